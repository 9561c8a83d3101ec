"""How an archive's members are bound together, and how its folder is read safely.

The binding goes both ways:

* the manifest lists every member file with its size and SHA-256
  (``members``), so an edit of any member is found by hashing it;
* the SHA-256 of the manifest itself (every field but ``members``, in a
  canonical JSON form: :func:`manifest_digest`) is stored in
  ``windows.parquet``'s own footer key-value metadata under
  ``schema.BINDING_KEY``, so an edit of the manifest is found when the
  archive is opened, by reading one footer: no member is hashed for that.

The canonical form (sorted keys, no spaces, ``repr`` of floats) makes the
digest a function of the manifest's values: an edit that changes any value
changes it, whitespace does not.  Archives of format versions from
``schema.BOUND_FROM_VERSION`` on must carry the binding; older ones
(version 3) are read as "manifest not bound" when they lack it.

The folder is read without following links: a symlink or a special file
(FIFO, device, socket) inside an archive folder is refused, and the
manifest is read with a size cap and a JSON nesting guard.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
from pathlib import Path

from ..errors import ArchiveCorrupt, ArchiveNotFound
from . import schema as S


def manifest_digest(manifest: dict) -> str:
    """SHA-256 (hex) of the manifest's canonical JSON without its ``members``."""
    core = {k: v for k, v in manifest.items() if k != "members"}
    text = json.dumps(core, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=True)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def footer_digest(key_value: dict | None) -> str | None:
    """The manifest digest stored in windows.parquet's footer, or None when there is none."""
    raw = (key_value or {}).get(S.BINDING_KEY)
    return None if raw is None else raw.decode("ascii", "replace")


def check_folder(path: Path) -> None:
    """Refuse a missing archive, a non-folder, and links or special files inside the folder."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise ArchiveNotFound(f"archive {path} does not exist; check the path") from None
    except OSError as exc:
        raise ArchiveCorrupt(f"archive {path} cannot be opened ({exc.strerror}); check the path") from None
    if not stat.S_ISDIR(st.st_mode):
        raise ArchiveCorrupt(f"{path} is not a tsarchive archive (not a folder); pass an archive folder")
    with os.scandir(path) as it:
        for entry in it:
            if entry.is_symlink():
                raise ArchiveCorrupt(f"archive member {entry.name} is a symbolic link; tsarchive refuses links "
                                     "inside an archive: copy the real file in its place")
            if not (entry.is_file(follow_symlinks=False) or entry.is_dir(follow_symlinks=False)):
                raise ArchiveCorrupt(f"archive member {entry.name} is not a regular file; "
                                     "the archive is damaged or not a tsarchive archive")


def member_size(path: Path) -> int | None:
    """Size of a regular member file (links not followed), None when it is missing or not a file."""
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return None
    return st.st_size if stat.S_ISREG(st.st_mode) else None


def read_manifest(path: Path) -> dict:
    """The manifest's JSON (``manifest.json``, else the one inside ``windows.parquet``: format 6), read with a
    size cap; any failure is ArchiveCorrupt in one line."""
    mpath = path / S.MANIFEST
    size = member_size(mpath)
    if size is None:
        if member_size(path / S.WINDOWS) is None:
            raise ArchiveCorrupt(f"{path} is not a tsarchive archive (no {S.MANIFEST} or {S.WINDOWS}); "
                                 "pass an archive folder")
        from .inside import read_inside       # format 6: the manifest inside windows.parquet's footer
        return read_inside(path)
    if size > S.MAX_MANIFEST_BYTES:
        raise ArchiveCorrupt(f"{S.MANIFEST} is {size} bytes, more than {S.MAX_MANIFEST_BYTES}; "
                             "the archive is damaged or not a tsarchive archive")
    try:
        fd = os.open(mpath, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
        with os.fdopen(fd, "rb") as fh:
            raw = fh.read(S.MAX_MANIFEST_BYTES + 1)
        return json.loads(raw.decode("utf-8"))
    except RecursionError:
        raise ArchiveCorrupt(f"{S.MANIFEST} nests too deeply to be a tsarchive manifest; "
                             "the archive is damaged") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise ArchiveCorrupt(f"{S.MANIFEST} cannot be read ({str(exc)[:80]}); the archive is damaged") from None


def file_sha256(path: Path) -> str:
    """SHA-256 of a member, opened without following a link."""
    h = hashlib.sha256()
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
    with os.fdopen(fd, "rb") as fh:
        while chunk := fh.read(1 << 20):
            h.update(chunk)
    return h.hexdigest()
