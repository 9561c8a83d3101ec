"""Verify an archive: member checksums, per-window CRCs, and (given the
source) every sample against its channel's budget.

Used by ``tsarchive verify``, by :meth:`Archive.verify`, and by ``pack``
itself, which checks its staged archive this way before moving it into
place.
"""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import checksum
from .errors import ArchiveCorrupt, BadInput
from .exact import abs_errors, rounded_errors
from .quantize import values_to_bits
from .recording import Recording
from .results import ChannelCheck, Progress, VerifyReport
from .windows import CHUNK_SAMPLES
from .workers import workers as worker_count

MAX_LISTED = 50  # failing windows listed per channel


def verify_archive(archive, against=None, progress=None, *, rate: float | None = None,
                   even_if_changed: bool = False) -> VerifyReport:
    """Check ``archive`` (an :class:`~tsarchive.archive.Archive`, best opened with ``strict=False`` so that
    damage is reported rather than raised; :func:`tsarchive.verify` also takes a path); compare with
    ``against`` when given.

    A source given as a path is first checked to be the file that was packed
    (the manifest's size and SHA-256).  When it is not, the report fails
    with that one problem and no sample is compared, unless
    ``even_if_changed`` is set: then every sample is compared and the report
    passes if all are within budget (the identity finding stays in
    ``source_check``).  ``rate`` is for a source that carries none (``.npy``,
    a table without a time column); the archive's rate is used otherwise.
    """
    from .store.members import member_problems

    arc = archive
    problems = list(arc.damage) + member_problems(arc.path, arc.members)
    identity = None if against is None or isinstance(against, Recording) else source_identity(arc, Path(against))
    if identity is not None and identity.same is False and not even_if_changed:
        problems.insert(0, identity.message + "; its samples were not compared (pass --even-if-changed to "
                        "compare them anyway)")
        against = None
    rec = _source(arc, against, rate)
    sidecar = check_sidecar(arc)
    problems.extend(sidecar)
    if rec is not None and not sidecar:
        problems.extend(compare_times(arc, rec))
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
                        channels=tuple(checks), problems=tuple(problems),
                        source_same=None if identity is None else identity.same,
                        source_check="" if identity is None else identity.message)


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
        join = np.ma.concatenate if any(isinstance(p, np.ma.MaskedArray) for p in parts) else np.concatenate
        return join(parts), bad, broken


def check_sidecar(arc) -> list[str]:
    """The time axis and the text columns decode (the problem named, not raised)."""
    from .store.sidecar import check_extra
    try:
        arc.timeline.check()
        check_extra(arc.manifest, arc.path, arc.timeline.n)
        arc.notes
    except ArchiveCorrupt as exc:
        return [str(exc)]
    return []


def compare_times(arc, rec: Recording) -> list[str]:
    """The source's time axis (its time column, else start + i/rate) against the archive's, exactly:
    kind, zone, then every time (ns, or float bits); the first difference is named."""
    from .store.timeaxis import DATETIME, source_axis
    src, tl = source_axis(rec, 0, 1), arc.timeline
    if (src.kind, src.zone) != (tl.kind, tl.zone):
        return [f"time axis: the source's times are {src.kind} (zone {src.zone or 'none'}) but the archive's "
                f"{tl.kind} (zone {tl.zone or 'none'})"]
    n = rec.n_samples
    if n != tl.n:
        return [f"time axis: the source has {n} times but the archive {tl.n}"]
    if rec.time is None and tl.listed is None and len(tl.run_index) == 1 and float(tl.rate) == float(rec.rate) \
            and np.array_equal(np.asarray(tl.run_start[:1]).view(np.int64), src.values[:1].view(np.int64)):
        return []       # both are start + i / rate by the one rule, from the same start at the same rate
    for lo in range(0, n, CHUNK_SAMPLES):
        a, b = source_axis(rec, lo, lo + CHUNK_SAMPLES).values, tl.values(lo, lo + CHUNK_SAMPLES)
        diff = np.flatnonzero(a.view(np.int64) != b.view(np.int64))
        if diff.size:
            i = int(diff[0])
            show = (lambda v: str(np.datetime64(int(v), "ns"))) if src.kind == DATETIME else (lambda v: repr(float(v)))
            return [f"time axis: sample {lo + i} is at {show(a[i])} in the source but {show(b[i])} in the archive"]
    return []


def _list(ws: list[int]) -> str:
    s = ", ".join(str(w) for w in ws[:10])
    return s + (f" and {len(ws) - 10} more" if len(ws) > 10 else "")


@dataclass(frozen=True)
class SourceIdentity:
    """Whether a file is the one an archive was packed from: ``same`` True, False, or None (not recorded)."""

    same: bool | None
    message: str


def source_identity(arc, path: Path) -> SourceIdentity:
    """Compare ``path``'s size and SHA-256 with the manifest's ``source`` (before any sample is read)."""
    src = arc.manifest.get("source", {})
    sha, size = str(src.get("sha256") or ""), src.get("bytes")
    if not path.is_file():
        from .errors import SourceNotFound
        raise SourceNotFound(f"{path}: no such file; pass the recording the archive was packed from")
    if not sha:
        return SourceIdentity(None, f"{path.name}: the archive recorded no SHA-256 for its source, so only "
                                    "the samples can show whether this is the file that was packed")
    actual_size = path.stat().st_size
    actual = checksum.file_sha256(path)
    if actual == sha and (size is None or int(size) == actual_size):
        return SourceIdentity(True, f"{path.name} is the file that was packed (size and SHA-256 match)")
    packed = src.get("name") or "the source"
    return SourceIdentity(False, f"{path.name} is not the file that was packed (SHA-256 differs: {packed} was "
                                 f"{sha[:12]}…, this file is {actual[:12]}…)")


def _source(arc, against, rate: float | None = None) -> Recording | None:
    if against is None or isinstance(against, Recording):
        return against
    from .ingest import ReadOptions, read_recording
    own = arc.channels[0].rate if arc.channels else None
    path = Path(against)
    options = ReadOptions.from_dict(arc.manifest.get("read_options") or {})   # as pack read it (optional field)
    if rate is not None or path.suffix.lower() == ".npy":
        rec = read_recording(path, rate=rate if rate is not None else own, options=options)
    else:
        try:  # a table's own time column first; the archive's rate when it has none
            rec = read_recording(path, options=options)
        except BadInput:
            rec = read_recording(path, rate=own, options=options)
    if rec.n_samples != (arc.channels[0].n_samples if arc.channels else 0):
        raise BadInput(f"{path.name} has {rec.n_samples} samples but the archive has "
                       f"{arc.channels[0].n_samples}; pass the recording the archive was packed from")
    return rec


def _column_index(rec: Recording, meta, j: int) -> int:
    k = rec.channel_index(meta.name, j)
    if k is not None:
        return k
    raise BadInput(f"the source has no channel {meta.name!r}; pass the recording the archive was packed from")


def _out_of_budget(x: np.ndarray, xh: np.ndarray, eps: float) -> tuple[np.ndarray, np.ndarray]:
    """Per-sample failure mask and |error| (0 where both are the same non-finite value).

    Exact: integers are compared in integers and floats with the
    subtraction's rounding error recovered where it decides (:mod:`tsarchive.exact`);
    a lossless channel must give back the very same bits (in the decoded dtype).
    """
    gone, gone_h = np.ma.getmaskarray(x), np.ma.getmaskarray(xh)     # missing samples (nulls)
    if gone.any() or gone_h.any():
        bad, err = _out_of_budget(np.ma.getdata(x), np.ma.getdata(xh), eps)
        both = gone & gone_h
        bad, err = np.where(both, False, bad | gone | gone_h), np.where(both, 0.0, np.where(gone | gone_h, np.inf, err))
        return bad, err
    x, xh = np.asarray(x), np.asarray(xh)
    if x.dtype.kind in "iu" and xh.dtype.kind in "iu" and x.dtype != xh.dtype \
            and np.can_cast(x.dtype, xh.dtype, "safe"):
        x = x.astype(xh.dtype)
    err = rounded_errors(x, xh)
    x64, xh64 = x.astype(np.float64), xh.astype(np.float64)
    finite = np.isfinite(x64)
    same_nonfinite = ~finite & ((np.isnan(x64) & np.isnan(xh64)) | (x64 == xh64))
    err = np.where(finite, err, np.where(same_nonfinite, 0.0, np.inf))
    if eps == 0:  # lossless: the very same bits, in the decoded dtype
        with np.errstate(invalid="ignore", over="ignore"):
            same = values_to_bits(x.astype(xh.dtype)) == values_to_bits(xh)
        return ~same, err
    bad = ~(err <= eps)
    tie = np.flatnonzero(err == eps)        # a rounded float difference equal to eps: the exact one decides
    if len(tie):
        exact = abs_errors(x[tie], xh[tie])
        bad[tie], err[tie] = ~(exact <= eps), exact
    return bad, err
