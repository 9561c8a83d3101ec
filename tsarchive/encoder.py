"""The packing stages between the grid and Parquet, for one channel at a time.

* :func:`plan_channel` — on a bounded sample of windows: fit the channel's
  LPC coefficients, pick predictors by a proxy cost, build the entropy tables
  per (predictor, activity class), both with and without the autoencoder, and
  estimate what the autoencoder saves;
* :func:`encode_batch` — windows of equal length -> grid integers -> codes ->
  predictions -> residuals -> entropy-coded rows for ``windows.parquet``, with
  each window's CRC-32, worst error and outlier score computed from exactly
  what the reader will decode.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from . import checksum, entropy
from .codec import FRAC_SAFE_SCALE, TableSet, ae_prediction, choose_modes, proxy_bits
from .predict import Context
from .predict import lpc as lpc_mod
from .exact import max_errors
from .quantize import Grid, quantize
from .store import schema as S
from .windows import levels, normalise

TABLE_SAMPLES = 1 << 20      # bound on the samples used to plan each channel (and to sample training windows)
MIN_TABLE_SAMPLES = 8192     # a table class with fewer samples is merged into its neighbour


@dataclass(frozen=True)
class ChannelPlan:
    lpc: tuple[lpc_mod.LpcCoefs, ...]   # the channel's LPC coefficient sets
    tables: TableSet            # tables when the autoencoder is used (or the only set without a model)
    tables_plain: TableSet      # tables without the autoencoder
    ae_gain_bits: float         # estimated bits the autoencoder saves on the whole channel
    plain_bits: float = 0.0     # proxy bits of the sampled windows without the autoencoder


def sample_windows(n: int, W: int, count: int) -> np.ndarray:
    """Up to ``count`` full-window numbers spread evenly over ``n`` samples."""
    full = n // W
    if full == 0:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.linspace(0, full - 1, min(full, count)).round().astype(np.int64))


def predict_batch(x: np.ndarray, grid: Grid, W: int, model, scale: int):
    """Quantize a batch of equal-length windows; return q, exceptions, levels, codes, AE prediction."""
    q, pos, bits = quantize(x.ravel(), grid)
    q = q.reshape(x.shape)
    lv = levels(q)
    if model is None or scale > FRAC_SAFE_SCALE:
        return q, pos, bits, lv, np.zeros((len(q), 0), dtype=np.int8), None
    codes = model.encode(normalise(q, lv, scale, W))
    return q, pos, bits, lv, codes, ae_prediction(model.int_decoder, codes, lv, scale, x.shape[1])


def plan_channel(windows: np.ndarray, tail: np.ndarray | None, n_total_windows: int, grid: Grid, W: int,
                 model, scale: int, base: ChannelPlan | None = None, subset: bool = False) -> ChannelPlan:
    """Plan a channel from sampled full ``windows`` (k, W) and its short last window ``tail``.

    ``base``, the same channel's plan without a model, supplies the LPC sets
    and plain tables (neither depends on the model), so planning with a
    model only adds the autoencoder's tables.  ``subset``: ``windows`` are
    only part of the windows ``base`` was planned on (a quick estimate of
    the model's gain), so the bits without the model are counted again on
    the same windows.
    """
    batches = []
    for part in np.array_split(np.arange(len(windows)), max(1, len(windows) // 512)) if len(windows) else []:
        q, _, _, lv, _, ae = predict_batch(windows[part], grid, W, model, scale)
        batches.append((q, lv, ae))
    if tail is not None and len(tail):
        q, _, _, lv, _, ae = predict_batch(tail[None, :], grid, W, model, scale)
        batches.append((q, lv, ae))
    if base is not None:
        lpc, plain, plain_bits = base.lpc, base.tables_plain, base.plain_bits
        if subset:
            plain_bits = _tables(batches, lpc, use_ae=False)[1]
    else:
        full = [(q, lv) for q, lv, _ in batches if q.shape[1] == W]
        lpc = lpc_mod.fit_sets(np.concatenate([q for q, _ in full]), np.concatenate([lv for _, lv in full]),
                               proxy_bits) if full else (lpc_mod.LpcCoefs(()),)
        plain, plain_bits = _tables(batches, lpc, use_ae=False)
    if model is None:
        return ChannelPlan(lpc, plain, plain, 0.0, plain_bits)
    with_ae, ae_bits = _tables(batches, lpc, use_ae=True)
    sampled = sum(len(q) for q, _, _ in batches)
    gain = (plain_bits - ae_bits) * n_total_windows / max(sampled, 1)
    return ChannelPlan(lpc, with_ae, plain, float(gain), plain_bits)


def coded_bytes(windows: np.ndarray, n_total_windows: int, grid: Grid, W: int) -> int:
    """Bytes the residuals of ``windows`` (k, W) take when planned and range coded on their own,
    without a model: the size estimate behind the choice of the window length."""
    plan = plan_channel(windows, None, n_total_windows, grid, W, None, 1)
    q, _, _, lv, _, _ = predict_batch(windows, grid, W, None, 1)
    modes, classes, res, _ = choose_modes(q, Context(lv, None, plan.lpc), plan.tables)
    return sum(len(p) for p in code_windows(modes, classes, res, plan.tables))


def code_windows(modes: np.ndarray, classes: np.ndarray, res: np.ndarray, tables: TableSet) -> list[bytes]:
    """Each window's residuals range coded under its (predictor, class) table, in window order."""
    payloads: list[bytes] = [b""] * len(res)
    for m, k in set(zip(modes.tolist(), classes.tolist())):
        sel = np.flatnonzero((modes == m) & (classes == k))
        for i, p in zip(sel, entropy.encode_many(res[sel], tables[(m, k)])):
            payloads[i] = p
    return payloads


def _tables(batches, lpc, use_ae: bool) -> tuple[TableSet, float]:
    groups: dict[int, dict[int, list[np.ndarray]]] = {}
    bits = 0.0
    for q, lv, ae in batches:
        modes, classes, res, _ = choose_modes(q, Context(lv, ae if use_ae else None, lpc), None)
        bits += float(proxy_bits(res).sum())
        for m, k in set(zip(modes.tolist(), classes.tolist())):
            groups.setdefault(m, {}).setdefault(k, []).append(res[(modes == m) & (classes == k)].ravel())
    tables = {}
    for m, by_class in groups.items():
        for cls, parts in merge_classes(by_class):
            tables[(m, cls)] = entropy.build_table(np.concatenate(parts))
    return TableSet(tables), bits


def merge_classes(by_class: dict[int, list[np.ndarray]]) -> list[tuple[int, list[np.ndarray]]]:
    """Merge neighbouring activity classes until each has enough samples for its table to pay."""
    total = sum(sum(len(a) for a in v) for v in by_class.values())
    need = max(MIN_TABLE_SAMPLES, total // 32)
    out: list[tuple[int, list[np.ndarray]]] = []
    cur, cur_n, weighted = [], 0, 0.0
    for cls in sorted(by_class):
        n = sum(len(a) for a in by_class[cls])
        cur += by_class[cls]
        cur_n += n
        weighted += cls * n
        if cur_n >= need:
            out.append((int(round(weighted / cur_n)), cur))
            cur, cur_n, weighted = [], 0, 0.0
    if cur:
        if out:  # a thin top end joins the last table
            rep, parts = out.pop()
            out.append((rep, parts + cur))
        else:
            out.append((int(round(weighted / max(cur_n, 1))), cur))
    return out


def encode_batch(x: np.ndarray, first_window: int, name: str, grid: Grid, W: int, model, scale: int,
                 lpc, tables: TableSet) -> tuple[pa.Table, pa.Table, float]:
    """Window rows for a batch of equal-length windows, the rows of those with verbatim samples
    (exceptions), and the batch's worst error in float64."""
    nb, L = x.shape
    q, pos, bits, lv, codes, ae = predict_batch(x, grid, W, model, scale)
    modes, classes, res, sets = choose_modes(q, Context(lv, ae, lpc), tables)
    payloads = code_windows(modes, classes, res, tables)
    xh = grid.dequantize(q.ravel(), pos, bits).reshape(nb, L)
    x64 = np.asarray(x).astype(np.float64)
    with np.errstate(invalid="ignore", over="ignore"):
        fin = np.isfinite(x64) & ~np.ma.getmaskarray(x)       # missing samples have no error
        preview = grid.to_out(grid.values(lv[:, None] + np.zeros((1, L), np.int64) if ae is None else ae))
        # peak, not RMS: a short transient must not be diluted by the rest of its window
        score = np.where(fin, np.abs(x64 - preview.astype(np.float64)), 0.0).max(axis=1, initial=0.0)
    wpos = pos // L
    worst = max_errors(np.ma.getdata(x), np.ma.getdata(xh), fin)   # exact (rounded up), integers in integers
    rows = pa.table({
        "channel": [name] * nb,
        "window": np.arange(first_window, first_window + nb, dtype=np.int32),
        "mode": modes.astype(np.int8),
        "lpc_set": sets.astype(np.int8),
        "table": classes.astype(np.int8),
        "level": lv,
        "code": list(codes.astype(np.int8)),
        "residual": payloads,
        "crc32": np.array([checksum.window_crc(xh[i]) for i in range(nb)], dtype=np.uint32),
        "worst": worst_steps(worst, grid.eps),
        "score": score_bf16(score),
    }, schema=S.windows_schema(True))
    held = np.unique(wpos)
    exceptions = pa.table({
        "channel": [name] * len(held),
        "window": (first_window + held).astype(np.int32),
        "pos": [(pos[wpos == i] % L).astype(np.int32) for i in held],
        "bits": [bits[wpos == i] for i in held],
    }, schema=S.EXCEPTIONS_SCHEMA)
    return rows, exceptions, float(worst.max(initial=0.0))


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
