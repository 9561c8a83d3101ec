"""Detect the decimal grid a logger wrote its values on.

A data logger that prints two decimals produces values such as ``21.37``;
parsed back into binary floating point they are the doubles *nearest* to
``2137 / 100``.  :func:`detect_decimals` finds the smallest number of
decimals ``d`` for which every finite value is exactly such a nearest
float, which lets a codec store the integers ``round(x * 10**d)`` and give
back the very same bits.

The test for a float64 source is ``float(round(x * 10**d)) / 10**d == x``
(bitwise); IEEE-754 division is correctly rounded, so the quotient of the
exact integer and the exact power of ten is the float nearest the decimal
number, which is what any correct decimal-to-binary parser returns.  For a
float32 source the quotient (computed in float64) is rounded to float32 and
compared with the float32 value.

Scientific notation is a decimal grid too: ``1.234e-07`` is ``1234 / 10**10``.
Up to :data:`ANY_SIZE_DECIMALS` decimals are looked for at any magnitude;
beyond, up to :data:`MAX_DECIMALS` (15, what a manifest's grid may hold),
only while the grid is at least eight times coarser than the source's
floats at the column's largest value: ``max|x| * 10**d < 2**(p - 3)``
with ``p`` the significand's bits (53 for float64, 24 for float32, 11 for
float16).  A finer grid would hold every float of the column whether or
not a logger wrote it, and the bound keeps float64 grids' integers below
``2**50``, the predictors' range.

For very long columns only a strided sample of at most
:data:`MAX_CHECKED` values is examined; a codec that relies on the result
must verify every value when it encodes (the lossless path does).
"""

from __future__ import annotations

import numpy as np

#: Largest number of decimals looked for (quantize.MAX_DECIMALS: what a manifest's grid may hold).
MAX_DECIMALS = 15

#: Decimals looked for whatever the column's magnitude (beyond: see the module docstring).
ANY_SIZE_DECIMALS = 6

#: At most this many values of a column are examined (an even stride).
MAX_CHECKED = 2_000_000

_PROBE = 1024  # a short head checked first so that most d fail cheaply


def _sample(values: np.ndarray) -> np.ndarray:
    """A strided sample of at most MAX_CHECKED values (a copy, float64 or float32)."""
    n = values.shape[0]
    step = max(1, -(-n // MAX_CHECKED))
    return np.asarray(values[::step])


def _on_grid(x: np.ndarray, d: int, is_f32: bool) -> bool:
    """True when every value of finite ``x`` lies on the 10**-d grid, bitwise."""
    scale = 10.0 ** d
    x64 = x.astype(np.float64, copy=False)
    with np.errstate(over="ignore", invalid="ignore"):
        q = np.round(x64 * scale) / scale
    if is_f32:
        with np.errstate(over="ignore"):
            q32 = q.astype(np.float32)
        return bool(np.array_equal(q32.view(np.uint32), x.view(np.uint32)))
    return bool(np.array_equal(q.view(np.uint64), x64.view(np.uint64)))


def detect_decimals(values: np.ndarray, dtype: np.dtype | str | None = None) -> int | None:
    """Smallest ``d`` in ``0..MAX_DECIMALS`` such that all finite values lie on a 10**-d grid (beyond
    ``ANY_SIZE_DECIMALS`` only while the grid is coarser than the floats: see the module docstring).

    ``values`` is a 1-D array (a memory map is fine); ``dtype`` is the dtype
    of the *source* column (defaults to ``values.dtype``).  Returns ``0`` for
    any integer dtype and for floats that are all whole numbers, ``None``
    when no ``d <= MAX_DECIMALS`` fits.  NaN and +-Inf are ignored; a column
    with no finite value returns ``0`` (every grid fits vacuously).
    """
    src = np.dtype(values.dtype if dtype is None else dtype)
    if src.kind in "iub":
        return 0
    if src.kind != "f":
        return None
    x = _sample(values)
    is_f32 = src.itemsize <= 4
    x = x.astype(np.float32 if is_f32 else np.float64, copy=False)
    x = np.ascontiguousarray(x[np.isfinite(x)])
    if x.size == 0:
        return 0
    head = x[:_PROBE]
    cap = 2.0 ** (np.finfo(src).nmant + 1 - 3)       # eight times coarser than the floats at the top
    top = float(np.max(np.abs(x)))
    for d in range(MAX_DECIMALS + 1):
        if d > ANY_SIZE_DECIMALS and top * 10.0 ** d >= cap:
            return None
        if _on_grid(head, d, is_f32) and _on_grid(x, d, is_f32):
            return d
    return None
