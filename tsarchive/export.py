"""Write channels to ``.npy``, ``.csv`` or ``.parquet`` -- the inverse of :mod:`tsarchive.ingest`.

:func:`write_table` is atomic: it writes a hidden temporary file in the
target folder and renames it over the target (``os.replace``) only when
complete, so an error or an interruption never leaves a partial file (an
existing target is kept as it was).  An existing target is overwritten on
success; refusing to overwrite is the caller's decision.

Formats:

``.npy``
    A 2-D array (samples x channels), or 1-D when ``shape_1d`` and there is
    one channel.  dtype: the channels' dtype when they share one, int64 when
    all are integers, float64 otherwise.  Names, units and times are not
    stored (reading it back needs ``--rate``).
``.csv``
    A header row, then one row per sample.  The first column is the time,
    exactly as logged (``times``) or as ``start + i / rate``: ISO 8601
    datetimes to the coarsest of s/ms/us/ns that is exact, naive when the
    source's were (``2024-03-05T14:00:00``), else with their offset
    (``…+01:00``) or ``Z``; seconds (``time [s]``) as Python's ``repr``.
    Text columns (``extra``) go back where they stood in the source row
    (``positions``), else after the channels; a null is an empty cell, an
    empty string ``""``.  The recording's notes come first, one a line, as
    they stood before the logger's header.
    Channels are headed ``name [unit]`` (plain ``name`` without a unit).
    Floats are written with Python's ``repr`` -- the shortest text that
    parses back to the same double -- and ``nan``, ``inf``, ``-inf``;
    integers as integers.
``.parquet``
    zstd-compressed; a first column ``time`` (``timestamp[ns]`` without a
    zone for naive times, else with ``UTC`` or the offset; float64 seconds
    with unit ``s`` for a seconds axis), then one column per channel in its
    own dtype, the unit in the field metadata ``b"unit"``; text columns as
    for CSV, in their Arrow types; notes in the file metadata ``b"notes"``.
"""

from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

from .errors import BadInput
from .store.timeaxis import Times

#: Extensions write_table understands.
FORMATS = (".npy", ".csv", ".parquet")

#: Rows formatted at a time when writing CSV.
CSV_CHUNK_ROWS = 65_536


__all__ = ["FORMATS", "TextParts", "write_table"]


@dataclass(frozen=True, eq=False)
class TextParts:
    """What a recording carries besides numbers: preamble ``notes`` (CSV: the lines before the header,
    as found; Parquet: the file metadata ``b"notes"``, a JSON list) and text columns ``extra`` (a
    row-aligned pyarrow Table) with their ``positions`` among the source's columns other than time."""

    notes: tuple[str, ...] = ()
    extra: "pa.Table | None" = None
    positions: tuple[int | None, ...] = ()


def write_table(path: str | Path, columns: dict[str, np.ndarray], *, rate: float, start: datetime | None,
                t0: float = 0.0, units: dict[str, str] | None = None, shape_1d: bool = False,
                times: Times | None = None, text: TextParts | None = None) -> Path:
    """Write ``columns`` (name -> 1-D array, all the same length) to ``path``; return the path.

    ``times`` are the rows' exact times (:class:`tsarchive.store.timeaxis.Times`);
    without them the times are ``start + i / rate`` from ``t0``: ``rate`` is
    samples per second, ``start`` the recording's start (naive stays naive)
    or None, ``t0`` the time of the first row in seconds from the start
    (non-zero for an excerpt).  ``units`` maps channel names to units;
    ``text`` holds notes and text columns.  See the module docstring for each format.  Raises
    :class:`BadInput` for an unknown extension, a missing folder, or
    columns that are empty, of unequal length or not numeric.
    """
    p = Path(path)
    ext = p.suffix.lower()
    if ext not in FORMATS:
        raise BadInput(f"{p.name}: cannot write format '{ext or '(none)'}'; use one of {', '.join(FORMATS)}")
    if not p.parent.is_dir():
        raise BadInput(f"{p.parent}: folder does not exist; create it first or choose another output path")
    cols = _check_columns(columns)
    if not (np.isfinite(rate) and rate > 0):
        raise BadInput(f"rate {rate!r} is not a positive number of samples per second; pass e.g. --rate 1000")
    units = dict(units or {})
    n = next(iter(cols.values())).shape[0]
    if times is None:
        times = _rule_times(n, float(rate), start, float(t0))
    text = text or TextParts()
    if len(times.values) != n or (text.extra is not None and text.extra.num_rows != n):
        raise BadInput(f"the time column or text columns do not have {n} rows; give one row per sample")
    order = _order(list(cols), text.extra, text.positions)
    with _atomic(p) as tmp:
        if ext == ".npy":
            _write_npy(tmp, cols, shape_1d)
        elif ext == ".csv":
            _write_csv(tmp, cols, times, units, text, order)
        else:
            _write_parquet(tmp, cols, times, units, text, order)
    return p


def _rule_times(n: int, rate: float, start: datetime | None, t0: float) -> Times:
    """Times ``start + t0 + i / rate`` by the archive's rate rule (store/timeaxis.py)."""
    from .store.timeaxis import DATETIME, SECONDS, datetime_ns, rule, zone_of
    first = int(round(t0 * rate))
    k = np.arange(first, first + n)
    if start is None:
        return Times(SECONDS, rule(k, rate, SECONDS), None, first, "time")
    return Times(DATETIME, datetime_ns(start) + rule(k, rate, DATETIME), zone_of(start), first, "time")


def _order(names: list[str], extra, positions) -> list[tuple[str, str]]:
    """Output columns after the time: ("ch", name) and ("text", name), each text column at its position
    among the source's columns other than time (0-based) where known, else after the channels."""
    out = [("ch", n) for n in names]
    if extra is None:
        return out
    pos = list(positions) + [None] * (extra.num_columns - len(positions))
    placed = sorted((p, i) for i, p in enumerate(pos) if p is not None)
    for p, i in placed:
        out.insert(min(p, len(out)), ("text", extra.column_names[i]))
    out += [("text", extra.column_names[i]) for i, p in enumerate(pos) if p is None]
    return out


def _check_columns(columns: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    if not columns:
        raise BadInput("no channels to write; select at least one channel")
    out, n = {}, None
    for name, arr in columns.items():
        a = arr if isinstance(arr, np.ma.MaskedArray) else np.asarray(arr)   # masked: missing samples
        if a.ndim != 1 or a.dtype.kind not in "fiu":
            raise BadInput(f"channel '{name}' is not a 1-D numeric array ({a.dtype}, {a.ndim}-D); pass one column each")
        if n is not None and a.shape[0] != n:
            raise BadInput(f"channel '{name}' has {a.shape[0]} samples, others {n}; give columns of equal length")
        n = a.shape[0]
        out[str(name)] = a
    if n == 0:
        raise BadInput("the columns have no samples; select a non-empty time range")
    return out


def _common_dtype(cols: dict[str, np.ndarray]) -> np.dtype:
    dtypes = {a.dtype.newbyteorder("=") for a in cols.values()}
    if len(dtypes) == 1:
        return dtypes.pop()
    if all(d.kind in "iu" for d in dtypes):
        return np.dtype(np.int64)
    return np.dtype(np.float64)


@contextmanager
def _atomic(path: Path) -> Iterator[str]:
    """Yield a temporary path beside ``path``; rename it over ``path`` on success, delete it on failure."""
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    os.close(fd)
    try:
        yield tmp
        with open(tmp, "rb+") as f:
            os.fsync(f.fileno())
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _write_npy(tmp: str, cols: dict[str, np.ndarray], shape_1d: bool) -> None:
    dtype = _common_dtype(cols)
    for name, a in cols.items():
        if isinstance(a, np.ma.MaskedArray) and np.ma.getmaskarray(a).any():
            raise BadInput(f"channel '{name}' has missing samples, which .npy cannot hold; export to .csv or "
                           ".parquet")
        if dtype.kind == "f" and a.dtype.kind in "iu" and len(a) and \
                not (-(2**53) <= int(a.min()) and int(a.max()) <= 2**53):
            raise BadInput(f"channel '{name}' holds integers beyond 2**53 that one float64 .npy array would "
                           "round; export to .csv or .parquet, or that channel on its own")
    arrays = list(cols.values())
    if shape_1d and len(arrays) == 1:
        data = np.ascontiguousarray(arrays[0], dtype=dtype)
    else:
        data = np.empty((arrays[0].shape[0], len(arrays)), dtype=dtype)
        for j, a in enumerate(arrays):
            data[:, j] = a
    with open(tmp, "wb") as f:
        np.save(f, data, allow_pickle=False)


def _iso_unit(ns: np.ndarray) -> str:
    """Coarsest of s/ms/us/ns that holds every time exactly (times are never rounded)."""
    for unit, div in (("s", 10**9), ("ms", 10**6), ("us", 10**3)):
        if not np.any(ns % div):
            return unit
    return "ns"


def _zone_ns(zone: str | None) -> int:
    """The zone's offset from UTC in ns (0 for naive and Z)."""
    if zone is None or zone == "Z":
        return 0
    from .store.timeaxis import parse_zone
    return parse_zone(zone).utcoffset(None) // timedelta(microseconds=1) * 1000


def _iso_strings(ns: np.ndarray, unit: str, zone: str | None) -> list[str]:
    """ISO 8601 strings of epoch ns, exact in ``unit``: wall clock plus the zone as logged (none if naive)."""
    scale = {"s": 10**9, "ms": 10**6, "us": 10**3, "ns": 1}[unit]
    local = (ns + _zone_ns(zone)) // scale
    text = np.datetime_as_string(local.astype(f"datetime64[{unit}]"), unit=unit).tolist()
    return text if zone is None else [t + zone for t in text]


def _time_cells(times: Times, lo: int, hi: int, unit: str) -> list[str]:
    if times.kind == "seconds":
        return _csv_text(times.values[lo:hi])
    return _iso_strings(times.values[lo:hi], unit, times.zone)


def _text_cells(col) -> list[str]:
    """CSV cells of a text column: a null is an empty cell, an empty string is ``""`` (RFC 4180 quoting)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):
        col = pc.cast(col, pa.string())
    out = []
    for v in col.to_pylist():
        if v is None:
            out.append("")
        elif v == "" or any(c in v for c in ',"\r\n') or v != v.strip():
            out.append('"' + v.replace('"', '""') + '"')
        else:
            out.append(v)
    return out


def _header(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def _csv_text(values: np.ndarray) -> list[str]:
    """Cells for one column chunk: repr for floats (exact round trip), str for ints, an empty cell
    for a missing sample."""
    if isinstance(values, np.ma.MaskedArray):
        gone = np.ma.getmaskarray(values)
        cells = _csv_text(np.ma.getdata(values))
        return [("" if g else c) for c, g in zip(cells, gone.tolist())]
    if values.dtype.kind == "f":
        return list(map(float.__repr__, values.astype(np.float64, copy=False).tolist()))
    return list(map(str, values.tolist()))


def _time_header(times: Times) -> str:
    if times.kind == "seconds" and times.name == "time":
        return "time [s]"
    return times.name


def _write_csv(tmp: str, cols: dict[str, np.ndarray], times: Times, units: dict[str, str], text: TextParts,
               order: list[tuple[str, str]]) -> None:
    extra = text.extra
    n = next(iter(cols.values())).shape[0]
    head = io.StringIO()
    csv.writer(head, lineterminator="\n").writerow(
        [_time_header(times)] + [_header(k, units.get(k, "")) if c == "ch" else k for c, k in order])
    unit = _iso_unit(times.values) if times.kind == "datetime" else ""
    with open(tmp, "w", encoding="utf-8", newline="\n") as f:
        f.write("".join(line + "\n" for line in text.notes))        # the preamble, as found
        f.write(head.getvalue())
        for lo in range(0, n, CSV_CHUNK_ROWS):
            hi = min(n, lo + CSV_CHUNK_ROWS)
            cells = [_time_cells(times, lo, hi, unit)] + [
                _csv_text(cols[k][lo:hi]) if c == "ch" else _text_cells(extra.column(k).slice(lo, hi - lo))
                for c, k in order]
            f.write("".join(",".join(row) + "\n" for row in zip(*cells)))


def _write_parquet(tmp: str, cols: dict[str, np.ndarray], times: Times, units: dict[str, str], text: TextParts,
                   order: list[tuple[str, str]]) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    extra = text.extra
    if times.kind == "datetime":
        time_arr = pa.array(times.values, type=pa.timestamp("ns", tz=None if times.zone is None else
                                                            ("UTC" if times.zone == "Z" else times.zone)))
        fields = [pa.field(times.name, time_arr.type)]
    else:
        time_arr = pa.array(np.asarray(times.values, dtype=np.float64))
        fields = [pa.field(times.name, pa.float64(), metadata={b"unit": b"s"})]
    arrays = [time_arr]
    for kind, name in order:
        if kind == "text":
            arrays.append(extra.column(name))
            fields.append(extra.schema.field(name))
            continue
        a = cols[name]
        arr = pa.array(np.ascontiguousarray(np.ma.getdata(a), dtype=a.dtype.newbyteorder("=")),
                       mask=np.ma.getmaskarray(a) if isinstance(a, np.ma.MaskedArray) else None)  # nulls
        unit = units.get(name, "")
        fields.append(pa.field(name, arr.type, metadata={b"unit": unit.encode("utf-8")} if unit else None))
        arrays.append(arr)
    meta = {b"notes": json.dumps(list(text.notes), ensure_ascii=False).encode("utf-8")} if text.notes else None
    table = pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=meta))
    pq.write_table(table, tmp, compression="zstd", row_group_size=1 << 20)
