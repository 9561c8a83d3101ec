"""CSV cell text for decoded samples: the shortest text that is true to the channel.

A :class:`CellFormat` says how one channel's values are written; :func:`cells`
turns a column into text.

* Integers are written as integers.
* Missing values (NaN) are empty cells; ``inf`` and ``-inf`` are spelled out.
* Without decimals, a float is written as the shortest text that parses back
  to the very same value in its own dtype: ``repr`` for float64, the shortest
  float32 text for float32 (numpy's unique Dragon4 output).
* ``CellFormat(decimals=d)`` (a lossless channel logged with ``d`` decimals):
  every value that is exactly the double a decimal parser makes of a
  ``d``-decimal number is written with ``d`` decimals (``24.95``, never
  ``24.950000000000003``); any other value (a sample stored verbatim) falls
  back to the shortest exact text above.  Either way the text parses back to
  the same bits.
* A lossy channel (``CellFormat(eps=..., worst=..., step=..., offset=...)``):
  each finite value is written with the fewest decimals whose text, parsed
  back as a double, (a) stays on the same point of the channel's 2ε grid and
  (b) is within ε of every original value the archive could have come from
  (those within the channel's recorded worst error of the decoded value, on
  the original's logged decimals when known).  For an original logged in
  decimals, (b) holds in decimal arithmetic, between the texts as the two
  files show them (``23.94`` for an original ``23.89`` at ε = 0.05, although
  float64 reads that difference as 0.05000000000000071); otherwise in
  float64, as ``numpy`` computes it.  Where no text shorter than the exact
  one qualifies, the exact text is written.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import timedelta

import numpy as np

#: Largest integer magnitude of ``value * 10**decimals`` treated as a decimal (as the quantiser does).
_MAX_SCALED = float(2**50)

__all__ = ["CellFormat", "cells"]


@dataclass(frozen=True)
class CellFormat:
    """How one channel's values become CSV text (see the module docstring).

    ``decimals``: a lossless channel logged with that many decimals.
    ``eps`` > 0 with ``step`` > 0: a lossy channel on the grid
    ``offset + q * step`` whose decoded values are at most ``worst`` from the
    original, logged with ``source_decimals`` decimals when known.
    """

    decimals: int | None = None
    eps: float = 0.0
    worst: float = 0.0
    step: float = 0.0
    offset: float = 0.0
    source_decimals: int | None = None

    @property
    def lossy(self) -> bool:
        return self.eps > 0 and self.step > 0 and math.isfinite(self.step) and math.isfinite(self.offset)


#: Most decimals tried for a lossy value before its exact text is kept.
_MAX_DECIMALS = 24


def cells(values: np.ndarray, fmt: CellFormat = CellFormat()) -> list[str]:
    """CSV text of one column chunk (``values`` 1-D, in the channel's dtype)."""
    a = np.asarray(values)
    if a.dtype.kind in "iub":
        return a.astype(np.int64 if a.dtype.kind != "u" else np.uint64).astype(str).tolist()
    if a.dtype.itemsize < 4:
        a = a.astype(np.float32)  # float16 prints through float32 (exact widening, IEEE-754)
    if fmt.decimals is not None:
        text = _decimal_cells(a, fmt.decimals)
    else:
        text = _exact(a)
        if fmt.lossy:
            _lossy_cells(a, fmt, text)
    for i in np.flatnonzero(np.isnan(a)).tolist():
        text[i] = ""
    return text


def _exact(a: np.ndarray) -> list[str]:
    """The shortest text that parses back to each value in its own dtype."""
    if a.dtype == np.float64:
        return list(map(float.__repr__, a.tolist()))  # Python's shortest round-trip repr
    return a.astype(str).tolist()  # numpy's Dragon4 in unique mode: the shortest float32 text


def _decimal_cells(a: np.ndarray, d: int) -> list[str]:
    """``d`` decimals for every value that is exactly a parsed ``d``-decimal number, exact text otherwise."""
    with np.errstate(invalid="ignore", over="ignore"):
        k = np.rint(a.astype(np.float64) * float(10**d))
        use = np.isfinite(k) & (np.abs(k) < _MAX_SCALED)
        on = np.where(use, k, 0.0) / float(10**d)  # what a decimal parser makes of k * 10**-d
        use &= on.astype(a.dtype) == a
    fixed = f"%.{d}f".__mod__
    if use.all():
        return list(map(fixed, on.tolist()))
    text = _exact(a)
    for i in np.flatnonzero(use).tolist():
        text[i] = fixed(float(on[i]))
    return text


def _lossy_cells(a: np.ndarray, fmt: CellFormat, text: list[str]) -> None:
    """In place: the fewest decimals that keep each value on its grid point and within ε (module doc)."""
    x = a.astype(np.float64)
    todo = np.isfinite(x)
    if not todo.any():
        return
    with np.errstate(invalid="ignore", over="ignore"):
        q = np.rint((x - fmt.offset) / fmt.step)
        lo, hi = _possible_originals(x, fmt, a.dtype)
    exact_len = np.fromiter(map(len, text), dtype=np.int64, count=len(text))
    first = max(0, math.floor(-math.log10(fmt.step)))
    top = float(np.max(np.abs(x[todo]))) + fmt.eps
    for d in range(first, _MAX_DECIMALS + 1):
        slack = _decimal_slack(fmt, d, top)
        idx = np.flatnonzero(todo)
        if not len(idx):
            break
        cand = list(map(f"%.{d}f".__mod__, x[idx].tolist()))
        shorter = np.fromiter(map(len, cand), dtype=np.int64, count=len(cand)) < exact_len[idx]
        if not shorter.any():
            break  # more decimals only get longer
        y = np.array(cand, dtype=np.float64)  # the double a reader parses (correctly rounded strtod)
        with np.errstate(invalid="ignore", over="ignore"):
            ok = shorter & (np.rint((y - fmt.offset) / fmt.step) == q[idx])
            ok &= (np.abs(y - lo[idx]) <= fmt.eps + slack) & (np.abs(hi[idx] - y) <= fmt.eps + slack)
        for j in np.flatnonzero(ok).tolist():
            text[int(idx[j])] = cand[j]
        todo[idx[ok]] = False


def _decimal_slack(fmt: CellFormat, d: int, top: float) -> float:
    """How far a float64 difference may read above ε when both texts are decimals (0 if not known).

    With the original logged at ``source_decimals`` and ε's shortest text at
    ``e`` decimals, a ``d``-decimal text differs from an original by a
    multiple of ``10**-max(d, decimals, e)`` exactly; float64 rounding of the
    two parsed texts and of their difference moves that by a few units in
    the last place of ``top`` (the largest magnitude).  When that unit is far
    above the rounding, a float64 reading within ε plus the rounding is
    exactly a decimal difference within ε: the bound as the two files show it.
    """
    if fmt.source_decimals is None:
        return 0.0
    eps_text = repr(float(fmt.eps))
    if "e" in eps_text or "E" in eps_text:
        return 0.0
    e = len(eps_text.split(".")[1]) if "." in eps_text else 0
    unit = 10.0 ** (-max(d, fmt.source_decimals, e))
    rounding = 8.0 * math.ulp(top)
    return rounding if unit > 1024.0 * rounding else 0.0


def _possible_originals(x: np.ndarray, fmt: CellFormat, dtype: np.dtype) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest original value a decoded ``x`` can stand for (``|x - orig| <= worst`` in float64).

    With the original's logged decimals, only values a decimal parser makes
    of them (in the channel's ``dtype``) count.
    """
    w = float(fmt.worst)
    lo = np.nextafter(x - w, -np.inf)  # one step outward: any double within w of x lies inside
    hi = np.nextafter(x + w, np.inf)
    d = fmt.source_decimals
    if d is None or not 0 <= d <= 15:
        return lo, hi
    scale = float(10**d)
    with np.errstate(over="ignore"):
        base_lo, base_hi = np.floor(lo * scale), np.ceil(hi * scale)
    if not (np.all(np.abs(base_lo[np.isfinite(base_lo)]) < _MAX_SCALED)
            and np.all(np.abs(base_hi[np.isfinite(base_hi)]) < _MAX_SCALED)):
        return lo, hi
    best_lo, best_hi = x.copy(), x.copy()  # no logged value within w: the sample was kept verbatim
    for j in range(4):  # logged values (j + floor) / 10**d as a decimal parser makes them, nearest the ends
        c = ((base_lo + j) / scale).astype(dtype).astype(np.float64)
        best_lo = np.where((np.abs(x - c) <= w) & (c < best_lo), c, best_lo)
        c = ((base_hi - j) / scale).astype(dtype).astype(np.float64)
        best_hi = np.where((np.abs(c - x) <= w) & (c > best_hi), c, best_hi)
    return best_lo, best_hi


def iso_unit(ns: np.ndarray) -> str:
    """Coarsest of s/ms/us/ns that holds every time exactly (times are never rounded)."""
    for unit, div in (("s", 10**9), ("ms", 10**6), ("us", 10**3)):
        if not np.any(ns % div):
            return unit
    return "ns"


def zone_ns(zone: str | None) -> int:
    """The zone's offset from UTC in ns (0 for naive and Z)."""
    if zone is None or zone == "Z":
        return 0
    from .store.timeaxis import parse_zone
    return parse_zone(zone).utcoffset(None) // timedelta(microseconds=1) * 1000


def iso_strings(ns: np.ndarray, unit: str, zone: str | None) -> list[str]:
    """ISO 8601 strings of epoch ns, exact in ``unit``: wall clock plus the zone as logged (none if naive)."""
    scale = {"s": 10**9, "ms": 10**6, "us": 10**3, "ns": 1}[unit]
    local = (ns + zone_ns(zone)) // scale
    text = np.datetime_as_string(local.astype(f"datetime64[{unit}]"), unit=unit).tolist()
    return text if zone is None else [t + zone for t in text]


def time_cells(times, lo: int, hi: int, unit: str) -> list[str]:
    """Cells of the time column for rows ``lo..hi-1``: seconds by repr, datetimes as ISO 8601 in ``unit``."""
    if times.kind == "seconds":
        return csv_text(times.values[lo:hi])
    return iso_strings(times.values[lo:hi], unit, times.zone)


def text_cells(col) -> list[str]:
    """CSV cells of a text column: a null is an empty cell, an empty string is ``""`` (RFC 4180 quoting)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):
        col = pc.cast(col, pa.string())
    out = []
    for v in col.to_pylist():
        if v is None:
            out.append("")
        elif v == "" or any(c in v for c in ',"\r\n') or v != v.strip():
            out.append('"' + v.replace('"', '""') + '"')
        else:
            out.append(v)
    return out


def header(name: str, unit: str) -> str:
    """A column header with its unit in brackets."""
    return f"{name} [{unit}]" if unit else name


def csv_text(values: np.ndarray) -> list[str]:
    """Cells of a time column in seconds: repr (exact round trip)."""
    return list(map(float.__repr__, values.astype(np.float64, copy=False).tolist()))


def csv_cells(values: np.ndarray, fmt: CellFormat) -> list[str]:
    """Cells for one channel's column chunk (:func:`tsarchive.export_text.cells`); a missing sample is an
    empty cell."""
    if isinstance(values, np.ma.MaskedArray):
        gone = np.ma.getmaskarray(values)
        text = cells(np.ma.getdata(values), fmt)
        return [("" if g else c) for c, g in zip(text, gone.tolist())]
    return cells(values, fmt)


def time_header(times) -> str:
    """The time column's header (seconds carry their unit)."""
    if times.kind == "seconds" and times.name == "time":
        return "time [s]"
    return times.name
