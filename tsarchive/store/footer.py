"""Check a Parquet member's footer before pyarrow's metadata accessors touch it.

pyarrow declares some footer accessors (``RowGroupMetaData.column``) without
C++ exception translation: on a footer whose column chunk names another
physical type than the schema, the Parquet library throws and the whole
process aborts ("terminate called after throwing ...").  A damaged or crafted
archive must not do that, so the footer is first read here, with nothing
but the Thrift compact protocol (Apache Thrift, "Thrift Compact protocol
encoding", the encoding of Parquet's ``FileMetaData``; field ids from
parquet-format's ``parquet.thrift``), and checked: every row group has one
column chunk per schema leaf, each with its metadata inline, of the leaf's
physical type and level histograms of its levels, nothing encrypted,
nothing in other files.  The facts the archive checks need (row counts,
sizes, encodings, value counts, statistics, key-value metadata) are taken
from this reading too, so pyarrow is only asked to read data.
"""

from __future__ import annotations

import os
import struct
from dataclasses import dataclass
from pathlib import Path

MAGIC = b"PAR1"
MAX_FOOTER = 64 << 20
_MAX_DEPTH = 32


class _Bad(Exception):
    pass


class _Reader:
    """Thrift compact protocol values as Python objects: a struct is ``{field id: value}``."""

    def __init__(self, buf: bytes) -> None:
        self.buf, self.pos = buf, 0

    def byte(self) -> int:
        if self.pos >= len(self.buf):
            raise _Bad("footer ends early")
        self.pos += 1
        return self.buf[self.pos - 1]

    def varint(self) -> int:
        out = shift = 0
        while True:
            b = self.byte()
            out |= (b & 0x7F) << shift
            if not b & 0x80:
                return out
            shift += 7
            if shift > 70:
                raise _Bad("varint too long")

    def zigzag(self) -> int:
        n = self.varint()
        return (n >> 1) ^ -(n & 1)

    def value(self, kind: int, depth: int):
        if depth > _MAX_DEPTH:
            raise _Bad("nested too deeply")
        if kind in (1, 2):                   # bool inside a struct: the type is the value
            return kind == 1
        if kind == 3:
            return self.byte()
        if kind in (4, 5, 6):
            return self.zigzag()
        if kind == 7:
            self.pos += 8
            if self.pos > len(self.buf):
                raise _Bad("footer ends early")
            return struct.unpack("<d", self.buf[self.pos - 8:self.pos])[0]
        if kind == 8:
            n = self.varint()
            if self.pos + n > len(self.buf):
                raise _Bad("string runs past the footer")
            self.pos += n
            return self.buf[self.pos - n:self.pos]
        if kind in (9, 10):
            head = self.byte()
            n, elem = head >> 4, head & 0x0F
            if n == 15:
                n = self.varint()
            if n > len(self.buf) - self.pos:
                raise _Bad("list longer than the footer")
            return [self.byte() == 1 if elem in (1, 2) else self.value(elem, depth + 1) for _ in range(n)]
        if kind == 11:
            n = self.varint()
            if n > len(self.buf) - self.pos:
                raise _Bad("map longer than the footer")
            kinds = self.byte() if n else 0
            return [(self.value(kinds >> 4, depth + 1), self.value(kinds & 0x0F, depth + 1)) for _ in range(n)]
        if kind == 12:
            return self.struct(depth + 1)
        raise _Bad(f"unknown Thrift type {kind}")

    def struct(self, depth: int = 0) -> dict:
        out, last = {}, 0
        while True:
            head = self.byte()
            if head == 0:
                return out
            delta, kind = head >> 4, head & 0x0F
            fid = last + delta if delta else self.zigzag()
            out[fid] = self.value(kind, depth)
            last = fid


@dataclass(frozen=True)
class Chunk:
    """One column chunk's footer facts (ColumnMetaData)."""

    path: str
    type: int
    encodings: tuple[int, ...]
    num_values: int
    uncompressed: int
    min: bytes | None
    max: bytes | None


@dataclass(frozen=True)
class Group:
    num_rows: int
    total_byte_size: int
    chunks: tuple[Chunk, ...]


@dataclass(frozen=True)
class Footer:
    """A Parquet footer read without pyarrow: its row groups and key-value metadata."""

    groups: tuple[Group, ...]
    key_value: dict[bytes, bytes]

    @property
    def num_rows(self) -> int:
        return sum(g.num_rows for g in self.groups)


DICTIONARY_ENCODINGS = (2, 8)      # parquet.thrift Encoding: PLAIN_DICTIONARY, RLE_DICTIONARY
BYTE_ARRAY = 6                     # parquet.thrift Type


def read_footer(path: Path) -> Footer | str:
    """The footer (see module doc), or why pyarrow must not read this file."""
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
        with os.fdopen(fd, "rb") as fh:
            size = os.fstat(fh.fileno()).st_size
            if size < 12:
                return "too short to be Parquet"
            fh.seek(size - 8)
            n = int.from_bytes(fh.read(4), "little")
            if not 0 < n <= min(MAX_FOOTER, size - 12):
                return "footer length out of range"
            fh.seek(size - 8 - n)
            return _footer_bytes(fh.read(n + 8))
    except OSError as exc:
        return exc.strerror or str(exc)


def _footer_bytes(buf: bytes) -> Footer | str:
    """A footer from the file's last bytes (Thrift ``FileMetaData``, its 4-byte length, ``PAR1``)."""
    if len(buf) < 12 or buf[-4:] != MAGIC:
        return "no Parquet end marker (or an encrypted footer)"
    n = int.from_bytes(buf[-8:-4], "little")
    if not 0 < n <= len(buf) - 8:
        return "footer length out of range"
    try:
        return _footer(_Reader(buf[-8 - n:-8]).struct())
    except (_Bad, RecursionError, struct.error, TypeError, ValueError, AttributeError) as exc:
        return f"footer unreadable ({str(exc)[:60]})"


def _leaves(schema: list) -> list[tuple[str, int, int, int]]:
    """(dotted path, physical type, max definition level, max repetition level) of each schema leaf."""
    out, stack = [], []            # stack: [children left, name, def, rep] of open groups
    for e in schema[1:]:
        while stack and stack[-1][0] == 0:
            stack.pop()
        rep = e.get(3, 0)          # SchemaElement: 1 type, 3 repetition (0 required, 1 optional, 2 repeated),
        d = (stack[-1][2] if stack else 0) + (rep != 0)          # 4 name, 5 num_children
        r = (stack[-1][3] if stack else 0) + (rep == 2)
        raw = e.get(4, b"")
        name = ".".join([x[1] for x in stack] + [raw.decode("utf-8", "replace") if isinstance(raw, bytes) else "?"])
        if stack:
            stack[-1][0] -= 1
        if e.get(5):
            stack.append([e[5], name.rsplit(".", 1)[-1], d, r])
        else:
            out.append((name, e.get(1), d, r))
    return out


def _footer(meta: dict) -> Footer | str:
    schema, groups = meta.get(2), meta.get(4, [])
    if not isinstance(schema, list) or not schema or not all(isinstance(e, dict) for e in schema) \
            or not isinstance(groups, list) or 8 in meta:
        return "footer schema missing or footer encrypted"
    leaves = _leaves(schema)
    out = []
    for g in groups:
        cols = g.get(1) if isinstance(g, dict) else None         # RowGroup: 1 columns, 2 bytes, 3 rows
        if not isinstance(cols, list) or len(cols) != len(leaves):
            return "a row group does not have one column per schema leaf"
        chunks = []
        for c, (name, typ, d, r) in zip(cols, leaves):           # ColumnChunk: 1 file_path, 3 meta_data, 8/9 crypto
            md = c.get(3) if isinstance(c, dict) else None
            if not isinstance(md, dict) or 1 in c or 8 in c or 9 in c or type(typ) is not int or md.get(1) != typ:
                return "a column chunk's type differs from its schema leaf"
            sizes = md.get(16, {})                               # SizeStatistics: 2 rep, 3 def level histograms
            if not isinstance(sizes, dict) or len(sizes.get(2, ())) not in (0, r + 1) or \
                    len(sizes.get(3, ())) not in (0, d + 1):
                return "a column chunk's level histograms do not fit its schema leaf"
            st = md.get(12, {})                                  # Statistics: 1/2 max/min, 5/6 max/min value
            enc = md.get(2, [])
            if not isinstance(st, dict) or not isinstance(enc, list) or not all(type(e) is int for e in enc):
                return "a column chunk's encodings or statistics are malformed"
            chunks.append(Chunk(name, typ, tuple(enc), _int(md.get(5)), _int(md.get(6)),
                                _bytes(st.get(6, st.get(2))), _bytes(st.get(5, st.get(1)))))
        out.append(Group(_int(g.get(3)), _int(g.get(2)), tuple(chunks)))
    kv = {}
    for item in meta.get(5, []):                                 # FileMetaData: 5 key_value_metadata
        if not isinstance(item, dict) or not isinstance(item.get(1), bytes):
            return "key-value metadata is malformed"
        kv[item[1]] = _bytes(item.get(2)) or b""
    return Footer(tuple(out), kv)


def _bytes(v) -> bytes | None:
    return v if isinstance(v, bytes) else None


def _int(v) -> int:
    if type(v) is not int or v < 0:
        raise _Bad("a size or count is missing or negative")
    return v
