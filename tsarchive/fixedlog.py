"""Base-2 logarithms as fixed-point integers: the same bits on every machine.

The packer's cost estimates (which predictor, table class, binning, LPC
order or set, window length) pick what goes into the archive, so they must
not depend on the CPU.  ``np.log2`` does: numpy dispatches it to SIMD code
whose last bit differs between CPU models.  Here ``log2(x)`` of a positive
integer is an integer in units of ``2**-FRAC`` bit, from integer operations
only:

* ``x = 2**e * (1 + f)``: ``e`` is the index of the leading one (exact),
  ``f`` the next 24 bits below it (lower bits are dropped: at most
  ``2**-24`` relative, 1e-7 bit);
* ``log2(1 + f)`` by linear interpolation in a table of ``2**TABLE_BITS + 1``
  values, themselves computed once by the bit-by-bit squaring method on
  uint64 (Knuth, TAOCP vol. 1, 1.2.2, exercise 25) with 31 guard bits: no
  float operation anywhere.

Costs are sums of these integers (int64 does not overflow below ``2**40``
samples), or ``float64`` values ``n / 2**FRAC`` whose sums stay exact (and so
order-free) while below ``2**(53 - FRAC)`` = ``2**37`` bits.  Accuracy:
within 1 unit (``2**-16`` bit) of the true ``log2`` (tests/test_exactfit.py).
"""

from __future__ import annotations

from functools import cache

import numpy as np

FRAC = 16                     # log2 results are integers in units of 2**-FRAC bit
ONE = 1 << FRAC               # one bit
TABLE_BITS = 12               # the table holds log2(1 + i / 2**TABLE_BITS), i = 0 .. 2**TABLE_BITS
_TFRAC = 32                   # the table's own fixed point (interpolated, then rounded to FRAC)
_MANT = 24                    # mantissa bits kept below the leading one
_SMALL = 1 << 16              # direct table for x < _SMALL


def _log2_1p(i: np.ndarray, k: int, frac: int, guard: int = 31) -> np.ndarray:
    """``2**frac * log2(1 + i / 2**k)`` (int64, within 2**(frac - guard + 2) of it) for
    ``0 <= i <= 2**k``, in integer operations only.

    Bit by bit: for ``y`` in [1, 2), square it; a square >= 2 gives the next
    binary digit 1 (and is halved).  ``y`` is kept to ``guard`` fractional
    bits, truncated (``y**2 < 2**64``: uint64), and a truncation at digit
    ``j`` moves the result by about ``2**-(guard + j)`` only.
    """
    one = np.uint64(1 << guard)
    y = ((np.uint64(1 << k) + i.astype(np.uint64)) << np.uint64(guard)) >> np.uint64(k)
    top = y >= 2 * one                    # i = 2**k: log2(2) = 1
    y = np.where(top, one, y)
    out = np.zeros(len(y), dtype=np.int64)
    for _ in range(frac + 2):             # two extra digits to round on
        y = (y * y) >> np.uint64(guard)
        big = y >= 2 * one
        out = (out << 1) | big
        y = np.where(big, y >> np.uint64(1), y)
    return np.where(top, 1 << frac, (out + 2) >> 2)


@cache
def _table() -> np.ndarray:
    return _log2_1p(np.arange((1 << TABLE_BITS) + 1), TABLE_BITS, _TFRAC)


def _top_bit(u: np.ndarray) -> np.ndarray:
    """floor(log2(u)) for uint64 ``u >= 1``, exact: a float guess (frexp does not round; the
    conversion to float may round up across a power of two), then corrected in integers."""
    e = (np.frexp(u.astype(np.float64))[1] - 1).astype(np.int64)
    return e - ((u >> e.astype(np.uint64)) == 0)


def log2q(x) -> np.ndarray:
    """``log2(x)`` in units of ``2**-FRAC`` (int64) for integers ``1 <= x < 2**64``: the same bits
    everywhere; within one unit of the true value."""
    u = np.asarray(x).astype(np.uint64)
    if u.size and int(u.min()) < 1:
        raise ValueError("log2q needs integers >= 1")
    e = _top_bit(u)
    # the MANT bits below the leading one: shift left when there are fewer
    up = np.maximum(_MANT - e, 0).astype(np.uint64)
    down = np.maximum(e - _MANT, 0).astype(np.uint64)
    m = ((u << up) >> down).astype(np.int64) - (1 << _MANT)
    lo_bits = _MANT - TABLE_BITS
    i, rem = m >> lo_bits, m & ((1 << lo_bits) - 1)
    t = _table()
    v = t[i] + (((t[np.minimum(i + 1, len(t) - 1)] - t[i]) * rem) >> lo_bits)
    half = 1 << (_TFRAC - FRAC - 1)
    return (e << FRAC) + ((v + half) >> (_TFRAC - FRAC))


@cache
def small_table() -> np.ndarray:
    """``log2q(x)`` for ``x < 2**16`` (index ``x``; entry 0 unused, set to 0), for quick lookups."""
    out = np.zeros(_SMALL, dtype=np.int64)
    out[1:] = log2q(np.arange(1, _SMALL, dtype=np.uint64))
    return out


def log2q_int(n: int) -> int:
    """:func:`log2q` of one Python integer ``1 <= n < 2**64``."""
    return int(log2q(np.array([n], dtype=np.uint64))[0])


def bits(units) -> np.ndarray | float:
    """Units of ``2**-FRAC`` bit as bits (float64, exact below ``2**53`` units)."""
    if isinstance(units, (int, np.integer)):
        return float(units) / ONE
    return np.asarray(units, dtype=np.float64) / ONE
