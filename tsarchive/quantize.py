"""Prequantization: map each sample onto an integer grid so that |x̂ - x| <= ε.

This is where the error bound is made.  Everything after this stage codes
the integers ``q`` losslessly, so the bound cannot be lost downstream.

Four grids:

* ``step``: ``x̂ = offset + q * step`` with ``step = 2ε`` (uniform
  quantization; a uniform quantizer's maximum error is Δ/2 = ε).
* ``decimal``: ``x̂ = (q * mult) / 10**decimals`` for lossless channels on a
  logged decimal grid (``decimals = 0`` for integer counts; ``mult`` > 1 when
  every logged value is a multiple of ``mult`` units of the last decimal, as
  a 0.005 mV resolution is 5 units of 0.001).  Dividing two exactly
  representable integers is correctly rounded by IEEE-754, so this gives back
  the very double a decimal parser produced.
* ``scaled`` (format 8): ``x̂ = (q + offset) * step`` for lossless channels
  whose values a file format computes from stored integers that way: an EDF
  or BDF signal's physical value is ``bitvalue * (offset + digital)``, with
  ``bitvalue = (physical max - min) / (digital max - min)`` and ``offset =
  physical max / bitvalue - digital max`` (the arithmetic of EDFlib, which
  pyedflib wraps).  The same two roundings in the same order give back the
  very double the reader produced; ``q`` is the stored integer.
* ``ordered`` (format 8): lossless float32 and float16 channels on no other
  grid.  ``q`` is the float's bit pattern as a signed integer with the
  negative floats' magnitude bits flipped (``b ^ ((b >> 31) & 0x7fffffff)``
  for float32), an order-preserving map (-0.0 is -1, +0.0 is 0) that is its
  own inverse: every float, NaN payloads and infinities included, comes back
  bit for bit, and neighbouring values are neighbouring integers that the
  predictors can follow.

Integer channels (int8 … uint64) whose grid has an integer origin and step
never go through float64: ``q`` is found by exact integer division, the
decoded value is ``origin + q * step`` in 64-bit wrap-around arithmetic
(exact modulo 2**64, hence exact whenever the true value is representable),
and the error is ``max - min`` of the two values in an order-preserving
unsigned view, exact whatever their magnitude (int64/uint64 near 2**63 too).

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

from . import codecs
from .errors import ArchiveCorrupt, BadInput
from .exact import _as_u, bits_to_values, values_to_bits, within  # noqa: F401  (the bits API is used from here)
from .floatbits import ORDERED_DTYPES, ordered_floats, ordered_ints  # noqa: F401  (the ordered grid's map)

_MAX_Q = float(2**50)
MAX_MULT = 1 << 20
MAX_DECIMALS = 15              # decimal grids: at most this many decimals (what a manifest may hold)
MAX_INT_STEP = 1 << 53          # integer grids: steps above this (absurd budgets) are clamped, exactly representable
KINDS = ("step", "decimal", "scaled", "ordered")


class InvalidGrid(ArchiveCorrupt):
    """A grid description no decoder can use: damage when read from an archive."""

    def __init__(self, problem: str) -> None:
        super().__init__(f"{problem}; the archive is damaged or from a newer tool")
        self.problem = problem


@dataclass(frozen=True)
class Grid:
    """How integers map back to sample values for one channel."""

    kind: str  # "step", "decimal" or "scaled"
    eps: float  # the bound; 0.0 means bit-exact
    out_dtype: str  # numpy dtype name of the decoded samples
    step: float = 1.0
    offset: float = 0.0
    decimals: int = 0
    mult: int = 1   # decimal grid: values are multiples of mult * 10**-decimals
    #: integer channels: the step grid's offset as an exact integer (``offset`` is a float and cannot
    #: hold every int64/uint64); optional in the manifest, absent in archives written before it
    origin: int | None = None
    #: sample values always stored verbatim (the channel's sentinels that occur); encoding only
    verbatim: tuple = ()
    #: integer channels with missing samples: the verbatim value (one that no sample has) that marks
    #: a missing sample; decoding gives a masked array.  Optional in the manifest
    missing: int | None = None

    def __post_init__(self) -> None:
        problem = self._problem()
        if problem is not None:      # read from an archive: damage (make_grid turns it into a user-input error)
            raise InvalidGrid(problem)

    def _problem(self) -> str | None:
        if self.kind not in KINDS:
            return f"unknown grid kind {self.kind!r}"
        if self.kind in ("step", "scaled") and not (math.isfinite(self.step) and self.step > 0 and math.isfinite(self.offset)):
            return "grid step must be positive and finite"
        if self.kind in ("scaled", "ordered") and self.eps != 0:
            return f"a {self.kind} grid is exact only"
        if self.kind == "ordered" and self.out_dtype not in ORDERED_DTYPES:
            return f"an ordered grid holds float32 or float16 samples, not {self.out_dtype}"
        if self.kind == "decimal" and not 0 <= self.decimals <= MAX_DECIMALS:
            return f"grid decimals {self.decimals} out of range 0..{MAX_DECIMALS}"
        if not 1 <= self.mult <= MAX_MULT:
            return "grid multiplier out of range"
        if self.origin is not None and not -(1 << 63) <= self.origin < (1 << 64):
            return "grid origin out of the 64-bit range"
        if self.missing is not None and not -(1 << 63) <= self.missing < (1 << 63):
            return "grid missing mark out of the int64 range"
        return None

    # -- the codec contract (tsarchive.codecs): the id is the kind, the config the manifest's grid entry
    @property
    def id(self) -> str:
        return self.kind

    def encode(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """See :func:`quantize`."""
        return quantize(x, self)

    def get_config(self) -> dict:
        return self.to_dict()

    @classmethod
    def from_config(cls, config: dict) -> "Grid":
        return cls.from_dict(config)

    def to_dict(self) -> dict:
        d = {"kind": self.kind, "eps": self.eps, "out_dtype": self.out_dtype, "step": self.step,
             "offset": self.offset, "decimals": self.decimals, "mult": self.mult}
        if self.origin is not None:
            d["origin"] = int(self.origin)
        if self.verbatim:
            d["verbatim"] = list(self.verbatim)
        if self.missing is not None:
            d["missing"] = int(self.missing)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "Grid":
        try:
            return cls(kind=str(d["kind"]), eps=float(d["eps"]), out_dtype=str(np.dtype(d["out_dtype"])),
                       step=float(d["step"]), offset=float(d["offset"]), decimals=int(d["decimals"]),
                       mult=int(d.get("mult", 1)), origin=None if d.get("origin") is None else int(d["origin"]),
                       verbatim=tuple(d.get("verbatim", ())),
                       missing=None if d.get("missing") is None else int(d["missing"]))
        except (KeyError, TypeError, ValueError) as exc:
            raise ArchiveCorrupt(f"grid description is incomplete ({exc}); the archive is damaged") from None

    # -- integer channels -------------------------------------------------------
    def int_params(self) -> tuple[int, int] | None:
        """``(origin, step)`` as exact integers when this grid decodes in integer arithmetic, else None.

        That is an integer output dtype and a grid of integers: a ``decimal``
        grid with no decimals (``q * mult``, the same values the float path
        gives wherever that was exact) or a ``step`` grid with an exact integer
        ``origin`` (every grid ``make_grid`` gives an integer channel).  A step
        grid written before ``origin`` existed decodes through float64 as it
        was written, so its checksums still hold.
        """
        dt = np.dtype(self.out_dtype)
        if dt.kind not in "iu":
            return None
        if self.kind == "decimal":
            return (0, self.mult) if self.decimals == 0 else None
        if self.origin is None or not (self.step.is_integer() and self.step <= 2.0**63):
            return None
        origin = self.origin
        lo, hi = (-(1 << 63), (1 << 63) - 1) if dt.kind == "i" else (0, (1 << 64) - 1)
        return (origin, int(self.step)) if lo <= origin <= hi else None

    def _int_decode(self, q: np.ndarray, origin: int, step: int) -> np.ndarray:
        """``origin + q * step`` in 64-bit wrap-around arithmetic, then the output dtype (narrow
        integer dtypes clip, as the float path did, so archives written before decode the same)."""
        dt = np.dtype(self.out_dtype)
        q = np.asarray(q, dtype=np.int64)
        with np.errstate(over="ignore"):
            if dt == np.uint64:
                return np.uint64(origin) + q.view(np.uint64) * np.uint64(step)
            v = (q.view(np.uint64) * np.uint64(step) + np.uint64(origin % (1 << 64))).view(np.int64)
        if dt == np.int64:
            return v
        info = np.iinfo(dt)
        return np.clip(v, info.min, info.max).astype(dt)

    # -- the two directions ---------------------------------------------------
    def values(self, q: np.ndarray) -> np.ndarray:
        """float64 x̂ for integers ``q`` (before conversion to the output dtype)."""
        if self.kind == "ordered":
            return ordered_floats(q, self.out_dtype).astype(np.float64)
        qf = q.astype(np.float64)               # a new array: the operations below run in place
        if self.kind == "decimal":
            # q * mult is an exact integer below 2**53, and the division is correctly rounded
            if self.mult != 1:
                qf *= float(self.mult)
            qf /= float(10**self.decimals)
            return qf
        if self.kind == "scaled":
            qf += self.offset                    # the file format's order: add, then scale
            qf *= self.step
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

    def decode(self, q: np.ndarray) -> np.ndarray:
        """Decoded samples in the output dtype (integer channels in exact integer arithmetic)."""
        ip = self.int_params()
        if ip is not None:
            return self._int_decode(q, *ip)
        if self.kind == "ordered":
            return ordered_floats(q, self.out_dtype)
        return self.to_out(self.values(q))

    def dequantize(self, q: np.ndarray, exc_pos: np.ndarray | None = None,
                   exc_bits: np.ndarray | None = None) -> np.ndarray:
        """Decoded samples in the output dtype, exceptions put back verbatim."""
        out = self.decode(q)
        if exc_pos is not None and len(exc_pos):
            out[exc_pos] = bits_to_values(exc_bits, out.dtype)
            if self.missing is not None:
                mask = np.zeros(len(out), dtype=bool)
                mask[exc_pos[np.asarray(exc_bits) == self.missing]] = True
                return np.ma.MaskedArray(out, mask=mask)
        return out


def make_grid(eps: float, decimals: int | None, dtype: np.dtype, anchor: float = 0.0, mult: int = 1,
              origin: int | None = None, scaled: tuple[float, float] | None = None) -> Grid:
    """Choose the grid for a channel (see :func:`_make_grid`); a channel no grid can serve is the
    caller's input error (:class:`BadInput`), never archive damage.  ``scaled``: ``(step, offset)`` of
    a channel whose values are ``(integer + offset) * step`` (an EDF signal's physical values); it is
    stored exactly on that grid when ``eps`` is below half of ``step``."""
    if scaled is not None and float(eps) < 0.5 * float(scaled[0]) and np.dtype(dtype) == np.float64:
        try:
            return Grid("scaled", 0.0, "float64", step=float(scaled[0]), offset=float(scaled[1]))
        except InvalidGrid as exc:
            raise BadInput(f"{exc.problem}: the channel's scale {scaled} cannot be stored") from None
    try:
        return _make_grid(eps, decimals, dtype, anchor, mult, origin)
    except InvalidGrid as exc:
        raise BadInput(f"{exc.problem}: the channel's decimals ({decimals}) or dtype ({np.dtype(dtype)}) cannot be "
                       f"stored; give decimals 0..{MAX_DECIMALS} or None") from None


def _make_grid(eps: float, decimals: int | None, dtype: np.dtype, anchor: float, mult: int,
               origin: int | None) -> Grid:
    """Choose the grid for a channel.

    ``eps == 0`` (lossless) uses the decimal grid when the channel has one;
    a channel with no grid and ``eps == 0`` (e.g. a constant channel under a
    percentage budget) uses a step grid anchored at ``anchor`` so that a
    constant comes back exactly with ``q == 0``.  A budget below half the
    logged resolution (``mult * 10**-decimals``) is also served exactly by
    the decimal grid.  ``origin`` is an integer channel's anchor as an exact
    integer (``anchor`` is its float64 rounding).  An absurd budget (1e308)
    is clamped to the largest step the grid can hold: every sample is then
    well inside it.
    """
    dt = np.dtype(dtype)
    out = dt.name if dt.kind in "fiu" else "float64"
    mult = int(mult) if decimals is not None and 1 <= int(mult) <= MAX_MULT else 1
    if decimals is not None and (eps == 0 or eps < 0.5 * mult * 10.0 ** (-decimals)):
        return Grid("decimal", 0.0, out, decimals=int(decimals), mult=mult)
    off = float(anchor) if math.isfinite(anchor) else 0.0
    if dt.kind in "iu":
        info = np.iinfo(dt)
        o = min(max(int(round(off)) if origin is None else int(origin), int(info.min)), int(info.max))
        if eps == 0:
            return Grid("step", 0.0, out, step=1.0, offset=float(o), origin=o)
    if eps == 0:
        return Grid("step", 0.0, out, step=1.0, offset=off)
    if dt.kind in "iu":
        # Integer samples on multiples of ``mult``: bins of 2m+1 consecutive multiples (m = floor(eps/mult))
        # centred on one, so every decoded value is itself such an integer at most m*mult <= eps away,
        # exactly, and no sample needs to be stored verbatim (a 2*eps step would decode to fractions that
        # the integer output rounds off).  The step stays below 2**53 (exact as a float in the manifest).
        m = min(int(math.floor(float(eps) / mult)), (MAX_INT_STEP // mult - 1) // 2)
        if m == 0:
            return Grid("decimal", 0.0, out, decimals=0, mult=mult)
        return Grid("step", float(eps), out, step=float((2 * m + 1) * mult), offset=float(o), origin=o)
    step = 2.0 * float(eps)
    return Grid("step", float(eps), out, step=step if math.isfinite(step) else _FLOAT_MAX, offset=off)


_FLOAT_MAX = float(np.finfo(np.float64).max)


def _fails(grid: Grid, q: np.ndarray, x: np.ndarray, raw_bits: np.ndarray | None) -> np.ndarray:
    out = grid.decode(q)
    if grid.eps == 0:  # bit-exact demanded
        return values_to_bits(out) != raw_bits
    bad = ~within(x, out, grid.eps)
    if grid.int_params() is None:
        bad |= ~within(x, grid.values(q), grid.eps)
    return bad


def quantize(x: np.ndarray, grid: Grid) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Integers ``q`` plus exceptions ``(positions, raw bits)`` for samples ``x``.

    Guarantee: ``grid.dequantize(q, pos, bits)`` is within ``grid.eps`` of
    ``x`` at every position (bit-exact when ``eps == 0``), checked here
    exactly: in integers for integer channels, else in float64 with the
    subtraction's rounding error recovered (:func:`abs_errors`), and in the
    output dtype.  Samples equal to one of ``grid.verbatim`` are stored
    verbatim; missing samples (``x`` masked) too, as ``grid.missing``.
    """
    missing = np.ma.getmaskarray(x) if isinstance(x, np.ma.MaskedArray) else None
    if missing is not None:
        if grid.missing is None and missing.any():
            raise ValueError("missing samples in a channel whose grid has no missing mark")
        x = x.filled(0)
    x = np.asarray(x)
    q, pos, bits = _quantize(x, grid)
    force = np.zeros(len(x), dtype=bool) if missing is None else missing.copy()
    if grid.verbatim:
        with np.errstate(invalid="ignore"):
            force |= np.isin(x, np.array(grid.verbatim, dtype=x.dtype))
    if not force.any():
        return q, pos, bits
    bad = force.copy()
    bad[pos] = True
    all_bits = np.zeros(len(x), dtype=np.int64)
    all_bits[pos] = bits
    extra = np.flatnonzero(force)
    all_bits[extra] = values_to_bits(x[extra].astype(grid.out_dtype))
    if missing is not None:
        all_bits[missing] = grid.missing
    fill_from_previous(q, bad)
    pos = np.flatnonzero(bad)
    return q, pos.astype(np.int64), all_bits[pos]


def _quantize(x: np.ndarray, grid: Grid) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if grid.kind == "ordered":
        return ordered_ints(x, grid.out_dtype), np.zeros(0, np.int64), np.zeros(0, np.int64)
    ip = grid.int_params()
    if ip is not None and x.dtype.kind in "iu":
        return _quantize_int(x.astype(grid.out_dtype, copy=False), grid, *ip)
    x64 = x.astype(np.float64)
    # The source column may be held wider than its own dtype: exactness is judged in the channel's dtype.
    raw_bits = values_to_bits(x.astype(grid.out_dtype)) if grid.eps == 0 else None
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        scaled = x64 * float(10**grid.decimals) / grid.mult if grid.kind == "decimal" else \
            x64 / grid.step - grid.offset if grid.kind == "scaled" else (x64 - grid.offset) / grid.step
        finite = np.isfinite(scaled) & (np.abs(scaled) < _MAX_Q)
        qf = np.where(finite, np.rint(scaled), 0.0)
    q = qf.astype(np.int64)
    bad = ~finite
    todo = finite & _fails(grid, q, x64, raw_bits)
    todo = _retry(grid, q, x64, raw_bits, todo)
    bad |= todo
    pos = np.flatnonzero(bad)
    if len(pos):
        fill_from_previous(q, bad)
    if grid.eps == 0 and raw_bits is not None:
        bits = raw_bits[pos]
    else:
        bits = values_to_bits(x[pos].astype(grid.out_dtype)) if len(pos) else np.zeros(0, np.int64)
    return q, pos.astype(np.int64), bits.astype(np.int64)


def _retry(grid: Grid, q: np.ndarray, x: np.ndarray, raw_bits, todo: np.ndarray) -> np.ndarray:
    """In place: give failing samples ``q - 1`` or ``q + 1`` where that is within the bound; returns
    the samples that still fail."""
    for delta in (-1, 1):
        idx = np.flatnonzero(todo)
        if not len(idx):
            break
        trial = q[idx] + delta
        ok = ~_fails(grid, trial, x[idx], None if raw_bits is None else raw_bits[idx])
        q[idx[ok]] = trial[ok]
        todo[idx[ok]] = False
    return todo


def _quantize_int(x: np.ndarray, grid: Grid, origin: int, step: int):
    """:func:`quantize` for an integer channel on an integer grid, in integer arithmetic throughout:
    ``q = round((x - origin) / step)`` by exact unsigned division of ``|x - origin|``; samples with
    ``|q| >= 2**50`` (the predictors' range) are stored verbatim."""
    ou = origin if x.dtype.kind == "u" else origin + (1 << 63)     # the origin in _as_u's view
    if not 0 <= ou < (1 << 64):
        raise ValueError("grid origin outside the channel's dtype")
    u, ou, st = _as_u(x), np.uint64(ou), np.uint64(step)
    ge = u >= ou
    with np.errstate(over="ignore"):
        d = np.where(ge, u - ou, ou - u)
    qa = d // st
    qa += ((d - qa * st) > st // np.uint64(2)).astype(np.uint64)    # round to nearest
    small = qa < np.uint64(1 << 50)
    q = np.where(small, qa, 0).astype(np.int64)
    q = np.where(ge, q, -q)
    raw_bits = values_to_bits(x) if grid.eps == 0 else None
    todo = small & _fails(grid, q, x, raw_bits)
    bad = ~small | _retry(grid, q, x, raw_bits, todo)
    pos = np.flatnonzero(bad)
    if len(pos):
        fill_from_previous(q, bad)
    return q, pos.astype(np.int64), values_to_bits(x[pos])


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


for _kind in KINDS:
    codecs.register("grid", _kind, Grid.from_config)
