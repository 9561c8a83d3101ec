"""Which residual coder wins where: today's payload against the coding levers, on the real recordings.

    python -m tsarchive.bench --study residuals [--cases real|NAME,...] [--budgets 1e-2,1e-3,1e-4]

For every real set and budget (``eps = b x range`` per channel, as the bench's
case table) the set is packed as the bench packs it, and the archive's own
residual windows (the integers its range coder codes) and grid integers ``q``
are read back.  On those streams, in bits per sample over all channels:

``today``       the archive's residual payload (order-0 range coding, static tables per
                predictor and activity class); ``tables`` = those tables' bytes in the manifest
``adaptive``    :class:`tsarchive.coding.adaptive.AdaptiveCoder` on the same residual windows,
                models starting at 1/2 in every window
``fitted``      the same coder starting from the channel's fitted initial state; ``init`` = its
                bytes (which a manifest would hold)
``+ltp``        per window the smaller of ``adaptive`` and the long-term predicted residual
                (:mod:`tsarchive.predict.longterm`) coded the same way plus its lag and gain
                bits, and a 1-bit on/off flag per window; ``ltp%`` = windows where it is on
``classic``     :class:`tsarchive.coding.classic.ClassicCoder` on each channel's ``q`` as one
                stream (differences + best of zstd / xz / bzip2)
``best``        the best classic baseline of the bench (:mod:`tsarchive.bench.baselines`:
                quantized, 1st or 2nd difference, zstd-19 / xz -9e / bzip2 -9, shuffled or not)
                on the source samples, whole blob with its headers

``frame``       today's bytes per window row besides the payload (the residual column's framing
                and every other column of ``windows.parquet``); ``term`` = the adaptive coder's
                bits per window above its ideal code length (termination)
``win``         the smallest payload of today(+tables) / adaptive / fitted(+init) / +ltp / classic, and
                ``best / win`` its ratio to the best classic (> 1: the lever beats the classic coder
                on payload alone, before the archive's fixed bytes)
"""

from __future__ import annotations

import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from tsarchive.coding.adaptive import AdaptiveCoder
from tsarchive.coding.classic import ClassicCoder
from tsarchive.predict import longterm

from . import baselines, realdata
from .archive_bytes import breakdown
from .tables import fmt, render


@dataclass(frozen=True)
class ChannelStreams:
    """One channel of a packed archive: grid integers and residuals per window, today's payload bytes."""

    q: list[np.ndarray]
    res: list[np.ndarray]
    payload_bytes: int
    table_bytes: int


@dataclass(frozen=True)
class StudyRow:
    case: str
    budget: float
    n: int                    # samples over all channels
    windows: int
    window: int
    today: int                # bytes
    tables: int
    adaptive: int
    fitted: int
    init: int
    ltp_bits: int             # bits (side information is not byte aligned)
    ltp_on: float
    classic: int
    best: int
    frame: float              # bytes per window row
    term: float               # bits per window

    def bps(self, nbytes: float) -> float:
        return 8 * nbytes / self.n

    @property
    def candidates(self) -> dict[str, float]:
        """Payload bytes of each lever with what it stores per channel (today's tables, the fitted state)."""
        return {"today": self.today + self.tables, "adaptive": self.adaptive, "fitted": self.fitted + self.init,
                "+ltp": self.ltp_bits / 8, "classic": self.classic}

    @property
    def winner(self) -> tuple[str, float]:
        name = min(self.candidates, key=lambda k: self.candidates[k])
        return name, self.candidates[name]

    def to_dict(self) -> dict:
        return dict(asdict(self), winner=self.winner[0])


def channel_streams(archive: Path) -> dict[str, ChannelStreams]:
    """Each channel's residual and grid windows, decoded from the archive as its reader does (read only)."""
    import tsarchive
    from tsarchive.codec import reconstruct
    from tsarchive.predict import Context
    from tsarchive.store.rows import binary_parts, codes, lengths

    arc = tsarchive.open(archive)
    entries = {c["name"]: c for c in arc.manifest["channels"]}
    out = {}
    for meta in arc.channels:
        rows, residuals, prediction, lpc = _reader_parts(arc, meta)
        t = rows(meta.name, 0, meta.n_windows)
        windows = t["window"].to_numpy()
        lens = lengths(meta, windows)
        modes, sets, classes = t["mode"].to_numpy(), t["lpc_set"].to_numpy(), t["table"].to_numpy()
        level = t["level"].to_numpy()
        pbuf, poffs = binary_parts(t["residual"])
        code = codes(t, len(windows))
        q_parts: list = [None] * len(windows)
        r_parts: list = [None] * len(windows)
        for sel, res in residuals(modes, classes, pbuf, poffs, lens, windows, level):
            L = res.shape[1]
            q = reconstruct(modes[sel], Context(level[sel], prediction(code[sel], level[sel], int(L)), lpc,
                                                sets[sel]), res)
            for k, i in enumerate(sel.tolist()):           # back in window order (the short last window too)
                q_parts[i], r_parts[i] = q[k], res[k]
        tables = sum(len(e["freqs"]) * 3 // 4 for e in entries[meta.name].get("tables", []))
        out[meta.name] = ChannelStreams(q_parts, r_parts, int(poffs[-1] - poffs[0]), tables)
    return out


def _reader_parts(arc, meta):
    """(rows, residual decoder, autoencoder prediction, LPC sets) of a channel, from the reader of
    either layout: the codec-contract one (``Archive.codec``) or the earlier one (``Archive._table``)."""
    if hasattr(arc, "codec"):
        from tsarchive.windowcodec import code_prediction, row_residuals

        codec = arc.codec(meta.name)
        return (arc.rows, lambda *rows: row_residuals(codec, *rows),
                lambda codes, level, L: code_prediction(codec, codes, level, L), codec.lpc)
    from tsarchive import entropy

    def residuals(modes, classes, buf, offs, lens, *_):
        for L in np.unique(lens).tolist():
            sel = np.flatnonzero(lens == L)
            res = np.empty((len(sel), L), np.int64)
            for m, c in set(zip(modes[sel].tolist(), classes[sel].tolist())):
                pick = (modes[sel] == m) & (classes[sel] == c)
                at = sel[pick]
                table = arc._table(meta.name, m, c)
                res[pick] = entropy.decode_flat(buf, offs[at], offs[at + 1], L, table).reshape(-1, L)
            yield sel, res

    return (arc._rows, residuals,
            lambda codes, level, L: arc._ae(meta, codes, level, L) if arc.decoder is not None else None, meta.lpc)


def ltp_bits(coder: AdaptiveCoder, windows: list[np.ndarray]) -> tuple[int, int]:
    """(bits, windows predicted): per window the smaller of plain and long-term predicted coding,
    each window with a 1-bit flag and, where on, its lag and gain."""
    plain = coder.encode_many(windows)
    total, on = 0, 0
    for w, p in zip(windows, plain):
        bits = 8 * len(p)
        lt = longterm.search(w)
        if lt is not None:
            alt = 8 * len(coder.encode(longterm.apply(w, lt))) + lt.side_bits(len(w))
            if alt < bits:
                bits, on = alt, on + 1
        total += bits + 1
    return total, on


def study_case(name: str, data: np.ndarray, rate: float, b: float, workdir: Path) -> StudyRow:
    """Pack ``data`` at budget fraction ``b`` as the bench does and measure every lever on its streams."""
    import tsarchive

    from .runner import channel_eps, logging_grid

    source = workdir / f"{name}.npy"
    if not source.exists():
        np.save(source, np.ascontiguousarray(data))
    eps = channel_eps(data, b)
    grid = logging_grid(source, rate)
    best = min(baselines.run(bl, data, eps, grid).nbytes for bl in baselines.BASELINES if not bl.lossless)
    archive = workdir / f"{name}-{b:g}.tsarchive"
    tsarchive.pack(source, archive, budget=f"{100 * b:.12g}%", rate=rate, force=True)
    parts = breakdown(archive)
    streams = channel_streams(archive)
    coder = AdaptiveCoder()
    today = tables = adaptive = fitted = init = ltp = on = classic = nwin = term_bits = 0
    window = 0
    for ch in streams.values():
        payloads = coder.encode_many(ch.res)
        fit = AdaptiveCoder.fit(ch.res)
        ideal = sum(coder.cost_bits(r) for r in ch.res)
        bits, k = ltp_bits(coder, ch.res)
        today += ch.payload_bytes
        tables += ch.table_bytes
        adaptive += sum(map(len, payloads))
        fitted += sum(map(len, fit.encode_many(ch.res)))
        init += fit.init_bytes
        ltp, on = ltp + bits, on + k
        classic += len(ClassicCoder().encode(np.concatenate(ch.q) if ch.q else np.zeros(0, np.int64)))
        nwin += len(ch.res)
        term_bits += 8 * sum(map(len, payloads)) - ideal
        window = max([window] + [len(r) for r in ch.res])
    frame = (parts.residual_framing + parts.other_columns) / max(nwin, 1)
    return StudyRow(name, b, int(data.shape[0] * data.shape[1]), nwin, window, today, tables, adaptive, fitted,
                    init, ltp, on / max(nwin, 1), classic, best, frame, term_bits / max(nwin, 1))


def run(names: list[str], budgets: tuple[float, ...], log: Callable[[str], None]) -> tuple[list[StudyRow], list[str]]:
    """Every real set of ``names`` at every budget: (rows, notes of skipped sets)."""
    rows, skipped = [], []
    with tempfile.TemporaryDirectory(prefix="tsbench-study-") as tmp:
        for name in names:
            r = realdata.load(name)
            if isinstance(r, str):
                skipped.append(r)
                continue
            data = np.asarray(r.data)
            for b in budgets:
                log(f"  study {name} budget {b:g}")
                rows.append(study_case(name, data, r.spec.rate, b, Path(tmp)))
    return rows, skipped


def study_table(rows: list[StudyRow]) -> str:
    """Bits per sample of every lever, the framing, and the winner with its ratio to the best classic."""
    head = ["case", "budget", "n", "W", "today", "tables B", "adaptive", "fitted", "init B", "+ltp", "ltp%",
            "classic", "best", "frame B/win", "term b/win", "win", "best / win"]
    body = []
    for r in rows:
        win, nbytes = r.winner
        body.append([r.case, f"{r.budget:g}", str(r.n), str(r.window), fmt(r.bps(r.today), ".3f"), str(r.tables),
                     fmt(r.bps(r.adaptive), ".3f"), fmt(r.bps(r.fitted), ".3f"), str(r.init),
                     fmt(r.bps(r.ltp_bits / 8), ".3f"), f"{100 * r.ltp_on:.0f}", fmt(r.bps(r.classic), ".3f"),
                     fmt(r.bps(r.best), ".3f"), fmt(r.frame, ".1f"), fmt(r.term, ".1f"), win,
                     fmt(r.best / nbytes if nbytes else float("inf"), ".2f")])
    return render(head, body)


def summary(rows: list[StudyRow]) -> str:
    """Geometric means of best classic / lever over the rows, and how many rows each lever reaches 1.0."""
    lines = []
    for lever in ("today", "adaptive", "fitted", "+ltp", "classic"):
        ratios = np.array([r.best / max(r.candidates[lever], 1e-9) for r in rows])
        lines.append(f"  {lever:9s} best classic / payload: geometric mean {np.exp(np.log(ratios).mean()):.2f}, "
                     f">= 1.0 on {int((ratios >= 1.0).sum())}/{len(rows)}")
    ratios = np.array([r.best / max(r.winner[1], 1e-9) for r in rows])
    lines.append(f"  per-case winner     best classic / payload: geometric mean {np.exp(np.log(ratios).mean()):.2f}, "
                 f">= 1.0 on {int((ratios >= 1.0).sum())}/{len(rows)}")
    return "\n".join(lines)
