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
* ``CellFormat(decimals=d, rounded=True)`` (a lossy channel): every finite
  value is written with ``d`` decimals, or its shortest exact text when that
  is shorter.  :func:`lossy_decimals` chooses ``d`` so that the text still
  tells the channel's grid values apart and stays within the channel's error
  budget of the original.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Largest integer magnitude of ``value * 10**decimals`` treated as a decimal (as the quantiser does).
_MAX_SCALED = float(2**50)

__all__ = ["CellFormat", "cells", "lossy_decimals"]


@dataclass(frozen=True)
class CellFormat:
    """How one channel's values become CSV text (see the module docstring)."""

    decimals: int | None = None
    rounded: bool = False

    def __post_init__(self) -> None:
        if self.decimals is not None and not 0 <= self.decimals <= 40:
            raise ValueError(f"decimals {self.decimals} out of range 0..40")
        if self.rounded and self.decimals is None:
            raise ValueError("a rounded format needs decimals")


def lossy_decimals(step: float, eps: float, worst: float) -> int | None:
    """Decimals for a lossy channel on a grid of ``step`` with budget ``eps`` and worst error ``worst``.

    The text must tell grid values apart (a rounding of at most ``step / 4``)
    and keep every written value within ``eps`` of the original: rounding
    adds at most half a unit of the last decimal, so that unit must not
    exceed the slack ``eps - worst`` the archive left.  None (write exact
    text instead) when there is no slack.
    """
    slack = eps - worst
    if not (math.isfinite(step) and step > 0 and math.isfinite(slack) and slack > 0):
        return None
    unit = min(step / 2.0, slack)
    d = max(0, math.ceil(-math.log10(unit)))
    while 10.0 ** (-d) > unit:  # guard log10's last-bit rounding
        d += 1
    return d if d <= 40 else None


def cells(values: np.ndarray, fmt: CellFormat = CellFormat()) -> list[str]:
    """CSV text of one column chunk (``values`` 1-D, in the channel's dtype)."""
    a = np.asarray(values)
    if a.dtype.kind in "iub":
        return a.astype(np.int64 if a.dtype.kind != "u" else np.uint64).astype(str).tolist()
    if a.dtype.itemsize < 4:
        a = a.astype(np.float32)  # float16 prints through float32 (exact widening, IEEE-754)
    text = a.astype(str)  # shortest exact text in the value's own dtype (numpy Dragon4, unique mode)
    missing = np.isnan(a)
    if fmt.decimals is not None:
        d = fmt.decimals
        x = a.astype(np.float64)
        with np.errstate(invalid="ignore", over="ignore"):
            k = np.rint(x * float(10**d))
            use = np.isfinite(k) & (np.abs(k) < _MAX_SCALED)
            if not fmt.rounded:  # only values that are exactly a d-decimal number as parsed
                on = np.where(use, k, 0.0) / float(10**d)
                use &= on.astype(a.dtype) == a
        if use.any():
            src = np.where(use, k / float(10**d), 0.0) if not fmt.rounded else np.where(use, x, 0.0)
            fixed = np.char.mod(f"%.{d}f", src[use])
            if fmt.rounded:  # never longer than the exact text
                exact = text[use]
                fixed = np.where(np.char.str_len(exact) < np.char.str_len(fixed), exact, fixed)
            text = text.astype(object)
            text[use] = fixed
    if missing.any():
        text = text.astype(object)
        text[missing] = ""
    return [str(s) for s in text.tolist()] if text.dtype == object else text.tolist()
