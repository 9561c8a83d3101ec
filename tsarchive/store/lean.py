"""The lean window rows of format 5 (read only; format 6 writes lean6.py's): a window's small facts packed
into two integer columns.

Format 5 stores what formats 3 and 4 spread over ten columns in five (six
with a model); the reader unpacks them into the same logical rows
(:data:`tsarchive.store.schema.WINDOWS_SCHEMA`), so nothing above the store
sees the difference:

``key``       int64  ``channel << 32 | window``: the channel's position in the
                     manifest's ``channels`` and the window number; the only
                     column with statistics (a row group's key range says which
                     channels and windows it holds)
``facts``     int64  ``crc32 | worst << 32 | table << 40 | lpc_set << 48 | mode << 56``
                     (``table`` and ``lpc_set`` as their int8 bytes)
``level``     int64  rounded window mean on the integer grid
``code``      list<int8>, with a model only
``residual``  binary, the coded residuals, stored uncompressed (already entropy coded)
``score``     float32

Rows are in row groups of at most ``ROW_GROUP_WINDOWS`` windows; a group
holds one channel's consecutive windows, or (the last group of a file) the
remaining windows of several channels in channel order, so a short
recording is one row group.  The same description, in one line, sits in
the file's footer key-value metadata under ``tsarchive.layout``, so a
reader with nothing but pyarrow finds what the columns mean.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import ArchiveCorrupt
from . import schema as S

LAYOUT_KEY = b"tsarchive.layout"
LAYOUT = b"key=channel<<32|window;facts=crc32|worst<<32|table<<40|lpc_set<<48|mode<<56"   # channel: its index
CHANNEL_SHIFT = 32
WINDOW_MASK = (1 << CHANNEL_SHIFT) - 1

LEAN_SCHEMA = pa.schema([        # required columns: no definition levels in the pages, no level histograms
    pa.field("key", pa.int64(), nullable=False),
    pa.field("facts", pa.int64(), nullable=False),
    pa.field("level", pa.int64(), nullable=False),
    pa.field("residual", pa.binary(), nullable=False),
    pa.field("score", pa.float32(), nullable=False),
])


# exceptions.parquet of format 5: the same key instead of channel and window (statistics on it only)
EXCEPTIONS_SCHEMA = pa.schema([
    pa.field("key", pa.int64(), nullable=False),
    pa.field("pos", pa.list_(pa.int32())),   # positions within the window of the samples stored verbatim
    pa.field("bits", pa.list_(pa.int64())),  # their raw IEEE-754 bits (floats) or values (integers)
])
# Positions and bits are DELTA_BINARY_PACKED (parquet-format's Encodings.md): a run of gaps is positions
# k, k+1, ... and one NaN's bits over and over, deltas 1 and 0 that pack into no bits at all.  PLAIN + zstd
# took 1.1 B per gap sample (a year at 15 min, nights empty: 19 864 B); delta-packed, 800 B.
EXCEPTIONS_OPTS = dict(compression="zstd", compression_level=9, store_schema=False, write_statistics=["key"],
                       use_dictionary=False, column_encoding={"pos.list.element": "DELTA_BINARY_PACKED",
                                                              "bits.list.element": "DELTA_BINARY_PACKED"})


def pack_exceptions(rows: pa.Table, channel: int) -> pa.Table:
    """Logical verbatim-sample rows (``schema.EXCEPTIONS_SCHEMA``) of one channel -> format 5's."""
    key = (np.int64(channel) << CHANNEL_SHIFT) | rows["window"].to_numpy().astype(np.int64)
    return pa.table({"key": key, "pos": rows["pos"], "bits": rows["bits"]}, schema=EXCEPTIONS_SCHEMA)


def key_filter(channel: int, w0: int, w1: int) -> list[tuple]:
    """A pyarrow filter for the rows of ``channel`` with ``w0 <= window < w1``."""
    base = channel << CHANNEL_SHIFT
    return [("key", ">=", base + max(w0, 0)), ("key", "<", base + min(w1, 1 << CHANNEL_SHIFT))]


def lean_schema(with_code: bool) -> pa.Schema:
    """The format-5 windows.parquet schema of an archive with (or without) a model."""
    if not with_code:
        return LEAN_SCHEMA
    return LEAN_SCHEMA.insert(LEAN_SCHEMA.get_field_index("level") + 1, S.CODE_FIELD)


def unpack(t: pa.Table, name: str, columns: list[str] | None) -> pa.Table:
    """Lean rows of one channel -> the logical rows (``WINDOWS_SCHEMA``), only ``columns`` when given."""
    if any(c.null_count for c in t.columns):
        raise ArchiveCorrupt(f"channel {name}: windows have empty (null) fields; the archive is damaged")
    logical = S.windows_schema("code" in t.column_names)
    names = logical.names if columns is None else [c for c in logical.names if c in columns]
    key = t["key"].to_numpy() if "key" in t.column_names else np.zeros(t.num_rows, np.int64)
    facts = t["facts"].to_numpy() if "facts" in t.column_names else None
    out = {}
    for c in names:
        if c == "channel":
            out[c] = pa.array([name] * t.num_rows, pa.string())
        elif c == "window":
            out[c] = pa.array((key & WINDOW_MASK).astype(np.int32))
        elif c in _FACTS:
            shift, dtype = _FACTS[c]
            out[c] = pa.array(((facts >> shift) & (0xFFFFFFFF if c == "crc32" else 0xFF)).astype(
                np.uint32 if c == "crc32" else np.uint8).view(dtype))
        else:
            out[c] = t[c]
    return pa.table(out, schema=pa.schema([logical.field(c) for c in names]))


_FACTS = {"crc32": (0, np.uint32), "worst": (32, np.uint8), "table": (40, np.int8), "lpc_set": (48, np.int8),
          "mode": (56, np.int8)}


def physical_columns(columns: list[str] | None, with_code: bool) -> list[str] | None:
    """The lean columns that hold the logical ``columns`` (``key`` always)."""
    if columns is None:
        return None
    want = set(columns)
    need = ["key"]
    if want & set(_FACTS):
        need.append("facts")
    need += [c for c in lean_schema(with_code).names if c in want and c not in ("key", "facts")]
    return need


def select(t: pa.Table, channel: int, w0: int, w1: int) -> pa.Table:
    """The rows of ``channel`` with ``w0 <= window < w1``, in window order."""
    lo, hi = (channel << CHANNEL_SHIFT) + max(w0, 0), (channel << CHANNEL_SHIFT) + min(w1, 1 << CHANNEL_SHIFT)
    t = t.filter(pc.and_(pc.greater_equal(t["key"], lo), pc.less(t["key"], hi)))
    return t.take(pc.sort_indices(t["key"]))
