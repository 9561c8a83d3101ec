"""What a recording carries besides its samples: the time axis, preamble notes and text columns.

Packing calls :func:`stage_sidecar`, which writes the optional members into
the staging folder and returns the manifest fields; every field and member
is optional on reading (archives without them have no notes, no text
columns, and the axis ``start + i / rate``).

* ``time`` and ``time.parquet``: see :mod:`tsarchive.store.timeaxis`;
* ``notes``: the preamble lines, a list of strings, as found;
* ``extra`` = ``{"columns": [names], "positions": [int | null]}`` and
  ``extra.parquet``: the non-numeric columns as Arrow wrote them (types,
  nulls and bytes kept; zstd), one row per sample.  ``positions`` is where
  each column stood among the source's columns other than time (0-based),
  taken from the field metadata ``b"position"`` when the reader set it;
  without it the column is written back after the channels.
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import ArchiveCorrupt, BadInput
from . import schema as S, timeaxis
from .timelist import write_listed

EXTRA_MEMBER = S.EXTRA
EXTRA_ROWS = 1 << 16        # rows per row group of extra.parquet (the unit read for a time range)


def axis_start(rec) -> datetime | None:
    """The recording's start for the manifest: its first logged datetime, else ``rec.start`` (zone kept)."""
    if rec.time is not None:
        if rec.time.kind != timeaxis.DATETIME or not len(rec.time.values):
            return None
        ns = int(rec.time.values[0])
        t = timeaxis.Timeline(timeaxis.DATETIME, rec.time.zone, (), rec.rate, 1, (0,), (ns,))
        return t.start_datetime()
    return rec.start


def stage_sidecar(stage: Path, rec) -> dict:
    """Write time.parquet / extra.parquet into ``stage`` when needed; return the manifest fields."""
    entry, listed = timeaxis.encode_axis(rec)
    fields: dict = {"time": entry}
    if listed is not None:
        write_listed(stage / timeaxis.TIME_MEMBER, listed)
    if rec.notes:
        fields["notes"] = [str(s) for s in rec.notes]
    extra = rec.extra
    if extra is not None and extra.num_columns:
        if extra.num_rows != rec.n_samples:
            raise BadInput(f"the text columns have {extra.num_rows} rows but the channels {rec.n_samples}; "
                           "give one row per sample")
        positions = []
        for f in extra.schema:
            p = (f.metadata or {}).get(b"position")
            positions.append(int(p) if p is not None and p.isdigit() else None)
        fields["extra"] = {"columns": list(extra.column_names), "positions": positions}
        pq.write_table(extra, stage / EXTRA_MEMBER, compression="zstd", compression_level=9,
                       row_group_size=EXTRA_ROWS, write_statistics=False)
    return fields


def notes(manifest: dict) -> tuple[str, ...]:
    got = manifest.get("notes", [])
    if not isinstance(got, list) or not all(isinstance(s, str) for s in got):
        raise ArchiveCorrupt("the manifest's notes are malformed; the archive is damaged")
    return tuple(got)


def extra_layout(manifest: dict) -> tuple[tuple[str, ...], tuple[int | None, ...]]:
    """(text column names, their source positions) from the manifest; empty without text columns."""
    entry = manifest.get("extra")
    if entry is None:
        return (), ()
    try:
        names = tuple(str(c) for c in entry["columns"])
        pos = tuple(None if p is None else int(p) for p in entry["positions"])
    except (KeyError, TypeError, ValueError):
        raise ArchiveCorrupt("the manifest's text-column entry is malformed; the archive is damaged") from None
    if len(pos) != len(names):
        raise ArchiveCorrupt("the manifest's text-column entry is malformed; the archive is damaged")
    return names, pos


def _extra_file(manifest: dict, folder: Path, n: int) -> pq.ParquetFile | None:
    names, _ = extra_layout(manifest)
    if not names:
        return None
    if EXTRA_MEMBER not in manifest.get("members", {}):
        raise ArchiveCorrupt(f"text columns are listed but {EXTRA_MEMBER} is not a member; the archive is damaged")
    try:
        f = pq.ParquetFile(folder / EXTRA_MEMBER)
    except (OSError, pa.ArrowException) as exc:
        raise ArchiveCorrupt(f"{EXTRA_MEMBER} cannot be read ({exc}); the archive is damaged") from None
    if f.metadata.num_rows != n or tuple(f.schema_arrow.names) != names:
        raise ArchiveCorrupt(f"{EXTRA_MEMBER} does not match the manifest; the archive is damaged")
    return f


def check_extra(manifest: dict, folder: Path, n: int) -> None:
    """Decode every row group of the text columns, one at a time (ArchiveCorrupt if one does not)."""
    f = _extra_file(manifest, folder, n)
    for g in range(f.metadata.num_row_groups if f is not None else 0):
        try:
            f.read_row_group(g)
        except (OSError, pa.ArrowException) as exc:
            raise ArchiveCorrupt(f"{EXTRA_MEMBER} cannot be read ({exc}); the archive is damaged") from None


def read_extra(manifest: dict, folder: Path, n: int, a: int, b: int) -> pa.Table | None:
    """Rows ``a .. b-1`` of the text columns (reading only the row groups they lie in), or None."""
    f = _extra_file(manifest, folder, n)
    if f is None:
        return None
    md = f.metadata
    try:
        groups, first, row = [], None, 0
        for g in range(md.num_row_groups):
            rows = md.row_group(g).num_rows
            if row < b and row + rows > a:
                groups.append(g)
                first = row if first is None else first
            row += rows
        if not groups:
            return f.schema_arrow.empty_table()
        return f.read_row_groups(groups).slice(a - first, b - a)
    except (OSError, pa.ArrowException) as exc:
        raise ArchiveCorrupt(f"{EXTRA_MEMBER} cannot be read ({exc}); the archive is damaged") from None
