"""The packing stages between the grid and Parquet, for one channel at a time.

* :func:`plan_channel` — on a bounded sample of windows: fit the channel's
  LPC coefficients, pick predictors by a proxy cost, build the entropy tables
  per (predictor, activity class), both with and without the autoencoder, and
  estimate what the autoencoder saves;
* :func:`code_windows` — residuals -> payloads under the plan's tables.

The rows themselves are made by :func:`tsarchive.windowcodec.encode_windows`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import entropy
from .codec import TableSet, choose_modes, proxy_bits
from .predict import Context
from .predict import lpc as lpc_mod
from .quantize import Grid
from .windows import spread
from .windowcodec import code_windows, predict_windows  # noqa: F401  (code_windows: the plan codes too)

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
    without a model: the size estimate behind the choice of the window length."""
    plan = plan_channel(windows, None, n_total_windows, grid, W, None, 1)
    q, _, _, lv, _, _ = predict_windows(windows, grid, W, None, 1)
    modes, classes, res, _ = choose_modes(q, Context(lv, None, plan.lpc), plan.tables)
    return sum(len(p) for p in code_windows(modes, classes, res, plan.tables))


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


