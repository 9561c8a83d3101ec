"""Format 7: Parquet footers without the optional fields no reader needs.

A Parquet footer (the Thrift ``FileMetaData`` before a file's last 8 bytes)
written by pyarrow carries, beside what a reader needs, fields that
parquet-format's ``parquet.thrift`` marks optional and that only help
writers' bookkeeping or readers of other files: the writer's name
(``created_by``, 34 bytes), the column orders (for statistics, which the
archive does not write), each column chunk's page-encoding statistics and
size statistics, and a row group's own offset, compressed size and ordinal.
On a short recording they are a tenth of the archive, so :func:`slim`
writes the footer again without them.  The pages are not touched (every
offset stays valid); what remains is a plain Parquet footer any reader
opens.

The footer is read and written with the Thrift compact protocol (Apache
Thrift, "Thrift Compact protocol encoding"): :func:`parse` keeps each field's
id, type and value in order, :func:`encode` writes them back, and the two are
exact inverses on any footer (``tests/test_store_slim.py`` checks that on
footers pyarrow wrote).
"""

from __future__ import annotations

import os
import struct
from pathlib import Path

from .footer import _Bad, _Reader

MAGIC = b"PAR1"

# parquet.thrift field ids left out: FileMetaData 6 created_by, 7 column_orders; RowGroup 5 file_offset,
# 6 total_compressed_size, 7 ordinal; ColumnMetaData 13 encoding_stats, 16 size_statistics.
DROP_FILE = frozenset({6, 7})
DROP_GROUP = frozenset({5, 6, 7})
DROP_COLUMN_META = frozenset({13, 16})
_FILE_ROW_GROUPS, _GROUP_COLUMNS, _CHUNK_META = 4, 1, 3
_STRUCT, _LIST, _SET, _BINARY, _DOUBLE, _MAP, _UUID = 12, 9, 10, 8, 7, 11, 13


class _In(_Reader):
    """The compact protocol with each field's Thrift type kept (footer.py's reader keeps values only)."""

    def take(self, n: int) -> bytes:
        self.pos += n
        if self.pos > len(self.buf):
            raise _Bad("footer ends early")
        return self.buf[self.pos - n:self.pos]

    def value(self, kind: int):
        if kind in (1, 2):
            return kind == 1
        if kind == 3:
            return self.byte()
        if kind in (4, 5, 6):
            return self.zigzag()
        if kind == _DOUBLE:
            return self.take(8)
        if kind == _BINARY:
            return self.take(self.varint())
        if kind in (_LIST, _SET):
            head = self.byte()
            n, elem = head >> 4, head & 0x0F
            if n == 15:
                n = self.varint()
            return elem, [self.element(elem) for _ in range(n)]
        if kind == _MAP:
            n = self.varint()
            kinds = self.byte() if n else 0
            return kinds, [(self.element(kinds >> 4), self.element(kinds & 0x0F)) for _ in range(n)]
        if kind == _UUID:
            return self.take(16)
        if kind == _STRUCT:
            return self.struct()
        raise _Bad(f"unknown Thrift type {kind}")

    def element(self, kind: int):
        """A container's element: a bool is a byte there (1 true, 2 false), not a field type."""
        return self.byte() == 1 if kind in (1, 2) else self.value(kind)

    def struct(self) -> list:
        out, last = [], 0
        while (head := self.byte()) != 0:
            delta, kind = head >> 4, head & 0x0F
            fid = last + delta if delta else self.zigzag()
            out.append((fid, kind, self.value(kind)))
            last = fid
        return out


def parse(footer: bytes) -> list:
    """A footer's ``FileMetaData`` as ``[(field id, Thrift type, value), ...]`` (structs nested alike)."""
    r = _In(footer)
    try:
        out = r.struct()
    except _Bad as exc:
        raise ValueError(str(exc)) from None
    if r.pos != len(footer):
        raise ValueError("bytes after the footer's end")
    return out


def _varint(n: int) -> bytes:
    out = bytearray()
    while n > 0x7F:
        out.append(n & 0x7F | 0x80)
        n >>= 7
    out.append(n)
    return bytes(out)


def _zigzag(n: int) -> bytes:
    return _varint((n << 1) ^ (n >> 63))


def _value(kind: int, v) -> bytes:
    if kind == 3:
        return bytes([v])
    if kind in (4, 5, 6):
        return _zigzag(v)
    if kind == _DOUBLE:
        return v
    if kind == _BINARY:
        return _varint(len(v)) + v
    if kind in (_LIST, _SET):
        elem, items = v
        head = bytes([len(items) << 4 | elem]) if len(items) < 15 else bytes([0xF0 | elem]) + _varint(len(items))
        return head + b"".join(_element(elem, x) for x in items)
    if kind == _MAP:
        kinds, items = v
        return _varint(len(items)) + (bytes([kinds]) if items else b"") + b"".join(
            _element(kinds >> 4, a) + _element(kinds & 0x0F, b) for a, b in items)
    if kind == _UUID:
        return v
    if kind == _STRUCT:
        return encode(v)
    raise ValueError(f"unknown Thrift type {kind}")


def _element(kind: int, v) -> bytes:
    return bytes([1 if v else 2]) if kind in (1, 2) else _value(kind, v)


def encode(fields: list) -> bytes:
    """Inverse of :func:`parse`: the struct's compact-protocol bytes (a bool field's value is its type)."""
    out, last = bytearray(), 0
    for fid, kind, v in fields:
        if kind in (1, 2):
            kind = 1 if v else 2
        delta = fid - last
        out += bytes([delta << 4 | kind]) if 0 < delta <= 15 else bytes([kind]) + _zigzag(fid)
        if kind not in (1, 2):
            out += _value(kind, v)
        last = fid
    out.append(0)
    return bytes(out)


def slimmed(fields: list) -> list:
    """``FileMetaData`` fields without the optional ones named by ``DROP_*``."""
    def group(g: list) -> list:
        return [(f, k, (v[0], [chunk(c) for c in v[1]]) if f == _GROUP_COLUMNS else v)
                for f, k, v in g if f not in DROP_GROUP]

    def chunk(c: list) -> list:
        return [(f, k, [m for m in v if m[0] not in DROP_COLUMN_META] if f == _CHUNK_META else v) for f, k, v in c]

    return [(f, k, (v[0], [group(g) for g in v[1]]) if f == _FILE_ROW_GROUPS else v)
            for f, k, v in fields if f not in DROP_FILE]


def slim(path: Path) -> int:
    """Rewrite a closed Parquet file's footer without the fields ``DROP_*`` name; returns the bytes saved (0,
    the file untouched, if its footer does not parse: slimming only saves bytes)."""
    size = os.path.getsize(path)
    with open(path, "r+b") as fh:
        fh.seek(size - 8)
        tail = fh.read(8)
        n = struct.unpack("<I", tail[:4])[0]
        if tail[4:] != MAGIC or not 0 < n <= size - 12:
            raise ValueError(f"{path.name} is not a Parquet file")
        fh.seek(size - 8 - n)
        try:
            new = encode(slimmed(parse(fh.read(n))))
        except ValueError:
            return 0
        fh.seek(size - 8 - n)
        fh.write(new + struct.pack("<I", len(new)) + MAGIC)
        fh.truncate()
    return n - len(new)
