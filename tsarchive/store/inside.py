"""The manifest inside ``windows.parquet``'s footer, and the digests that bind every byte (formats 6 and 7).

``windows.parquet``'s footer key-value metadata holds two entries:

``tsarchive.manifest``  (format 7; format 6: ``tsarchive``) the manifest: its compact JSON (compact.py) as one
                        zstd frame (level 19, content size and checksum in the frame header, no dictionary id)
                        compressed with the raw-content dictionary shipped beside this module
                        (``manifest7.zdict``; format 6: ``manifest6.zdict``; their SHA-256 are pinned by
                        ``tests/test_store_inside.py``; neither ever changes)
``tsarchive.digest``    (format 7; format 6: ``tsarchive.sha256``) the SHA-256 of the footer (the Thrift
                        ``FileMetaData`` before the file's last 8 bytes) with this entry's value read as zeros

Format 7 writes both values as *7-bit text*: the bytes' bits, most significant first, cut into groups of
seven, each group one byte below 0x80 (the last group padded with zero bits), so the values are ASCII and a
Parquet reader that takes key-value metadata as UTF-8 text (parquet.thrift declares them ``string``) opens
the file; format 6 stored the raw bytes, which such readers refuse.  :func:`from_text` is the inverse.

The manifest's ``data`` entry holds the size and SHA-256 of the file's bytes
before the footer (the window rows), and its ``members`` every other member
file's, so every byte of the archive is bound: the footer digest covers the
schema, the row groups and the manifest (checked at opening: the footer is
read anyway), the manifest covers the window rows and the other members
(hashed by ``verify``, ``report`` and ``unpack``).  A reader with pyarrow, numpy and zstandard gets the
manifest out with :func:`one_liner`'s text (DEVELOPERS.md, "Archive format").
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
import zstandard

from ..errors import ArchiveCorrupt
from . import schema as S
from .footer import Footer, read_footer

HERE = Path(__file__).parent


@dataclass(frozen=True)
class Place:
    """Where one format version keeps its manifest and footer digest in ``windows.parquet``'s footer."""

    manifest_key: bytes
    digest_key: bytes
    dictionary: str          # file name beside this module
    text: bool               # values as 7-bit text (format 7) or raw bytes (format 6)

    def stored(self, raw: bytes) -> bytes:
        """Bytes as this version stores them in the footer: 7-bit text (format 7) or as they are."""
        return to_text(raw) if self.text else raw

    def raw(self, stored: bytes) -> bytes:
        """Inverse of :meth:`stored` (ValueError on a byte that is not 7-bit text, format 7)."""
        return from_text(stored) if self.text else stored

    @property
    def slot(self) -> int:
        """Bytes of the digest's value: 32, or 37 as 7-bit text."""
        return len(self.stored(bytes(32)))


V6 = Place(b"tsarchive", b"tsarchive.sha256", "manifest6.zdict", False)
V7 = Place(S.MANIFEST_KEY, S.DIGEST_KEY, "manifest7.zdict", True)
WRITE = V7                                   # what the writer uses
DICT_FILE = HERE / WRITE.dictionary


def to_text(b: bytes) -> bytes:
    """Bytes as 7-bit text: their bits in groups of seven (the last padded with zeros), one byte each."""
    bits = np.unpackbits(np.frombuffer(b, np.uint8))
    bits = np.concatenate([bits, np.zeros(-len(bits) % 7, np.uint8)]).reshape(-1, 7)
    return np.packbits(np.concatenate([np.zeros((len(bits), 1), np.uint8), bits], axis=1), axis=1).tobytes()


def from_text(t: bytes) -> bytes:
    """Inverse of :func:`to_text` (the padding bits dropped); ValueError on a byte of 0x80 or above."""
    a = np.frombuffer(t, np.uint8)
    if (a >= 0x80).any():
        raise ValueError("not 7-bit text")
    bits = np.unpackbits(a[:, None], axis=1)[:, 1:].ravel()
    return np.packbits(bits[:len(bits) // 8 * 8]).tobytes()


@lru_cache(maxsize=2)
def _dictionary(name: str = WRITE.dictionary) -> zstandard.ZstdCompressionDict:
    return zstandard.ZstdCompressionDict((HERE / name).read_bytes(), dict_type=zstandard.DICT_TYPE_RAWCONTENT)


def compress(manifest: dict, place: Place = WRITE) -> bytes:
    """The manifest's stored value: compact JSON (the writer's separators) in one zstd frame, as 7-bit text
    (format 7)."""
    text = json.dumps(manifest, separators=(",", ":")).encode("utf-8")
    zd = _dictionary(place.dictionary)
    params = zstandard.ZstdCompressionParameters.from_level(19, source_size=len(text), dict_size=len(zd.as_bytes()),
                                                            write_checksum=True, write_content_size=True,
                                                            write_dict_id=False)
    frame = zstandard.ZstdCompressor(dict_data=zd, compression_params=params).compress(text)
    return place.stored(frame)


def decompress(blob: bytes, place: Place = WRITE) -> dict:
    """The manifest from its stored value, its declared size checked against the cap before anything is
    allocated; any failure is one ArchiveCorrupt line."""
    try:
        blob = place.raw(blob)
        size = zstandard.frame_content_size(blob)
        if size < 0 or size > S.MAX_MANIFEST_BYTES:
            raise ArchiveCorrupt(f"the manifest in {S.WINDOWS} declares {size} bytes (at most "
                                 f"{S.MAX_MANIFEST_BYTES}); the archive is damaged or crafted")
        raw = zstandard.ZstdDecompressor(dict_data=_dictionary(place.dictionary)).decompress(blob, max_output_size=size)
        return json.loads(raw.decode("utf-8"))
    except RecursionError:
        raise ArchiveCorrupt("the manifest nests too deeply to be a tsarchive manifest; the archive is damaged") \
            from None
    except (zstandard.ZstdError, UnicodeDecodeError, ValueError) as exc:
        raise ArchiveCorrupt(f"the manifest in {S.WINDOWS} cannot be read ({str(exc)[:80]}); "
                             "the archive is damaged") from None


def place_of(key_value: dict | None) -> Place | None:
    """The format's place of a footer's key-value metadata: format 7's keys, else format 6's, else None."""
    kv = key_value or {}
    return next((p for p in (V7, V6) if p.manifest_key in kv), None)


def stored_in(footer: Footer) -> bytes | None:
    """The manifest's stored value from a parsed footer, None when the file carries none (format <= 5)."""
    place = place_of(footer.key_value)
    return None if place is None else footer.key_value[place.manifest_key]


def digest_ok(footer: Footer) -> bool:
    """Whether a parsed footer carries a digest value of its place's length."""
    place = place_of(footer.key_value)
    return place is not None and len((footer.key_value or {}).get(place.digest_key, b"")) == place.slot


def read_inside(path: Path) -> dict:
    """The manifest of a format-6 or format-7 archive folder, from ``windows.parquet``'s footer."""
    footer = read_footer(path / S.WINDOWS)
    if isinstance(footer, str):
        raise ArchiveCorrupt(f"{S.WINDOWS} cannot be read ({footer}); the archive is damaged")
    place = place_of(footer.key_value)
    if place is None:
        raise ArchiveCorrupt(f"{path} is not a tsarchive archive (no manifest.json, and {S.WINDOWS} holds no "
                             "manifest); pass an archive folder")
    return decompress(footer.key_value[place.manifest_key], place)


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


def _slot_in(footer: bytes) -> tuple[int, Place] | None:
    """(where the digest's value starts, the place) in a footer's bytes, None without a digest entry."""
    for place in (V7, V6):     # Thrift compact: KeyValue field 2 (binary) and the value's varint length
        tag = place.digest_key + bytes([0x18, place.slot])
        at = footer.rfind(tag)
        if at >= 0 and at + len(tag) + place.slot <= len(footer):
            return at + len(tag), place
    return None


ZERO = WRITE.stored(bytes(32))


def footer_digest(footer: bytes, at: int, place: Place = WRITE) -> bytes:
    """SHA-256 of the footer's bytes with its digest slot's value read as zeros."""
    return hashlib.sha256(footer[:at] + place.stored(bytes(32)) + footer[at + place.slot:]).digest()


def _stored_digest(footer: bytes, at: int, place: Place) -> bytes:
    return place.raw(footer[at:at + place.slot])


def seal(path: Path) -> bytes:
    """Write the footer's digest into the zeroed slot of a just-closed ``windows.parquet``; returns it."""
    start, footer = _tail(path)
    found = _slot_in(footer)
    if found is None or footer[found[0]:found[0] + found[1].slot] != found[1].stored(bytes(32)):
        raise RuntimeError(f"{path.name} has no empty digest slot")   # the writer's own slip, never the user's
    at, place = found
    digest = footer_digest(footer, at, place)
    with open(path, "r+b") as fh:
        fh.seek(start + at)
        fh.write(place.stored(digest))
    return digest


def footer_problem(path: Path, data_bytes: int) -> str | None:
    """None when ``windows.parquet``'s footer matches its digest and follows the ``data_bytes`` bytes of
    window rows the manifest declares; else the one-line finding (cheap: the footer alone is read)."""
    got = _tail(path)
    found = None if got is None else _slot_in(got[1])
    if found is None:
        return f"{S.WINDOWS} has no footer digest; the archive is damaged"
    at, place = found
    try:
        stored = _stored_digest(got[1], at, place)
    except ValueError:
        stored = None
    if footer_digest(got[1], at, place) != stored:
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
    found = None if got is None else _slot_in(got[1])
    if found is None:
        return None
    try:
        return _stored_digest(got[1], *found).hex()
    except ValueError:
        return None


def is_archive(folder: Path) -> bool:
    """Whether ``folder`` looks like an archive: ``manifest.json`` (formats 3 to 5) or a ``windows.parquet``
    (format 6 keeps its manifest inside it)."""
    folder = Path(folder)
    return folder.is_dir() and ((folder / S.MANIFEST).is_file() or (folder / S.WINDOWS).is_file())


def one_liner(archive: str = "run.tsarchive") -> str:
    """The manifest out of a format-7 archive with nothing but pyarrow, numpy and zstandard (and this
    dictionary): 7-bit text back to bytes, then the zstd frame."""
    return ("import pyarrow.parquet as pq, zstandard as z, numpy as np; "
            f"t = np.frombuffer(pq.read_metadata('{archive}/windows.parquet').metadata[b'tsarchive.manifest'], np.uint8); "
            "b = np.unpackbits(t[:, None], axis=1)[:, 1:].ravel(); blob = np.packbits(b[:len(b) // 8 * 8]).tobytes(); "
            "d = z.ZstdCompressionDict(open('manifest7.zdict', 'rb').read(), dict_type=z.DICT_TYPE_RAWCONTENT); "
            "print(z.ZstdDecompressor(dict_data=d).decompress(blob).decode())")
