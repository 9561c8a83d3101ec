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
    Values are written by :func:`tsarchive.export_text.cells` with each
    channel's :class:`~tsarchive.export_text.CellFormat`: the shortest text
    true to the channel (its logged decimals, the shortest float32 text for
    float32), missing values as empty cells.  With an ``origin``, the file
    starts with ``#`` comment lines saying it is a reconstruction, from
    which archive, and within which ±ε.
``.parquet``
    zstd-compressed; a first column ``time`` (``timestamp[ns]`` without a
    zone for naive times, else with ``UTC`` or the offset; float64 seconds
    with unit ``s`` for a seconds axis), then one column per channel in its
    own dtype, the unit in the field metadata ``b"unit"``; text columns as
    for CSV, in their Arrow types; notes in the file metadata ``b"notes"``.  With an ``origin``, the file's key-value metadata
    also holds it as JSON under ``b"tsarchive.origin"``.

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
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .errors import BadInput
from .store.timeaxis import Times
from .export_text import (CellFormat, csv_cells, header, iso_unit, text_cells,
                          time_cells, time_header)

if TYPE_CHECKING:
    import pyarrow as pa

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

__all__ = ["FORMATS", "ORIGIN_KEY", "SIDECAR_SUFFIX", "Origin", "TextParts", "sidecar_path", "write_table"]


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
                times: Times | None = None, text: TextParts | None = None,
                formats: dict[str, CellFormat] | None = None, origin: Origin | None = None,
                replace: bool = False) -> Path:
    """Write ``columns`` (name -> 1-D array, all the same length) to ``path``; return the path.

    ``times`` are the rows' exact times (:class:`tsarchive.store.timeaxis.Times`);
    without them the times are ``start + i / rate`` from ``t0``: ``rate`` is
    samples per second, ``start`` the recording's start (naive stays naive)
    or None, ``t0`` the time of the first row in seconds from the start
    (non-zero for an excerpt).  ``units`` maps channel names to units;
    ``text`` holds notes and text columns; ``formats`` maps channel names to
    their CSV cell format, ``origin`` marks the file as a reconstruction, and
    ``replace`` allows an existing file to be replaced.  See the module
    docstring for each format.  Raises :class:`BadInput` for an unknown
    extension, a missing folder, an existing target without ``replace``, or
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
    formats = dict(formats or {})
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
                _write_csv(tmp, cols, times, units, text, order, formats, origin)
            else:
                _write_parquet(tmp, cols, times, units, text, order, origin)
    except BaseException:
        if side_done:
            side.unlink(missing_ok=True)
        raise
    return p


def _exists(path: Path) -> BadInput:
    return BadInput(f"{path.name} already exists; pass --force to replace it, or choose another name")


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


def _write_csv(tmp: str, cols: dict[str, np.ndarray], times: Times, units: dict[str, str], text: TextParts,
               order: list[tuple[str, str]], formats: dict[str, CellFormat], origin: Origin | None) -> None:
    extra = text.extra
    n = next(iter(cols.values())).shape[0]
    head = io.StringIO()
    for line in origin.comment_lines() if origin is not None else ():   # first: the reader knows the mark
        head.write(line.replace("\n", " ") + "\n")
    for line in text.notes:                                             # the preamble, as found
        head.write(line + "\n")
    csv.writer(head, lineterminator="\n").writerow(
        [time_header(times)] + [header(k, units.get(k, "")) if c == "ch" else k for c, k in order])
    unit = iso_unit(times.values) if times.kind == "datetime" else ""
    plain = CellFormat()
    with open(tmp, "w", encoding="utf-8", newline="\n") as f:
        f.write(head.getvalue())
        for lo in range(0, n, CSV_CHUNK_ROWS):
            hi = min(n, lo + CSV_CHUNK_ROWS)
            cells = [time_cells(times, lo, hi, unit)] + [
                csv_cells(cols[k][lo:hi], formats.get(k, plain)) if c == "ch"
                else text_cells(extra.column(k).slice(lo, hi - lo)) for c, k in order]
            f.write("".join(",".join(row) + "\n" for row in zip(*cells)))


def _write_parquet(tmp: str, cols: dict[str, np.ndarray], times: Times, units: dict[str, str], text: TextParts,
                   order: list[tuple[str, str]], origin: Origin | None) -> None:
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
    meta = {}
    if text.notes:
        meta[b"notes"] = json.dumps(list(text.notes), ensure_ascii=False).encode("utf-8")
    if origin is not None:
        meta[ORIGIN_KEY] = json.dumps(origin.to_dict()).encode("utf-8")
    table = pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=meta or None))
    pq.write_table(table, tmp, compression="zstd", row_group_size=1 << 20)
