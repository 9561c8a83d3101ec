"""Linear prediction (LPC) with integer coefficients, fitted once per channel.

Within a window, ``y = q - level`` is predicted from ``y[i-1], …, y[i-p]``
(zero before the window start) as ``P = (Σ A_k y[i-k] + 2**(S-1)) >> S``.
The integer coefficients ``A_k`` are fitted by least squares on a sample of
the channel's windows, for a few orders, keeping the cheapest; they are
stored in the manifest.  The fit is exact (integer covariances, a rational
solve: :mod:`.exactls`) and the costs are integers in disguise
(:mod:`tsarchive.fixedlog`), so the same samples give the same coefficients
on every machine and BLAS.  All arithmetic is
int64 and exact; decoding runs the recursion sample by sample in a numba
kernel (compiled on first use and cached on disk), or vectorised across
windows with numpy where numba cannot be imported.  Both give the same bits.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np

from .. import fixedlog
from ..compiled import compile_kernels
from ..errors import ArchiveCorrupt
from . import exactls

SHIFT = 14                 # fixed-point bits of the coefficients
MAX_COEF = 1 << 18         # |A_k| bound
MAX_Y = 1 << 36            # windows with larger deviations do not use this predictor (int64 headroom)
MAX_ORDER = 32
ORDERS = (2, 4, 8, 16, 32)
FIT_ROWS = 50_000          # regression rows: plenty for at most 32 coefficients
SCORE_SAMPLES = 1 << 17    # the candidate orders are scored on windows holding about this many samples
SCORE_MIN_WINDOWS = 64     # … and on at least this many windows


@dataclass(frozen=True)
class LpcCoefs:
    coefs: tuple[int, ...]
    shift: int = SHIFT

    def __post_init__(self) -> None:
        if len(self.coefs) > MAX_ORDER or any(abs(int(a)) > MAX_COEF for a in self.coefs) or self.shift != SHIFT:
            raise ArchiveCorrupt("linear-prediction coefficients are out of range; the archive is damaged")

    @property
    def order(self) -> int:
        return len(self.coefs)

    def to_dict(self) -> dict:
        return {"coefs": list(self.coefs), "shift": self.shift}

    @classmethod
    def from_dict(cls, d: dict) -> "LpcCoefs":
        try:
            return cls(tuple(int(a) for a in d["coefs"]), int(d["shift"]))
        except (KeyError, TypeError, ValueError):
            raise ArchiveCorrupt("linear-prediction coefficients are unreadable; the archive is damaged") from None


def usable(q: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Windows whose deviations from their level are small enough for exact int64 prediction."""
    return np.abs(q - level[:, None]).max(axis=1, initial=0) < MAX_Y


def _design(y: np.ndarray, order: int, rows: int) -> np.ndarray:
    """Regression rows (int64) of up to ``rows`` evenly chosen samples: column 0 the sample,
    column ``k`` its ``k``-th previous deviation."""
    n = y.shape[1] - order
    pick = _even(y.shape[0] * n, rows)
    w, i = pick // n, pick % n + order
    return y[w[:, None], i[:, None] - np.arange(order + 1)]   # one gather: row j holds y[w_j, i_j - k]


def _even(total: int, count: int) -> np.ndarray:
    """``min(total, count)`` indices ``floor(j (total - 1) / (count - 1))`` spread over ``range(total)``,
    in integers (distinct: the step is at least 1)."""
    count = min(total, count)
    if count <= 1:
        return np.zeros(count, dtype=np.int64)
    return np.arange(count, dtype=np.int64) * (total - 1) // (count - 1)


def _windows_for(samples: int, n: int, least: int) -> int:
    """How many windows of ``n`` samples hold about ``samples`` (at least ``least``): a sample
    bounded in samples, not in windows, costs the same whatever the window length."""
    return max(least, samples // max(n, 1))


def _spread(total: int, count: int) -> np.ndarray:
    """Up to ``count`` indices spread evenly over ``range(total)``."""
    return _even(total, count)


def _coefs(a) -> LpcCoefs:
    """Rational least-squares coefficients -> ``round(a 2**SHIFT)`` within ``±MAX_COEF``."""
    return LpcCoefs(tuple(min(MAX_COEF, max(-MAX_COEF, exactls.fixed_point(v, SHIFT))) for v in a))


def _normal_equations(y: np.ndarray, order: int, rows: int) -> tuple[list[list[int]], list[int]]:
    """``X.T X`` and ``X.T t`` of the regression rows, exactly (Python integers)."""
    m = exactls.gram(_design(y, order, rows))
    return [row[1:] for row in m[1:]], m[0][1:]


def fit(q: np.ndarray, level: np.ndarray, cost) -> LpcCoefs:
    """The cheapest of the candidate orders on windows ``q`` under ``cost(residuals) -> bits``.

    Least squares by the covariance method: one Gram matrix of the largest
    order serves every order (its leading block), computed and solved
    exactly (:mod:`.exactls`); each order is then scored on evenly spread windows
    holding about :data:`SCORE_SAMPLES` samples, and on at least
    :data:`SCORE_MIN_WINDOWS` (fewer long windows made the choice noisy:
    16 windows of 8192 cost the seismometer case 0.9 % at 1e-2).
    """
    ok = usable(q, level)
    q, level = q[ok], level[ok]
    orders = [p for p in ORDERS if q.shape[1] > 2 * p]
    if len(q) == 0 or not orders:
        return LpcCoefs(())
    G, g = _normal_equations(q - level[:, None], orders[-1], FIT_ROWS)
    solved = exactls.solve_leading(G, g, orders)
    score = _spread(len(q), _windows_for(SCORE_SAMPLES, q.shape[1], SCORE_MIN_WINDOWS))
    qs, ls = q[score], level[score]
    best, best_bits = LpcCoefs(()), float(cost(residuals(qs, ls, LpcCoefs(()))).sum())
    for p in orders:
        c = _coefs(solved[p])
        bits = float(cost(residuals(qs, ls, c)).sum()) + 32 * p
        if bits < best_bits:
            best, best_bits = c, bits
    return best


MAX_SETS = 4               # coefficient sets per channel (a window names the one it uses)
MIN_SET_WINDOWS = 8        # a set is refitted only on at least this many windows
SET_EVAL_SAMPLES = 1 << 18  # sets are compared on windows holding about this many samples
SET_FIT_ROWS = 20_000      # regression rows when refitting a set
COEF_BITS = 40             # what one stored coefficient costs (JSON in the manifest), for the decision


def _fit_order(q: np.ndarray, level: np.ndarray, order: int) -> LpcCoefs:
    """Least-squares coefficients of one given order on windows ``q``."""
    G, g = _normal_equations(q - level[:, None], order, SET_FIT_ROWS)
    return _coefs(exactls.solve_leading(G, g, [order])[order])


def fit_sets(q: np.ndarray, level: np.ndarray, cost) -> tuple[LpcCoefs, ...]:
    """Up to :data:`MAX_SETS` coefficient sets for the channel's windows ``q``.

    The first set is :func:`fit`'s.  Then, while it pays, a set is added:
    seeded on the windows that the current sets (and the previous-sample
    predictor, which competes for every window anyway) serve worst, then
    refined by two rounds of assigning each window to its cheapest set and
    refitting each set on its windows (Lloyd's algorithm, with least squares
    in place of means).  "Pays" means the estimated bits of the windows, plus
    the coefficients and ``log2(sets)`` bits per window, drop by 0.5 %.
    Signals whose character changes over the recording (a sweep, a shock,
    then random vibration) gain most; stationary ones keep one set.
    """
    first = fit(q, level, cost)
    ok = usable(q, level)
    q, level = q[ok], level[ok]
    if not first.coefs or len(q) < 4 * MIN_SET_WINDOWS:
        return (first,)
    ev = _spread(len(q), _windows_for(SET_EVAL_SAMPLES, q.shape[1], 4 * MIN_SET_WINDOWS))
    q, level = q[ev], level[ev]
    prev = cost(np.concatenate([q[:, :1] - level[:, None], np.diff(q, axis=1)], axis=1))
    order = max(first.order, 2)

    def costs(sets):
        return np.stack([cost(residuals(q, level, c)) for c in sets] + [prev])

    def total(c, sets):
        k = len(sets)
        # every term a multiple of 2**-16 bit far below 2**37 bits: exact sums (tsarchive.fixedlog)
        return float(c.min(axis=0).sum()) + COEF_BITS * sum(s.order for s in sets) \
            + fixedlog.bits(fixedlog.log2q_int(k) * len(q))

    sets = [first]
    c = costs(sets)
    best = total(c, sets)
    while len(sets) < MAX_SETS:
        worst = np.argsort(-c.min(axis=0), kind="stable")[:max(MIN_SET_WINDOWS, len(q) // (2 * (len(sets) + 1)))]
        cand = sets + [_fit_order(q[worst], level[worst], order)]
        for _ in range(2):
            a = costs(cand)[:-1].argmin(axis=0)
            cand = [_fit_order(q[a == k], level[a == k], order) if (a == k).sum() >= MIN_SET_WINDOWS and k else s
                    for k, s in enumerate(cand)]
        cc = costs(cand)
        t = total(cc, cand)
        if t >= best * 0.995:
            break
        sets, c, best = cand, cc, t
    return tuple(sets)


def residuals(q: np.ndarray, level: np.ndarray, lpc: LpcCoefs) -> np.ndarray:
    """``r = y - P(y[i-1], …)`` with ``y = q - level``: the encoder's side of :func:`reconstruct`."""
    y = q - level[:, None]
    if y.size == 0 or not any(lpc.coefs):
        return y
    kernels = _kernels()
    if kernels is None:
        return _residuals_numpy(y, lpc)
    r = np.empty(y.shape, dtype=np.int64)
    kernels[1](np.ascontiguousarray(y, dtype=np.int64), _reversed(lpc), lpc.shift, r)
    return r


def _residuals_numpy(y: np.ndarray, lpc: LpcCoefs) -> np.ndarray:
    """Reference encoder (and fallback without numba), vectorised across windows and lags."""
    acc = np.full_like(y, 1 << (lpc.shift - 1))
    for k, a in enumerate(lpc.coefs, start=1):
        if a and k < y.shape[1]:
            acc[:, k:] += a * y[:, :-k]
    return y - (acc >> lpc.shift)


def reconstruct(r: np.ndarray, level: np.ndarray, lpc: LpcCoefs) -> np.ndarray:
    """Inverse of :func:`residuals`: ``y[i] = r[i] + P(y[i-1], …)``, then ``q = level + y``."""
    if r.size == 0 or not any(lpc.coefs):
        return level[:, None] + r            # P = half >> SHIFT = 0 throughout: y = r
    kernels = _kernels()
    if kernels is None:
        return _reconstruct_numpy(r, level, lpc)
    q = np.empty(r.shape, dtype=np.int64)
    # int64 and C order always, so numba compiles (or loads) one specialisation only; the kernel adds the
    # level as it writes ``q`` (no second pass over a fresh array)
    lv = np.ascontiguousarray(np.broadcast_to(np.asarray(level, dtype=np.int64), r.shape[:1]))  # one per window
    kernels[0](np.ascontiguousarray(r, dtype=np.int64), _reversed(lpc), lpc.shift, lv, q)
    return q


def _reconstruct_numpy(r: np.ndarray, level: np.ndarray, lpc: LpcCoefs) -> np.ndarray:
    """Reference decoder (and fallback without numba): the recursion vectorised across windows."""
    n = r.shape[1]
    rt = np.ascontiguousarray(r.T)           # (n, windows): each step reads contiguous rows
    y = np.zeros_like(rt)
    coefs = [(k, np.int64(a)) for k, a in enumerate(lpc.coefs, start=1) if a]
    half = np.int64(1 << (lpc.shift - 1))
    acc = np.empty(r.shape[0], dtype=np.int64)
    tmp = np.empty(r.shape[0], dtype=np.int64)
    for i in range(n):
        acc.fill(half)
        for k, a in coefs:
            if k > i:
                break
            np.multiply(y[i - k], a, out=tmp)
            acc += tmp
        np.right_shift(acc, lpc.shift, out=acc)
        np.add(rt[i], acc, out=y[i])
    return level[:, None] + y.T


NARROW = 1 << 31            # |y| below this: the kernels keep the history in int32 (int32 x int32 products)
SCALAR_LAGS = 4            # the reconstruction kernel holds this many latest lags in registers


def _reversed(lpc: LpcCoefs) -> np.ndarray:
    """The kernels' coefficients: reversed (``rev[p-k] = A_k``), zero-padded in front to at least
    ``SCALAR_LAGS + 1`` lags (a zero coefficient on a zero history adds an exact 0)."""
    rev = np.array(lpc.coefs[::-1], dtype=np.int64)
    return np.concatenate([np.zeros(max(0, SCALAR_LAGS + 1 - len(rev)), np.int64), rev])


def _reconstruct_kernel(r, rev, shift, level, q):
    """``q[w, i] = level[w] + y[w, i]`` with ``y[w, i] = r[w, i] + ((half + Σ_{k<=min(p,i)} A_k y[w, i-k]) >> shift)``,
    windows outer (numba).

    ``rev`` holds the coefficients reversed (``rev[p-k] = A_k``, ``p > SCALAR_LAGS``) and
    the history ``h`` has ``p`` zeros before the window's ``y``, so the sum
    walks ``h[i:i+p]`` forwards and lags ``k > i`` meet zeros (windows shorter
    than ``p`` included).  Zero coefficients and zero history add an exact 0,
    int64 addition wraps modulo 2**64 so the order of the sum cannot change a
    bit, and ``>>`` on int64 is arithmetic: the numpy path's bits exactly.

    Speed: while a window's values fit in int32 (|y| < 2**31, the usual case)
    its history is kept as int32, so each product is an exact int32 x int32 ->
    int64 multiply (one vector instruction), and the latest ``SCALAR_LAGS``
    values stay in registers (a vector load of a value stored a moment ago
    stalls).  The first value outside int32 sends the window back to the plain
    int64 loop from its start: the same integers either way.
    """
    p = rev.shape[0]
    n = r.shape[1]
    half = np.int64(1) << (shift - 1)
    rv = rev.astype(np.int32)                        # |A_k| <= MAX_COEF < 2**31
    a1, a2, a3, a4 = rev[p - 1], rev[p - 2], rev[p - 3], rev[p - 4]
    h32 = np.zeros(p + n, dtype=np.int32)            # h32[p + i] = y[w, i]; h32[:p] stays 0
    h = np.zeros(p + n, dtype=np.int64)
    for w in range(r.shape[0]):
        lv = level[w]
        narrow = True
        y1 = y2 = y3 = y4 = np.int64(0)
        for i in range(n):
            acc = half
            for j in range(p - 4):                   # lags p … 5
                acc += np.int64(rv[j]) * np.int64(h32[i + j])
            acc += a4 * y4 + a3 * y3 + a2 * y2
            acc += a1 * y1
            v = r[w, i] + (acc >> shift)
            if v >= NARROW or v < -NARROW:
                narrow = False
                break
            h32[p + i] = np.int32(v)
            q[w, i] = lv + v
            y4, y3, y2, y1 = y3, y2, y1, v
        if narrow:
            continue
        for i in range(n):                           # the same recursion on int64 throughout
            acc = half
            for j in range(p):
                acc += rev[j] * h[i + j]
            h[p + i] = r[w, i] + (acc >> shift)
            q[w, i] = lv + h[p + i]


def _residuals_kernel(y, rev, shift, r):
    """``r[w, i] = y[w, i] - ((half + Σ_{k<=min(p,i)} A_k y[w, i-k]) >> shift)`` (numba; same bits as numpy).

    A window whose values fit in int32 is filtered lag by lag over the whole
    window (``acc[i] += A_k * y[i-k]`` vectorises across ``i``, int32 x int32
    -> int64); otherwise, as in :func:`_reconstruct_kernel`, sample by sample
    on int64.  Either way a history with ``p`` leading zeros gives every
    sample the same fixed-length sum.
    """
    p = rev.shape[0]
    n = y.shape[1]
    half = np.int64(1) << (shift - 1)
    rv = rev.astype(np.int32)
    h32 = np.zeros(p + n, dtype=np.int32)
    h = np.zeros(p + n, dtype=np.int64)
    acc = np.empty(n, dtype=np.int64)
    for w in range(y.shape[0]):
        narrow = True
        for i in range(n):
            v = y[w, i]
            if v >= NARROW or v < -NARROW:
                narrow = False
                break
            h32[p + i] = np.int32(v)
        if narrow:
            acc[:] = half
            for j in range(p):                       # lag p - j
                a = np.int64(rv[j])
                for i in range(n):
                    acc[i] += a * np.int64(h32[i + j])
            for i in range(n):
                r[w, i] = y[w, i] - (acc[i] >> shift)
            continue
        h[p:] = y[w]
        for i in range(n):
            s = half
            for j in range(p):
                s += rev[j] * h[i + j]
            r[w, i] = h[p + i] - (s >> shift)


@cache
def _kernels():
    """The numba-compiled (:func:`_reconstruct_kernel`, :func:`_residuals_kernel`), or ``None`` without
    numba (:func:`tsarchive.compiled.compile_kernels`)."""
    return compile_kernels((_reconstruct_kernel, _residuals_kernel))
