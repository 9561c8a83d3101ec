"""Claim an archive's target path, and move a finished archive into it without a gap.

* **Claim.**  A pack holds an exclusive lock on ``.NAME.claim`` beside the
  target (``flock``, released by the kernel when the process dies, even by
  ``kill -9``) from its start to its commit: a second pack to the same
  target is refused at once instead of silently replacing the first.
  Claims are re-entrant within a process.
* **Leftovers.**  Whoever holds the claim owns every ``.NAME.staging-*``
  and ``.NAME.replaced-*`` beside the target, so it removes those left by
  killed runs, after restoring a ``.replaced-*`` archive when the target is
  missing (a run killed between the fallback's two renames).
* **Commit.**  A new target is created with ``renameat2(RENAME_NOREPLACE)``
  (Linux, through ctypes); a replaced one is swapped in with
  ``renameat2(RENAME_EXCHANGE)``, so the target always holds either the old
  or the new archive.  Elsewhere (or on file systems without them): a check
  under the claim, or the old archive renamed aside to ``.NAME.replaced-*``
  first, which the next claim restores if the process died in between.
"""

from __future__ import annotations

import ctypes
import errno
import glob
import os
import shutil
import sys
import threading
import uuid
from contextlib import contextmanager
from pathlib import Path

from ..errors import ArchiveExists, BadInput
from .inside import is_archive

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX
    fcntl = None

_RENAME_NOREPLACE, _RENAME_EXCHANGE, _AT_FDCWD = 1, 2, -100
_lock = threading.Lock()
_held: dict[Path, list] = {}          # target -> [claim fd, depth]


def is_archive_dir(path: Path) -> bool:
    return is_archive(path)


def check_target(path: Path, force: bool) -> None:
    """Refuse a target that exists (unless ``force`` and it is an archive folder, not a link to one)."""
    if path.exists() or path.is_symlink():
        if not force:
            raise ArchiveExists(f"{path} already exists; pass --force to replace it or choose another name")
        if path.is_symlink():
            raise ArchiveExists(f"{path} is a symbolic link; refusing to replace it even with --force: "
                                "give the real archive folder's path")
        if not is_archive_dir(path):
            raise ArchiveExists(f"{path} exists and is not a tsarchive archive; refusing to replace it "
                                "even with --force")
    if not path.parent.exists():
        raise BadInput(f"folder {path.parent} does not exist; create it or choose another output path")


def staging_name(path: Path) -> Path:
    return path.parent / f".{path.name}.staging-{uuid.uuid4().hex[:8]}"


def _aside_name(path: Path) -> Path:
    return path.parent / f".{path.name}.replaced-{uuid.uuid4().hex[:8]}"


def _claim_file(path: Path) -> Path:
    return path.parent / f".{path.name}.claim"


@contextmanager
def claim_target(path: str | os.PathLike, force: bool | None = None):
    """Hold the claim on ``path`` for the ``with`` block (see module doc); with ``force`` given, the target
    is checked (:func:`check_target`) once claimed and tidied."""
    path = Path(os.path.abspath(path))
    with _lock:
        entry = _held.get(path)
        if entry is None:
            entry = _held[path] = [_acquire(path), 0]
        entry[1] += 1
    try:
        if entry[1] == 1:
            _tidy(path)
        if force is not None:
            check_target(path, force)
        yield path
    finally:
        with _lock:
            entry[1] -= 1
            if entry[1] == 0:
                del _held[path]
                _release(path, entry[0])


def _acquire(path: Path) -> int:
    if not path.parent.is_dir():
        raise BadInput(f"folder {path.parent} does not exist; create it or choose another output path")
    cf = _claim_file(path)
    busy = ArchiveExists(f"{path} is being written by another tsarchive run right now; wait for it to finish "
                         "or choose another name")
    for _ in range(20):
        if fcntl is None:  # pragma: no cover - not POSIX: an exclusive create (a stale one is removed by hand)
            try:
                return os.open(cf, os.O_CREAT | os.O_EXCL | os.O_RDWR, 0o644)
            except FileExistsError:
                raise busy from None
        fd = os.open(cf, os.O_CREAT | os.O_RDWR | getattr(os, "O_NOFOLLOW", 0), 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise busy from None
        try:
            same = os.fstat(fd).st_ino == os.stat(cf, follow_symlinks=False).st_ino
        except FileNotFoundError:
            same = False
        if same:
            return fd
        os.close(fd)      # the holder removed the file between our open and our lock: try the new one
    raise busy


def _release(path: Path, fd: int) -> None:
    try:
        os.unlink(_claim_file(path))
    except FileNotFoundError:
        pass
    os.close(fd)


def _tidy(path: Path) -> None:
    """Restore an archive left aside by a killed replacement, then remove the leftovers of killed runs."""
    name = glob.escape(path.name)
    asides = sorted(path.parent.glob(f".{name}.replaced-*"), key=lambda p: p.stat(follow_symlinks=False).st_mtime)
    if asides and not os.path.lexists(path) and is_archive(asides[-1]):
        os.rename(asides.pop(), path)
    for p in [*asides, *path.parent.glob(f".{name}.staging-*")]:
        if p.is_dir() and not p.is_symlink():
            shutil.rmtree(p, ignore_errors=True)
        else:
            p.unlink(missing_ok=True)


def _renameat2(src: Path, dst: Path, flags: int) -> bool:
    """renameat2 on Linux; False when it is not available here (then the caller falls back)."""
    if not sys.platform.startswith("linux"):
        return False
    fn = getattr(ctypes.CDLL(None, use_errno=True), "renameat2", None)
    if fn is None:
        return False
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    if fn(_AT_FDCWD, os.fsencode(src), _AT_FDCWD, os.fsencode(dst), flags) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP):
        return False
    if err == errno.EEXIST:
        raise ArchiveExists(f"{dst} appeared while packing; nothing was replaced: choose another name or --force")
    raise OSError(err, os.strerror(err), str(dst))


def move_into_place(stage: Path, path: Path, *, replace: bool) -> None:
    """Move the finished ``stage`` folder to ``path`` (claimed by the caller); see the module doc."""
    if not replace or not os.path.lexists(path):
        if os.path.lexists(path):
            raise ArchiveExists(f"{path} appeared while packing; nothing was replaced: choose another name or --force")
        if not _renameat2(stage, path, _RENAME_NOREPLACE):
            os.rename(stage, path)
        return
    if _renameat2(stage, path, _RENAME_EXCHANGE):
        shutil.rmtree(stage, ignore_errors=True)      # now the old archive
        return
    aside = _aside_name(path)
    os.rename(path, aside)
    os.rename(stage, path)                            # a kill before this line: the next claim restores `aside`
    shutil.rmtree(aside, ignore_errors=True)
