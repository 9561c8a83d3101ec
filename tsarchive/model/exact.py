"""Arithmetic whose result is the same bits on every machine and thread count (numpy; numba for one loop).

Training feeds the stored integer decoder and the keep/drop decision, so it
must repeat bit for bit.  What does and does not repeat in float64 numpy:

* elementwise ``+ - * /``, ``sqrt``, ``rint``, ``abs``, ``maximum`` and
  comparisons are correctly rounded (IEEE 754-2008, clause 5.4) and give the
  same bits whatever SIMD width numpy dispatches to;
* transcendental ufuncs (``exp``, ``tanh``, ...) do not: they dispatch to
  CPU-specific code -- the trainer uses :func:`exp` and :func:`tanh` below,
  built from the elementwise operations above;
* a BLAS product or a sum adds in an order that depends on blocking, SIMD
  width, FMA and threads.  It is exact, hence order-free, when every operand
  is an integer and every partial sum stays below 2**53: :func:`matmul` and
  :func:`total` first round their operands to such integers (block floating
  point: one power-of-two scale per operand, so scaling is exact too).

A product ``a @ b`` with inner size n keeps ``(52 - ceil(log2 n)) // 2``
significant bits per operand (19 for n = 8192, 22 for n = 256): about the
precision of float32 training, but reproducible.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from ..compiled import compile_kernels

_SUM_BITS = 52          # |exact partial sums| <= 2**52 < 2**53: every one is a float64 integer


def _bits_for(n: int) -> int:
    return max(1, _SUM_BITS - max(0, (int(n) - 1).bit_length()))


def to_grid(a: np.ndarray, bits: int, axis: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """``(q, scale)``: integers ``q = rint(a * scale)`` (float64), ``|q| <= 2**bits``, ``a ~ q / scale``.

    ``scale`` is a power of two per slice along ``axis`` (one for the whole
    array when ``axis`` is None), taken from the slice's largest magnitude:
    max and frexp do not round and multiplying by a power of two is exact, so
    ``q`` is the same everywhere.
    """
    a = np.asarray(a, dtype=np.float64)
    if not a.size:
        return np.zeros_like(a), np.ones((1,) * a.ndim)
    flip = a.ndim == 2 and not a.flags.c_contiguous and a.T.flags.c_contiguous   # walk memory in its own order
    rows = a.T if flip else a
    kern = _kernels() if a.ndim == 2 and axis in (0, 1) and rows.flags.c_contiguous else None
    if kern is None:
        peak = np.maximum(np.max(a, axis=axis, keepdims=True), -np.min(a, axis=axis, keepdims=True))
    else:     # one compiled pass for max |a| and finiteness: on |a|'s IEEE bits (an order-keeping integer view)
        top = kern[0](rows.view(np.int64), axis ^ flip)
        if np.any(top >= _NOT_FINITE):
            raise FloatingPointError("training diverged (a value is not finite)")
        peak = top.view(np.float64)
        peak = peak[:, None] if axis == 1 else peak[None, :]
    if not np.all(np.isfinite(peak)):
        raise FloatingPointError("training diverged (a value is not finite)")
    scale = np.ldexp(1.0, bits - np.frexp(peak)[1])      # peak < 2**frexp(peak)[1]
    if kern is not None:
        q = kern[1](rows, scale.ravel(), axis ^ flip)
        return (q.T if flip else q), scale
    q = a * scale
    return np.rint(q, out=q), scale


_NOT_FINITE = 0x7FF0000000000000     # |x|'s bits at or above this: infinity or NaN


def _peaks(bits, axis):
    """max over ``axis`` (0 or 1) of ``|x|``'s IEEE-754 bits, ``bits`` being the int64 view of a 2-D float64
    array: for non-negative floats the bits order as the values do, and NaN and infinity sort above every
    finite value (IEEE 754 3.4), so the max is max |x| exactly, or says that a value is not finite."""
    n, m = bits.shape
    out = np.zeros(m if axis == 0 else n, np.int64)
    for i in range(n):
        if axis == 0:
            for j in range(m):
                out[j] = max(out[j], bits[i, j] & 0x7FFFFFFFFFFFFFFF)
        else:
            top = 0
            for j in range(m):
                top = max(top, bits[i, j] & 0x7FFFFFFFFFFFFFFF)
            out[i] = top
    return out


def _scaled(a, scale, axis):
    """``rint(a * scale)`` with ``scale`` per slice along ``axis``: each element one IEEE product and one rounding
    to nearest even, as numpy's ``a * scale`` and ``rint``."""
    n, m = a.shape
    q = np.empty((n, m))
    for i in range(n):
        for j in range(m):
            q[i, j] = np.rint(a[i, j] * scale[j if axis == 0 else i])
    return q


@functools.cache
def _kernels():
    """The compiled (:func:`_peaks`, :func:`_scaled`), or None without numba (the numpy path gives the same bits)."""
    return compile_kernels((_peaks, _scaled))


def matmul(a: np.ndarray, b: np.ndarray, left: tuple | None = None) -> np.ndarray:
    """``a @ b`` (2-D) with each row of ``a`` and each column of ``b`` rounded to its own grid (module
    doc): identical bits on any BLAS and thread count, and a row's result does not depend on the others.
    ``left``: ``a``'s grid from :func:`left_grid`, for an ``a`` multiplied again and again."""
    bits = _bits_for(a.shape[-1])
    qa, sa = left if left is not None else left_grid(a)
    qb, sb = to_grid(b, bits - bits // 2, axis=0)
    out = qa @ qb
    out /= sa                              # powers of two: exact
    out /= sb
    return out


def left_grid(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The grid :func:`matmul` puts the left operand ``a`` on."""
    return to_grid(a, _bits_for(a.shape[-1]) // 2, axis=1)


def total(a: np.ndarray, axis: int | None = None) -> np.ndarray | float:
    """Sum of ``a`` (over ``axis``) rounded to the grid first: exact, so the summation order cannot matter."""
    n = a.size if axis is None else a.shape[axis]
    q, scale = to_grid(a, _bits_for(n), axis=axis)
    if axis is None:
        return float(np.sum(q)) / float(scale.ravel()[0])
    return np.sum(q, axis=axis) / np.squeeze(scale, axis=axis)


_LN2 = 0.6931471805599453
_LN2_HI = 0.6931471804855391          # ln 2 split (Cody & Waite 1980): k * _LN2_HI is exact for |k| < 2**20
_LN2_LO = 7.440617110012397e-11       # ln 2 - _LN2_HI
_EXP_TAYLOR = [1 / math.factorial(k) for k in range(17)]   # int / int: Python rounds the exact quotient once


def exp(x: np.ndarray) -> np.ndarray:
    """exp(x) from single IEEE operations (numpy's exp dispatches to CPU-specific code): x = k ln2 + r,
    |r| <= ln2/2, a degree-16 Taylor polynomial of r (Horner), times 2**k (exact).  Within 2 ulp."""
    x = np.clip(np.asarray(x, dtype=np.float64), -700.0, 700.0)     # results stay normal numbers
    k = np.rint(x / _LN2)
    r = x - k * _LN2_HI
    r = r - k * _LN2_LO
    acc = np.full_like(r, _EXP_TAYLOR[-1])
    for c in reversed(_EXP_TAYLOR[:-1]):
        acc = acc * r
        acc = acc + c
    return np.ldexp(acc, k.astype(np.int64))


def tanh(z: np.ndarray) -> np.ndarray:
    """tanh(z) = sign(z) (1 - e) / (1 + e) with e = exp(-2|z|), from :func:`exp`: the same bits everywhere."""
    e = exp(-2.0 * np.abs(z))
    return np.copysign((1.0 - e) / (1.0 + e), z)
