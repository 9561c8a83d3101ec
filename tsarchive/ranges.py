"""What a channel's budget and grid need to know of its values, in one pass over the recording.

Per channel: the range of its finite samples (a %-of-range budget's base)
with the channel's sentinels (values meaning "no measurement") left out,
the first such sample (exactly, for integer channels: the grid's origin),
which sentinels occur, and the logged resolution's multiplier.  Integer
channels are scanned in integers (Python ints), so an int64 near 2**63 is
not rounded on the way.  Missing samples (masked) are no values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .quantize import MAX_MULT
from .recording import Recording
from .windows import CHUNK_SAMPLES



@dataclass(frozen=True)
class Range:
    """One channel's values as a budget and a grid need them (see :func:`finite_ranges`)."""

    span: float           # max - min of the finite samples that are not sentinels
    span_all: float       # the same with the sentinels counted
    anchor: float         # the first such sample
    origin: int | None    # integer channels: the same sample, exactly
    mult: int             # the logged resolution's multiplier (gcd of the logged integers)
    kept: tuple[float, ...]  # sentinel values that occur (stored verbatim)
    missing: int | None = None  # integer channels with missing samples: the int64 bits marking one
    no_mark: bool = False       # missing samples but no value of the dtype was found free to mark them


class _Scan:
    """Running min/max/first/gcd of one channel (integers exactly, as Python ints)."""

    def __init__(self, ch) -> None:
        self.ch, self.dt = ch, np.dtype(ch.dtype)
        self.lo = self.hi = self.lo_all = self.hi_all = self.first = None
        self.gcd, self.found, self.has_missing = 0, set(), False
        self.sentinels = _sentinels_in(ch.sentinels, self.dt)

    def add(self, col: np.ndarray) -> None:
        if isinstance(col, np.ma.MaskedArray):
            self.has_missing |= bool(np.ma.getmaskarray(col).any())
            col = col.compressed()                  # missing samples are no values
        if col.dtype.kind == "f":
            col = col[np.isfinite(col)]
        if not len(col):
            return
        self.lo_all = _min(self.lo_all, col.min())
        self.hi_all = _max(self.hi_all, col.max())
        if len(self.sentinels):
            hit = np.isin(col, self.sentinels)
            if hit.any():
                self.found.update(col[hit].tolist())
                col = col[~hit]
                if not len(col):
                    return
        self.lo, self.hi = _min(self.lo, col.min()), _max(self.hi, col.max())
        if self.first is None:
            self.first = col[0].item()
        if self.ch.decimals is not None and self.gcd != 1:
            if col.dtype.kind in "iu":
                v = col.astype(np.uint64) if col.dtype.kind == "u" else \
                    np.where(col < 0, np.uint64(0) - col.astype(np.int64).view(np.uint64), col.astype(np.uint64))
                v = v[v > 0]                         # |x| exactly (2**63 for int64's minimum too)
            else:
                v = np.abs(np.rint(col.astype(np.float64) * 10.0 ** self.ch.decimals))
                v = v[(v > 0) & (v < 2.0 ** 62)].astype(np.int64)
            if len(v):
                self.gcd = int(np.gcd.reduce(np.append(v, type(v[0])(self.gcd))))

    def result(self, rec: Recording | None = None, j: int = 0) -> Range:
        mark = self._mark() if self.has_missing and self.dt.kind in "iu" else None
        if mark is None and rec is not None and self.has_missing and self.dt.kind in "iu":
            mark = _free_value(rec, j, self.dt)
        no_mark = self.has_missing and self.dt.kind in "iu" and mark is None
        if self.lo is None:
            return Range(0.0, _span(self.lo_all, self.hi_all), 0.0, None, 1, tuple(sorted(self.found)), mark, no_mark)
        integer = self.dt.kind in "iu" and isinstance(self.first, int)
        return Range(_span(self.lo, self.hi), _span(self.lo_all, self.hi_all), float(self.first),
                     int(self.first) if integer else None,
                     self.gcd if 1 <= self.gcd <= MAX_MULT else 1, tuple(sorted(self.found)), mark, no_mark)

    def _mark(self) -> int | None:
        """A value no sample has (just below the smallest or above the largest), as int64 bits."""
        info = np.iinfo(self.dt)
        if self.lo_all is None:
            v = 0
        elif self.lo_all > info.min:
            v = self.lo_all - 1
        elif self.hi_all < info.max:
            v = self.hi_all + 1
        else:
            return None
        return int(np.array([v], dtype=self.dt).astype(np.int64)[0])


def _free_value(rec: Recording, j: int, dt: np.dtype) -> int | None:
    """A value of ``dt`` that no sample of channel ``j`` has, as int64 bits, or None (a second pass,
    taken only when both ends of the dtype's range occur): every value is a candidate for dtypes of
    up to 16 bits, else 64 evenly spread ones."""
    info = np.iinfo(dt)
    if info.bits <= 16:
        cand = np.arange(int(info.min), int(info.max) + 1, dtype=np.int64)
    else:
        cand = np.array([int(info.min) + k * ((int(info.max) - int(info.min)) // 65) for k in range(1, 65)],
                        dtype=object)
    cand = cand.astype(dt)
    seen = np.zeros(len(cand), dtype=bool)
    for s in range(0, rec.n_samples, CHUNK_SAMPLES):
        col = rec.rows(s, s + CHUNK_SAMPLES)[:, j]
        col = col.compressed() if isinstance(col, np.ma.MaskedArray) else np.asarray(col)
        seen |= np.isin(cand, col)
    free = np.flatnonzero(~seen)
    return int(cand[free[:1]].astype(np.int64)[0]) if len(free) else None


def _min(a, b):
    b = b.item()
    return b if a is None or b < a else a


def _max(a, b):
    b = b.item()
    return b if a is None or b > a else a


def _span(lo, hi) -> float:
    """``hi - lo`` as a float (exact integers subtracted first); 0 when there are none.  A span beyond
    the largest double (finite floats near ±max) counts as that largest double: a %-budget of it is
    then a little smaller than asked, never larger."""
    if lo is None:
        return 0.0
    d = float(hi - lo) if isinstance(lo, int) and isinstance(hi, int) else float(hi) - float(lo)
    return d if math.isfinite(d) else _FLOAT_MAX


_FLOAT_MAX = float(np.finfo(np.float64).max)


def _sentinels_in(values, dt: np.dtype) -> np.ndarray:
    """The sentinel values that a channel of dtype ``dt`` can hold exactly, in that dtype."""
    out = []
    for v in values:
        v = float(v)
        if dt.kind in "iu":
            info = np.iinfo(dt)
            if v.is_integer() and info.min <= v <= info.max:
                out.append(int(v))
        elif np.isfinite(v) and float(dt.type(v)) == v:
            out.append(v)
    return np.array(out, dtype=dt)


def finite_ranges(rec: Recording) -> list[Range]:
    """Per channel: the range of its finite samples (left without its sentinels), the first of them
    (exactly, for integers), the sentinels found, and the logged resolution's multiplier.

    The multiplier is the greatest common divisor of the logged integers
    ``round(x * 10**decimals)`` (channels with a detected decimal grid): a
    0.005 mV resolution logged with three decimals gives 5.  Samples off the
    grid do not matter here; quantization checks every sample anyway.
    """
    scans = [_Scan(ch) for ch in rec.channels]
    for s in range(0, rec.n_samples, CHUNK_SAMPLES):
        block = rec.rows(s, s + CHUNK_SAMPLES)
        for j, scan in enumerate(scans):
            scan.add(block[:, j])
    return [scan.result(rec, j) for j, scan in enumerate(scans)]
