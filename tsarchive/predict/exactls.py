"""Least squares in exact integer arithmetic: the same coefficients on every machine and BLAS.

The LPC coefficients are stored in the archive, so their fit must not depend
on how a BLAS blocks its sums or which CPU it runs on.  Two steps, both exact:

* :func:`gram` -- ``A.T @ A`` of an int64 matrix as Python integers.  Each
  column is split into signed limbs of ``s`` bits with ``2**(2s) * rows <=
  2**53``, so every product of two limbs and every partial sum of a float64
  BLAS product of the limb matrices is an integer below ``2**53``: exact,
  whatever the order, blocking, FMA use or thread count.  The limb products
  are then recombined in Python integers.
* :func:`solve_leading` -- the normal equations ``G a = g`` of every leading
  block of ``G`` at once: fraction-free Gaussian elimination (Bareiss 1968,
  "Sylvester's identity and multistep integer-preserving Gaussian
  elimination"), whose rows serve every leading block, then back
  substitution in ``fractions.Fraction``.  ``G = X.T X`` is positive
  semi-definite, so a zero pivot means its whole row of the remaining
  system is zero: that coefficient is left at 0 (a least-squares solution
  all the same).

:func:`fixed_point` rounds a rational to ``round(a * 2**shift)`` (ties to
even, as ``np.rint``).
"""

from __future__ import annotations

from contextlib import nullcontext
from fractions import Fraction

import numpy as np

_EXACT = 53                   # float64 holds every integer below 2**53


def _limbs(a: np.ndarray, s: int, k: int) -> np.ndarray:
    """``[limb_0 | limb_1 | ...]`` (float64, column-major) with ``a == sum(limb_j * 2**(s*j))``: low limbs
    in [0, 2**s), the top one signed (``|top| <= 2**s`` when ``|a| < 2**(s*k)``)."""
    cols = a.shape[1]
    z = np.empty((a.shape[0], k * cols), dtype=np.float64, order="F")
    rest = a
    for j in range(k - 1):
        z[:, j * cols:(j + 1) * cols] = rest & ((1 << s) - 1)
        rest = rest >> s
    z[:, (k - 1) * cols:] = rest
    return z


def gram(a: np.ndarray) -> list[list[int]]:
    """``a.T @ a`` for an int64 matrix ``a`` (rows, cols), exactly, as Python integers."""
    a = np.asarray(a, dtype=np.int64)
    rows, cols = a.shape
    if rows == 0:
        return [[0] * cols for _ in range(cols)]
    s = (_EXACT - rows.bit_length()) // 2
    if s < 1:
        raise ValueError("too many rows for an exact product")
    peak = int(np.abs(a).max(initial=0))
    k = max(1, -(-(peak.bit_length() + 1) // s))      # |a| < 2**(s*k)
    z = _limbs(a, s, k)                               # limb j of column c at j * cols + c
    with _one_blas_thread():
        zz = (z.T @ z).tolist()                       # every partial sum an integer below 2**53: exact
    if k == 1:
        return [[int(v) for v in row] for row in zz]
    out = [[0] * cols for _ in range(cols)]
    for i in range(cols):
        for j in range(i, cols):
            v = 0
            for li in range(k):
                row = zz[li * cols + i]
                for lj in range(k):
                    v += int(row[lj * cols + j]) << (s * (li + lj))
            out[i][j] = out[j][i] = v
    return out


def _one_blas_thread():
    """The BLAS on one thread for these small products: a second thread on a busy core only spins
    (the planner already runs channels side by side).  Speed only: the sums are exact on any count."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def _eliminate(G: list[list[int]], g: list[int]) -> tuple[list[list[int]], set[int]]:
    """Bareiss forward elimination of ``[G | g]``: row ``k`` is final after step ``k - 1`` and holds
    only rows ``< k``, so the same rows serve every leading block.  ``G`` is symmetric and so is each
    reduced matrix (its entries are minors of ``G``): only the upper triangle is kept up to date, and
    ``m[i][k]`` is read as ``m[k][i]``.  Returns the rows and the indices of the zero pivots."""
    n = len(G)
    m = [list(G[i]) + [g[i]] for i in range(n)]
    prev, free = 1, set()
    for k in range(n):
        piv = m[k][k]
        if piv == 0:                       # positive semi-definite: the rest of this row and column is 0
            free.add(k)
            continue
        rk = m[k]
        for i in range(k + 1, n):
            ri, mik = m[i], rk[i]
            for j in range(i, n + 1):
                ri[j] = (ri[j] * piv - mik * rk[j]) // prev    # exact division (Sylvester's identity)
        prev = piv
    return m, free


def solve_leading(G: list[list[int]], g: list[int], orders) -> dict[int, list[Fraction]]:
    """For each ``p`` in ``orders``: an exact solution of ``G[:p, :p] a = g[:p]`` (zero where
    the system leaves a coefficient free)."""
    n = max(orders, default=0)
    m, free = _eliminate([row[:n] for row in G[:n]], list(g[:n]))
    out = {}
    for p in orders:
        x = [Fraction(0)] * p
        for k in range(p - 1, -1, -1):
            if k in free:
                continue
            acc = Fraction(m[k][n])
            for j in range(k + 1, p):
                if x[j]:
                    acc -= m[k][j] * x[j]
            x[k] = acc / m[k][k]
        out[p] = x
    return out


def fixed_point(x: Fraction, shift: int) -> int:
    """``round(x * 2**shift)``, ties to even."""
    return round(x * (1 << shift))
