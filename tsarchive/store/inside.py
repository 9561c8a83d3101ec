"""Format 6: the manifest inside ``windows.parquet``'s footer, and the digest that binds the whole file.

``windows.parquet``'s footer key-value metadata holds two entries:

``tsarchive``         the manifest: its compact JSON (compact.py) as one zstd frame (level 19, content size
                      and checksum in the frame header, no dictionary id) compressed with the raw-content
                      dictionary ``manifest6.zdict`` shipped beside this module (its SHA-256 is
                      pinned by ``tests/test_store_inside.py``; it never changes within format 6)
``tsarchive.sha256``  32 bytes: the SHA-256 of the whole file with these 32 bytes set to zero

The manifest lists every other member file with its size and SHA-256
(``members``), so every byte of the archive is bound: the file digest covers
the window rows, the footer and the manifest, and the manifest covers the
other members.  A reader with pyarrow and zstandard gets the manifest out
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


def _slot(path: Path) -> tuple[int, bytes] | None:
    """(offset in the file, the 32 bytes) of the digest slot, None when the footer has none."""
    size = path.stat().st_size
    with open(path, "rb") as fh:
        fh.seek(max(size - 8, 0))
        tail = fh.read(8)
        n = int.from_bytes(tail[:4], "little") if len(tail) == 8 else 0
        if tail[4:] != b"PAR1" or not 0 < n <= min(size - 12, 64 << 20):
            return None
        fh.seek(size - 8 - n)
        footer = fh.read(n)
    at = footer.rfind(S.DIGEST_KEY + _SLOT_TAG)
    if at < 0:
        return None
    at += len(S.DIGEST_KEY) + len(_SLOT_TAG)
    return size - 8 - n + at, footer[at:at + 32]


def file_digest(path: Path, skip: int) -> bytes:
    """SHA-256 of a file with the 32 bytes at ``skip`` read as zeros (opened without following a link)."""
    h = hashlib.sha256()
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
    with os.fdopen(fd, "rb") as fh:
        pos = 0
        while chunk := fh.read(1 << 20):
            lo, hi = max(skip - pos, 0), min(skip + 32 - pos, len(chunk))
            if lo < hi:
                chunk = chunk[:lo] + bytes(hi - lo) + chunk[hi:]
            h.update(chunk)
            pos += len(chunk)
    return h.digest()


def seal(path: Path) -> bytes:
    """Write the file digest into the zeroed slot of a just-closed ``windows.parquet``; returns it."""
    found = _slot(path)
    if found is None or found[1] != ZERO:
        raise RuntimeError(f"{path.name} has no empty digest slot")   # the writer's own slip, never the user's
    digest = file_digest(path, found[0])
    with open(path, "r+b") as fh:
        fh.seek(found[0])
        fh.write(digest)
    return digest


def digest_problem(path: Path) -> str | None:
    """None when ``windows.parquet`` matches its stored digest, else the one-line finding."""
    found = _slot(path)
    if found is None or len(found[1]) != 32:
        return f"member {S.WINDOWS}: its footer carries no file digest (damaged or edited)"
    if file_digest(path, found[0]) != found[1]:
        return (f"member {S.WINDOWS}: SHA-256 differs from the digest in its footer (the window rows, the "
                "footer or the manifest were damaged or edited)")
    return None


def identity(folder: Path) -> str | None:
    """The archive's identity as hex: the SHA-256 of ``manifest.json`` (formats 3 to 5) or the file digest
    stored in ``windows.parquet`` (format 6, which binds the manifest and, through it, every member); None
    when the folder holds neither."""
    folder = Path(folder)
    try:
        return hashlib.sha256((folder / S.MANIFEST).read_bytes()).hexdigest()
    except OSError:
        pass
    try:
        found = _slot(folder / S.WINDOWS)
    except OSError:
        return None
    return None if found is None else found[1].hex()


def is_archive(folder: Path) -> bool:
    """Whether ``folder`` looks like an archive: ``manifest.json`` (formats 3 to 5) or a ``windows.parquet``
    (format 6 keeps its manifest inside it)."""
    folder = Path(folder)
    return folder.is_dir() and ((folder / S.MANIFEST).is_file() or (folder / S.WINDOWS).is_file())


def one_liner(archive: str = "run.tsarchive") -> str:
    """The manifest out of a format-6 archive with nothing but pyarrow and zstandard (and this dictionary)."""
    return ("import json, pyarrow.parquet as pq, zstandard as z; "
            f"blob = pq.read_metadata('{archive}/windows.parquet').metadata[b'tsarchive']; "
            "d = z.ZstdCompressionDict(open('manifest6.zdict', 'rb').read(), dict_type=z.DICT_TYPE_RAWCONTENT); "
            "print(json.loads(z.ZstdDecompressor(dict_data=d).decompress(blob)))")
