"""Parse a point in time, typed on the command line or in the app, into seconds from the recording start.

The command line (``unpack --start/--end``) and the app (jump to time, export range)
use this one parser, so both accept the same forms:

* a plain number of seconds: ``12``, ``0.25``, ``1e3``;
* a number with a unit: ``250ms``, ``90s``, ``5min``, ``2h``, ``3d`` (also
  ``1.5 h``; no other units, and no ``m`` -- it could mean minutes or milli);
* several of those in a row, largest first: ``2h1min``, ``1d 6h``, ``1min 30.5s``;
* hours:minutes:seconds or minutes:seconds, as the app shows positions:
  ``1:02:03``, ``1:15.5`` (minutes and seconds after the first field below 60);
* an ISO 8601 datetime, ``2031-04-02T08:30:00Z`` -- only when the recording
  has a start time; a datetime without an offset is read in the recording's
  own zone (its wall clock for naive recordings), one with an offset on a
  naive recording is refused (which wall clock it means is unknown).

The result is never negative.  :func:`parse_offset` gives it exactly (a
Fraction of seconds), so that a range starts exactly on a logged sample.
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timedelta
from fractions import Fraction

from .errors import BadInput

#: Unit suffixes and their length in seconds.
UNITS = {"ms": Fraction(1, 1000), "s": Fraction(1), "min": Fraction(60), "h": Fraction(3600), "d": Fraction(86400)}

_NUM_UNIT = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([a-zA-Z]*)\s*$")
_PART = re.compile(r"\s*(\d+\.?\d*|\.\d+)\s*(ms|s|min|h|d)", re.IGNORECASE)
_CLOCK = re.compile(r"^\s*(\d+):(\d{1,2})(?::(\d{1,2}(?:\.\d*)?))?\s*$|^\s*(\d+):(\d{1,2}\.\d*)\s*$")
_FORMS = ("give seconds (12.5), a duration (250ms, 90s, 5min, 2h, 3d, 2h1min), a clock time from the start "
          "(1:02:03 or 1:15.5) or an ISO 8601 datetime")


def parse_time(spec: str, start: datetime | None) -> float:
    """Seconds from ``start`` denoted by ``spec`` (see the module docstring).

    Raises :class:`BadInput` when ``spec`` cannot be parsed, is negative or
    not finite, or is a datetime while ``start`` is None.
    """
    return float(parse_offset(spec, start))


def parse_offset(spec: str, start: datetime | None, start_ns: int | None = None) -> Fraction:
    """:func:`parse_time`, exactly: a Fraction of seconds (``0.1`` is 1/10, not the nearest double).

    ``start_ns`` is the first sample's exact time (ns since 1970-01-01, as
    the archive keeps it) when ``start``, a datetime, holds only microseconds.
    """
    text = str(spec).strip()
    relative = _relative(text, spec)
    if relative is not None:
        return _non_negative(relative, spec)
    m = _NUM_UNIT.match(text)
    if m is not None:
        unit = m.group(2).lower()
        if unit and unit not in UNITS:
            raise BadInput(f"time '{spec}': unknown unit '{m.group(2)}'; {_FORMS}")
        if not math.isfinite(float(m.group(1))):
            raise BadInput(f"time '{spec}' is not a finite number; {_FORMS}")
        return _non_negative(Fraction(m.group(1)) * UNITS.get(unit, Fraction(1)), spec)
    try:
        dt = datetime.fromisoformat(text)
    except ValueError:
        raise BadInput(f"time '{spec}' is not understood; {_FORMS}") from None
    if start is None:
        raise BadInput(f"time '{spec}' is a datetime but the recording has no start time; give seconds instead")
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=start.tzinfo)
    elif start.tzinfo is None:
        raise BadInput(f"time '{spec}' has a zone but the recording's times were logged without one; "
                       "give it without an offset, as the logger's clock showed it")
    if start_ns is not None:
        from .store.timeaxis import NS, datetime_ns
        return _non_negative(Fraction(datetime_ns(dt) - start_ns, NS), spec)
    return _non_negative(Fraction((dt - start) // timedelta(microseconds=1), 10**6), spec)


def _relative(text: str, spec: str) -> Fraction | None:
    """A clock time (``1:02:03``, ``1:15.5``) or a run of units (``2h1min``) as exact seconds, else None."""
    m = _CLOCK.match(text)
    if m is not None:
        if m.group(4) is not None:  # minutes:seconds with a fraction (1:15.5)
            fields = [m.group(4), m.group(5)]
        else:
            fields = [f for f in m.group(1, 2, 3) if f is not None]
        values = [Fraction(f) for f in fields]
        if any(v >= 60 for v in values[1:]):
            raise BadInput(f"time '{spec}': minutes and seconds after a colon must be below 60; {_FORMS}")
        total = Fraction(0)
        for v in values:
            total = total * 60 + v
        return total
    parts = list(_PART.finditer(text))
    if len(parts) < 2 or "".join(p.group(0) for p in parts).strip() != text:
        return None  # one number with a unit is read below, with its own messages
    units = [p.group(2).lower() for p in parts]
    order = list(UNITS)[::-1]  # d, h, min, s, ms
    if any(order.index(a) >= order.index(b) for a, b in zip(units, units[1:])):
        raise BadInput(f"time '{spec}': give each unit once, largest first (2h1min30s); {_FORMS}")
    return sum((Fraction(p.group(1)) * UNITS[u] for p, u in zip(parts, units)), Fraction(0))


def _non_negative(value: Fraction, spec: str) -> Fraction:
    if value < 0:
        raise BadInput(f"time '{spec}' lies before the start of the recording; give a time at or after it")
    return value
