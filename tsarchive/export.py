"""Write channels to ``.npy``, ``.csv`` or ``.parquet`` -- the inverse of :mod:`tsarchive.ingest`.

:func:`write_table` is atomic: it writes a hidden temporary file in the
target folder and moves it into place only when complete, so an error or
an interruption never leaves a partial file (an existing target is kept as
it was).  Whether a target may be written at all (not the source, not in an
archive folder) is :mod:`tsarchive.export_range`'s decision.

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
    Values are written by :func:`tsarchive.export_text.cells` with each
    channel's :class:`~tsarchive.export_text.CellFormat`: the shortest text
    true to the channel (its logged decimals, the shortest float32 text for
    float32), missing values as empty cells.  With an ``origin``, the file
    starts with ``#`` comment lines saying it is a reconstruction, from
    which archive, and within which ±ε.
``.parquet``
    zstd-compressed; a first column ``time`` (``timestamp[ns, UTC]`` when
    ``start`` is known, else float64 seconds with unit ``s``), then one
    column per channel in its own dtype, the unit in the field metadata
    ``b"unit"``.  With an ``origin``, the file's key-value metadata holds it
    as JSON under ``b"tsarchive.origin"``.

With an ``origin``, an ``.npy`` gets a sidecar ``NAME.npy.origin.json``
(the same JSON), written and committed together with it.

An existing target is replaced only with ``replace=True``; otherwise the
finished file is linked into place, which fails if a file of that name
appeared meanwhile (no check-then-write race).
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
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

from .errors import BadInput
from .export_text import CellFormat, cells

#: Extensions write_table understands.
FORMATS = (".npy", ".csv", ".parquet")

#: Rows formatted at a time when writing CSV.
CSV_CHUNK_ROWS = 65_536

#: Parquet key-value metadata key (and JSON content of an .npy sidecar) marking a reconstruction.
ORIGIN_KEY = b"tsarchive.origin"

#: How the first line of a CSV export begins (the ingest reader skips the "#" lines of such a file).
CSV_MARK = "# reconstruction written by tsarchive"

#: Suffix added to an .npy's name for its sidecar.
SIDECAR_SUFFIX = ".origin.json"

_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)

__all__ = ["FORMATS", "ORIGIN_KEY", "SIDECAR_SUFFIX", "Origin", "sidecar_path", "write_table"]


@dataclass(frozen=True)
class Origin:
    """Where an exported file came from: it is a reconstruction, not the original recording.

    ``bounds`` holds ``(channel, eps, unit)`` per written channel (``eps`` 0
    for a channel kept exactly).
    """

    archive: str
    source: str
    source_sha256: str
    tool_version: str
    bounds: tuple[tuple[str, float, str], ...]

    @property
    def lossy(self) -> bool:
        return any(eps > 0 for _, eps, _ in self.bounds)

    def to_dict(self) -> dict:
        return {"reconstruction": True, "archive": self.archive, "source": self.source,
                "source_sha256": self.source_sha256, "tool_version": self.tool_version,
                "channels": [{"name": n, "eps": e, "unit": u} for n, e, u in self.bounds]}

    def comment_lines(self) -> list[str]:
        """The ``#`` lines heading a CSV export."""
        within = "; ".join(f"{n} exact" if e == 0 else f"{n} ±{e:g}{' ' + u if u else ''}"
                           for n, e, u in self.bounds)
        return [f"{CSV_MARK} {self.tool_version} from archive {self.archive}",
                f"# original recording {self.source or '(unnamed)'}, SHA-256 {self.source_sha256 or '(unknown)'}",
                "# not the original: every value is within its channel's bound of it: " + within]


def sidecar_path(path: str | Path) -> Path:
    """The origin file written beside an exported ``.npy``."""
    p = Path(path)
    return p.with_name(p.name + SIDECAR_SUFFIX)


def write_table(path: str | Path, columns: dict[str, np.ndarray], *, rate: float, start: datetime | None,
                t0: float = 0.0, units: dict[str, str] | None = None, shape_1d: bool = False,
                formats: dict[str, CellFormat] | None = None, origin: Origin | None = None,
                replace: bool = False) -> Path:
    """Write ``columns`` (name -> 1-D array, all the same length) to ``path``; return the path.

    ``rate`` is samples per second, ``start`` the recording's start (UTC;
    naive is taken as UTC) or None, ``t0`` the time of the first row in
    seconds from the start (non-zero for an excerpt), ``units`` maps channel
    names to units, ``formats`` channel names to their CSV cell format,
    ``origin`` marks the file as a reconstruction, and ``replace`` allows an
    existing file to be replaced.  See the module docstring for each format.
    Raises :class:`BadInput` for an unknown extension, a missing folder, an
    existing target without ``replace``, or columns that are empty, of
    unequal length or not numeric.
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
    formats = dict(formats or {})
    if start is not None and start.tzinfo is None:
        start = start.replace(tzinfo=timezone.utc)
    side = sidecar_path(p) if ext == ".npy" and origin is not None else None
    for target in (p, side):
        if target is not None and not replace and (target.exists() or target.is_symlink()):
            raise _exists(target)
    side_done = False
    try:
        with _atomic(p, replace) as tmp:
            if ext == ".npy":
                _write_npy(tmp, cols, shape_1d)
                if side is not None:  # committed just before the .npy; taken back if the .npy fails
                    with _atomic(side, replace) as tmp_side:
                        with open(tmp_side, "w", encoding="utf-8") as f:
                            json.dump(origin.to_dict(), f, indent=1)
                            f.write("\n")
                    side_done = True
            elif ext == ".csv":
                _write_csv(tmp, cols, float(rate), start, float(t0), units, formats, origin)
            else:
                _write_parquet(tmp, cols, float(rate), start, float(t0), units, origin)
    except BaseException:
        if side_done:
            side.unlink(missing_ok=True)
        raise
    return p


def _exists(path: Path) -> BadInput:
    return BadInput(f"{path.name} already exists; pass --force to replace it, or choose another name")


def _check_columns(columns: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    if not columns:
        raise BadInput("no channels to write; select at least one channel")
    out, n = {}, None
    for name, arr in columns.items():
        a = np.asarray(arr)
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
def _atomic(path: Path, replace: bool = False) -> Iterator[str]:
    """Yield a temporary path beside ``path``; move it into place on success, delete it on failure.

    Without ``replace`` the file is hard-linked to ``path``, which fails if
    ``path`` exists by then; where the file system has no hard links, an
    existence check and a rename take its place.
    """
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    os.close(fd)
    try:
        yield tmp
        with open(tmp, "rb+") as f:
            os.fsync(f.fileno())
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)
        if replace:
            os.replace(tmp, path)
        else:
            _claim(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _claim(tmp: str, path: Path) -> None:
    """Move ``tmp`` to ``path`` unless ``path`` exists (BadInput then)."""
    try:
        os.link(tmp, path)
    except FileExistsError:
        raise _exists(path) from None
    except OSError:  # no hard links here (some network or FAT file systems)
        if path.exists() or path.is_symlink():
            raise _exists(path) from None
        os.replace(tmp, path)
        return
    os.unlink(tmp)


def _write_npy(tmp: str, cols: dict[str, np.ndarray], shape_1d: bool) -> None:
    dtype = _common_dtype(cols)
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
    """Cells of the time column in seconds: repr (exact round trip)."""
    return list(map(float.__repr__, values.astype(np.float64, copy=False).tolist()))


def _write_csv(tmp: str, cols: dict[str, np.ndarray], rate: float, start: datetime | None, t0: float,
               units: dict[str, str], formats: dict[str, CellFormat], origin: Origin | None) -> None:
    n = next(iter(cols.values())).shape[0]
    head = io.StringIO()
    for line in origin.comment_lines() if origin is not None else ():
        head.write(line.replace("\n", " ") + "\n")
    csv.writer(head, lineterminator="\n").writerow(
        ["time" if start is not None else "time [s]"] + [_header(k, units.get(k, "")) for k in cols])
    ns = _times_ns(n, rate, start, t0) if start is not None else None
    unit = _iso_unit(ns, rate) if ns is not None else ""
    plain = CellFormat()
    with open(tmp, "w", encoding="utf-8", newline="\n") as f:
        f.write(head.getvalue())
        for lo in range(0, n, CSV_CHUNK_ROWS):
            hi = min(n, lo + CSV_CHUNK_ROWS)
            if ns is not None:
                times = _iso_strings(ns[lo:hi], unit)
            else:
                times = _csv_text(t0 + np.arange(lo, hi, dtype=np.float64) / rate)
            columns = [times] + [cells(a[lo:hi], formats.get(k, plain)) for k, a in cols.items()]
            f.write("".join(",".join(row) + "\n" for row in zip(*columns)))


def _write_parquet(tmp: str, cols: dict[str, np.ndarray], rate: float, start: datetime | None, t0: float,
                   units: dict[str, str], origin: Origin | None) -> None:
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
        arr = pa.array(np.ascontiguousarray(a, dtype=a.dtype.newbyteorder("=")))
        unit = units.get(name, "")
        fields.append(pa.field(name, arr.type, metadata={b"unit": unit.encode("utf-8")} if unit else None))
        arrays.append(arr)
    meta = None if origin is None else {ORIGIN_KEY: json.dumps(origin.to_dict()).encode("utf-8")}
    table = pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=meta))
    pq.write_table(table, tmp, compression="zstd", row_group_size=1 << 20)
