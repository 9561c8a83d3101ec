"""The packing stages between the grid and Parquet, for one channel at a time.

* :func:`plan_channel` — on a bounded sample of windows: fit the channel's
  LPC coefficients, pick predictors by a proxy cost, build the entropy tables
  per (predictor, activity class), both with and without the autoencoder, and
  estimate what the autoencoder saves;
* :func:`choose_coder` — on the same sample, the channel's residual coder: the
  range coder under the plan's tables, or the adaptive coder (from rest or from
  a fitted initial state), whichever codes the sample smallest, counted in
  whole bytes with what each adds to the manifest;
* :func:`classic_phase` — for a channel the classic coder takes, the grid's
  phase its compressor codes the same sample smallest in;
* :func:`code_windows` — residuals -> payloads under the plan's tables.

The rows themselves are made by :func:`tsarchive.windowcodec.encode_windows`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import entropy
from .coding import fallback
from .coding.adaptive import AdaptiveCoder
from .coding.classic import ClassicCoder
from .codec import TableSet, choose_modes, proxy_bits
from .predict import Context
from .predict import lpc as lpc_mod
from .quantize import Grid
from .windows import spread
from .windowcodec import code_windows, predict_windows  # noqa: F401  (code_windows: the plan codes too)

TABLE_SAMPLES = 1 << 20      # bound on the samples used to plan each channel (and to sample training windows)
MIN_TABLE_SAMPLES = 8192     # a table class with fewer samples is merged into its neighbour
CHOICE_SAMPLES = 1 << 18     # bound on the samples per channel the coder choice codes each way
ADAPTIVE_GAIN = (127, 128)   # the adaptive coder is taken only where it codes the sample in fewer than 127/128
                             # of the range coder's bytes: it decodes at about half its speed (bench --speed's
                             # recording: 50 against 24 ms a 900 000-sample channel, for 0.18 % fewer bytes)
PHASE_GAIN = (127, 128)      # a classic channel's grid moves where the sample's bytes drop below 127/128 of them:
                             # a sample's smaller gains do not hold on the channel (seismo_kw1 at 1 %: 0.05 %
                             # fewer bytes on two blocks, 0.5 % more on the channel; appliance_acsf1 at 0.01 %:
                             # 1.0 % fewer on both)
EXCEPTION_BYTES = 12         # what a sample stored verbatim costs, roughly (position and raw value)
FIT_MIN_SAMPLES = 1 << 17    # channels shorter than this never try a fitted initial state (its bytes
                             # pay only on about 1e5 samples or more: bench --study residuals)


@dataclass(frozen=True)
class ChannelPlan:
    lpc: tuple[lpc_mod.LpcCoefs, ...]   # the channel's LPC coefficient sets
    tables: TableSet            # tables when the autoencoder is used (or the only set without a model)
    tables_plain: TableSet      # tables without the autoencoder
    ae_gain_bits: float         # estimated bits the autoencoder saves on the whole channel
    plain_bits: float = 0.0     # proxy bits of the sampled windows without the autoencoder


def sample_windows(n: int, W: int, count: int) -> np.ndarray:
    """Up to ``count`` full-window numbers spread evenly over ``n`` samples."""
    return spread(n // W, count)


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
        q, _, _, lv, _, ae = predict_windows(windows[part], grid, W, model, scale)
        batches.append((q, lv, ae))
    if tail is not None and len(tail):
        q, _, _, lv, _, ae = predict_windows(tail[None, :], grid, W, model, scale)
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
    without a model, or classic coded if that is smaller (:func:`~tsarchive.coding.fallback.classic_bytes`,
    whose repeats longer windows hold more of): the size estimate behind the choice of the window length."""
    plan = plan_channel(windows, None, n_total_windows, grid, W, None, 1)
    q, _, _, lv, _, _ = predict_windows(windows, grid, W, None, 1)
    modes, classes, res, _ = choose_modes(q, Context(lv, None, plan.lpc), plan.tables)
    return min(sum(len(p) for p in code_windows(modes, classes, res, plan.tables)), fallback.classic_bytes(q, lv))


def choose_coder(windows: np.ndarray, n_total_windows: int, grid: Grid, W: int, model, scale: int,
                 lpc, tables: TableSet, blocks: np.ndarray | None = None):
    """The channel's residual coder: None (range coding under ``tables``, stored in the manifest), an
    :class:`~tsarchive.coding.adaptive.AdaptiveCoder` or a one-combination
    :class:`~tsarchive.coding.classic.ClassicCoder` (every window then predicted by the previous
    sample: :func:`coder_tables`), whichever gives the fewest bytes.

    Each candidate codes the same spread sample of the full ``windows`` (k, W), the range and adaptive
    coders with the predictors ``tables`` choose, the classic coder with the previous sample
    (:mod:`tsarchive.coding.fallback`); its payload bytes are scaled to the channel's windows (integer
    arithmetic, so the choice, and the archive, are the same on every machine) and what it adds to the
    manifest is added: the tables' JSON text, or the coder's config (a fitted initial state in base64).
    The adaptive coder must take fewer than ``ADAPTIVE_GAIN`` of the range coder's bytes (it decodes at about
    half the speed), and the classic coder must be strictly smaller than the best of the others.
    ``blocks``: whole blocks of consecutive full windows (:func:`~tsarchive.coding.fallback.block_windows`
    each), on which the classic coder in blocks is measured.
    """
    if not len(windows):
        return None
    pick = spread(len(windows), max(1, CHOICE_SAMPLES // W))
    q, _, _, lv, _, ae = predict_windows(windows[pick], grid, W, model, scale)
    modes, classes, res, _ = choose_modes(q, Context(lv, ae, lpc), tables)
    k = len(res)

    def total(payload_bytes: int, stored) -> int:
        return fallback.estimate(payload_bytes, k, n_total_windows, stored)

    entries = [{"mode": int(m), "table": int(c), "coder": entropy.RangeCoder.id,
                **entropy.RangeCoder(t).get_config()} for (m, c), t in sorted(tables.tables.items())]
    best, best_bytes = None, total(sum(map(len, code_windows(modes, classes, res, tables))), entries)
    rest, fitted, rest_sizes = AdaptiveCoder(), None, None
    if n_total_windows * W >= FIT_MIN_SAMPLES:
        fitted, rest_sizes = AdaptiveCoder.fit_sized(res)      # its pass codes from rest too: rest's sizes for free
    adaptive, adaptive_bytes = None, None
    for coder, sizes in ((rest, rest_sizes), (fitted, None)):
        if coder is None:
            continue
        size = total(int(sizes.sum()) if sizes is not None else sum(map(len, coder.encode_many(res))),
                     coder.get_config())
        if adaptive_bytes is None or size < adaptive_bytes:
            adaptive, adaptive_bytes = coder, size
    if adaptive_bytes * ADAPTIVE_GAIN[1] < best_bytes * ADAPTIVE_GAIN[0]:
        best, best_bytes = adaptive, adaptive_bytes
    on_grid = None
    if blocks is not None and len(blocks):
        bq, _, _, blv, _, _ = predict_windows(blocks, grid, W, None, scale)
        on_grid = (bq, blv)
    return fallback.classic_choice(q, lv, n_total_windows, best_bytes, on_grid) or best


def classic_phase(windows: np.ndarray, blocks: np.ndarray | None, n_total_windows: int, options, W: int,
                  coder):
    """The grid of ``options`` (the channel's grid first, then its other phases:
    :func:`~tsarchive.gridphase.ranked_phases`) on which a classic channel's ``coder`` codes the same
    windows :func:`choose_coder` measured it on in the fewest bytes, and the coder; the first for any
    other coder.

    :func:`~tsarchive.gridphase.choose_phase` placed the grid by the first differences' cost before the
    coder was known; a general-purpose compressor finds repeats that cost does not see (appliance_acsf1
    at 1 %: xz in blocks takes 2577 B of the channel a quarter step up, 2801 B where that cost put the
    grid).  Each candidate costs one pass of the chosen combination (not the full choice), counted as
    :func:`~tsarchive.coding.fallback.measure` counts it plus ``EXCEPTION_BYTES`` a verbatim sample,
    scaled alike; the grid moves to the smallest (the earliest of a tie) only where it takes fewer than
    ``PHASE_GAIN`` of the bytes the first takes."""
    grid = options[0]
    if not isinstance(coder, ClassicCoder) or len(options) == 1 or not len(windows):
        return grid, coder
    pick = spread(len(windows), max(1, CHOICE_SAMPLES // W))

    def size(g: Grid) -> int:
        q, pos, _, lv, _, _ = predict_windows(windows[pick], g, W, None, 1)
        on = None if coder.block == 1 else predict_windows(blocks, g, W, None, 1)[::3]   # (windows, levels)
        held = len(pos) * n_total_windows // len(q)
        return fallback.measure(coder, q, lv, n_total_windows, on) + EXCEPTION_BYTES * held

    sizes = [size(g) for g in options]
    i = min(range(len(options)), key=lambda i: (sizes[i], i))
    return (options[i] if sizes[i] * PHASE_GAIN[1] < sizes[0] * PHASE_GAIN[0] else grid), coder


def coder_tables(coder, tables: TableSet) -> TableSet:
    """The tables that steer a channel's choice of predictor under its residual ``coder``: ``tables``
    themselves, except for the classic coder, whose windows all take the previous-sample predictor
    (one table of it, any: a channel with a coder stores no tables)."""
    if not isinstance(coder, ClassicCoder) or not tables.tables:
        return tables
    return TableSet({(fallback.PREV, 0): tables.tables[min(tables.tables)]})


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


