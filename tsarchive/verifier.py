"""Verify an archive: member checksums, per-window CRCs, and (given the
source) every sample against its channel's budget.

Used by ``tsarchive verify``, by :meth:`Archive.verify`, and by ``pack``
itself, which checks its staged archive this way before moving it into
place.
"""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from .errors import ArchiveCorrupt, BadInput
from .recording import Recording
from .results import ChannelCheck, Progress, VerifyReport
from .workers import workers as worker_count

CHUNK_SAMPLES = 1 << 20
MAX_LISTED = 50  # failing windows listed per channel


def verify_archive(archive, against=None, progress=None) -> VerifyReport:
    """Check ``archive`` (a path or an open Archive); compare with ``against`` when given."""
    from .store.members import member_problems
    from .store.reader import Archive, open_archive

    arc = archive if isinstance(archive, Archive) else open_archive(archive, strict=False)
    problems = list(arc.damage) + member_problems(arc.path, arc.members)
    rec = _source(arc, against)
    total = sum(c.n_windows for c in arc.channels)
    done = [0]
    lock = threading.Lock()

    def step(n: int, message: str) -> None:
        with lock:
            done[0] += n
            if progress is not None:
                progress(Progress("verify", done[0], total, message))

    jobs = [(meta, None if rec is None else _column_index(rec, meta, j)) for j, meta in enumerate(arc.channels)]
    if not arc.decodable:  # a member is missing or unreadable: report that, decode nothing
        checks = [ChannelCheck(name=m.name, eps=m.eps, worst_error=None, n_bad=0, bad_windows=(),
                               bad_checksums=()) for m, _ in jobs]
        return VerifyReport(ok=False, checksums_ok=False, compared=rec is not None, channels=tuple(checks),
                            problems=tuple(problems))
    workers = worker_count(len(jobs))
    if workers == 1:
        results = [_check_channel(arc, rec, meta, col, step) for meta, col in jobs]
    else:
        arc.prepare_threads()
        with ThreadPoolExecutor(workers) as pool:  # channels decode independently: same result on any thread count
            results = list(pool.map(lambda job: _check_channel(arc, rec, job[0], job[1], step), jobs))
    checks = [c for c, _ in results]
    for _, found in results:
        problems.extend(found)
    checksums_ok = not arc.damage and not any(c.bad_checksums for c in checks) and \
        not any(p.startswith("member") or "cannot be decoded" in p for p in problems)
    return VerifyReport(ok=not problems, checksums_ok=checksums_ok, compared=rec is not None,
                        channels=tuple(checks), problems=tuple(problems))


def _check_channel(arc, rec, meta, col, step) -> tuple[ChannelCheck, list[str]]:
    """Decode one channel block by block; CRC mismatches, undecodable windows and (with the source
    column ``col``) samples outside the budget."""
    problems: list[str] = []
    per = max(1, CHUNK_SAMPLES // meta.window)
    bad_crc: list[int] = []
    bad_windows: list[int] = []
    n_bad, worst = 0, 0.0
    for w0 in range(0, meta.n_windows, per):
        w1 = min(meta.n_windows, w0 + per)
        xh, bad, undecodable = _decode(arc, meta, w0, w1)
        bad_crc.extend(bad)
        if undecodable:
            problems.append(f"channel {meta.name}: window(s) {_list(undecodable)} cannot be decoded "
                            "(damaged payload)")
        if col is not None:
            a = w0 * meta.window
            x = rec.rows(a, a + len(xh))[:, col]  # a fresh block: a memory-mapped source stays unmapped
            bad_mask, err = _out_of_budget(x, xh, meta.eps)
            for w in undecodable:  # already reported; do not count their placeholder samples
                lo = (w - w0) * meta.window
                bad_mask[lo:lo + meta.window], err[lo:lo + meta.window] = False, 0.0
            worst = max(worst, float(err.max()) if len(err) else 0.0)
            if bad_mask.any():
                n_bad += int(bad_mask.sum())
                bad_windows.extend(int(w) for w in np.unique(a // meta.window + np.flatnonzero(bad_mask)
                                                             // meta.window))
        step(w1 - w0, f"{meta.name}: window {w1}/{meta.n_windows}")
    if bad_crc:
        problems.append(f"channel {meta.name}: checksum mismatch in window(s) {_list(bad_crc)}")
    if n_bad:
        problems.append(f"channel {meta.name}: {n_bad} sample(s) outside ±{meta.eps:g} {meta.unit} "
                        f"in window(s) {_list(bad_windows)}")
    return ChannelCheck(name=meta.name, eps=meta.eps, worst_error=worst if col is not None else None,
                        n_bad=n_bad, bad_windows=tuple(bad_windows[:MAX_LISTED]),
                        bad_checksums=tuple(bad_crc[:MAX_LISTED])), problems


def _decode(arc, meta, w0: int, w1: int):
    """Decode windows ``w0..w1-1`` without stopping at damage.

    Returns ``(samples, CRC-mismatch windows, undecodable windows)``; an
    undecodable window's samples are left as the reader's zeros.
    """
    try:
        xh, _, bad = arc.decode_windows(meta.name, w0, w1, check=False)
        return xh, bad, []
    except ArchiveCorrupt:
        parts, bad, broken = [], [], []
        for w in range(w0, w1):
            try:
                x, _, b = arc.decode_windows(meta.name, w, w + 1, check=False)
                bad.extend(b)
            except ArchiveCorrupt:
                n = min(meta.window, meta.n_samples - w * meta.window)
                x = np.zeros(n, dtype=np.dtype(meta.grid.out_dtype))
                broken.append(w)
            parts.append(x)
        return np.concatenate(parts), bad, broken


def _list(ws: list[int]) -> str:
    s = ", ".join(str(w) for w in ws[:10])
    return s + (f" and {len(ws) - 10} more" if len(ws) > 10 else "")


def _source(arc, against) -> Recording | None:
    if against is None or isinstance(against, Recording):
        return against
    from .ingest import read_recording
    rate = arc.channels[0].rate if arc.channels else None
    path = Path(against)
    rec = read_recording(path, rate=rate if path.suffix.lower() == ".npy" else None)
    if rec.n_samples != (arc.channels[0].n_samples if arc.channels else 0):
        raise BadInput(f"{path.name} has {rec.n_samples} samples but the archive has "
                       f"{arc.channels[0].n_samples}; pass the recording the archive was packed from")
    return rec


def _column_index(rec: Recording, meta, j: int) -> int:
    names = [c.name for c in rec.channels]
    if meta.name in names:
        return names.index(meta.name)
    if j < len(names):
        return j
    raise BadInput(f"the source has no channel {meta.name!r}; pass the recording the archive was packed from")


def _out_of_budget(x: np.ndarray, xh: np.ndarray, eps: float) -> tuple[np.ndarray, np.ndarray]:
    """Per-sample failure mask and |error| (0 where both are the same non-finite value)."""
    x64, xh64 = x.astype(np.float64), xh.astype(np.float64)
    with np.errstate(invalid="ignore", over="ignore"):
        err = np.abs(xh64 - x64)
    finite = np.isfinite(x64)
    same_nonfinite = ~finite & ((np.isnan(x64) & np.isnan(xh64)) | (x64 == xh64))
    err = np.where(finite, err, np.where(same_nonfinite, 0.0, np.inf))
    if eps == 0:  # lossless: the very same values (compare in the decoded dtype)
        same = (x.astype(xh.dtype) == xh) | (np.isnan(x64) & np.isnan(xh64))
        return ~same | (err > 0), err
    return ~(err <= eps), err
