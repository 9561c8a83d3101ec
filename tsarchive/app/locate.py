"""Finding things on disk and reading what the user typed (no Textual, no codec logic).

* :func:`scan_folder` lists the recordings and archives of one folder (cheap: names
  and sizes only; details are loaded later by the Folder screen's worker).
* :func:`find_source` looks for an archive's original recording next to it.
* :func:`read_time`, :func:`parse_optional_int`
  turn text fields into the arguments the library expects, raising
  :class:`tsarchive.errors.BadInput` with a one-line message when they cannot.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable

from tsarchive.errors import BadInput
from tsarchive.names import ARCHIVE_SUFFIX, ARCHIVE_SUFFIXES

RECORDING_SUFFIXES = (".npy", ".csv", ".parquet")
EXPORT_SUFFIXES = (".csv", ".parquet", ".npy")


@dataclass(frozen=True)
class FolderEntry:
    """One row of the Folder screen: a recording file or an archive directory."""

    path: Path
    kind: str  # "recording" or "archive"
    size: int

    @property
    def is_archive(self) -> bool:
        return self.kind == "archive"


def tree_size(path: Path) -> int:
    """Bytes of a file, or of every file below a directory."""
    if path.is_file():
        return path.stat().st_size
    total = 0
    for root, _dirs, files in os.walk(path):
        for name in files:
            try:
                total += (Path(root) / name).stat().st_size
            except OSError:
                continue  # a file vanished while walking: leave it out of the total
    return total


def is_archive_path(path: Path) -> bool:
    """A folder whose name ends in one of :data:`ARCHIVE_SUFFIXES` (``.tsarchive``, or the older ``.tsa``)."""
    return path.suffix in ARCHIVE_SUFFIXES and path.is_dir()


def scan_folder(folder: Path) -> list[FolderEntry]:
    """Archives first, then recordings, each group sorted by name.

    Raises :class:`BadInput` when ``folder`` is not a readable directory.
    """
    try:
        children = sorted(folder.iterdir(), key=lambda p: p.name.lower())
    except OSError as exc:
        raise BadInput(f"cannot list folder {folder}: {exc.strerror or exc}; pick a readable folder") from exc
    archives = [FolderEntry(p, "archive", 0) for p in children if is_archive_path(p)]
    recordings = [FolderEntry(p, "recording", p.stat().st_size) for p in children
                  if p.is_file() and p.suffix.lower() in RECORDING_SUFFIXES]
    return archives + recordings


def find_source(archive_path: Path, source_name: str | None, folders: Iterable[Path] = ()) -> Path | None:
    """The original recording named ``source_name`` next to the archive or in ``folders``."""
    if not source_name:
        return None
    name = Path(source_name).name
    seen: set[Path] = set()
    for folder in (archive_path.parent, *folders):
        folder = Path(folder)
        if folder in seen:
            continue
        seen.add(folder)
        candidate = folder / name
        if candidate.is_file():
            return candidate
    return None


def parse_optional_int(text: str, what: str, minimum: int = 1) -> int | None:
    """``""``/``"auto"`` -> None; ``"64"`` -> 64; anything else raises :class:`BadInput`."""
    text = text.strip().lower()
    if text in ("", "auto"):
        return None
    if not text.isdigit() or int(text) < minimum:
        raise BadInput(f"{what} {text!r} is not a whole number of at least {minimum}; "
                       "type one or leave it empty for auto")
    return int(text)


def parse_optional_float(text: str, what: str) -> float | None:
    """``""`` -> None; ``"2.5"`` -> 2.5 (must be a positive number) or :class:`BadInput`."""
    text = text.strip()
    if not text:
        return None
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not value > 0 or value == float("inf"):
        raise BadInput(f"{what} {text!r} is not a positive number; type one or leave it empty for the default")
    return value


def export_target(text: str, folder: Path) -> Path:
    """The export file a typed name stands for (relative names land in ``folder``)."""
    text = text.strip()
    if not text:
        raise BadInput("type a file name ending in .csv, .parquet or .npy for the export")
    path = Path(text).expanduser()
    if not path.is_absolute():
        path = folder / path
    if path.suffix.lower() not in EXPORT_SUFFIXES:
        raise BadInput(f"export name {path.name!r} must end in .csv, .parquet or .npy")
    return path


def read_time(text: str, start=None, what: str = "time") -> float | None:
    """A typed time in seconds from the recording start, or None for an empty field.

    Read by the library's :func:`tsarchive.timespec.parse_time`, the parser of the command
    line's ``--start``/``--end``: both accept the same forms (``12.5``, ``90s``, ``2h1min``,
    ``3d``, ``1:02:03``, ``1:15.5``, ISO 8601 datetimes).
    """
    offset = read_offset(text, start, what)
    return None if offset is None else float(offset)


def read_offset(text: str, start=None, what: str = "time", start_ns: int | None = None):
    """:func:`read_time` exactly, as a Fraction of seconds (``start_ns``: the first sample's exact time, as
    ``unpack`` reads ``--start``), so that a typed logged time selects the very sample it names."""
    from tsarchive.timespec import parse_offset

    text = text.strip()
    if not text:
        return None
    try:
        return parse_offset(text, start, start_ns)
    except BadInput as exc:
        raise BadInput(f"{what}: {exc}") from None


def free_archive_name(folder: Path, stem: str) -> str:
    """``stem.tsarchive``, or ``stem-2.tsarchive``, ``stem-3.tsarchive``... whichever is not taken in ``folder``."""
    name = stem + ARCHIVE_SUFFIX
    n = 2
    while (folder / name).exists():
        name = f"{stem}-{n}{ARCHIVE_SUFFIX}"
        n += 1
    return name
