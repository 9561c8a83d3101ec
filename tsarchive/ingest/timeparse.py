"""Parse a logger's time column(s) into a :class:`~tsarchive.recording.TimeAxis`, exactly.

Accepted forms (one form per file, decided from the whole column):

* ISO 8601 ``2024-03-05T14:00:00[.fff][Z|+01:00]`` (``T`` or a space; ``/``
  between date parts is accepted too);
* ``05.03.2024 14:00:00`` (day.month.year, the usual German form);
* ``03/05/2024 14:00:00`` (month/day/year), or day/month/year when some
  first field is above 12; these two forms also take two-digit years
  (``69``-``99`` are 19xx, ``00``-``68`` 20xx, as POSIX ``%y``) and a
  12-hour clock (``02:00:00 PM``);
* a date column beside a time column (``Date``, ``Time``), including the
  ISO 8601 end of day ``24:00``, which is 00:00 of the next day;
* numbers: elapsed seconds (``Elapsed (s)``, ``time [s]``) or seconds since
  1970-01-01 UTC (a column named ``epoch``, ``unix`` or ``posix``).

Dates are turned into day numbers with integer arithmetic (Howard
Hinnant's ``days_from_civil``, "chrono-Compatible Low-Level Date
Algorithms"), so every nanosecond is exact.  Times without an offset stay
naive (``zone`` None, values = the wall clock as logged) unless the user
states the zone (with ``--zone``, or in the header: ``Date Time, GMT-05:00``);
times with an offset are held as UTC instants and the
offset as logged is kept in ``zone``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import BadInput
from ..recording import TimeAxis
from .options import parse_zone, zone_seconds

_NS = 1_000_000_000
YEAR_MIN, YEAR_MAX = 1900, 2261   # int64 nanoseconds since 1970 end in April 2262

_TIME = r"(?P<h>\d{1,2}):(?P<mi>\d{2})(?::(?P<s>\d{2})(?:[.,](?P<f>\d{1,9}))?)?"
_TIME12 = _TIME + r"(?:\s*(?P<ap>[AaPp]\.?[Mm]\.?))?"      # 02:00:00 PM
_ZONE = r"\s*(?P<z>[Zz]|[+-]\d{2}:?\d{2})?"
FORMS = {
    "ISO 8601": re.compile(r"^\s*(?P<Y>\d{4})[-/](?P<M>\d{1,2})[-/](?P<D>\d{1,2})(?:(?:T|\s+)" + _TIME + ")?" + _ZONE + r"\s*$"),
    "dd.mm.yyyy": re.compile(r"^\s*(?P<D>\d{1,2})\.(?P<M>\d{1,2})\.(?P<Y>\d{4}|\d{2})(?:\s+" + _TIME12 + ")?" + _ZONE + r"\s*$"),
    "MM/DD/YYYY": re.compile(r"^\s*(?P<M>\d{1,2})/(?P<D>\d{1,2})/(?P<Y>\d{4}|\d{2})(?:\s+" + _TIME12 + ")?" + _ZONE + r"\s*$"),
}
TIME_ONLY = re.compile(r"^\s*" + _TIME12 + r"\s*$")
#: "Date Time, GMT-05:00": a zone stated in the time column's header.
HEADER_ZONE = re.compile(r"(?:GMT|UTC)\s*(?P<sign>[+-])(?P<h>\d{1,2})(?::?(?P<m>\d{2}))?", re.IGNORECASE)

#: Header names (lower case, before any unit) that mark a time column.
TIME_NAMES = frozenset({"time", "t", "timestamp", "datetime", "date_time", "date", "time_s", "elapsed", "zeit",
                        "datum", "uhrzeit", "date/time", "datum/zeit", "epoch", "unix", "unix_time", "epoch_time",
                        "posix", "elapsed_time", "seconds", "time_stamp", "clock"})
EPOCH_NAMES = frozenset({"epoch", "unix", "unix_time", "epoch_time", "posix"})
DATE_NAMES = frozenset({"date", "datum"})


@dataclass(frozen=True)
class TimeFound:
    """A parsed time axis plus how it was read (for the dry run)."""

    axis: TimeAxis
    form: str
    notes: tuple[str, ...] = ()


def normal_name(header: str) -> str:
    from .columns import split_header
    return split_header(header)[0].lower().strip().replace(" ", "_").replace("-", "_")


def is_time_name(header: str) -> bool:
    return normal_name(header) in TIME_NAMES


def days_from_civil(y: np.ndarray, m: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Days since 1970-01-01 of proleptic Gregorian dates (Hinnant's days_from_civil, integer only)."""
    y = y - (m <= 2)
    era = np.floor_divide(y, 400)
    yoe = y - era * 400
    mp = (m + 9) % 12
    doy = (153 * mp + 2) // 5 + d - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    return era * 146097 + doe - 719468


def _days_in_month(y: np.ndarray, m: np.ndarray) -> np.ndarray:
    leap = ((y % 4 == 0) & (y % 100 != 0)) | (y % 400 == 0)
    base = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.int64)[np.clip(m, 1, 12) - 1]
    return base + ((m == 2) & leap)


def _groups(strings: pa.Array, pattern: re.Pattern) -> dict[str, np.ndarray] | None:
    """Named groups of ``pattern`` for every string (int64, 0 where absent), or None if one does not match."""
    if not pc.match_substring_regex(strings[:64], pattern.pattern).to_numpy(zero_copy_only=False).all():
        return None     # a cheap look at the head first: most forms fail there
    st = pc.extract_regex(strings, pattern.pattern)   # null where a string does not match
    if st.null_count:
        return None
    out = {}
    for name in pattern.groupindex:
        col = st.field(name)
        if name in ("z", "ap"):     # texts: the zone, AM/PM
            out[name] = col
            continue
        if name == "f":  # fraction of a second -> nanoseconds (right-padded to 9 digits)
            col = pc.utf8_rpad(col, 9, "0")
        col = pc.if_else(pc.equal(col, ""), "0", col)
        out[name] = np.asarray(pc.cast(col, pa.int64()).to_numpy(zero_copy_only=False), dtype=np.int64)
    return out


def _first_bad(ok: np.ndarray) -> int:
    return int(np.argmin(ok))


def _clock_ns(g: dict[str, np.ndarray], header: str, raw: pa.Array) -> np.ndarray:
    """Nanoseconds since 1970 (wall clock) of date groups Y M D (+ optional h mi s f), checked."""
    y, m, d = g["Y"], g["M"], g["D"]
    h, mi, s, f = (g.get(k, np.zeros_like(y)) for k in ("h", "mi", "s", "f"))
    # two-digit years as POSIX strptime's %y reads them: 69..99 -> 1969..1999, 00..68 -> 2000..2068
    y = np.where(y < 100, np.where(y < 69, 2000 + y, 1900 + y), y)
    if g.get("ap") is not None:         # 12-hour clock: 12:xx AM is 00:xx, 12:xx PM is 12:xx
        first = pc.utf8_lower(pc.utf8_slice_codeunits(g["ap"], 0, 1)).to_numpy(zero_copy_only=False)
        has, pm = first != "", first == "p"
        ok = ~has | ((h >= 1) & (h <= 12))
        if not ok.all():
            i = _first_bad(ok)
            raise BadInput(f"time column '{header}' row {i + 1}: {raw[i].as_py()!r} is not a valid 12-hour time; "
                           "fix that row")
        h = np.where(has, h % 12 + 12 * pm, h)
    ok_date = (m >= 1) & (m <= 12) & (d >= 1) & (d <= _days_in_month(y, m))
    end_of_day = (h == 24) & (mi == 0) & (s == 0) & (f == 0)      # ISO 8601: 24:00 ends the day
    ok_time = ((h <= 23) | end_of_day) & (mi <= 59) & (s <= 59)
    ok = ok_date & ok_time
    if not ok.all():
        i = _first_bad(ok)
        raise BadInput(f"time column '{header}' row {i + 1}: {raw[i].as_py()!r} is not a valid date and time; "
                       "fix that row")
    ok = (y >= YEAR_MIN) & (y <= YEAR_MAX)
    if not ok.all():
        i = _first_bad(ok)
        raise BadInput(f"time column '{header}' row {i + 1}: year {int(y[i])} is outside {YEAR_MIN}..{YEAR_MAX}; "
                       "check the date format")
    secs = days_from_civil(y, m, d) * 86400 + h * 3600 + mi * 60 + s
    return secs * _NS + f


def _zone(g, header: str, stated: str | None) -> tuple[np.ndarray, str | None, tuple[str, ...]]:
    """(offset seconds per row, zone of the axis, notes) from the ``z`` group and the user's zone."""
    z = g.get("z")
    if z is None:
        return _zone_from(np.zeros(0, dtype=np.int64), [], header, stated)
    coded = z.dictionary_encode()   # few distinct offsets: each is parsed once
    return _zone_from(coded.indices.to_numpy(zero_copy_only=False), coded.dictionary.to_pylist(), header, stated)


def _zone_from(index: np.ndarray, texts: list[str], header: str, stated: str | None):
    """:func:`_zone` from the distinct logged zone texts and each row's index into them."""
    logged = set(texts)
    if not logged or logged == {""}:
        if stated is None:
            return np.zeros(0, dtype=np.int64), None, ("naive (no zone logged; kept as the wall clock)",)
        return np.full(1, zone_seconds(stated), dtype=np.int64), stated, (f"zone {stated} (stated)",)
    if "" in logged:
        raise BadInput(f"time column '{header}': some times carry an offset and some do not; "
                       "make them all the same")
    kinds = [parse_zone(t) for t in texts]
    offsets = np.array([zone_seconds(k) for k in kinds], dtype=np.int64)[index]
    first = kinds[int(index[0])]
    notes = (f"zone {first} (logged)",)
    if len(set(kinds)) > 1:
        notes = (f"offsets change within the file ({', '.join(sorted(set(kinds)))}); held as UTC instants, "
                 f"zone {first} from the first row, the logged text kept beside",)
    return offsets, first, notes


#: Plain ISO 8601 date-times that Arrow's own (C++) timestamp parser reads, much faster than the regex path.
FAST_ISO = re.compile(r"^\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,9})?)?(?:Z|[+-]\d{2}:\d{2})?$")
_ZONE_TAIL = re.compile(r"(Z|[+-]\d{2}:\d{2})$")
_LO_NS = int(days_from_civil(np.array([YEAR_MIN]), np.array([1]), np.array([1]))[0]) * 86400 * _NS
_HI_NS = int(days_from_civil(np.array([YEAR_MAX + 1]), np.array([1]), np.array([1]))[0]) * 86400 * _NS


def _fast_iso(strings: pa.Array, header: str, stated: str | None) -> TimeFound | None:
    """The common case, parsed by Arrow; None sends the column to the regex path (which also explains errors)."""
    if not pc.match_substring_regex(strings[:64], FAST_ISO.pattern).to_numpy(zero_copy_only=False).all():
        return None
    tails = pc.utf8_slice_codeunits(strings, -6).dictionary_encode()
    texts = [(m.group(1) if m else "") for m in (_ZONE_TAIL.search(t) for t in tails.dictionary.to_pylist())]
    if len(set(t == "" for t in texts)) > 1:
        return None
    zoned = texts[0] != ""
    try:
        ns = pc.cast(strings, pa.timestamp("ns", tz="UTC" if zoned else None)).cast(pa.int64())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    ns = np.asarray(ns.to_numpy(zero_copy_only=False), dtype=np.int64)
    if ns.size and (ns.min() < _LO_NS or ns.max() >= _HI_NS):
        return None
    offsets, zone, notes = _zone_from(tails.indices.to_numpy(zero_copy_only=False), texts, header, stated)
    if not zoned and offsets.size:      # a stated zone: the wall clock becomes UTC instants
        ns = ns - offsets * _NS
    return TimeFound(TimeAxis("datetime", ns, zone=zone, columns=(header,)), "ISO 8601", notes)


def parse_datetimes(strings: pa.Array, header: str, stated_zone: str | None) -> TimeFound | None:
    """A datetime TimeAxis from one column of strings, or None when no form fits every row."""
    fast = _fast_iso(strings, header, stated_zone)
    if fast is not None:
        return fast
    for form, pattern in FORMS.items():
        g = _groups(strings, pattern)
        if g is None:
            continue
        notes: tuple[str, ...] = ()
        if form == "MM/DD/YYYY" and bool(np.any(g["M"] > 12)):
            g["M"], g["D"] = g["D"], g["M"]
            form = "DD/MM/YYYY"
            notes = ("day/month/year (a first field above 12 was found)",)
        elif form == "MM/DD/YYYY":
            notes = ("month/day/year (no first field above 12, so taken as US order)",)
        if bool(np.any(g["Y"] < 100)):
            notes += ("two-digit years: 69-99 are 1969-1999, 00-68 are 2000-2068 (as POSIX %y)",)
        return _finish(g, _clock_ns(g, header, strings), header, stated_zone, form, notes, (header,))
    return None


def parse_date_and_time(dates: pa.Array, times: pa.Array, headers: tuple[str, str],
                        stated_zone: str | None) -> TimeFound | None:
    """A datetime TimeAxis from a date column and a time-of-day column, or None when they do not fit."""
    tg = _groups(times, TIME_ONLY)
    if tg is None:
        return None
    for form, pattern in FORMS.items():
        g = _groups(dates, pattern)
        if g is None or bool(np.any(g["h"] + g["mi"] + g["s"] + g["f"])) or \
                any(t for t in g["z"].to_pylist()):
            continue
        if form == "MM/DD/YYYY" and bool(np.any(g["M"] > 12)):
            g["M"], g["D"] = g["D"], g["M"]
            form = "DD/MM/YYYY"
        g.pop("z")
        g.pop("ap", None)
        g.update({k: tg[k] for k in ("h", "mi", "s", "f", "ap")})
        ns = _clock_ns(g, headers[1], times)
        return _finish(g, ns, headers[1], stated_zone, f"{form} + hh:mm:ss in two columns", (), headers)
    return None


def _finish(g, ns, header, stated_zone, form, notes, columns) -> TimeFound:
    offsets, zone, znotes = _zone(g, header, stated_zone)
    if offsets.size:
        ns = ns - offsets * _NS
    return TimeFound(TimeAxis("datetime", ns, zone=zone, columns=tuple(columns)), form, notes + znotes)


def header_zone(header: str) -> str | None:
    """``"Date Time, GMT-05:00"`` -> ``"-05:00"``, ``"Time (UTC)"`` -> ``"Z"``: the zone a time header states."""
    m = HEADER_ZONE.search(header)
    if m is None:
        return "Z" if re.search(r"\b(?:UTC|GMT)\b", header, re.IGNORECASE) else None   # "Time (UTC)"
    return parse_zone(f"{m.group('sign')}{int(m.group('h')):02d}:{m.group('m') or '00'}")


def parse_seconds(values: np.ndarray, header: str) -> TimeFound:
    """A seconds TimeAxis (float64 bit for bit): epoch seconds (UTC) for epoch-named columns, else elapsed."""
    epoch = normal_name(header) in EPOCH_NAMES
    if epoch:
        lo, hi = days_from_civil(*(np.array([v]) for v in (YEAR_MIN, 1, 1))), days_from_civil(
            *(np.array([v]) for v in (YEAR_MAX + 1, 1, 1)))
        ok = (values >= lo[0] * 86400.0) & (values < hi[0] * 86400.0)
        if not ok.all():
            i = _first_bad(ok)
            raise BadInput(f"time column '{header}' row {i + 1}: {float(values[i])!r} s since 1970 is outside "
                           f"{YEAR_MIN}..{YEAR_MAX}; check that it holds seconds, not milliseconds")
    return TimeFound(TimeAxis("seconds", np.asarray(values, dtype=np.float64), zone="Z" if epoch else None,
                              columns=(header,)), "seconds since 1970 (UTC)" if epoch else "elapsed seconds")
