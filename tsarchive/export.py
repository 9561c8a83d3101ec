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
    A header row, then one row per sample.  The first column is the time:
    ``time`` with ISO 8601 UTC datetimes (``2031-04-02T08:00:00.250Z``,
    to the coarsest of s/ms/us/ns that is exact, else us) when ``start`` is
    known, else ``time [s]`` with seconds from the recording start.
    Channels are headed ``name [unit]`` (plain ``name`` without a unit).
    Floats are written with Python's ``repr`` -- the shortest text that
    parses back to the same double -- and ``nan``, ``inf``, ``-inf``;
    integers as integers.
``.parquet``
    zstd-compressed; a first column ``time`` (``timestamp[ns, UTC]`` when
    ``start`` is known, else float64 seconds with unit ``s``), then one
    column per channel in its own dtype, the unit in the field metadata
    ``b"unit"``.
"""

from __future__ import annotations

import csv
import io
import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

from .errors import BadInput

#: Extensions write_table understands.
FORMATS = (".npy", ".csv", ".parquet")

#: Rows formatted at a time when writing CSV.
CSV_CHUNK_ROWS = 65_536

_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)

__all__ = ["FORMATS", "write_table"]


def write_table(path: str | Path, columns: dict[str, np.ndarray], *, rate: float, start: datetime | None,
                t0: float = 0.0, units: dict[str, str] | None = None, shape_1d: bool = False) -> Path:
    """Write ``columns`` (name -> 1-D array, all the same length) to ``path``; return the path.

    ``rate`` is samples per second, ``start`` the recording's start (UTC;
    naive is taken as UTC) or None, ``t0`` the time of the first row in
    seconds from the start (non-zero for an excerpt), ``units`` maps channel
    names to units.  See the module docstring for each format.  Raises
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
    if start is not None and start.tzinfo is None:
        start = start.replace(tzinfo=timezone.utc)
    with _atomic(p) as tmp:
        if ext == ".npy":
            _write_npy(tmp, cols, shape_1d)
        elif ext == ".csv":
            _write_csv(tmp, cols, float(rate), start, float(t0), units)
        else:
            _write_parquet(tmp, cols, float(rate), start, float(t0), units)
    return p


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


def _start_ns(start: datetime) -> int:
    return ((start - _EPOCH) // timedelta(microseconds=1)) * 1000


def _times_ns(n: int, rate: float, start: datetime, t0: float) -> np.ndarray:
    offsets = t0 + np.arange(n, dtype=np.float64) / rate
    return _start_ns(start) + np.round(offsets * 1e9).astype(np.int64)


def _iso_unit(ns: np.ndarray, rate: float) -> str:
    """Coarsest of s/ms/us that holds every time exactly; else us (ns above 100 kHz)."""
    for unit, div in (("s", 10**9), ("ms", 10**6), ("us", 10**3)):
        if not np.any(ns % div):
            return unit
    return "us" if rate <= 1e5 else "ns"


def _iso_strings(ns: np.ndarray, unit: str) -> list[str]:
    """ISO 8601 UTC strings (``...Z``) of epoch nanoseconds, rounded to ``unit``."""
    scale = {"s": 10**9, "ms": 10**6, "us": 10**3, "ns": 1}[unit]
    rounded = (ns + scale // 2) // scale  # round half up to the unit
    return np.datetime_as_string(rounded.astype(f"datetime64[{unit}]"), timezone="UTC").tolist()


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


def _write_csv(tmp: str, cols: dict[str, np.ndarray], rate: float, start: datetime | None, t0: float,
               units: dict[str, str]) -> None:
    n = next(iter(cols.values())).shape[0]
    head = io.StringIO()
    csv.writer(head, lineterminator="\n").writerow(
        ["time" if start is not None else "time [s]"] + [_header(k, units.get(k, "")) for k in cols])
    ns = _times_ns(n, rate, start, t0) if start is not None else None
    unit = _iso_unit(ns, rate) if ns is not None else ""
    with open(tmp, "w", encoding="utf-8", newline="\n") as f:
        f.write(head.getvalue())
        for lo in range(0, n, CSV_CHUNK_ROWS):
            hi = min(n, lo + CSV_CHUNK_ROWS)
            if ns is not None:
                times = _iso_strings(ns[lo:hi], unit)
            else:
                times = _csv_text(t0 + np.arange(lo, hi, dtype=np.float64) / rate)
            cells = [times] + [_csv_text(a[lo:hi]) for a in cols.values()]
            f.write("".join(",".join(row) + "\n" for row in zip(*cells)))


def _write_parquet(tmp: str, cols: dict[str, np.ndarray], rate: float, start: datetime | None, t0: float,
                   units: dict[str, str]) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    n = next(iter(cols.values())).shape[0]
    if start is not None:
        time_arr = pa.array(_times_ns(n, rate, start, t0), type=pa.timestamp("ns", tz="UTC"))
        fields = [pa.field("time", time_arr.type)]
    else:
        time_arr = pa.array(t0 + np.arange(n, dtype=np.float64) / rate)
        fields = [pa.field("time", pa.float64(), metadata={b"unit": b"s"})]
    arrays = [time_arr]
    for name, a in cols.items():
        arr = pa.array(np.ascontiguousarray(np.ma.getdata(a), dtype=a.dtype.newbyteorder("=")),
                       mask=np.ma.getmaskarray(a) if isinstance(a, np.ma.MaskedArray) else None)  # nulls
        unit = units.get(name, "")
        fields.append(pa.field(name, arr.type, metadata={b"unit": unit.encode("utf-8")} if unit else None))
        arrays.append(arr)
    table = pa.Table.from_arrays(arrays, schema=pa.schema(fields))
    pq.write_table(table, tmp, compression="zstd", row_group_size=1 << 20)
