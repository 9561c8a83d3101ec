"""How a source is to be read: the choices a user can state, in one frozen dataclass.

Everything here is optional; with the defaults every reader detects what it
can (encoding, delimiter, decimal mark, preamble, time column) and refuses
only what it cannot read.  The CLI builds a :class:`ReadOptions` from
``pack``'s options; the API takes one as ``options=``.

>>> ReadOptions.build(missing="-9999, n/a", zone="+01:00").sentinels
(-9999.0,)
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from ..errors import BadInput
from ..store.timeaxis import MAX_RATE

#: ``Z``, ``+01:00``, ``-0530``: a fixed offset from UTC (ISO 8601 "time zone designator").
ZONE_RE = re.compile(r"^(?:Z|(?P<sign>[+-])(?P<h>\d{2}):?(?P<m>\d{2}))$")


@dataclass(frozen=True)
class ReadOptions:
    """User-stated choices for reading a source (all optional).

    * ``rate``: samples per second, for sources without a time column
      (``.npy``, tables without one, or with ``without_time``); beside a
      time column it must agree with the column's nominal rate.  For EDF it
      picks the group of signals recorded at that rate.
    * ``zone``: the offset naive times were logged in (``"+01:00"``, ``"Z"``);
      times that carry their own offset keep it.
    * ``without_time``: ignore the source's time column (its timing is then
      lost: the samples are taken as regular at ``rate``).
    * ``text_tokens``: extra cell texts meaning "no measurement" (become NaN).
    * ``sentinels``: numbers meaning "no measurement" (kept exactly, listed
      per channel in :attr:`ChannelInfo.sentinels`).
    * ``skip_text``: leave non-numeric columns out instead of keeping them.
    * ``names`` / ``units``: channel names and units for sources that carry
      none (``.npy``), in column order.
    """

    rate: float | None = None
    zone: str | None = None
    without_time: bool = False
    text_tokens: tuple[str, ...] = ()
    sentinels: tuple[float, ...] = ()
    skip_text: bool = False
    names: tuple[str, ...] = ()
    units: tuple[str, ...] = ()

    @classmethod
    def build(cls, *, rate=None, zone=None, without_time=False, missing=None, skip_text=False,
              names=None, units=None) -> "ReadOptions":
        """Options from user text: ``missing`` and ``names``/``units`` are comma-separated lists."""
        tokens, sentinels = parse_missing(missing)
        return cls(rate=check_rate(rate), zone=parse_zone(zone), without_time=bool(without_time),
                   text_tokens=tokens, sentinels=sentinels, skip_text=bool(skip_text),
                   names=split_list(names, "--names"), units=split_list(units, "--units", allow_empty=True))


    def to_dict(self) -> dict:
        """The choices that differ from the defaults, JSON-safe (for a manifest, so a source can be re-read alike)."""
        d = {"rate": self.rate, "zone": self.zone, "without_time": self.without_time,
             "text_tokens": list(self.text_tokens), "sentinels": list(self.sentinels), "skip_text": self.skip_text,
             "names": list(self.names), "units": list(self.units)}
        return {k: v for k, v in d.items() if v not in (None, False, [])}

    @classmethod
    def from_dict(cls, d: dict) -> "ReadOptions":
        """Inverse of :meth:`to_dict`; every value is checked again (it may come from a file)."""
        if not isinstance(d, dict):
            raise BadInput("read options must be a JSON object; the archive's manifest is damaged")
        return cls(rate=check_rate(d.get("rate")), zone=parse_zone(d.get("zone")),
                   without_time=bool(d.get("without_time", False)),
                   text_tokens=tuple(str(t) for t in d.get("text_tokens", ())),
                   sentinels=tuple(float(v) for v in d.get("sentinels", ())), skip_text=bool(d.get("skip_text", False)),
                   names=tuple(str(t) for t in d.get("names", ())), units=tuple(str(t) for t in d.get("units", ())))


def check_rate(rate) -> float | None:
    """``rate`` as a float, None kept; BadInput unless finite, positive and at most 1 GHz.

    Above 10^9 Hz two samples would share a nanosecond, the finest step a
    timestamp is held in.
    """
    if rate is None:
        return None
    try:
        r = float(rate)
    except (TypeError, ValueError):
        raise BadInput(f"rate {rate!r} is not a number of samples per second; pass e.g. --rate 1000") from None
    if not (math.isfinite(r) and r > 0):
        raise BadInput(f"rate {rate!r} is not a positive number of samples per second; pass e.g. --rate 1000")
    if r > MAX_RATE:
        raise BadInput(f"rate {r:g} Hz is above 1 GHz, where samples would share a nanosecond; check the rate")
    return r


def parse_zone(text: str | None) -> str | None:
    """``"+0100"`` -> ``"+01:00"``; ``"Z"``/``"UTC"`` -> ``"Z"``; None kept; BadInput otherwise."""
    if text is None:
        return None
    t = str(text).strip()
    if t.upper() in ("Z", "UTC"):
        return "Z"
    m = ZONE_RE.match(t)
    if m is None or int(m.group("h")) > 23 or int(m.group("m")) > 59:
        raise BadInput(f"zone {text!r} is not an offset from UTC; write it as +01:00, -05:30 or Z")
    return f"{m.group('sign')}{m.group('h')}:{m.group('m')}"


def zone_seconds(zone: str | None) -> int:
    """Offset of ``zone`` (as returned by :func:`parse_zone`) east of UTC, in seconds."""
    if zone in (None, "Z"):
        return 0
    sign = -1 if zone[0] == "-" else 1
    return sign * (int(zone[1:3]) * 3600 + int(zone[4:6]) * 60)


def parse_missing(text) -> tuple[tuple[str, ...], tuple[float, ...]]:
    """``"-9999, n/a"`` -> ``(("n/a",), (-9999.0,))``: numbers are sentinels, other words text tokens."""
    tokens: list[str] = []
    sentinels: list[float] = []
    items = text if isinstance(text, (list, tuple)) else split_list(text, "--missing")
    for item in items:
        s = str(item).strip()
        try:
            v = float(s.replace(",", ".")) if re.fullmatch(r"[+-]?[\d.,eE+-]+", s) else None
        except ValueError:
            v = None
        if v is not None and math.isfinite(v):
            if v not in sentinels:
                sentinels.append(v)
        elif s not in tokens:
            tokens.append(s)
    return tuple(tokens), tuple(sentinels)


def split_list(text, option: str, allow_empty: bool = False) -> tuple[str, ...]:
    """``"a, b,c"`` -> ``("a", "b", "c")``; a list is taken as given; empty items refused unless allowed."""
    if text is None:
        return ()
    items = [str(s).strip() for s in (text if isinstance(text, (list, tuple)) else str(text).split(","))]
    if not allow_empty and any(not s for s in items):
        raise BadInput(f"{option} {text!r} has an empty item; list the values separated by commas")
    return tuple(items)
