"""Window batches on the integer grid: codes -> predictions -> residuals, and back.

Used by both directions of the pipeline.  Everything here is integer
arithmetic on int64 arrays of shape ``(n_windows, n)`` (one batch of windows
of equal length), so the decoder reproduces the encoder's integers exactly
whatever the machine, thread count or inference path.

Predictor choice is per window, by estimated coded bits: the ideal code
length of the window's residuals under the channel's entropy table for
that predictor and the window's activity class (codes and levels are
stored for every window, whatever its predictor, because browsing uses
them).  Before tables exist a Laplace-style proxy ``sum log2(1 + 2|r|)``
stands in.  Every estimate is a fixed-point integer (:mod:`.fixedlog`)
carried in float64 where its sums stay exact, so the choices, and the
archive bytes, are the same on every CPU.  Classes let quiet and busy stretches of one channel use
different tables, so a quiet window is not charged for the busy ones.
"""

from __future__ import annotations

import numpy as np

from . import entropy, fixedlog
from .predict import PREDICTORS, Context, get_predictor
from .predict import lpc as lpc_mod

CODER_ID = "range"       # entropy coder id stored with every table entry (registered in tsarchive.codecs)
N_CLASSES = 16           # residual activity classes, each may have its own table
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
    """Per-window bit estimate without a table: sum of log2(1 + 2|r|) + 1 per sample.

    Each log2 is :func:`fixedlog.log2q` (``|r|`` capped at ``2**61``), summed in int64, so a
    window's estimate is the same bits whatever the order of its samples or the CPU.
    """
    a = np.minimum(np.abs(r), 1 << 61)                 # |-2**63| wraps negative: the cap catches it too
    a = np.where(a < 0, 1 << 61, a)
    small = a < (1 << 15)
    units = fixedlog.small_table()[np.where(small, 2 * a + 1, 0)]
    if not small.all():
        units[~small] = fixedlog.log2q(2 * a[~small] + 1)
    return fixedlog.bits(units.sum(axis=1) + r.shape[1] * fixedlog.ONE)


# class k >= 1 once 1.5 log2(1 + mean|r|) >= k, i.e. mean|r| >= 2**(2k/3) - 1: thresholds times 2**20,
# from the integer cube root of 2**(2k + 60) (no float), so a window's class is decided in integers
_CLASS_FRAC = 20


def _icbrt(n: int) -> int:
    """floor(n ** (1/3)) for an integer n >= 0 (Newton's method on integers)."""
    x = 1 << -(-n.bit_length() // 3)
    while True:
        y = (2 * x + n // (x * x)) // 3
        if y >= x:
            return x
        x = y


_CLASS_AT = np.array([_icbrt(1 << (2 * k + 3 * _CLASS_FRAC)) - (1 << _CLASS_FRAC) for k in range(1, N_CLASSES)],
                     dtype=np.int64)


def spread_class(r: np.ndarray) -> np.ndarray:
    """Activity class of each window's residuals: ``floor(1.5 log2(1 + mean|r|))`` in 0..15, decided
    exactly: ``sum|r| * 2**20 >= n * threshold_k`` (each ``|r|`` capped at ``2**40``, beyond any threshold)."""
    n = r.shape[1]
    if not n:
        return np.zeros(r.shape[0], dtype=np.int8)
    a = np.abs(r)
    s = np.where((a < 0) | (a > (1 << 40)), 1 << 40, a).sum(axis=1)     # < 2**62 for n < 2**22
    # s >= n t / 2**20  <=>  s >= ceil(n t / 2**20), s an integer; n t < 2**53 for n < 2**22
    need = -((-n * _CLASS_AT) >> _CLASS_FRAC)
    return (s[:, None] >= need[None, :]).sum(axis=1).astype(np.int8)


def sample_costs(r: np.ndarray, table) -> np.ndarray:
    """Ideal code length in bits of every residual under ``table`` (same shape as ``r``)."""
    tok, _, nbits = entropy.tokenize(r.ravel(), table)
    cost = table.token_cost[tok]
    if len(nbits):
        cost[tok >= (1 << table.direct_bits)] += nbits
    return cost.reshape(r.shape)


class TableSet:
    """A channel's entropy tables, keyed ``(predictor, class)``.

    A window coded with predictor ``m`` uses the table of ``m`` whose class
    is nearest to the window's own :func:`spread_class`; the class used is
    stored per window, so decoding never recomputes it.
    """

    def __init__(self, tables: dict[tuple[int, int], object]) -> None:
        self.tables = dict(tables)
        self._classes = {}
        for m, c in self.tables:
            self._classes.setdefault(m, []).append(c)
        self._classes = {m: np.array(sorted(cs), dtype=np.int8) for m, cs in self._classes.items()}

    @property
    def modes(self) -> list[int]:
        return sorted(self._classes)

    def nearest(self, mode: int, cls: np.ndarray) -> np.ndarray:
        have = self._classes[mode]
        if len(have) == 1:
            return np.full(len(cls), have[0], dtype=np.int8)
        i = np.clip(np.searchsorted(have, cls), 1, len(have) - 1)
        lo, hi = have[i - 1], have[i]
        return np.where(np.abs(cls - lo) <= np.abs(hi - cls), lo, hi).astype(np.int8)

    def bits(self, mode: int, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per-window bits of residuals ``r`` under predictor ``mode``'s best-matching tables, and the classes."""
        cls = self.nearest(mode, spread_class(r))
        bits = np.empty(r.shape[0])
        for c in np.unique(cls):
            sel = cls == c
            bits[sel] = sample_costs(r[sel], self.tables[(mode, int(c))]).sum(axis=1)
        return bits, cls

    def __getitem__(self, key: tuple[int, int]):
        return self.tables[key]


def choose_modes(q: np.ndarray, ctx: Context, tables: TableSet | None
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Pick the cheapest predictor (and table class, and LPC set) per window.

    Returns ``(modes int8[N], classes int8[N], residuals int64[N, n], lpc sets int8[N])``.
    Without ``tables`` the proxy decides and classes are the windows' own
    spread classes; with them, only predictors that have tables compete.
    Every LPC set of the channel is a candidate of the ``lpc`` predictor;
    the set is 0 for windows of other predictors.
    """
    modes = candidate_modes(ctx)
    if tables is not None:
        modes = [m for m in modes if m in tables.modes] or tables.modes[:1]
    best_bits = None
    best_mode = np.zeros(q.shape[0], dtype=np.int8)
    best_cls = np.zeros(q.shape[0], dtype=np.int8)
    best_set = np.zeros(q.shape[0], dtype=np.int8)
    best_res = None
    lpc_ok = lpc_mod.usable(q, ctx.level) if any(PREDICTORS[m].uses_lpc for m in modes) else None
    for m in modes:
        p = get_predictor(m)
        for k in range(len(ctx.lpc)) if p.uses_lpc else (0,):
            r = p.residuals(q, ctx.with_set(k) if p.uses_lpc else ctx)
            if tables is None:
                bits, cls = proxy_bits(r), spread_class(r)
            else:
                bits, cls = tables.bits(m, r)
            if p.uses_lpc:
                bits = np.where(lpc_ok, bits + _set_bits(len(ctx.lpc)), np.inf)
            if best_bits is None:
                best_bits, best_res = bits, r.copy()
                best_mode[:], best_cls[:], best_set[:] = m, cls, k
                continue
            better = bits < best_bits
            best_bits = np.where(better, bits, best_bits)
            best_mode[better] = m
            best_cls[better] = cls[better]
            best_set[better] = k
            best_res[better] = r[better]
    return best_mode, best_cls, best_res, best_set


def _set_bits(n_sets: int) -> float:
    """Rough cost of naming one of ``n_sets`` LPC sets in a window's row."""
    return fixedlog.bits(fixedlog.log2q_int(n_sets)) if n_sets > 1 else 0.0


def reconstruct(modes: np.ndarray, ctx: Context, residuals: np.ndarray) -> np.ndarray:
    """Inverse of :func:`choose_modes` given the chosen modes (and ``ctx.lpc_set``)."""
    used = np.unique(modes)
    if len(used) == 1:                     # one predictor for all windows: no gather/scatter copies
        return get_predictor(int(used[0])).reconstruct(residuals, ctx)
    q = np.empty_like(residuals)
    for m in used:
        sel = modes == m
        q[sel] = get_predictor(int(m)).reconstruct(residuals[sel], ctx.take(sel))
    return q
