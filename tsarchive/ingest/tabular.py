"""Turn a table (CSV or Parquet, already read by pyarrow) into a Recording.

Shared by :mod:`.csvfile` and :mod:`.parquetfile`:

* an optional *first* time column -- recognised by its type (timestamp or
  date), by its name (``time``, ``t``, ``timestamp``, ``datetime``, ...,
  optionally followed by ``[unit]``) or by string values that parse as
  ISO 8601 -- holding datetimes or seconds;
* the sample rate inferred from that column when it is regular;
* every other column is a numeric channel (``name [unit]`` headers give
  units; Parquet may also store the unit in the field metadata ``b"unit"``).
"""

from __future__ import annotations

import re
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pyarrow as pa

from ..errors import BadInput
from ..recording import ChannelInfo, Recording
from .grid import detect_decimals

#: ``name [unit]`` -- the unit is whatever stands in the last square brackets.
HEADER_RE = re.compile(r"^(?P<name>.*?)\s*\[(?P<unit>[^\[\]]*)\]\s*$")

#: Names (case-insensitive, before any ``[unit]``) that mark a time column.
TIME_NAMES = frozenset({"time", "t", "timestamp", "datetime", "date_time", "date", "time_s", "elapsed"})

#: A seconds column is regular when every step is within this fraction of the median step.
SECONDS_REL_TOL = 1e-6

#: A datetime column is regular when every step is within this many seconds of the median step.
DATETIME_ABS_TOL = 1e-3

_NS = 1_000_000_000
_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)


def split_header(header: str) -> tuple[str, str]:
    """``"chamber_temp [degC]"`` -> ``("chamber_temp", "degC")``; no brackets -> ``(header, "")``."""
    m = HEADER_RE.match(header)
    if m is None or not m.group("name").strip():
        return header.strip(), ""
    return m.group("name").strip(), m.group("unit").strip()


def is_time_name(header: str) -> bool:
    """True for headers such as ``time``, ``Time [s]``, ``timestamp`` or ``DateTime``."""
    name = split_header(header)[0].lower().replace(" ", "_").replace("-", "_")
    return name in TIME_NAMES


def _parse_iso_strings(col: pa.ChunkedArray) -> np.ndarray | None:
    """int64 ns since the epoch (UTC; naive taken as UTC), or None if any value is not ISO 8601."""
    values = col.to_pylist()
    out = np.empty(len(values), dtype=np.int64)
    for i, v in enumerate(values):
        if v is None:
            return None
        try:
            dt = datetime.fromisoformat(v.strip().replace("z", "Z"))
        except ValueError:
            return None
        if dt.tzinfo is None:
            dt = dt.replace(tzinfo=timezone.utc)
        delta = dt - _EPOCH
        out[i] = (delta.days * 86400 + delta.seconds) * _NS + delta.microseconds * 1000
    return out


def _timestamps_ns(col: pa.ChunkedArray) -> np.ndarray:
    """int64 ns since the epoch (UTC) of a timestamp or date column."""
    t = col.type
    if pa.types.is_date(t):
        col = col.cast(pa.timestamp("s"))
        t = col.type
    try:
        col = col.cast(pa.timestamp("ns", tz=t.tz))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
        raise BadInput(f"time column cannot be held at nanosecond resolution ({exc}); check its dates") from exc
    return col.cast(pa.int64()).to_numpy(zero_copy_only=False)


def _time_values(name: str, col: pa.ChunkedArray) -> tuple[str, np.ndarray] | None:
    """``("ns", int64 epoch ns)`` or ``("s", float64 seconds)`` if ``col`` is a time column, else None."""
    t = col.type
    named = is_time_name(name)
    if pa.types.is_timestamp(t) or pa.types.is_date(t):
        if col.null_count:
            raise BadInput(f"time column '{name}' has empty cells; fill them or drop the column and pass --rate")
        return "ns", _timestamps_ns(col)
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        ns = _parse_iso_strings(col)
        if ns is not None:
            return "ns", ns
        if named:
            raise BadInput(f"time column '{name}' holds values that are neither ISO 8601 datetimes nor seconds; "
                           "fix them or pass --rate")
        return None
    if named and (pa.types.is_integer(t) or pa.types.is_floating(t)):
        if col.null_count:
            raise BadInput(f"time column '{name}' has empty cells; fill them or drop the column and pass --rate")
        return "s", col.cast(pa.float64()).to_numpy(zero_copy_only=False)
    return None


def _snap_rate(offsets: np.ndarray, tol: float) -> float:
    """The rate with fewest significant digits whose grid ``i / rate`` stays within ``tol`` of ``offsets``.

    ``offsets`` are seconds from the first sample.  Falls back to the
    reciprocal of the mean step when no rounded rate fits.
    """
    n = offsets.shape[0]
    raw = (n - 1) / float(offsets[-1])
    idx = np.arange(n, dtype=np.float64)
    for digits in range(1, 16):
        r = float(f"{raw:.{digits}g}")
        if abs(offsets[-1] - (n - 1) / r) > tol:
            continue
        if float(np.max(np.abs(offsets - idx / r))) <= tol:
            return r
    return raw


def infer_rate(kind: str, values: np.ndarray, name: str) -> float:
    """Sample rate of a regular time column (``kind`` "ns" or "s"); BadInput when irregular.

    Datetimes ("ns", epoch nanoseconds) are compared in integer nanoseconds,
    so a step exactly 1 ms off the median still counts as regular.
    """
    n = values.shape[0]
    if n < 2:
        raise BadInput(f"time column '{name}' has a single row, so no rate can be inferred; pass --rate HZ")
    if kind == "ns":
        steps_ns = np.diff(values)
        med_ns = int(np.median(steps_ns))
        dev = np.abs(steps_ns - med_ns)
        regular = med_ns > 0 and bool(np.all(steps_ns > 0)) and int(dev.max()) <= round(DATETIME_ABS_TOL * _NS)
        steps = steps_ns.astype(np.float64) / _NS
        offsets = (values - values[0]).astype(np.float64) / _NS
        med = med_ns / _NS
        snap_tol = min(DATETIME_ABS_TOL, 0.5 * med)
    else:
        steps = np.diff(values)
        offsets = values - values[0]
        med = float(np.median(steps))
        dev = np.abs(steps - med)
        regular = med > 0 and bool(np.all(steps > 0)) and float(dev.max()) <= SECONDS_REL_TOL * med
        snap_tol = SECONDS_REL_TOL * med
    if not regular:
        worst = float(steps[int(np.argmax(dev))])
        raise BadInput(f"time column '{name}' is irregular (median step {med:g} s, one step {worst:g} s); "
                       "resample it to a fixed rate or pass --rate HZ")
    return _snap_rate(offsets, snap_tol * (1 + 1e-9))


def _channel_array(name: str, col: pa.ChunkedArray) -> tuple[np.ndarray, str]:
    """(1-D numpy array, source dtype name) of a numeric column; nulls become NaN in a float column,
    and masked samples of an integer column (a ``numpy.ma.MaskedArray`` in the column's own dtype:
    a float64 copy would round integers above 2**53)."""
    t = col.type
    if pa.types.is_null(t):
        return np.full(len(col), np.nan), "float64"
    if pa.types.is_integer(t):
        if col.null_count:
            missing = col.is_null().to_numpy(zero_copy_only=False)
            values = col.fill_null(pa.scalar(0, type=t)).to_numpy(zero_copy_only=False)
            return np.ma.MaskedArray(values, mask=missing), values.dtype.name
        arr = col.to_numpy(zero_copy_only=False)
        return arr, arr.dtype.name
    if pa.types.is_floating(t):
        if col.null_count:
            col = col.fill_null(pa.scalar(np.nan, type=t))
        arr = col.to_numpy(zero_copy_only=False)
        return arr, arr.dtype.name
    raise BadInput(f"column '{name}' is not numeric ({t}); remove or convert it before packing")


def check_rate(rate: float | None) -> float | None:
    """``rate`` as a float, None kept; BadInput unless finite and positive."""
    if rate is None:
        return None
    r = float(rate)
    if not (np.isfinite(r) and r > 0):
        raise BadInput(f"rate {rate!r} is not a positive number of samples per second; pass e.g. --rate 1000")
    return r


def table_to_recording(table: pa.Table, path: Path, rate: float | None,
                       units: dict[str, str] | None = None) -> Recording:
    """Build a Recording from an Arrow table (see the module docstring for the rules).

    ``units`` maps column names to units found elsewhere (Parquet field
    metadata); they take precedence over ``[unit]`` in the name.  An explicit
    ``rate`` overrides (and skips checking) the time column; the start time
    still comes from a datetime column.
    """
    rate = check_rate(rate)
    units = units or {}
    if table.num_rows == 0:
        raise BadInput(f"{path.name}: has no data rows; give a non-empty recording")
    names = list(table.column_names)
    start: datetime | None = None
    first = 0
    if names:
        tv = _time_values(names[0], table.column(0))
        if tv is not None:
            kind, values = tv
            first = 1
            if kind == "ns":
                start = _ns_to_datetime(int(values[0]))
            if rate is None:
                rate = infer_rate(kind, values, names[0])
    if rate is None:
        raise BadInput(f"{path.name}: has no time column; it needs --rate HZ")
    if first >= len(names):
        raise BadInput(f"{path.name}: has no data columns besides time; give at least one channel")
    arrays, channels, seen = [], [], set()
    for j in range(first, len(names)):
        header = names[j]
        name, unit = split_header(header)
        unit = units.get(header, unit)
        if name in seen:
            raise BadInput(f"{path.name}: channel name '{name}' appears twice; rename one of the columns")
        seen.add(name)
        arr, dtype_name = _channel_array(header, table.column(j))
        arrays.append(arr)
        channels.append(ChannelInfo(name=name, unit=unit, dtype=dtype_name,
                                    decimals=detect_decimals(arr, dtype_name)))
    return Recording.from_columns(arrays, rate=rate, channels=channels, start=start, source=path)


def _ns_to_datetime(ns: int) -> datetime:
    """UTC datetime of epoch nanoseconds (sub-microsecond digits are dropped)."""
    return _EPOCH + timedelta(microseconds=ns // 1000)
