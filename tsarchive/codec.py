"""Window batches on the integer grid: codes -> predictions -> residuals, and back.

Used by both directions of the pipeline.  Everything here is integer
arithmetic on int64 arrays of shape ``(n_windows, n)`` (one batch of windows
of equal length), so the decoder reproduces the encoder's integers exactly
whatever the machine, thread count or inference path.

Predictor choice is per window, by estimated coded bits: the ideal code
length of the window's residuals under the channel's entropy table for
that predictor, plus the side cost of nothing else (codes and levels are
stored for every window, whatever its predictor, because browsing uses
them).  Before tables exist a Laplace-style proxy ``sum log2(1 + 2|r|)``
stands in.
"""

from __future__ import annotations

import numpy as np

from . import entropy
from .predict import PREDICTORS, Context, get_predictor
from .predict import lpc as lpc_mod

CODER_ID = "range"       # entropy coder id stored with every residual payload (tsarchive.entropy.CODERS)
FRAC_SAFE_SCALE = 2**36  # largest channel scale the autoencoder path accepts
Y_CLIP = 2**24           # bound on the decoder's fixed-point output before scaling


def ae_prediction(decoder, codes: np.ndarray, level: np.ndarray, scale: int, n: int) -> np.ndarray:
    """Integer prediction ``level + floor(y * scale / 2**frac)`` for the first ``n`` samples."""
    y = decoder.predict(codes)[:, :n]
    y = np.clip(y, -Y_CLIP, Y_CLIP)
    return level[:, None] + ((y * np.int64(scale)) >> np.int64(decoder.frac_bits))


def candidate_modes(ctx: Context) -> list[int]:
    return [m for m, p in PREDICTORS.items() if p.available(ctx)]


def proxy_bits(r: np.ndarray) -> np.ndarray:
    """Per-window bit estimate without a table: sum of log2(1 + 2|r|) + 1 per sample."""
    a = np.abs(r.astype(np.float64))
    return np.log2(1.0 + 2.0 * a).sum(axis=1) + r.shape[1]


def window_bits(r: np.ndarray, table) -> np.ndarray:
    """Ideal coded bits per window under ``table`` (or the proxy when ``table`` is None)."""
    if table is None:
        return proxy_bits(r)
    return sample_costs(r, table).sum(axis=1)


def sample_costs(r: np.ndarray, table) -> np.ndarray:
    """Ideal code length in bits of every residual under ``table`` (same shape as ``r``)."""
    tok, _, nbits = entropy.tokenize(r.ravel(), table)
    cost = table.token_cost[tok]
    if len(nbits):
        cost[tok >= (1 << table.direct_bits)] += nbits
    return cost.reshape(r.shape)


def choose_modes(q: np.ndarray, ctx: Context, tables: dict[int, object] | None) -> tuple[np.ndarray, np.ndarray]:
    """Pick the cheapest predictor per window.

    Returns ``(modes int8[N], residuals int64[N, n])``.  With ``tables``
    given, only predictors that have a table are considered.
    """
    modes = candidate_modes(ctx)
    if tables is not None:
        modes = [m for m in modes if m in tables] or [0]
    best_bits = None
    best_mode = np.zeros(q.shape[0], dtype=np.int8)
    best_res = None
    lpc_ok = lpc_mod.usable(q, ctx.level) if any(PREDICTORS[m].uses_lpc for m in modes) else None
    for m in modes:
        p = get_predictor(m)
        r = p.residuals(q, ctx)
        bits = window_bits(r, None if tables is None else tables.get(m))
        if p.uses_lpc:
            bits = np.where(lpc_ok, bits, np.inf)
        if best_bits is None:
            best_bits, best_res = bits, r.copy()
            best_mode[:] = m
            continue
        better = bits < best_bits
        best_bits = np.where(better, bits, best_bits)
        best_mode[better] = m
        best_res[better] = r[better]
    return best_mode, best_res


def reconstruct(modes: np.ndarray, ctx: Context, residuals: np.ndarray) -> np.ndarray:
    """Inverse of :func:`choose_modes` given the chosen modes."""
    q = np.empty_like(residuals)
    for m in np.unique(modes):
        sel = modes == m
        q[sel] = get_predictor(int(m)).reconstruct(residuals[sel], ctx.take(sel))
    return q
