"""Prequantization: map each sample onto an integer grid so that |x̂ - x| <= ε.

This is where the error bound is made.  Everything after this stage codes
the integers ``q`` losslessly, so the bound cannot be lost downstream.

Two grids:

* ``step``: ``x̂ = offset + q * step`` with ``step = 2ε`` (uniform
  quantization; a uniform quantizer's maximum error is Δ/2 = ε).
* ``decimal``: ``x̂ = (q * mult) / 10**decimals`` for lossless channels on a
  logged decimal grid (``decimals = 0`` for integer counts; ``mult`` > 1 when
  every logged value is a multiple of ``mult`` units of the last decimal, as
  a 0.005 mV resolution is 5 units of 0.001).  Dividing two exactly
  representable integers is correctly rounded by IEEE-754, so this gives back
  the very double a decimal parser produced.

Floating point is never trusted to be within bounds by construction: every
candidate x̂ is checked in float64 *and* after conversion to the output
dtype.  A sample that fails with ``q`` is retried with ``q ± 1``; what still
fails (and every NaN, ±Inf, or magnitude beyond 2**50 grid steps) becomes an
*exception*: its raw bits are stored and put back verbatim on decoding.
Exceptions carry an integer ``q`` as well (copied from the nearest preceding
ordinary sample) so that predictors see a smooth integer sequence.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ArchiveCorrupt

_MAX_Q = float(2**50)
MAX_MULT = 1 << 20


@dataclass(frozen=True)
class Grid:
    """How integers map back to sample values for one channel."""

    kind: str  # "step" or "decimal"
    eps: float  # the bound; 0.0 means bit-exact
    out_dtype: str  # numpy dtype name of the decoded samples
    step: float = 1.0
    offset: float = 0.0
    decimals: int = 0
    mult: int = 1   # decimal grid: values are multiples of mult * 10**-decimals

    def __post_init__(self) -> None:
        if self.kind not in ("step", "decimal"):
            raise ArchiveCorrupt(f"unknown grid kind {self.kind!r}; the archive is damaged or from a newer tool")
        if self.kind == "step" and not (math.isfinite(self.step) and self.step > 0 and math.isfinite(self.offset)):
            raise ArchiveCorrupt("grid step must be positive and finite; the archive is damaged")
        if self.kind == "decimal" and not 0 <= self.decimals <= 15:
            raise ArchiveCorrupt("grid decimals out of range 0..15; the archive is damaged")
        if not 1 <= self.mult <= MAX_MULT:
            raise ArchiveCorrupt("grid multiplier out of range; the archive is damaged")

    def to_dict(self) -> dict:
        return {"kind": self.kind, "eps": self.eps, "out_dtype": self.out_dtype, "step": self.step,
                "offset": self.offset, "decimals": self.decimals, "mult": self.mult}

    @classmethod
    def from_dict(cls, d: dict) -> "Grid":
        try:
            return cls(kind=str(d["kind"]), eps=float(d["eps"]), out_dtype=str(np.dtype(d["out_dtype"])),
                       step=float(d["step"]), offset=float(d["offset"]), decimals=int(d["decimals"]),
                       mult=int(d.get("mult", 1)))
        except (KeyError, TypeError, ValueError) as exc:
            raise ArchiveCorrupt(f"grid description is incomplete ({exc}); the archive is damaged") from None

    # -- the two directions ---------------------------------------------------
    def values(self, q: np.ndarray) -> np.ndarray:
        """float64 x̂ for integers ``q`` (before conversion to the output dtype)."""
        qf = q.astype(np.float64)               # a new array: the operations below run in place
        if self.kind == "decimal":
            # q * mult is an exact integer below 2**53, and the division is correctly rounded
            if self.mult != 1:
                qf *= float(self.mult)
            qf /= float(10**self.decimals)
            return qf
        qf *= self.step                          # offset + q * step, the same two roundings
        qf += self.offset
        return qf

    def to_out(self, xh: np.ndarray) -> np.ndarray:
        """Convert float64 values to the output dtype (ints round to nearest and clip)."""
        dt = np.dtype(self.out_dtype)
        if dt.kind in "iu":
            info = np.iinfo(dt)
            with np.errstate(invalid="ignore"):
                return np.clip(np.rint(xh), info.min, info.max).astype(dt)
        return xh.astype(dt)

    def dequantize(self, q: np.ndarray, exc_pos: np.ndarray | None = None,
                   exc_bits: np.ndarray | None = None) -> np.ndarray:
        """Decoded samples in the output dtype, exceptions put back verbatim."""
        out = self.to_out(self.values(q))
        if exc_pos is not None and len(exc_pos):
            out[exc_pos] = bits_to_values(exc_bits, out.dtype)
        return out


def values_to_bits(x: np.ndarray) -> np.ndarray:
    """Raw bits of samples as int64 (floats by bit pattern, ints by value)."""
    x = np.asarray(x)
    if x.dtype.kind == "f":
        width = {2: np.int16, 4: np.int32, 8: np.int64}[x.dtype.itemsize]
        return x.view(width).astype(np.int64)
    return x.astype(np.int64)


def bits_to_values(bits: np.ndarray, dtype: np.dtype) -> np.ndarray:
    dtype = np.dtype(dtype)
    bits = np.asarray(bits, dtype=np.int64)
    if dtype.kind == "f":
        width = {2: np.int16, 4: np.int32, 8: np.int64}[dtype.itemsize]
        return bits.astype(width).view(dtype)
    return bits.astype(dtype)


def make_grid(eps: float, decimals: int | None, dtype: np.dtype, anchor: float = 0.0, mult: int = 1) -> Grid:
    """Choose the grid for a channel.

    ``eps == 0`` (lossless) uses the decimal grid when the channel has one;
    a channel with no grid and ``eps == 0`` (e.g. a constant channel under a
    percentage budget) uses a step grid anchored at ``anchor`` so that a
    constant comes back exactly with ``q == 0``.  A budget below half the
    logged resolution (``mult * 10**-decimals``) is also served exactly by
    the decimal grid.
    """
    dt = np.dtype(dtype)
    out = dt.name if dt.kind in "fiu" else "float64"
    mult = int(mult) if decimals is not None and 1 <= int(mult) <= MAX_MULT else 1
    if decimals is not None and (eps == 0 or eps < 0.5 * mult * 10.0 ** (-decimals)):
        return Grid("decimal", 0.0, out, decimals=int(decimals), mult=mult)
    if eps == 0:
        return Grid("step", 0.0, out, step=1.0, offset=float(anchor) if math.isfinite(anchor) else 0.0)
    off = float(anchor) if math.isfinite(anchor) else 0.0
    if dt.kind in "iu":
        # Integer samples on multiples of ``mult``: bins of 2m+1 consecutive multiples (m = floor(eps/mult))
        # centred on one, so every decoded value is itself such an integer at most m*mult <= eps away,
        # exactly, and no sample needs to be stored verbatim (a 2*eps step would decode to fractions that
        # the integer output rounds off).
        m = int(math.floor(float(eps) / mult))
        if m == 0:
            return Grid("decimal", 0.0, out, decimals=0, mult=mult)
        return Grid("step", float(eps), out, step=float((2 * m + 1) * mult), offset=float(round(off)))
    return Grid("step", float(eps), out, step=2.0 * float(eps), offset=off)


def _fails(grid: Grid, q: np.ndarray, x64: np.ndarray, raw_bits: np.ndarray | None) -> np.ndarray:
    xh = grid.values(q)
    out = grid.to_out(xh)
    if grid.eps == 0:  # bit-exact demanded
        return values_to_bits(out) != raw_bits
    with np.errstate(invalid="ignore", over="ignore"):
        bad = ~(np.abs(xh - x64) <= grid.eps)
        bad |= ~(np.abs(out.astype(np.float64) - x64) <= grid.eps)
    return bad


def quantize(x: np.ndarray, grid: Grid) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Integers ``q`` plus exceptions ``(positions, raw bits)`` for samples ``x``.

    Guarantee: ``grid.dequantize(q, pos, bits)`` is within ``grid.eps`` of
    ``x`` at every position (bit-exact when ``eps == 0``), checked here in
    float64 and in the output dtype.
    """
    x = np.asarray(x)
    x64 = x.astype(np.float64)
    # The source column may be held wider than its own dtype (a float64 table with an int column):
    # exactness is judged on the value in the channel's dtype.
    raw_bits = values_to_bits(x.astype(grid.out_dtype)) if grid.eps == 0 else None
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        scaled = x64 * float(10**grid.decimals) / grid.mult if grid.kind == "decimal" else (x64 - grid.offset) / grid.step
        finite = np.isfinite(scaled) & (np.abs(scaled) < _MAX_Q)
        qf = np.where(finite, np.rint(scaled), 0.0)
    q = qf.astype(np.int64)
    bad = ~finite
    todo = finite & _fails(grid, q, x64, raw_bits)
    for delta in (-1, 1):
        idx = np.flatnonzero(todo)
        if not len(idx):
            break
        trial = q[idx] + delta
        ok = ~_fails(grid, trial, x64[idx], None if raw_bits is None else raw_bits[idx])
        q[idx[ok]] = trial[ok]
        todo[idx[ok]] = False
    bad |= todo
    pos = np.flatnonzero(bad)
    if len(pos):
        fill_from_previous(q, bad)
    if grid.eps == 0 and raw_bits is not None:
        bits = raw_bits[pos]
    else:
        bits = values_to_bits(x[pos].astype(grid.out_dtype)) if len(pos) else np.zeros(0, np.int64)
    return q, pos.astype(np.int64), bits.astype(np.int64)


def fill_from_previous(q: np.ndarray, bad: np.ndarray) -> None:
    """In place: give each flagged sample the q of the nearest earlier good one
    (the first good one for a leading run; 0 if there is none)."""
    good = ~bad
    if not good.any():
        q[:] = 0
        return
    idx = np.where(good, np.arange(len(q)), -1)
    np.maximum.accumulate(idx, out=idx)
    first = int(np.argmax(good))
    idx[idx < 0] = first
    q[:] = q[idx]
