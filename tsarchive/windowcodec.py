"""A channel's windows <-> rows of ``windows.parquet``, both directions side by side.

* :func:`encode_windows` — windows of equal length -> grid integers -> codes ->
  predictions -> residuals -> entropy-coded rows, with each window's CRC-32,
  worst error and outlier score computed from exactly what decoding gives;
* :func:`decode_windows` — the rows (and the window's verbatim samples) ->
  residuals -> predictor inverse -> grid -> samples, every window's CRC-32 checked.

Both take the channel's :class:`~tsarchive.channelcodec.ChannelCodec`; the store
(:mod:`tsarchive.store`) only moves the rows.  Everything between the grid and
the bytes is integer arithmetic, so decoding is bit-exact on any machine.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from . import checksum, entropy
from .channelcodec import ChannelCodec
from .coding import fallback
from .codec import FRAC_SAFE_SCALE, TableSet, ae_prediction, choose_modes, reconstruct
from .errors import ArchiveCorrupt
from .exact import max_errors
from .predict import PREDICTORS, Context
from .quantize import Grid, bits_to_values, quantize
from .store import schema as S
from .store.rows import binary_parts, codes as row_codes
from .windows import levels, normalise


def predict_windows(x: np.ndarray, grid: Grid, W: int, model, scale: int):
    """Quantize a batch of equal-length windows; return q, exceptions, levels, codes, AE prediction."""
    q, pos, bits = quantize(x.ravel(), grid)
    q = q.reshape(x.shape)
    lv = levels(q)
    if model is None or scale > FRAC_SAFE_SCALE:
        return q, pos, bits, lv, np.zeros((len(q), 0), dtype=np.int8), None
    codes = model.encode(normalise(q, lv, scale, W))
    return q, pos, bits, lv, codes, ae_prediction(model.int_decoder, codes, lv, scale, x.shape[1])



def code_windows(modes: np.ndarray, classes: np.ndarray, res: np.ndarray, tables: TableSet,
                 residual_coder=None) -> list[bytes]:
    """Each window's residuals range coded under its (predictor, class) table, in window order (or all
    by ``residual_coder``, the channel's one coder, when given)."""
    if residual_coder is not None:
        return residual_coder.encode_many(res)
    payloads: list[bytes] = [b""] * len(res)
    for m, k in set(zip(modes.tolist(), classes.tolist())):
        sel = np.flatnonzero((modes == m) & (classes == k))
        for i, p in zip(sel, entropy.encode_many(res[sel], tables[(m, k)])):
            payloads[i] = p
    return payloads


@dataclass(frozen=True)
class _Batch:
    """Equal-length windows from ``first`` on, between the samples and their rows: grid integers ``q``,
    levels, codes, predictors, residuals, decoded samples ``xh`` and what the rows say of them."""

    first: int
    q: np.ndarray
    lv: np.ndarray
    codes: np.ndarray
    modes: np.ndarray
    classes: np.ndarray
    res: np.ndarray
    sets: np.ndarray
    xh: np.ndarray
    pos: np.ndarray
    bits: np.ndarray
    score: np.ndarray
    worst: np.ndarray


def encode_windows(x: np.ndarray, first_window: int, codec: ChannelCodec, model=None, tail=None
                   ) -> tuple[pa.Table, pa.Table, float]:
    """Window rows for ``windows.parquet`` from a batch of equal-length windows ``x`` (their first is
    window ``first_window``), the rows of those with verbatim samples (exceptions), and the batch's
    worst error in float64.  ``tail``: the channel's short last window (its samples, 1-D) right after
    ``x``, where its coder joins it to the block of ``x``'s last windows (:func:`joins_tail`): its row
    follows theirs and the block is one payload.  ``model`` (a trained autoencoder, pack side) gives
    the codes; the inverse is :func:`decode_windows`."""
    parts = [_predicted(x, first_window, codec, model)]
    if tail is not None:
        parts.append(_predicted(tail[None, :], first_window + len(x), codec, model))
    payloads = _payloads(parts, codec)
    out = [_rows(p, codec, payloads[p.first - first_window:p.first - first_window + len(p.q)]) for p in parts]
    return (pa.concat_tables([t for t, _ in out]), pa.concat_tables([e for _, e in out]),
            max(float(p.worst.max(initial=0.0)) for p in parts))


def _predicted(x: np.ndarray, first: int, codec: ChannelCodec, model) -> _Batch:
    """Equal-length windows ``x`` quantized, predicted and decoded again, with their worst errors and scores."""
    nb, L = x.shape
    grid = codec.grid
    q, pos, bits, lv, codes, ae = predict_windows(x, grid, codec.window, model, codec.scale)
    modes, classes, res, sets = choose_modes(q, Context(lv, ae, codec.lpc), codec.table_set)
    xh = grid.dequantize(q.ravel(), pos, bits).reshape(nb, L)
    x64 = np.asarray(x).astype(np.float64)
    with np.errstate(invalid="ignore", over="ignore"):
        fin = np.isfinite(x64) & ~np.ma.getmaskarray(x)       # missing samples have no error
        preview = grid.to_out(grid.values(lv[:, None] + np.zeros((1, L), np.int64) if ae is None else ae))
        # peak, not RMS: a short transient must not be diluted by the rest of its window
        score = np.where(fin, np.abs(x64 - preview.astype(np.float64)), 0.0).max(axis=1, initial=0.0)
    worst = max_errors(np.ma.getdata(x), np.ma.getdata(xh), fin)   # exact (rounded up), integers in integers
    return _Batch(first, q, lv, codes, modes, classes, res, sets, xh, pos, bits, score, worst)


def _payloads(parts: list[_Batch], codec: ChannelCodec) -> list[bytes]:
    """The ``residual`` cells of consecutive batches: window by window, or a block-coded channel's blocks
    (:func:`block_heads`) as one stream each (:func:`tsarchive.coding.fallback.joined`)."""
    lens = np.concatenate([np.full(len(p.q), p.q.shape[1]) for p in parts])
    heads = block_heads(codec, np.arange(parts[0].first, parts[0].first + len(lens)), lens)
    if heads is None:
        return [c for p in parts for c in code_windows(p.modes, p.classes, p.res, codec.table_set,
                                                       codec.residual_coder)]
    stream = fallback.joined(np.concatenate([p.q.reshape(-1) for p in parts]),
                             np.concatenate([p.lv for p in parts]), lens, heads)
    return codec.residual_coder.encode_blocks(stream, lens, heads)


def _rows(p: _Batch, codec: ChannelCodec, payloads: list[bytes]) -> tuple[pa.Table, pa.Table]:
    """A batch's window rows and the rows of its verbatim samples (exceptions)."""
    nb, L = p.q.shape
    windows = np.arange(p.first, p.first + nb, dtype=np.int32)
    rows = pa.table({
        "channel": [codec.name] * nb,
        "window": windows,
        "mode": p.modes.astype(np.int8),
        "lpc_set": p.sets.astype(np.int8),
        # a channel with one coder names no table: the column stays constant (and tiny)
        "table": (p.classes if codec.residual_coder is None else np.zeros_like(p.classes)).astype(np.int8),
        "level": p.lv,
        "code": list(p.codes.astype(np.int8)),
        "residual": payloads,
        "crc32": np.array([checksum.window_crc(p.xh[i]) for i in range(nb)], dtype=np.uint32),
        "worst": worst_steps(p.worst, codec.grid.eps),
        "score": score_bf16(p.score),
    }, schema=S.windows_schema(True))
    wpos = p.pos // L
    held = np.unique(wpos)
    exceptions = pa.table({
        "channel": [codec.name] * len(held),
        "window": (p.first + held).astype(np.int32),
        "pos": [(p.pos[wpos == i] % L).astype(np.int32) for i in held],
        "bits": [p.bits[wpos == i] for i in held],
    }, schema=S.EXCEPTIONS_SCHEMA)
    return rows, exceptions


def worst_steps(worst: np.ndarray, eps: float) -> np.ndarray:
    """Per-window worst errors in 1/WORST_STEPS of ``eps``, rounded up (never understating), as uint8."""
    if eps <= 0:
        return np.zeros(len(worst), np.uint8)
    k = np.ceil(worst / eps * S.WORST_STEPS * (1 + 1e-12))
    k = np.where(worst <= eps, np.minimum(k, S.WORST_STEPS), k)  # within budget: at most eps itself
    return np.clip(k, 0, 255).astype(np.uint8)


def score_bf16(score: np.ndarray) -> np.ndarray:
    """Scores as float32 rounded to 8 significant bits (bfloat16 precision, 0.4 %): enough to rank
    windows, and the two zero low bytes cost nothing after byte-stream split + zstd."""
    big = float(np.finfo(np.float32).max) / 2
    s = np.nan_to_num(score, nan=0.0, posinf=big).clip(0, big).astype(np.float32)
    u = (s.view(np.uint32) + np.uint32(0x8000)) & np.uint32(0xFFFF0000)
    return u.view(np.float32)


def decode_windows(rows: pa.Table, lens: np.ndarray, held: dict, codec: ChannelCodec, *, check: bool = True):
    """Samples of consecutive window ``rows`` (``lens`` samples each; ``held``: window -> (positions,
    raw bits) stored verbatim); returns ``(values, bad-crc windows)``.

    With ``check`` a CRC mismatch raises :class:`ArchiveCorrupt`; without,
    the mismatching windows are returned for reporting.  Integer channels
    with missing samples come back as a masked array.
    """
    name, grid = codec.name, codec.grid
    windows = rows["window"].to_numpy()
    modes, lpc_set = rows["mode"].to_numpy(), rows["lpc_set"].to_numpy()
    if not set(np.unique(modes).tolist()) <= PREDICTORS.keys() or \
            (len(rows) and not 0 <= int(lpc_set.min()) <= int(lpc_set.max()) < len(codec.lpc)):
        raise ArchiveCorrupt(f"channel {name}: windows {windows[0]}..{windows[-1]} name a predictor or a "
                             "linear-prediction set this archive does not have; the archive is damaged")
    classes, level, crcs = rows["table"].to_numpy(), rows["level"].to_numpy(), rows["crc32"].to_numpy()
    pbuf, poffs = binary_parts(rows["residual"])
    codes = row_codes(rows, len(rows))
    out = np.empty(int(lens.sum()), dtype=np.dtype(grid.out_dtype))
    missing = None if grid.missing is None else np.zeros(len(out), dtype=bool)
    offs = np.concatenate([[0], np.cumsum(lens)])
    bad = []
    for sel, res in row_residuals(codec, modes, classes, pbuf, poffs, lens, windows, level):
        L = res.shape[1]
        ae = code_prediction(codec, codes[sel], level[sel], L)
        x = grid.decode(reconstruct(modes[sel], Context(level[sel], ae, codec.lpc, lpc_set[sel]), res))
        _put_verbatim(x, windows[sel], held, offs[sel], missing, codec)
        got = np.array([checksum.window_crc(row) for row in x], dtype=np.int64)
        for k in np.flatnonzero(got != crcs[sel].astype(np.int64)):
            if check:
                raise ArchiveCorrupt(f"channel {name} window {windows[sel[k]]}: checksum mismatch; "
                                     "the archive is damaged — restore it from a copy")
            bad.append(int(windows[sel[k]]))
        # windows are consecutive and only a channel's last one is short, so each length is one run
        out[offs[sel[0]]:offs[sel[-1] + 1]] = x.ravel()
    bad.sort()
    return (out if missing is None else np.ma.MaskedArray(out, mask=missing)), bad


def row_residuals(codec: ChannelCodec, modes: np.ndarray, classes: np.ndarray, buf: np.ndarray,
                  cells: np.ndarray, lens: np.ndarray, windows: np.ndarray, level: np.ndarray
                  ) -> list[tuple[np.ndarray, np.ndarray]]:
    """Residuals of consecutive window rows (predictors ``modes``, classes ``classes``, ``lens`` samples
    and levels ``level`` each; row i's cell is ``buf[cells[i]:cells[i + 1]]`` of the ``residual``
    column) as ``(rows, residuals (k, L))`` per window length L.  A block-coded channel's rows must
    cover whole blocks (:func:`block_span`), its short last window with its block where the coder
    joins it: the blocks are decoded once, across both lengths."""
    lens = np.asarray(lens, np.int64)
    heads = block_heads(codec, windows, lens)
    flat = None
    if heads is not None:
        values = codec.residual_coder.decode_blocks(buf, cells[:-1], cells[1:], lens, heads)
        flat = fallback.unjoined(values, level, lens, heads)
    offs = np.concatenate([[0], np.cumsum(lens)])
    out = []
    for L in np.unique(lens).tolist():
        sel = np.flatnonzero(lens == L)
        if flat is not None:
            out.append((sel, flat[offs[sel][:, None] + np.arange(L)]))
            continue
        groups = set(zip(modes[sel].tolist(), classes[sel].tolist()))
        res = None if len(groups) == 1 else np.empty((len(sel), L), dtype=np.int64)
        for m, c in groups:
            pick = np.flatnonzero((modes[sel] == m) & (classes[sel] == c))
            at = sel[pick]          # strict=False: the per-window CRC catches what a range code cannot
            got = codec.coder(m, c).decode_flat(buf, cells[at], cells[at + 1], L, strict=False).reshape(-1, L)
            if res is None:         # one coder for every row: its output is the batch, no copy
                res = got
            else:
                res[pick] = got
        out.append((sel, res))
    return out


def block_windows(codec: ChannelCodec) -> int:
    """Windows per payload of the channel's coder: 1, or a classic coder's ``block``."""
    return getattr(codec.residual_coder, "block", 1)


def joins_tail(codec: ChannelCodec) -> bool:
    """Whether the channel's short last window is coded with the block its number falls in (a classic
    coder's ``tail``), not as a block of its own."""
    return getattr(codec.residual_coder, "tail", False)


def block_heads(codec: ChannelCodec, windows: np.ndarray, lens) -> np.ndarray | None:
    """Which of consecutive ``windows`` (``lens`` samples each, or all) start a payload of a block-coded
    channel, or None for a channel whose every window is its own payload."""
    if block_windows(codec) == 1:
        return None
    return codec.residual_coder.block_heads(windows, np.asarray(lens) != codec.window)


def block_span(codec: ChannelCodec, w0: int, w1: int, n_windows: int) -> tuple[int, int]:
    """Windows ``w0..w1-1`` (clipped to the channel's ``n_windows``) widened to whole blocks: what must be
    decoded to give them (random access costs one block; the last block runs to the channel's last window,
    so it holds the short last window that may be coded with it)."""
    B = block_windows(codec)
    w0, w1 = max(w0, 0), min(w1, n_windows)
    if B == 1 or w1 <= w0:
        return w0, w1
    return w0 // B * B, min(n_windows, -(-w1 // B) * B)


def _put_verbatim(x: np.ndarray, windows: np.ndarray, held: dict, offs: np.ndarray, missing, codec) -> None:
    """In place: the samples stored verbatim (and, for a channel with missing samples, which are missing)."""
    L = x.shape[1]
    for k, w in enumerate(windows.tolist()):
        if w in held:
            pos, raw = held[w]
            if len(pos) != len(raw) or (len(pos) and not (0 <= pos.min() and pos.max() < L)):
                raise ArchiveCorrupt(f"channel {codec.name} window {w}: verbatim samples are malformed; "
                                     "the archive is damaged")
            x[k, pos] = bits_to_values(raw, x.dtype)
            if missing is not None:
                missing[offs[k] + pos[raw == codec.grid.missing]] = True


def code_prediction(codec: ChannelCodec, codes: np.ndarray, level: np.ndarray, L: int) -> np.ndarray | None:
    """The autoencoder's integer prediction of windows from their codes, or None (no model, no codes,
    or a channel whose scale the model cannot take)."""
    decoder = codec.decoder
    if decoder is None or codec.scale > FRAC_SAFE_SCALE or codes.shape[1] == 0:
        return None
    if codes.shape[1] != decoder.code_size:
        raise ArchiveCorrupt(f"channel {codec.name}: window codes have {codes.shape[1]} values, the model takes "
                             f"{decoder.code_size}; the archive is damaged")
    return ae_prediction(decoder, codes, level, codec.scale, L)
