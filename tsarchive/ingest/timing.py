"""How regular a time column is, and the nominal rate it implies.

A logger's clock jitters, skips rows and is set back; none of that is
refused any more.  The time column is kept exactly (``Recording.time``)
and ``Recording.rate`` is its *nominal* rate: the reciprocal of the median
step, rounded to the fewest significant digits that stay within the
column's own tolerance (so a 1 Hz column with a 60-row gap has rate 1.0,
and a 3 Hz clock logged to the millisecond has rate 3.0).

:func:`timing_of` summarises the column for the dry run: regular, jitter
(steps off the median by more than the tolerance but less than half a
step), gaps (steps of 1.5 median steps or more), repeated times and steps
that go back.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta, timezone

import numpy as np

from ..errors import BadInput
from ..recording import TimeAxis
from ..store.timeaxis import EARLIEST_NS, LATEST_NS

_NS = 1_000_000_000

#: A seconds column is regular when every step is within this fraction of the median step.
SECONDS_REL_TOL = 1e-6
#: A datetime column is regular when every step is within this many nanoseconds of the median step.
DATETIME_ABS_TOL_NS = 1_000_000

#: Rates that put a recording's timestamps outside these years are refused: the store's limits
#: (int64 nanoseconds since 1970 end in April 2262), so ingest and store refuse the same spans.
EARLIEST = datetime(1970, 1, 1) + timedelta(microseconds=EARLIEST_NS // 1000)
LATEST = datetime(1970, 1, 1) + timedelta(microseconds=LATEST_NS // 1000)


@dataclass(frozen=True)
class Timing:
    """A time column's steps: median, counts of jittered / gap / repeated / backward steps, the nominal rate."""

    rate: float
    median_step: float       # seconds
    jitter: int
    gaps: int
    backward: int
    largest_gap: float       # seconds (0 without gaps)
    repeated: int = 0

    @property
    def regular(self) -> bool:
        return not (self.jitter or self.gaps or self.backward or self.repeated)

    def describe(self) -> str:
        if self.regular:
            return f"regular, {self.rate:g} Hz (step {self.median_step:g} s)"
        parts = [f"{self.jitter} jittered step(s)"] if self.jitter else []
        if self.gaps:
            parts.append(f"{self.gaps} gap(s), the largest {self.largest_gap:g} s")
        if self.repeated:
            parts.append(f"{self.repeated} repeated time(s)")
        if self.backward:
            parts.append(f"{self.backward} step(s) back in time")
        return f"irregular, nominal {self.rate:g} Hz (median step {self.median_step:g} s): " + ", ".join(parts)


def _steps(axis: TimeAxis) -> tuple[np.ndarray, float, float]:
    """(steps in the axis unit as float64, median step in seconds, tolerance in seconds)."""
    if axis.kind == "datetime":
        steps_ns = np.diff(axis.values)
        med_ns = int(np.median(steps_ns))
        return steps_ns.astype(np.float64) / _NS, med_ns / _NS, DATETIME_ABS_TOL_NS / _NS
    steps = np.diff(axis.values)
    med = float(np.median(steps))
    return steps, med, SECONDS_REL_TOL * abs(med)


def timing_of(axis: TimeAxis, name: str) -> Timing:
    """The :class:`Timing` of ``axis``; BadInput when it has one row or does not advance."""
    n = axis.values.shape[0]
    if n < 2:
        raise BadInput(f"time column '{name}' has a single row, so it gives no rate; give the rate with --rate HZ")
    steps, med, tol = _steps(axis)
    if not (np.isfinite(med) and med > 0):
        raise BadInput(f"time column '{name}' does not advance (median step {med:g} s); "
                       "check that it is the time column")
    dev = np.abs(steps - med)
    gaps = steps >= 1.5 * med
    back = steps <= 0
    jitter = (dev > tol * (1 + 1e-9)) & ~gaps & ~back
    if jitter.any() or gaps.any() or back.any():
        rate = _nominal(lambda r: abs(1.0 / r - med) <= tol, lambda st: abs(st - med) <= tol, med)
    else:   # regular: the grid i / rate (or i * step) must fit every time
        offsets = axis.values - axis.values[0]
        if axis.kind == "datetime":
            offsets, tol = offsets.astype(np.float64) / _NS, min(tol, 0.5 * med)
        idx = np.arange(n, dtype=np.float64)
        rate = _nominal(lambda r: float(np.max(np.abs(offsets - idx / r))) <= tol * (1 + 1e-9),
                        lambda st: float(np.max(np.abs(offsets - idx * st))) <= tol * (1 + 1e-9),
                        float(offsets[-1]) / (n - 1))
    return Timing(rate=rate, median_step=med, jitter=int(jitter.sum()), gaps=int(gaps.sum()),
                  backward=int((steps < 0).sum()), repeated=int((steps == 0).sum()),
                  largest_gap=float(steps[gaps].max()) if gaps.any() else 0.0)


def _fewest(x: float, fits) -> tuple[float, int]:
    """(x rounded to the fewest significant digits that ``fits``, that number of digits); (x, 17) if none."""
    for digits in range(1, 16):
        v = float(f"{x:.{digits}g}")
        if v > 0 and fits(v):
            return v, digits
    return x, 17


def _nominal(rate_fits, step_fits, step: float) -> float:
    """The plainest rate: a short decimal rate (3 Hz for 333/334 ms steps) or the reciprocal of a short
    decimal step (1/900 Hz for 15 min steps), whichever needs fewer digits; else 1/step."""
    r, dr = _fewest(1.0 / step, rate_fits)
    st, ds = _fewest(step, step_fits)
    if min(dr, ds) > 16:
        return 1.0 / step
    return r if dr <= ds else 1.0 / st


def check_rate_beside(rate: float, timing: Timing, name: str) -> None:
    """BadInput unless a given ``rate`` agrees (to 1e-6) with the time column's nominal rate."""
    if abs(rate - timing.rate) > 1e-6 * timing.rate:
        raise BadInput(f"--rate {rate:g} disagrees with time column '{name}' (nominal {timing.rate:g} Hz); "
                       "leave --rate out, the time column's own times are kept")


def check_span(start: datetime | None, n: int, rate: float) -> None:
    """BadInput when ``n`` samples at ``rate`` from ``start`` start before 1900 or end after 2262."""
    if start is None or n < 2:
        return
    naive = start.replace(tzinfo=None) if start.tzinfo is None else start.astimezone(timezone.utc).replace(tzinfo=None)
    span = (n - 1) / rate
    if span > (LATEST - naive).total_seconds():
        raise BadInput(f"rate {rate:g} Hz puts the last of {n} samples after {LATEST.year} "
                       f"(starting {naive.isoformat()}); check the rate")
    if naive < EARLIEST:
        raise BadInput(f"start {naive.isoformat()} is before {EARLIEST.year}; check the time column")
