"""Long-term (periodic) prediction of a short-term residual window, integers only.

The method is the long-term predictor of GSM 06.10 (ETSI EN 300 961, RPE-LTP,
sections 4.2.11-4.2.12): on the short-term residual ``d`` of a block, find the
lag ``L`` that maximises the cross-correlation with the block's own past, a
2-bit gain ``b`` from the ratio of that correlation to the past's energy
(decision levels DLB = 0.2, 0.5, 0.8; gains QLB = 3277, 11469, 21299, 32767
in units of 2**-15, GSM's Table 4.3a/b), and predict ``d[t]`` by
``mult_r(QLB[b], d[t - L]) = (QLB[b] * d[t - L] + 2**14) >> 15``.  Here the
past is the same window's (so every window decodes on its own): for
``t < L`` nothing is predicted, and the residual is

    e[t] = d[t] - ((QLB[b] * d[t - L] + 2**14) >> 15)     (t >= L)

:func:`invert` rebuilds ``d`` lag by lag exactly (int64; windows whose
``|d|`` reaches 2**46 are never predicted, so no product overflows).

Unlike GSM (lags 40-120 on 40-sample subframes) the lag range is the whole
window, ``MIN_LAG`` to ``n - MIN_OVERLAP``, and the lag is chosen by the
normalised correlation ``R(L)**2 / S(L)`` with ``R(L) > 0`` (the energy a
gain-1-optimal predictor removes), not by ``R`` alone, since a long lag has a
shorter overlap.  Correlations are exact integers: the search runs on
``d >> s`` with ``s`` chosen so that ``|d >> s| <= 2**SEARCH_BITS``, where a
float64 FFT correlation, rounded, is provably the exact integer (its error is
below ``n log2(n) max|x|**2 2**-50 < 1/4``: the bound of Percival,
Math. Comp. 72 (2003), with a safety factor) -- so the choice is the same on
every machine.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

QLB = (3277, 11469, 21299, 32767)           # GSM 06.10 gain levels, 2**-15
DLB = (6554, 16384, 26214)                  # GSM 06.10 gain decision levels, 2**-15
MIN_LAG = 2
MIN_OVERLAP = 16
SEARCH_BITS = 15
MAX_ABS = 1 << 46                           # larger residuals: no long-term prediction


@dataclass(frozen=True)
class LongTerm:
    """A window's long-term predictor: ``lag`` samples back, gain ``QLB[gain]`` / 2**15."""

    lag: int
    gain: int

    def side_bits(self, n: int) -> int:
        """Bits that describe it for a window of ``n`` samples: the lag below ``n`` and the 2-bit gain."""
        return max(1, int(n - 1).bit_length()) + 2


def _search_values(d: np.ndarray) -> np.ndarray:
    """``d >> s`` with ``|d >> s| <= 2**SEARCH_BITS`` and within the exact-FFT bound for its length."""
    n = len(d)
    top = int(np.abs(d).max(initial=0))
    # exact-rounding bound: n * (log2 n + 1) * max**2 < 2**48
    limit_bits = min(SEARCH_BITS, (48 - (n * (n.bit_length() + 1)).bit_length()) // 2)
    s = max(0, top.bit_length() - max(limit_bits, 1))
    return d >> s


def correlations(x: np.ndarray) -> np.ndarray:
    """``R[L] = sum_t x[t] x[t - L]`` for L = 0..n-1, exact integers (int64) for ``x`` from
    :func:`_search_values` (an FFT correlation whose rounding error is below 1/4, then rounded)."""
    n = len(x)
    size = 1 << (2 * n - 1).bit_length()
    f = np.fft.rfft(x.astype(np.float64), size)
    return np.rint(np.fft.irfft(f * np.conj(f), size)[:n]).astype(np.int64)


def best_lag(d: np.ndarray, min_lag: int = MIN_LAG, max_lag: int | None = None) -> tuple[int, int, int] | None:
    """(lag, R, S) maximising ``R**2 / S`` over ``min_lag..max_lag`` with ``R > 0``, on the search values;
    None when no lag correlates positively."""
    n = len(d)
    max_lag = n - MIN_OVERLAP if max_lag is None else min(max_lag, n - 1)
    if max_lag < min_lag:
        return None
    x = _search_values(np.asarray(d, dtype=np.int64))
    R = correlations(x)
    sq = np.concatenate([[0], np.cumsum(x * x)])          # S(L) = sum_{t < n-L} x[t]**2
    lags = np.arange(min_lag, max_lag + 1)
    r = R[lags]
    s = sq[n - lags]
    ok = (r > 0) & (s > 0)
    if not ok.any():
        return None
    lags, r, s = lags[ok], r[ok], s[ok]
    # exact argmax of r**2 / s: the float keys (each a correctly rounded IEEE operation, so the same on
    # every machine) shortlist the lags near the top, Python integers decide (ties: the shortest lag)
    key = r.astype(np.float64) ** 2 / s.astype(np.float64)
    near = np.flatnonzero(key >= key.max() * (1 - 1e-9))
    best = int(near[0])
    for k in near[1:].tolist():
        if int(r[k]) ** 2 * int(s[best]) > int(r[best]) ** 2 * int(s[k]):
            best = k
    return int(lags[best]), int(r[best]), int(s[best])


def gain_index(R: int, S: int) -> int:
    """GSM 06.10's gain quantisation: the number of decision levels DLB that ``R / S`` exceeds."""
    return sum(1 for t in DLB if R * 32768 > t * S)


def search(d: np.ndarray, min_lag: int = MIN_LAG, max_lag: int | None = None) -> LongTerm | None:
    """The long-term predictor of window ``d``, or None (no positive correlation, or values too large)."""
    d = np.asarray(d, dtype=np.int64)
    if len(d) < MIN_LAG + MIN_OVERLAP or int(np.abs(d).max(initial=0)) >= MAX_ABS or d.min(initial=0) <= -MAX_ABS:
        return None
    found = best_lag(d, min_lag, max_lag)
    if found is None:
        return None
    lag, R, S = found
    return LongTerm(lag, gain_index(R, S))


def _predict(past: np.ndarray, gain: int) -> np.ndarray:
    return (np.int64(QLB[gain]) * past + np.int64(1 << 14)) >> np.int64(15)


def apply(d: np.ndarray, lt: LongTerm) -> np.ndarray:
    """``e[t] = d[t] - mult_r(QLB[gain], d[t - lag])`` for ``t >= lag``; ``e[t] = d[t]`` before."""
    d = np.asarray(d, dtype=np.int64)
    e = d.copy()
    e[lt.lag:] -= _predict(d[:-lt.lag] if lt.lag else d, lt.gain)
    return e


def invert(e: np.ndarray, lt: LongTerm) -> np.ndarray:
    """Inverse of :func:`apply`: rebuilds ``d`` one lag-long stretch at a time."""
    d = np.asarray(e, dtype=np.int64).copy()
    for a in range(lt.lag, len(d), lt.lag):
        b = min(a + lt.lag, len(d))
        d[a:b] += _predict(d[a - lt.lag:b - lt.lag], lt.gain)
    return d
