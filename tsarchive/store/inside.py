"""Format 6: the manifest inside ``windows.parquet``'s footer, and the digests that bind every byte.

``windows.parquet``'s footer key-value metadata holds two entries:

``tsarchive``         the manifest: its compact JSON (compact.py) as one zstd frame (level 19, content size
                      and checksum in the frame header, no dictionary id) compressed with the raw-content
                      dictionary ``manifest6.zdict`` shipped beside this module (its SHA-256 is
                      pinned by ``tests/test_store_inside.py``; it never changes within format 6)
``tsarchive.sha256``  32 bytes: the SHA-256 of the footer (the Thrift ``FileMetaData`` before the
                      file's last 8 bytes) with these 32 bytes set to zero

The manifest's ``data`` entry holds the size and SHA-256 of the file's bytes
before the footer (the window rows), and its ``members`` every other member
file's, so every byte of the archive is bound: the footer digest covers the
schema, the row groups and the manifest (checked at opening: the footer is
read anyway), the manifest covers the window rows and the other members
(hashed by ``verify``, ``report`` and ``unpack``).  A reader with pyarrow and zstandard gets the manifest out
with :func:`one_liner`'s text (DEVELOPERS.md, "Archive format").
"""

from __future__ import annotations

import hashlib
import json
import os
from functools import lru_cache
from pathlib import Path

import zstandard

from ..errors import ArchiveCorrupt
from . import schema as S
from .footer import Footer, read_footer

DICT_FILE = Path(__file__).with_name("manifest6.zdict")
ZERO = bytes(32)
_SLOT_TAG = b"\x18\x20"      # Thrift compact: field 2 (binary) of a KeyValue, then the varint length 32


@lru_cache(maxsize=1)
def _dictionary() -> zstandard.ZstdCompressionDict:
    return zstandard.ZstdCompressionDict(DICT_FILE.read_bytes(), dict_type=zstandard.DICT_TYPE_RAWCONTENT)


def compress(manifest: dict) -> bytes:
    """The manifest's stored bytes: compact JSON (the writer's separators) in one zstd frame."""
    text = json.dumps(manifest, separators=(",", ":")).encode("utf-8")
    params = zstandard.ZstdCompressionParameters.from_level(19, source_size=len(text), dict_size=len(_dictionary().as_bytes()),
                                                            write_checksum=True, write_content_size=True,
                                                            write_dict_id=False)
    return zstandard.ZstdCompressor(dict_data=_dictionary(), compression_params=params).compress(text)


def decompress(blob: bytes) -> dict:
    """The manifest from its stored bytes, its declared size checked against the cap before anything is
    allocated; any failure is one ArchiveCorrupt line."""
    try:
        size = zstandard.frame_content_size(blob)
        if size < 0 or size > S.MAX_MANIFEST_BYTES:
            raise ArchiveCorrupt(f"the manifest in {S.WINDOWS} declares {size} bytes (at most "
                                 f"{S.MAX_MANIFEST_BYTES}); the archive is damaged or crafted")
        raw = zstandard.ZstdDecompressor(dict_data=_dictionary()).decompress(blob, max_output_size=size)
        return json.loads(raw.decode("utf-8"))
    except RecursionError:
        raise ArchiveCorrupt("the manifest nests too deeply to be a tsarchive manifest; the archive is damaged") \
            from None
    except (zstandard.ZstdError, UnicodeDecodeError, ValueError) as exc:
        raise ArchiveCorrupt(f"the manifest in {S.WINDOWS} cannot be read ({str(exc)[:80]}); "
                             "the archive is damaged") from None


def stored_in(footer: Footer) -> bytes | None:
    """The manifest's stored bytes from a parsed footer, None when the file carries none (format <= 5)."""
    return (footer.key_value or {}).get(S.MANIFEST_KEY)


def read_inside(path: Path) -> dict:
    """The manifest of a format-6 archive folder, from ``windows.parquet``'s footer."""
    footer = read_footer(path / S.WINDOWS)
    if isinstance(footer, str):
        raise ArchiveCorrupt(f"{S.WINDOWS} cannot be read ({footer}); the archive is damaged")
    blob = stored_in(footer)
    if blob is None:
        raise ArchiveCorrupt(f"{path} is not a tsarchive archive (no manifest.json, and {S.WINDOWS} holds no "
                             "manifest); pass an archive folder")
    return decompress(blob)


def _tail(path: Path) -> tuple[int, bytes] | None:
    """(where the footer starts, its bytes) of a Parquet file, None when its tail is not a Parquet tail."""
    size = path.stat().st_size
    with open(path, "rb") as fh:
        fh.seek(max(size - 8, 0))
        tail = fh.read(8)
        n = int.from_bytes(tail[:4], "little") if len(tail) == 8 else 0
        if tail[4:] != b"PAR1" or not 0 < n <= min(size - 12, 64 << 20):
            return None
        fh.seek(size - 8 - n)
        return size - 8 - n, fh.read(n)


def _slot_in(footer: bytes) -> int | None:
    at = footer.rfind(S.DIGEST_KEY + _SLOT_TAG)
    return None if at < 0 or at + len(S.DIGEST_KEY) + 2 + 32 > len(footer) else at + len(S.DIGEST_KEY) + 2


def footer_digest(footer: bytes, at: int) -> bytes:
    """SHA-256 of the footer's bytes with the 32 bytes of its digest slot read as zeros."""
    return hashlib.sha256(footer[:at] + ZERO + footer[at + 32:]).digest()


def seal(path: Path) -> bytes:
    """Write the footer's digest into the zeroed slot of a just-closed ``windows.parquet``; returns it."""
    start, footer = _tail(path)
    at = _slot_in(footer)
    if at is None or footer[at:at + 32] != ZERO:
        raise RuntimeError(f"{path.name} has no empty digest slot")   # the writer's own slip, never the user's
    digest = footer_digest(footer, at)
    with open(path, "r+b") as fh:
        fh.seek(start + at)
        fh.write(digest)
    return digest


def footer_problem(path: Path, data_bytes: int) -> str | None:
    """None when ``windows.parquet``'s footer matches its digest and follows the ``data_bytes`` bytes of
    window rows the manifest declares; else the one-line finding (cheap: the footer alone is read)."""
    got = _tail(path)
    at = None if got is None else _slot_in(got[1])
    if at is None:
        return f"{S.WINDOWS} has no footer digest; the archive is damaged"
    if footer_digest(got[1], at) != got[1][at:at + 32]:
        return (f"the manifest or footer in {S.WINDOWS} was edited or damaged (its digest differs); "
                "restore the archive from a copy")
    if got[0] != data_bytes:
        return (f"{S.WINDOWS} holds {got[0]} bytes of window rows but the manifest says {data_bytes}; "
                "the archive is damaged")
    return None


def prefix_sha256(path: Path, n: int) -> str:
    """SHA-256 (hex) of a file's first ``n`` bytes, opened without following a link."""
    h = hashlib.sha256()
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
    with os.fdopen(fd, "rb") as fh:
        while n > 0 and (chunk := fh.read(min(n, 1 << 20))):
            h.update(chunk)
            n -= len(chunk)
    return h.hexdigest()


def identity(folder: Path) -> str | None:
    """The archive's identity as hex: the SHA-256 of ``manifest.json`` (formats 3 to 5) or the footer digest
    stored in ``windows.parquet`` (format 6, which binds the manifest and, through it, every byte); None
    when the folder holds neither."""
    folder = Path(folder)
    try:
        return hashlib.sha256((folder / S.MANIFEST).read_bytes()).hexdigest()
    except OSError:
        pass
    try:
        got = _tail(folder / S.WINDOWS)
    except OSError:
        return None
    at = None if got is None else _slot_in(got[1])
    return None if at is None else got[1][at:at + 32].hex()


def is_archive(folder: Path) -> bool:
    """Whether ``folder`` looks like an archive: ``manifest.json`` (formats 3 to 5) or a ``windows.parquet``
    (format 6 keeps its manifest inside it)."""
    folder = Path(folder)
    return folder.is_dir() and ((folder / S.MANIFEST).is_file() or (folder / S.WINDOWS).is_file())


def one_liner(archive: str = "run.tsarchive") -> str:
    """The manifest out of a format-6 archive with nothing but pyarrow and zstandard (and this dictionary)."""
    return ("import pyarrow.parquet as pq, zstandard as z; "
            f"blob = pq.read_metadata('{archive}/windows.parquet').metadata[b'tsarchive']; "
            "d = z.ZstdCompressionDict(open('manifest6.zdict', 'rb').read(), dict_type=z.DICT_TYPE_RAWCONTENT); "
            "print(z.ZstdDecompressor(dict_data=d).decompress(blob).decode())")
