"""Exact comparisons of samples: ``|x̂ - x|`` and ``|x̂ - x| <= ε`` without float64 rounding.

Integers (int8 … uint64) are compared in integers: ``|a - b|`` is
``max - min`` in an order-preserving uint64 view, exact whatever the
magnitudes (an int64 near 2**62 has float64 neighbours 1024 apart).  Floats
go through float64 with the subtraction's rounding error recovered by TwoSum
where it matters.  Used by quantization (the bound is made), encoding (the
reported worst error) and verification (the bound is checked).
"""

from __future__ import annotations

import math

import numpy as np

_SIGN = np.uint64(1 << 63)


def _as_u(x: np.ndarray) -> np.ndarray:
    """Integers in an order-preserving uint64 view (signed ones with the sign bit flipped)."""
    if x.dtype.kind == "u":
        return x.astype(np.uint64)
    return x.astype(np.int64).view(np.uint64) ^ _SIGN


def int_abs_diff(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Exact ``|a - b|`` of two integer arrays of the same signedness, as uint64 (max - min in an
    order-preserving unsigned view: no overflow whatever the magnitudes)."""
    ua, ub = _as_u(np.asarray(a)), _as_u(np.asarray(b))
    return np.maximum(ua, ub) - np.minimum(ua, ub)


def abs_errors(x: np.ndarray, xh: np.ndarray) -> np.ndarray:
    """``|xh - x|`` per sample as float64 rounded *up* (never below the exact value), so that
    ``abs_errors(x, xh) <= eps`` is an exact test for any float ``eps``.

    Integers of the same signedness are subtracted exactly (:func:`int_abs_diff`); floats through
    float64 with the rounding error of the subtraction recovered by TwoSum (Knuth, TAOCP vol. 2,
    4.2.2): where the exact difference is above the rounded one, the next float up is taken.
    Non-finite inputs give NaN or inf.
    """
    x, xh = np.asarray(x), np.asarray(xh)
    if x.dtype.kind in "iu" and xh.dtype.kind in "iu" and (x.dtype.kind == xh.dtype.kind or
                                                            max(x.dtype.itemsize, xh.dtype.itemsize) < 8):
        d = int_abs_diff(x.astype(np.int64), xh.astype(np.int64)) if x.dtype.kind != xh.dtype.kind \
            else int_abs_diff(x, xh)
        f = d.astype(np.float64)
        fits = f < 2.0**64                                   # 2**64 itself is above every uint64
        under = fits & (np.where(fits, f, 0.0).astype(np.uint64) < d)   # float64 rounded these down
        if under.any():
            f[under] = np.nextafter(f[under], np.inf)
        return f
    a, b = xh.astype(np.float64), x.astype(np.float64)
    with np.errstate(invalid="ignore", over="ignore"):
        s = a - b
        bp = s - a                               # TwoSum of a and -b: s + e == a - b exactly
        e = (a - (s - bp)) + (-b - bp)
        err = np.abs(s)
        # s == 0 only when a == b (float subtraction is exact near zero), so e is 0 there
        up = np.isfinite(err) & (e != 0) & ((e > 0) == (s > 0))
    if up.any():
        err[up] = np.nextafter(err[up], np.inf)
    return err


def within(x: np.ndarray, xh: np.ndarray, eps: float) -> np.ndarray:
    """Exactly ``|xh - x| <= eps`` per sample (False where either is not finite).

    Integers of the same signedness compare in uint64.  For floats the
    rounded difference decides except where it equals ``eps`` (rounding is
    monotonic, so a rounded difference below or above ``eps`` is on the same
    side as the exact one); only those ties need :func:`abs_errors`.
    """
    x, xh = np.asarray(x), np.asarray(xh)
    if x.dtype.kind in "iu" and x.dtype.kind == xh.dtype.kind:
        limit = np.uint64(min(math.floor(eps), (1 << 64) - 1)) if math.isfinite(eps) else np.uint64((1 << 64) - 1)
        return int_abs_diff(x, xh) <= limit
    with np.errstate(invalid="ignore", over="ignore"):
        s = np.abs(xh.astype(np.float64) - x.astype(np.float64))
    ok = s <= eps
    tie = s == eps
    if tie.any():
        ok[tie] = abs_errors(x[tie], xh[tie]) <= eps
    return ok


def rounded_errors(x: np.ndarray, xh: np.ndarray) -> np.ndarray:
    """``|xh - x|`` per sample, cheaply: exact (rounded up) for integers, the float64 difference
    rounded to nearest for floats (within half an ulp of the exact value: a report, not a bound
    check; :func:`within` is the exact test)."""
    x, xh = np.asarray(x), np.asarray(xh)
    if x.dtype.kind in "iu" and xh.dtype.kind in "iu":
        return abs_errors(x, xh)
    with np.errstate(invalid="ignore", over="ignore"):
        return np.abs(xh.astype(np.float64) - x.astype(np.float64))


def max_errors(x: np.ndarray, xh: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Per row of 2-D ``x`` the largest ``|xh - x|`` over the samples where ``keep`` (0 for a row
    with none): exact for integers (rounded up above 2**53), the nearest double for floats."""
    return np.where(keep, rounded_errors(x, xh), 0.0).max(axis=1, initial=0.0)


def values_to_bits(x: np.ndarray) -> np.ndarray:
    """Raw bits of samples as int64 (floats by bit pattern, ints by value)."""
    x = np.asarray(x)
    if x.dtype.kind == "f":
        width = {2: np.int16, 4: np.int32, 8: np.int64}[x.dtype.itemsize]
        return x.view(width).astype(np.int64)
    return x.astype(np.int64)


def bits_to_values(bits: np.ndarray, dtype: np.dtype) -> np.ndarray:
    """Inverse of :func:`values_to_bits` for samples of ``dtype``."""
    dtype = np.dtype(dtype)
    bits = np.asarray(bits, dtype=np.int64)
    if dtype.kind == "f":
        width = {2: np.int16, 4: np.int32, 8: np.int64}[dtype.itemsize]
        return bits.astype(width).view(dtype)
    return bits.astype(dtype)
