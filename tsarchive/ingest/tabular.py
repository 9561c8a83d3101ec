"""Turn a table's columns (CSV text or typed Parquet) into a Recording, and say what was found.

Shared by :mod:`.csvfile` and :mod:`.parquetfile`:

* the **time column** is the first of the first three columns that is
  timestamp/date typed, time-named (``time``, ``Elapsed (s)``, ``Datum``,
  ...) or whose text parses as dates and times (:mod:`.timeparse`); a date
  column followed by a time-of-day column is one time axis.  It is kept
  exactly in ``Recording.time``; ``rate`` is its nominal rate
  (:mod:`.timing`).  ``--rate`` beside it must agree with it;
  ``without_time`` drops it (and then needs ``rate``);
* every other **numeric** column is a channel (``name [unit]`` or
  ``name (unit)`` headers give units; Parquet may store the unit in the
  field metadata ``b"unit"``);
* **text** columns (status, alarms, notes) are kept in ``Recording.extra``,
  or left out with ``skip_text``.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import BadInput
from ..recording import ChannelInfo, Recording, TimeAxis
from .columns import ColumnReport, as_text, count_sentinels, split_header, text_to_numbers, typed_to_numbers
from .grid import detect_decimals
from .options import ReadOptions, check_rate, zone_seconds
from .timeparse import (DATE_NAMES, TIME_ONLY, TimeFound, header_zone, is_time_name, normal_name,
                        parse_date_and_time, parse_datetimes, parse_seconds)
from .timing import Timing, check_rate_beside, check_span, timing_of

__all__ = ["Detected", "build_recording", "split_header", "is_time_name", "check_rate"]

_EPOCH = datetime(1970, 1, 1)
TIME_SEARCH = 3     # the time column is looked for among this many leading columns


@dataclass(frozen=True)
class Detected:
    """A Recording plus what reading found: per-column reports, timing, and the text dialect."""

    recording: Recording
    columns: tuple[ColumnReport, ...]
    timing: Timing | None = None
    time_form: str = ""
    time_notes: tuple[str, ...] = ()
    encoding: str = ""
    delimiter: str = ""
    decimal: str = ""
    preamble: tuple[str, ...] = ()
    #: how the timing is known when there is no time column (a format's header, or the rate given)
    timing_text: str = ""


def _is_text(col: pa.ChunkedArray) -> bool:
    return pa.types.is_string(col.type) or pa.types.is_large_string(col.type)


def _strings(col: pa.ChunkedArray) -> pa.Array:
    return col.combine_chunks().cast(pa.string())


def _typed_time(header: str, col: pa.ChunkedArray) -> TimeFound:
    t = col.type
    if pa.types.is_date(t):
        col, t = col.cast(pa.timestamp("s")), pa.timestamp("s")
    tz = t.tz
    try:
        ns = col.cast(pa.timestamp("ns", tz=tz)).cast(pa.int64()).to_numpy(zero_copy_only=False)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
        raise BadInput(f"time column '{header}' cannot be held at nanosecond resolution ({exc}); "
                       "check its dates") from None
    zone = None if tz is None else ("Z" if tz.upper() in ("UTC", "Z", "+00:00", "ETC/UTC") else tz)
    notes = ()
    if zone is not None and zone != "Z" and not (zone[:1] in "+-" and len(zone) == 6):
        notes = (f"zone {zone} (a named zone): held as UTC instants, zone Z",)
        zone = "Z"
    return TimeFound(TimeAxis("datetime", np.asarray(ns, dtype=np.int64), zone=zone, columns=(header,)),
                     f"timestamp[{t.unit}]", notes)


def _try_time(headers, cols, j: int, opts: ReadOptions, decimal: str) -> tuple[TimeFound, int] | None:
    """(the time axis, how many columns it takes) when column ``j`` starts one, else None.

    Dates and times are recognised by their text in any of the leading
    columns (a record number may come first); a column is taken as time by
    its *name* alone (seconds, or an error when its text is no time) only
    when it is the first column, so that a channel named ``T`` further
    right stays a channel.
    """
    header, col = headers[j], cols[j]
    if pa.types.is_timestamp(col.type) or pa.types.is_date(col.type):
        if col.null_count:
            raise BadInput(f"time column '{header}' has empty cells; fill them in")
        return _typed_time(header, col), 1
    named = j == 0 and is_time_name(header)
    if opts.zone is None and header_zone(header) is not None:
        opts = replace(opts, zone=header_zone(header))
    if _is_text(col):
        s = _strings(col)
        blank = pc.fill_null(pc.equal(pc.utf8_trim_whitespace(s), ""), True)
        if pc.any(blank).as_py():
            if named:
                first = int(np.argmax(blank.to_numpy(zero_copy_only=False)))
                raise BadInput(f"time column '{header}' row {first + 1} is empty; fill in every time")
            return None
        if j + 1 < len(cols) and _is_text(cols[j + 1]) and (normal_name(header) in DATE_NAMES
                                                             or is_time_name(header)):
            both = parse_date_and_time(s, _strings(cols[j + 1]), (header, headers[j + 1]), opts.zone)
            if both is not None:
                return both, 2
        found = parse_datetimes(s, header, opts.zone)
        if found is not None:
            return found, 1
        if named and pc.all(pc.match_substring_regex(s, TIME_ONLY.pattern)).as_py():
            raise BadInput(f"time column '{header}' holds times of day ({s[0].as_py()!r}) without dates; "
                           "export the date too (a date column beside it will do)")
        if named:
            try:
                text = pc.replace_substring(s, ",", ".") if decimal == "," else s
                values = np.asarray(pc.cast(pc.utf8_trim_whitespace(text), pa.float64()).to_numpy(zero_copy_only=False))
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                raise BadInput(f"time column '{header}' holds {s[0].as_py()!r}, which is neither a date and time "
                               "(ISO 8601, dd.mm.yyyy hh:mm:ss, MM/DD/YYYY hh:mm:ss) nor seconds; fix that column"
                               ) from None
            return _seconds(header, values), 1
        return None
    if named and (pa.types.is_integer(col.type) or pa.types.is_floating(col.type)):
        if col.null_count:
            raise BadInput(f"time column '{header}' has empty cells; fill them in")
        return _seconds(header, col.cast(pa.float64()).to_numpy(zero_copy_only=False)), 1
    return None


def _seconds(header: str, values: np.ndarray) -> TimeFound:
    if not np.all(np.isfinite(values)):
        i = int(np.argmin(np.isfinite(values)))
        raise BadInput(f"time column '{header}' row {i + 1} is {float(values[i])!r}; fill in every time")
    return parse_seconds(values, header)


def _find_time(headers, cols, opts: ReadOptions, decimal: str) -> tuple[TimeFound | None, list[int]]:
    for j in range(min(TIME_SEARCH, len(cols))):
        got = _try_time(headers, cols, j, opts, decimal)
        if got is not None:
            return got[0], list(range(j, j + got[1]))
    return None, []


def _start(axis: TimeAxis | None) -> datetime | None:
    """The first time as a datetime: naive for naive times, aware (with the logged offset) otherwise."""
    if axis is None:
        return None
    if axis.kind == "seconds":
        if axis.zone != "Z":
            return None
        return datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(seconds=float(axis.values[0]))
    wall = _EPOCH + timedelta(microseconds=int(axis.values[0]) // 1000)
    if axis.zone is None:
        return wall
    off = timezone(timedelta(seconds=zone_seconds(axis.zone)))
    return wall.replace(tzinfo=timezone.utc).astimezone(off)


def build_recording(path: Path, headers: list[str], cols: list[pa.ChunkedArray], opts: ReadOptions,
                    units: dict[str, str] | None = None, text_source: bool = False, decimal: str = ".",
                    notes: tuple[str, ...] = ()) -> Detected:
    """A :class:`Detected` from named columns (see the module docstring for the rules)."""
    units = units or {}
    n = len(cols[0]) if cols else 0
    if n == 0:
        raise BadInput(f"{path.name}: has no data rows; give a non-empty recording")
    found, time_idx = _find_time(headers, cols, opts, decimal)
    reports: dict[int, ColumnReport] = {}
    timing = None
    dropped = None      # with without_time, the time column is left out; only its first time (the start) is kept
    if found is not None and opts.without_time:
        for j in time_idx:
            reports[j] = ColumnReport(headers[j], "skipped")
        found, dropped = None, found
    rate = opts.rate
    if found is not None and not (n == 1 and rate is not None):   # one row: its time, and the rate given
        timing = timing_of(found.axis, "+".join(found.axis.columns))
        if rate is not None:
            check_rate_beside(rate, timing, "+".join(found.axis.columns))
        rate = timing.rate
    if found is not None:
        for j in time_idx:
            reports[j] = ColumnReport(headers[j], "time", name=headers[j], dtype=found.form)
    if rate is None:
        raise BadInput(f"{path.name}: has no time column; it needs --rate HZ" if not time_idx else
                       f"{path.name}: --without-time leaves no timing; give the sample rate with --rate HZ")
    arrays, channels, extra, seen = [], [], {}, set()
    for j, header in enumerate(headers):
        if j in reports:
            continue
        col = cols[j]
        name, unit = split_header(header)
        unit = units.get(header, unit)
        got = (text_to_numbers(col, decimal, opts.text_tokens) if text_source and _is_text(col)
               else typed_to_numbers(header, col))
        if got is None:
            if opts.skip_text:
                reports[j] = ColumnReport(header, "skipped", name=name)
                continue
            _claim(path, header, seen)
            extra[header] = as_text(header, col, empty_is_null=text_source)
            reports[j] = ColumnReport(header, "text", name=header, dtype="string",
                                      missing=int(extra[header].null_count))
            continue
        arr, dtype_name, n_missing = got[0], got[1], got[2]
        tokens = got[3] if len(got) > 3 else ()
        _claim(path, name, seen)
        info = ChannelInfo(name=name, unit=unit, dtype=dtype_name, decimals=detect_decimals(arr, dtype_name),
                           sentinels=opts.sentinels)
        arrays.append(arr)
        channels.append(info)
        reports[j] = ColumnReport(header, "channel", name=name, unit=unit, dtype=dtype_name, decimals=info.decimals,
                                  missing=n_missing, tokens=tokens, sentinels=count_sentinels(arr, opts.sentinels))
    if not channels:
        raise BadInput(f"{path.name}: has no numeric column to pack (columns: {', '.join(headers)}"
                       f"{_first_text(extra, decimal, opts)}); check the delimiter and the header")
    axis = None if found is None else found.axis
    if found is not None and any(t.startswith("offsets change") for t in found.notes):
        for j in time_idx:   # the offsets as logged are kept beside the UTC instants
            extra.setdefault(headers[j], as_text(headers[j], cols[j], empty_is_null=False))
    start = _start(axis if dropped is None else dropped.axis)
    check_span(start, n, rate)
    table = _text_table(extra, headers, reports)
    rec = Recording.from_columns(arrays, rate=float(rate), channels=channels, start=start, source=path,
                                 time=axis, notes=tuple(notes), extra=table)
    return Detected(recording=rec, columns=tuple(reports[j] for j in sorted(reports)), timing=timing,
                    time_form="" if found is None else found.form, time_notes=() if found is None else found.notes)


def _text_table(extra: dict, headers: list[str], reports: dict) -> pa.Table | None:
    """The text columns as a table; each field's metadata ``b"position"`` is its place among the source's
    kept columns other than time (channels and text), so an export puts it back where it stood."""
    if not extra:
        return None
    kept = [headers[j] for j in sorted(reports) if reports[j].role in ("channel", "text")]
    fields = [pa.field(h, col.type, metadata={b"position": str(kept.index(h)).encode()} if h in kept else None)
              for h, col in extra.items()]
    return pa.table(list(extra.values()), schema=pa.schema(fields))


def _first_text(extra: dict, decimal: str, opts: ReadOptions) -> str:
    """``; 'x' row 2 holds '"2'``: the first cell that kept a column from being numeric (for the error)."""
    from .columns import MISSING_TOKENS
    skip = set(MISSING_TOKENS) | set(opts.text_tokens)
    for header, col in extra.items():
        for i, v in enumerate(col.to_pylist()):
            t = (v or "").strip()
            if t in skip:
                continue
            try:
                float(t.replace(",", ".") if decimal == "," else t)
            except ValueError:
                return f"; '{header}' row {i + 1} holds {t[:40]!r}"
    return ""


def _claim(path: Path, name: str, seen: set) -> None:
    if name in seen:
        raise BadInput(f"{path.name}: column name '{name}' appears twice; rename one of the columns")
    seen.add(name)
