"""The window rows of format 6: a window's facts in one fixed-width column, its place in the manifest.

Format 6 stores what format 5 spread over five columns in two (three with a
model); the reader unpacks them into the same logical rows
(:data:`tsarchive.store.schema.WINDOWS_SCHEMA`):

``facts``     fixed_size_binary[20], little-endian: ``crc32`` u32, ``level`` i64, ``score`` f32, ``worst`` u8,
              ``table`` i8, ``lpc_set`` i8, ``mode`` i8 (BYTE_STREAM_SPLIT + zstd: each of the 20 byte
              planes compresses on its own, so a slowly moving level costs about what delta packing did)
``code``      list<int8>, with a model only
``residual``  binary, the coded residuals, stored uncompressed (already entropy coded)

No column says which channel and window a row is: the manifest's ``groups``
lists, per row group in file order, ``[channel, first window]`` of its first
row, and the rows run on from there (:func:`runs`): through the channel's
windows up to its last, then through the windows left over of each following
channel that has any (those past its full groups of ``ROW_GROUP_WINDOWS``).
The writer puts each channel's windows in full groups, in time order, and
the windows left over of every channel together in the last groups, so a
short recording is one row group whose entry is ``[0, 0]``.  Nothing in the
file carries statistics: the map is the manifest's.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..errors import ArchiveCorrupt
from . import schema as S

FACTS_BYTES = 20
LAYOUT = ("facts=crc32:u32,level:i64,score:f32,worst:u8,table:i8,lpc_set:i8,mode:i8 (little-endian); "
          "groups=[channel,first window] per row group")
FACTS = np.dtype([("crc32", "<u4"), ("level", "<i8"), ("score", "<f4"), ("worst", "u1"), ("table", "i1"),
                  ("lpc_set", "i1"), ("mode", "i1")])
FACT_COLUMNS = tuple(FACTS.names)
assert FACTS.itemsize == FACTS_BYTES

SCHEMA = pa.schema([        # required columns: no definition levels in the pages
    pa.field("facts", pa.binary(FACTS_BYTES), nullable=False),
    pa.field("residual", pa.binary(), nullable=False),
])
WRITER_OPTS = dict(
    compression={"facts": "zstd", "code.list.element": "zstd", "residual": "none"},
    compression_level={"facts": 19, "code.list.element": 9}, store_schema=False, write_statistics=False,
    use_dictionary=False, column_encoding={"facts": "PLAIN", "residual": "DELTA_LENGTH_BYTE_ARRAY"})
# Format 7 stores ``facts`` PLAIN: BYTE_STREAM_SPLIT on a fixed-size binary column (format 6) is refused by
# readers that split only FLOAT, DOUBLE, INT32 and INT64 (DuckDB among them); it cost ~10 % more bytes.


def lean6_schema(with_code: bool) -> pa.Schema:
    """The format-6 windows.parquet schema of an archive with (or without) a model."""
    return SCHEMA.insert(1, S.CODE_FIELD) if with_code else SCHEMA


def writer_opts(schema: pa.Schema) -> dict:
    if "code" in schema.names:
        return WRITER_OPTS
    return dict(WRITER_OPTS, compression={k: v for k, v in WRITER_OPTS["compression"].items() if "code" not in k},
                compression_level={"facts": 19})


def pack(rows: pa.Table, with_code: bool) -> pa.Table:
    """Logical window rows of one channel -> format 6's columns."""
    n = rows.num_rows
    f = np.zeros(n, FACTS)
    for c in FACT_COLUMNS:
        f[c] = rows[c].to_numpy()
    facts = pa.FixedSizeBinaryArray.from_buffers(pa.binary(FACTS_BYTES), n, [None, pa.py_buffer(f.tobytes())])
    cols = {"facts": facts}
    if with_code:
        cols["code"] = rows["code"]
    cols["residual"] = rows["residual"]
    return pa.table(cols, schema=lean6_schema(with_code))


def unpack(t: pa.Table, name: str, windows: np.ndarray, columns: list[str] | None) -> pa.Table:
    """Format-6 rows of one channel (their window numbers beside them) -> the logical rows, only ``columns``
    when given."""
    if any(c.null_count for c in t.columns):
        raise ArchiveCorrupt(f"channel {name}: windows have empty (null) fields; the archive is damaged")
    logical = S.windows_schema("code" in t.column_names)
    names = logical.names if columns is None else [c for c in logical.names if c in columns]
    facts = None
    if "facts" in t.column_names:
        col = t["facts"].combine_chunks()
        raw = np.frombuffer(col.buffers()[1], np.uint8)[col.offset * FACTS_BYTES:(col.offset + len(col)) * FACTS_BYTES]
        facts = raw.view(FACTS)
    out = {}
    for c in names:
        if c == "channel":
            out[c] = pa.array([name] * t.num_rows, pa.string())
        elif c == "window":
            out[c] = pa.array(windows.astype(np.int32))
        elif c in FACT_COLUMNS:
            out[c] = pa.array(np.ascontiguousarray(facts[c]).astype(logical.field(c).type.to_pandas_dtype()))
        else:
            out[c] = t[c]
    return pa.table(out, schema=pa.schema([logical.field(c) for c in names]))


def physical_columns(columns: list[str] | None, with_code: bool) -> list[str] | None:
    """The format-6 columns that hold the logical ``columns`` (at least one, to count the rows)."""
    if columns is None:
        return None
    want = set(columns)
    need = ["facts"] if want & set(FACT_COLUMNS) else []
    need += [c for c in ("code", "residual") if c in want and (c != "code" or with_code)]
    return need or ["facts"]


def group_starts(keys: np.ndarray) -> list[list[int]]:
    """``[channel, first window]`` of each row group a table of ``ROW_GROUP_WINDOWS`` rows per group starts
    (``keys``: ``channel << 32 | window`` of its rows, as lean.py's)."""
    first = keys[::S.ROW_GROUP_WINDOWS]
    return [[int(k >> 32), int(k & 0xFFFFFFFF)] for k in first]


def runs(groups, rows: list[int], n_windows: list[int]) -> list[list[tuple[int, int, int]]]:
    """Per row group, its rows as ``(channel, first window, end window)`` runs (module doc); ValueError
    (its message a finding) when ``groups`` is malformed or the groups do not tile every channel's windows
    exactly once."""
    if not isinstance(groups, list) or len(groups) != len(rows):
        raise ValueError(f"the manifest lists {len(groups) if isinstance(groups, list) else 'no'} row groups, "
                         f"{S.WINDOWS} holds {len(rows)}")
    nch, out = len(n_windows), []
    rest = [n - n % S.ROW_GROUP_WINDOWS if n % S.ROW_GROUP_WINDOWS else None for n in n_windows]
    for g, (start, n) in enumerate(zip(groups, rows)):
        if not (isinstance(start, list) and len(start) == 2 and all(type(v) is int for v in start)) or \
                not 0 <= start[0] < nch or not 0 <= start[1] < max(n_windows[start[0]], 1) or n < 1:
            raise ValueError(f"the manifest's entry for row group {g} does not name a window")
        c, w, mine = start[0], start[1], []
        while n > 0:
            take = min(n, n_windows[c] - w)
            if take > 0:
                mine.append((c, w, w + take))
                n -= take
            c += 1
            while c < nch and rest[c] is None:
                c += 1
            if n > 0 and c >= nch:
                raise ValueError(f"row group {g} runs past the last channel's windows")
            w = rest[c] if n > 0 else 0
        out.append(mine)
    seen = [[] for _ in range(nch)]
    for mine in out:
        for c, a, b in mine:
            seen[c].append((a, b))
    for c, spans in enumerate(seen):
        spans.sort()
        if sum(b - a for a, b in spans) != n_windows[c] or \
                any(spans[i][1] != spans[i + 1][0] for i in range(len(spans) - 1)) or (spans and spans[0][0]):
            raise ValueError(f"the row groups hold channel {c}'s windows other than once each, in order")
    return out


def keys(mine: list[tuple[int, int, int]]) -> np.ndarray:
    """``channel << 32 | window`` of a row group's rows, from its runs."""
    parts = [(np.int64(c) << 32) | np.arange(a, b, dtype=np.int64) for c, a, b in mine]
    return np.concatenate(parts) if parts else np.zeros(0, np.int64)
