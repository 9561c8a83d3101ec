"""The recording's time axis in the archive: stored losslessly, given back exactly.

Manifest entry ``time`` (optional on reading: an archive without it has the
axis ``start + i / rate`` of its first channel)::

    {"kind": "datetime" | "seconds", "zone": null | "Z" | "+01:00", "columns": [source headers],
     "runs": [[index, start], ...]}      # or "listed": true, every time in time.parquet

``kind``/``zone``/``columns`` are :class:`tsarchive.recording.TimeAxis`'s.
A *run* is a stretch of samples that follows the **rate rule** from the
run's first time; a perfectly regular axis is one run, a gap starts a new
one.  Writer and reader apply the same rule, in integers only:

* ``datetime`` (int64 ns): ``t[r + k] = t[r] + (2·k·P + Q) // (2·Q)``, where
  ``P / Q = 10^9 / rate`` in lowest terms and ``rate`` is the decimal its
  shortest ``repr`` spells (Python's repr is correctly rounded, so the same
  on every machine): ``k · 10^9 / rate`` ns rounded half up;
* ``seconds`` (float64): ``t[r + k] = t[r] + k / rate`` (two correctly
  rounded IEEE-754 operations); a run's start is stored as ``float.hex``.

An axis that needs more than ``MAX_RUNS`` runs (jitter) is *listed*
(:mod:`tsarchive.store.timelist`):
``time.parquet`` holds every time in one int64 column ``t``,
DELTA_BINARY_PACKED + zstd: for datetimes ``(t - origin) / tick`` with
``origin`` the earliest time and ``tick`` the greatest common divisor of
all times' distances from it (1000 for a clock logging microseconds: about
10 bits a sample saved), both in the entry; for seconds the float64 bits.
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from fractions import Fraction
from functools import cached_property, lru_cache
from pathlib import Path

import numpy as np

from ..errors import ArchiveCorrupt, BadInput
from . import schema as S
from .timelist import ListedTimes

TIME_MEMBER = S.TIME
DATETIME, SECONDS = "datetime", "seconds"
NS = 10**9
MAX_RUNS = 64               # more runs than this: the axis is listed in time.parquet
CHUNK = 1 << 16             # samples compared per step while finding runs
MAX_RATE = 1e9              # above 1 GHz consecutive samples cannot be told apart in ns
_EPOCH = datetime(1970, 1, 1)
#: datetimes must lie in [1900-01-01, 2262-01-01): int64 ns ends in April 2262
EARLIEST_NS = (datetime(1900, 1, 1) - _EPOCH) // timedelta(microseconds=1) * 1000
LATEST_NS = (datetime(2262, 1, 1) - _EPOCH) // timedelta(microseconds=1) * 1000
LONGEST_S = (LATEST_NS - EARLIEST_NS) / NS   # longest span of a seconds axis


@dataclass(frozen=True, eq=False)
class Times:
    """The exact times of samples ``first .. first + len(values) - 1``.

    ``values`` are int64 ns since 1970-01-01 (``kind`` "datetime"; the wall
    clock when ``zone`` is None) or float64 seconds (``kind`` "seconds").
    ``name`` is the header to write the time column under.
    """

    kind: str
    values: np.ndarray
    zone: str | None = None
    first: int = 0
    name: str = "time"


# -- the rate rule ---------------------------------------------------------------
@lru_cache(maxsize=64)
def _period(rate: float) -> tuple[int, int]:
    """(P, Q): 10^9 / rate ns in lowest terms, rate read as the decimal its repr spells."""
    f = Fraction(NS) / Fraction(repr(float(rate)))
    return f.numerator, f.denominator


def rule(k: np.ndarray, rate: float, kind: str) -> np.ndarray:
    """Offsets of samples ``k`` (>= 0) from their run's first time: int64 ns or float64 s."""
    k = np.asarray(k, dtype=np.int64)
    if kind == SECONDS:
        return k.astype(np.float64) / float(rate)
    P, Q = _period(rate)
    kmax = int(k.max()) if k.size else 0
    if 2 * Q * P < 2**62 and (kmax // Q + 1) * P < 2**62:
        whole, part = np.divmod(k, Q)
        return whole * P + (2 * part * P + Q) // (2 * Q)
    return np.array([(2 * int(x) * P + Q) // (2 * Q) for x in k.tolist()], dtype=np.int64)


def _differs(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Elementwise 'not the same time' (floats compared bit for bit)."""
    if a.dtype.kind == "f":
        return a.view(np.int64) != b.view(np.int64)
    return a != b


def _run_end(values: np.ndarray, r: int, rate: float, kind: str) -> int:
    """First index after ``r`` where the axis leaves the rule started at ``values[r]``."""
    n = len(values)
    for c in range(r, n, CHUNK):
        d = min(n, c + CHUNK)
        bad = np.flatnonzero(_differs(values[r] + rule(np.arange(c - r, d - r), rate, kind), values[c:d]))
        if bad.size:
            return c + int(bad[0])
    return n


def find_runs(values: np.ndarray, rate: float, kind: str) -> list[int] | None:
    """Indices where the runs start, or None when more than ``MAX_RUNS`` are needed."""
    runs, r = [], 0
    while r < len(values):
        if len(runs) == MAX_RUNS:
            return None
        runs.append(r)
        r = _run_end(values, r, rate, kind)
    return runs


# -- packing ---------------------------------------------------------------------
def zone_of(t: datetime) -> str | None:
    """None for a naive datetime, "Z" for UTC, else the offset as ``+hh:mm``."""
    off = t.utcoffset()
    if off is None:
        return None
    if off == timedelta(0) and t.tzinfo is timezone.utc:
        return "Z"
    minutes = int(off.total_seconds()) // 60
    sign = "-" if minutes < 0 else "+"
    return f"{sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"


def datetime_ns(t: datetime) -> int:
    """ns since 1970-01-01 of ``t``: the instant for an aware datetime, the wall clock for a naive one."""
    if t.tzinfo is not None:
        t = t.astimezone(timezone.utc).replace(tzinfo=None)
    return (t - _EPOCH) // timedelta(microseconds=1) * 1000


def source_axis(rec, a: int = 0, b: int | None = None) -> Times:
    """The times of samples ``a .. b-1`` of ``rec``: its logged time column, else ``start + i / rate``
    (computed for the asked rows only: a long recording without a time column is never held whole)."""
    b = rec.n_samples if b is None else min(b, rec.n_samples)
    if rec.time is not None:
        kind = rec.time.kind
        dtype = np.int64 if kind == DATETIME else np.float64
        name = rec.time.columns[0] if len(rec.time.columns) == 1 else "time"
        return Times(kind, np.asarray(rec.time.values[a:b], dtype=dtype), rec.time.zone, a, name)
    k = np.arange(a, max(a, b))
    if rec.start is not None:
        return Times(DATETIME, datetime_ns(rec.start) + rule(k, rec.rate, DATETIME), zone_of(rec.start), a)
    return Times(SECONDS, rule(k, rec.rate, SECONDS), None, a)


def check_axis(rec) -> None:
    """BadInput (one line) unless the rate and the time axis of ``rec`` can be stored and given back."""
    r = float(rec.rate)
    if not (math.isfinite(r) and r > 0):
        raise BadInput(f"rate {rec.rate!r} is not a positive number of samples per second; pass e.g. --rate 1000")
    if r > MAX_RATE:
        raise BadInput(f"rate {r:g} Hz puts samples less than 1 ns apart, so their times cannot be told apart; "
                       "check --rate (at most 1e9)")
    if rec.time is not None:
        _check_time_column(rec)
    n = rec.n_samples
    span = (n - 1) / r if n > 1 else 0.0
    first = source_axis(rec, 0, 1)
    if first.kind == SECONDS or not n:
        if span > LONGEST_S:
            raise BadInput(f"rate {r:g} Hz spreads {n} samples over {span:.3g} s, longer than any record "
                           "(1900..2262); check --rate")
        return
    t0 = int(first.values[0])
    if not (EARLIEST_NS <= t0 and t0 + span * NS < LATEST_NS):
        shown = np.datetime64(t0, "ns").astype("datetime64[s]")
        raise BadInput(f"rate {r:g} Hz puts the samples from {shown} to {span:.3g} s later, outside 1900..2262; "
                       "check --rate")


def _check_time_column(rec) -> None:
    n, kind = rec.n_samples, rec.time.kind
    if kind not in (DATETIME, SECONDS):
        raise BadInput(f"time axis kind {kind!r} is unknown; use 'datetime' or 'seconds'")
    if len(rec.time.values) != n:
        raise BadInput(f"the time column has {len(rec.time.values)} rows but the channels {n}; "
                       "give one time per sample")
    if np.asarray(rec.time.values).dtype.kind != ("i" if kind == DATETIME else "f"):
        raise BadInput(f"the {kind} time axis holds {np.asarray(rec.time.values).dtype} values; "
                       "give int64 ns for datetimes, float64 for seconds")
    try:
        parse_zone(rec.time.zone)
    except ArchiveCorrupt:
        raise BadInput(f"time zone {rec.time.zone!r} is not understood; give Z or an offset such as +01:00") \
            from None


def encode_axis(rec) -> tuple[dict, np.ndarray | None]:
    """(the manifest's ``time`` entry, the int64 column of time.parquet or None)."""
    axis = source_axis(rec, 0, None if rec.time is not None else 1)
    entry = {"kind": axis.kind, "zone": axis.zone,
             "columns": list(rec.time.columns) if rec.time is not None else []}
    if rec.time is None:
        runs = [0] * (rec.n_samples > 0)
    elif axis.kind == SECONDS and not np.all(np.isfinite(axis.values)):
        runs = None       # NaN payloads need not survive arithmetic on every machine: list every time
    else:
        runs = find_runs(axis.values, rec.rate, axis.kind)
    if runs is None:
        if axis.kind == SECONDS:
            return dict(entry, listed=True), axis.values.view(np.int64)
        lo, hi = int(axis.values.min()), int(axis.values.max())
        if hi - lo >= 2**63:        # more than 292 years apart: kept as they are
            return dict(entry, listed=True, origin=0, tick=1), axis.values
        dist = axis.values - lo
        tick = int(np.gcd.reduce(dist)) or 1
        return dict(entry, listed=True, origin=lo, tick=tick), dist // tick
    starts = [int(axis.values[r]) if axis.kind == DATETIME else float(axis.values[r]).hex() for r in runs]
    return dict(entry, runs=[[int(r), s] for r, s in zip(runs, starts)]), None


# -- reading ---------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Timeline:
    """An archive's time axis: the exact time of any sample, and sample spans of time ranges."""

    kind: str
    zone: str | None
    columns: tuple[str, ...]
    rate: float
    n: int
    run_index: tuple[int, ...] = ()
    run_start: tuple = ()          # int ns or float seconds, one per run
    listed: ListedTimes | None = None

    @property
    def name(self) -> str:
        return self.columns[0] if len(self.columns) == 1 else "time"

    def values(self, a: int, b: int) -> np.ndarray:
        """Times of samples ``a .. b-1`` (int64 ns or float64 s)."""
        a, b = max(0, a), min(self.n, b)
        if self.listed is not None:
            return self.listed.values(a, b)
        out = np.empty(max(0, b - a), dtype=np.int64 if self.kind == DATETIME else np.float64)
        bounds = self.run_index + (self.n,)
        for j, r in enumerate(self.run_index):
            lo, hi = max(a, r), min(b, bounds[j + 1])
            if lo < hi:
                out[lo - a:hi - a] = self.run_start[j] + rule(np.arange(lo - r, hi - r), self.rate, self.kind)
        return out

    def check(self) -> None:
        """Decode every stored time (ArchiveCorrupt at the first that does not decode)."""
        if self.listed is not None:
            for g in range(len(self.listed.bounds) - 1):
                self.listed.group(g)
        elif self.n:
            self.values(0, 1)

    def times(self, a: int, b: int) -> Times:
        return Times(self.kind, self.values(a, b), self.zone, a, self.name)

    def _key(self, i: int):
        v = self.values(i, i + 1)[0]
        return int(v) if self.kind == DATETIME else Fraction(float(v))

    @cached_property
    def _backwards(self) -> int | None:
        """First sample whose time is before its predecessor's (or not a number), or None."""
        if self.listed is not None:
            return self.listed.backwards
        for r in self.run_index[1:]:
            if self._key(r) < self._key(r - 1):
                return r
        return None

    def _first_at(self, offset: Fraction) -> int:
        """First sample whose time is at least ``offset`` seconds after the first sample's."""
        t0 = self._key(0)
        target = t0 + math.ceil(offset * NS) if self.kind == DATETIME else t0 + offset

        class _Keys:
            def __len__(s):
                return self.n

            def __getitem__(s, i):
                return self._key(i)
        return bisect.bisect_left(_Keys(), target)

    def span(self, start=None, end=None) -> tuple[int, int]:
        """Samples ``[a, b)`` whose times t satisfy start <= t - t[0] < end (seconds; None: open)."""
        s = None if start is None else Fraction(start)
        e = None if end is None else Fraction(end)
        if s is not None and e is not None and e <= s:
            raise BadInput(f"end {float(e):g} s is not after start {float(s):g} s; give a later end")
        if (s is None and e is None) or not self.n:
            return 0, self.n
        back = self._backwards
        if back is not None:
            raise BadInput(f"the recording's clock goes back (or is blank) at sample {back}, so a time range is "
                           "ambiguous; export the whole recording instead")
        a = 0 if s is None or s <= 0 else self._first_at(s)
        if a >= self.n:
            last = (self._key(self.n - 1) - self._key(0)) / (NS if self.kind == DATETIME else 1)
            raise BadInput(f"start {float(s):g} s is past the end of the recording (its last sample is "
                           f"{float(last):g} s after the first); give an earlier start")
        b = self.n if e is None else self._first_at(e)
        return a, max(a, b)

    def describe(self) -> str:
        """One line for reports: kind, zone, how it is stored, first and last time."""
        if not self.n:
            return "times: none (no samples)"
        if self.listed is not None:
            how = "irregular, every time listed"
        elif len(self.run_index) == 1:
            how = f"regular at {self.rate:g} Hz"
        else:
            how = f"{self.rate:g} Hz with {len(self.run_index) - 1} break(s) (gaps or clock steps)"
        ends = self.values(0, 1).tolist() + self.values(self.n - 1, self.n).tolist()
        if self.kind == SECONDS:
            return f"times: seconds, {how}, {ends[0]!r} to {ends[1]!r}"
        zone = "no zone (wall clock as logged)" if self.zone is None else f"zone {self.zone}"
        unit = next((u for u, d in (("s", NS), ("ms", 10**6), ("us", 1000)) if not any(t % d for t in ends)), "ns")
        first, last = (str(np.datetime64(t + _offset_ns(self.zone), "ns").astype(f"datetime64[{unit}]"))
                       + (self.zone or "") for t in ends)
        return f"times: {zone}, {how}, {first} to {last}"

    def start_datetime(self) -> datetime | None:
        """The first sample's time as a datetime (naive stays naive; microseconds), None for seconds."""
        if self.kind != DATETIME or not self.n:
            return None
        ns = int(self.values(0, 1)[0])
        if self.zone is None:
            return _EPOCH + timedelta(microseconds=ns // 1000)
        utc = datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(microseconds=ns // 1000)
        return utc.astimezone(parse_zone(self.zone))


def _offset_ns(zone: str | None) -> int:
    tz = parse_zone(zone)
    return 0 if tz is None else tz.utcoffset(None) // timedelta(microseconds=1) * 1000


def parse_zone(zone: str | None):
    """The tzinfo of a zone string ("Z", "+01:00"); None for naive."""
    if zone is None:
        return None
    if zone == "Z":
        return timezone.utc
    try:
        sign = -1 if zone[0] == "-" else 1
        hh, mm = zone[1:].split(":")
        if zone[0] not in "+-" or len(hh) != 2 or len(mm) != 2:
            raise ValueError(zone)
        return timezone(sign * timedelta(hours=int(hh), minutes=int(mm)))
    except (ValueError, IndexError):
        raise ArchiveCorrupt(f"time zone {zone!r} in the manifest is malformed; the archive is damaged") from None


def load_timeline(manifest: dict, folder: Path, n: int, rate: float, start: datetime | None) -> Timeline:
    """The archive's Timeline from its manifest (and time.parquet when the axis is listed)."""
    entry = manifest.get("time")
    if entry is None:      # archives before the time entry: start + i / rate of the first channel
        if start is None:
            return Timeline(SECONDS, None, (), rate, n, (0,), (0.0,))
        return Timeline(DATETIME, zone_of(start), (), rate, n, (0,), (datetime_ns(start),))
    try:
        kind, zone, columns = entry["kind"], entry.get("zone"), tuple(str(c) for c in entry.get("columns", []))
        if kind not in (DATETIME, SECONDS):
            raise ValueError(kind)
        parse_zone(zone)
        if entry.get("listed"):
            origin, tick = int(entry.get("origin", 0)), int(entry.get("tick", 1))
            if tick < 1:
                raise ValueError(tick)
            return Timeline(kind, zone, columns, rate, n,
                            listed=ListedTimes(manifest, folder, n, kind == SECONDS, origin, tick))
        runs = entry["runs"]
        index = tuple(int(r[0]) for r in runs)
        starts = tuple(int(r[1]) if kind == DATETIME else float.fromhex(r[1]) for r in runs)
    except (KeyError, TypeError, ValueError, IndexError, AttributeError):
        raise ArchiveCorrupt("the manifest's time entry is malformed; the archive is damaged") from None
    if (n and (not index or index[0] != 0)) or any(b <= a for a, b in zip(index, index[1:])) or \
            (index and index[-1] >= n) or (kind == DATETIME and not _runs_in_range(index, starts, n, rate)):
        raise ArchiveCorrupt("the manifest's time runs are out of order or range; the archive is damaged")
    return Timeline(kind, zone, columns, rate, n, index, starts)


def _runs_in_range(index: tuple[int, ...], starts: tuple[int, ...], n: int, rate: float) -> bool:
    """Every run's first and last time lie in 1900..2262 (Python integers: nothing can wrap around)."""
    P, Q = _period(rate)
    ends = index[1:] + (n,)
    return all(EARLIEST_NS <= s and s + (2 * (e - r - 1) * P + Q) // (2 * Q) < LATEST_NS
               for r, s, e in zip(index, starts, ends))
