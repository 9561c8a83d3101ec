"""Parse a point in time given on the command line into seconds from the recording start.

Accepted forms:

* a plain number of seconds: ``12``, ``0.25``, ``1e3``;
* a number with a unit: ``250ms``, ``90s``, ``5min``, ``2h`` (also
  ``1.5 h``; no other units, and no ``m`` -- it could mean minutes or milli);
* an ISO 8601 datetime, ``2031-04-02T08:30:00Z`` -- only when the recording
  has a start time; a datetime without an offset is taken as UTC.

The result is never negative.
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timezone

from .errors import BadInput

#: Unit suffixes and their length in seconds.
UNITS = {"ms": 1e-3, "s": 1.0, "min": 60.0, "h": 3600.0}

_NUM_UNIT = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([a-zA-Z]*)\s*$")
_FORMS = "give seconds (12.5), a duration (250ms, 90s, 5min, 2h) or an ISO 8601 datetime"


def parse_time(spec: str, start: datetime | None) -> float:
    """Seconds from ``start`` denoted by ``spec`` (see the module docstring).

    Raises :class:`BadInput` when ``spec`` cannot be parsed, is negative or
    not finite, or is a datetime while ``start`` is None.
    """
    text = str(spec).strip()
    m = _NUM_UNIT.match(text)
    if m is not None:
        unit = m.group(2).lower()
        if unit and unit not in UNITS:
            raise BadInput(f"time '{spec}': unknown unit '{m.group(2)}'; {_FORMS}")
        value = float(m.group(1)) * UNITS.get(unit, 1.0)
        return _non_negative(value, spec)
    try:
        dt = datetime.fromisoformat(text)
    except ValueError:
        raise BadInput(f"time '{spec}' is not understood; {_FORMS}") from None
    if start is None:
        raise BadInput(f"time '{spec}' is a datetime but the recording has no start time; give seconds instead")
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=timezone.utc)
    if start.tzinfo is None:
        start = start.replace(tzinfo=timezone.utc)
    return _non_negative((dt - start).total_seconds(), spec)


def _non_negative(value: float, spec: str) -> float:
    if not math.isfinite(value):
        raise BadInput(f"time '{spec}' is not a finite number; {_FORMS}")
    if value < 0:
        raise BadInput(f"time '{spec}' lies before the start of the recording; give a time at or after it")
    return float(value)
