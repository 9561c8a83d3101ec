"""Checksums stored in archives.

* :func:`window_crc` -- CRC-32 (zlib's, the IEEE 802.3 polynomial, the
  "CRC-32/ISO-HDLC" parameters) of an array's bytes in one fixed layout:
  the array is converted to the little-endian form of its dtype
  (``dtype.newbyteorder('<')``) and laid out C-contiguously, so the value
  does not depend on the machine's byte order or on the array's strides.
  The dtype itself is not hashed: int64 ``[1]`` and int32 ``[1]`` differ
  only because their bytes differ.
* :func:`bytes_crc` -- the same CRC of a byte string.
* :func:`file_sha256` -- SHA-256 of a file as lowercase hex, read in
  1 MiB chunks (constant memory for any file size).

Results are Python ints in ``0 .. 2**32 - 1``.
"""

from __future__ import annotations

import hashlib
import zlib
from pathlib import Path

import numpy as np

from tsarchive.errors import BadInput, SourceNotFound

CHUNK_BYTES = 1 << 20


def bytes_crc(data: bytes | bytearray | memoryview, start: int = 0) -> int:
    """CRC-32 of ``data``; pass a previous result as ``start`` to continue it."""
    return zlib.crc32(data, start) & 0xFFFFFFFF


def window_crc(values: np.ndarray) -> int:
    """CRC-32 of ``values`` as little-endian, C-contiguous bytes (see module doc)."""
    a = np.asarray(values)
    if a.dtype.hasobject or a.dtype.kind not in "biufc":
        raise BadInput(f"window_crc needs a numeric array, got dtype {a.dtype}; convert it first")
    a = np.ascontiguousarray(a, dtype=a.dtype.newbyteorder("<"))
    return bytes_crc(memoryview(a).cast("B"))


def file_sha256(path: str | Path) -> str:
    """Lowercase hex SHA-256 of the file at ``path``, streamed in 1 MiB chunks."""
    h = hashlib.sha256()
    try:
        with open(path, "rb") as f:
            while chunk := f.read(CHUNK_BYTES):
                h.update(chunk)
    except FileNotFoundError:
        raise SourceNotFound(f"cannot checksum {path}: no such file; check the path") from None
    return h.hexdigest()
