"""Times for the app, from the archive's logged time axis (``Archive.timeline``; no Textual).

Positions are kept in samples; these functions turn them into seconds elapsed since the
first sample (exact on irregular axes with gaps, unlike ``i / rate``), and turn seconds into
labels: the time of day when the recording was logged with real times, else elapsed time
marked as elapsed (``+1:15.25``), so that it never reads like a clock.
"""

from __future__ import annotations

import math
from datetime import timedelta
from decimal import Decimal

import numpy as np

DATETIME = "datetime"
NS = 10**9
WHOLE = 1 << 22
"""Samples of the time axis read at once when looking up window starts."""


def elapsed(timeline, a: int, b: int) -> np.ndarray:
    """Seconds from the first sample to samples ``a .. b-1`` (float64)."""
    if b <= a or timeline.n == 0:
        return np.zeros(0)
    v, v0 = timeline.values(a, b), timeline.values(0, 1)[0]
    if timeline.kind == DATETIME:
        return (v - v0).astype(np.float64) / NS
    return np.asarray(v, dtype=np.float64) - float(v0)


def elapsed_at(timeline, samples: np.ndarray) -> np.ndarray:
    """:func:`elapsed` of the listed sample numbers (ascending), read in bounded chunks of the axis."""
    samples = np.minimum(np.asarray(samples, dtype=np.int64), max(timeline.n - 1, 0))
    out = np.zeros(len(samples))
    for c0 in range(0, timeline.n if len(samples) else 0, WHOLE):
        lo, hi = np.searchsorted(samples, [c0, c0 + WHOLE])
        if hi > lo:
            out[lo:hi] = elapsed(timeline, c0, min(c0 + WHOLE, timeline.n))[samples[lo:hi] - c0]
    return out


def first_time(timeline) -> np.datetime64 | None:
    """The first sample's logged time of day (naive as logged), or None for an elapsed-only axis."""
    if timeline.kind != DATETIME or timeline.n == 0:
        return None
    return np.datetime64(int(timeline.values(0, 1)[0]), "ns")


def typed_time(timeline, seconds: float | None) -> str:
    """A position as a field shows it for retyping, in a form the time parser reads back, never rounded to
    fewer digits than it holds: the logged ISO 8601 time (naive as logged, else with its offset; to the
    microsecond, rounded down, which still selects the same sample) or, without logged clock times,
    the time elapsed since the first sample as ``h:mm:ss.fff`` (every digit of the shortest repr).
    """
    if seconds is None or not math.isfinite(seconds):
        return ""
    if timeline.kind == DATETIME and timeline.n:
        ns = int(timeline.values(0, 1)[0]) + round(seconds * NS)
        zone = getattr(timeline, "zone", None)
        if zone is not None:
            from tsarchive.store.timeaxis import parse_zone
            ns += parse_zone(zone).utcoffset(None) // timedelta(microseconds=1) * 1000  # the logged wall clock in that offset
        text = str(np.datetime64(ns // 1000, "us"))
        text = text.rstrip("0").rstrip(".") if "." in text else text
        return text + (zone or "")
    d = Decimal(repr(max(float(seconds), 0.0)))
    hours, rest = divmod(d, 3600)
    minutes, secs = divmod(rest, 60)
    secs_text = format(secs.normalize(), "f") if secs else "0"
    return f"{int(hours)}:{int(minutes):02d}:{'0' if secs < 10 else ''}{secs_text}"


def since(seconds: float | None) -> str:
    """Elapsed time, marked as such: ``75.25`` -> ``"+1:15.25"``, ``72192`` -> ``"+20:03:12"``."""
    if seconds is None or not math.isfinite(seconds):
        return "—"
    s = float(seconds)
    minutes, rest = divmod(max(s, 0.0), 60.0)
    if minutes >= 60:
        hours, minutes = divmod(minutes, 60.0)
        return f"+{int(hours)}:{int(minutes):02d}:{rest:02.0f}" if hours >= 10 else \
            f"+{int(hours)}:{int(minutes):02d}:{rest:05.2f}"
    return f"+{int(minutes)}:{rest:05.2f}"


def time_of_day(first: np.datetime64, seconds: float, with_date: bool = False) -> str:
    """``first`` plus ``seconds`` as ``"14:03:12.50"`` (``"2026-03-04 14:03:12.50"`` with the date)."""
    t = first + np.timedelta64(int(round(seconds * NS)), "ns")
    text = str(t.astype("datetime64[ms]")).replace("T", " ")
    day, clock = text.split(" ")
    clock = clock[:11]  # hh:mm:ss.ss
    return f"{day} {clock}" if with_date else clock


class TimeLabels:
    """Labels for one recording: time of day when it has real times, else elapsed (``+…``)."""

    def __init__(self, timeline, duration: float) -> None:
        self.first = first_time(timeline)
        self.zone = getattr(timeline, "zone", None)
        self.long = duration >= 86400 - 1

    @property
    def axis_name(self) -> str:
        if self.first is None:
            return "elapsed (h:mm:ss from the first sample)"
        return f"time of day ({self.zone})" if self.zone else "time of day"

    @property
    def column(self) -> str:
        return "Elapsed" if self.first is None else "Time"

    def at(self, seconds: float) -> str:
        if self.first is None:
            return since(seconds)
        return time_of_day(self.first, seconds, with_date=self.long)

    def start_line(self, capital: bool = False) -> str:
        """The recording's real start, for titles and panels."""
        if self.first is None:
            text = "start time not logged (times are elapsed)"
        else:
            zone = f" {self.zone}" if self.zone else " (no zone logged)"
            text = f"started {time_of_day(self.first, 0.0, with_date=True)}{zone}"
        return text[0].upper() + text[1:] if capital else text


def ticks(lo: float, hi: float, labels: TimeLabels, count: int = 4) -> tuple[list[float], list[str]]:
    """About ``count`` round tick positions (s) in ``[lo, hi]`` and their labels."""
    span = hi - lo
    if not span > 0:
        return [lo], [labels.at(lo)]
    raw = span / count
    steps = [s * m for m in (1e-3, 1e-2, 1e-1, 1, 60, 3600) for s in (1, 2, 5, 10, 15, 30)]
    step = min((s for s in steps if s >= raw), default=raw)
    first = math.ceil(lo / step) * step
    xs = [first + i * step for i in range(int((hi - first) / step) + 1)]
    return xs, [labels.at(x) for x in xs]
