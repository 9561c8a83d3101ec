"""Messages that workers post back to their screens (one dataclass each).

Workers run in threads (``@work(thread=True)``) and never touch widgets; they post
one of these and the screen's ``on_<message>`` handler updates the display.
Library objects (``tsarchive.Progress``, ``PackResult``, ``VerifyReport``...) are
carried as they are: the app formats them, it never recomputes them.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from textual.message import Message


@dataclass
class WorkFailed(Message):
    """A worker stopped on a :class:`tsarchive.errors.TsArchiveError`; ``text`` is its one line."""

    text: str
    title: str = "Could not finish"


@dataclass
class FolderDetailsLoaded(Message):
    """Details of one row of the Folder screen, read by ``inspect_source`` or ``open``.

    ``problem`` is the one-line error when the file could not be read (other fields None);
    ``needs_rate``: it is readable once a rate is given (a .npy), which the Packing screen asks for.
    """

    path: Path
    duration: float | None = None
    n_channels: int | None = None
    rate: float | None = None
    ratio: float | None = None
    problem: str | None = None
    needs_rate: bool = False


@dataclass
class RecordingInspected(Message):
    """The Packing screen's source header (a :class:`tsarchive.Recording`), or None and the
    one-line ``problem`` when the file could not be read as it stands (e.g. a .npy needs a rate)."""

    recording: Any
    problem: str | None = None


@dataclass
class PackStep(Message):
    """One :class:`tsarchive.Progress` event from ``tsarchive.pack``."""

    progress: Any


@dataclass
class PackDone(Message):
    """``tsarchive.pack`` returned this :class:`tsarchive.PackResult`."""

    result: Any


@dataclass
class PackHalted(Message):
    """Packing stopped without an archive: cancelled by the user or failed (``text``)."""

    text: str
    cancelled: bool


@dataclass
class ArchiveReady(Message):
    """``tsarchive.open`` returned this archive; ``source`` is the original if found."""

    archive: Any
    source: Path | None


@dataclass
class CheckStep(Message):
    """One :class:`tsarchive.Progress` event from ``Archive.verify``."""

    progress: Any


@dataclass
class CheckDone(Message):
    """``Archive.verify`` returned ``report``; ``against`` is the source compared, if any.

    ``starts`` maps each channel with failing windows to its window start times (s).
    ``report`` is None when verification stopped on an error (``problem``, its one line);
    ``damaged`` tells that the error said the archive is corrupt (a failed check).
    """

    report: Any
    against: Path | None
    starts: dict[str, np.ndarray]
    problem: str | None = None
    damaged: bool = False


@dataclass
class WindowsLoaded(Message):
    """The window table of one channel (``Archive.windows``) and, when at hand, the
    channel's original samples (``original``, from the source recording) for comparison."""

    table: Any
    original: np.ndarray | None = None
    starts: np.ndarray | None = None
    """Each window's start, seconds from the first sample on the logged time axis."""


@dataclass
class StretchLoaded(Message):
    """Samples of the stretch ``start``..``end`` s, thinned for plotting.

    ``original`` and ``error`` are None when the source recording is not at hand.
    """

    start: float
    end: float
    t: np.ndarray
    rebuilt: np.ndarray
    preview: np.ndarray
    original: np.ndarray | None
    error: np.ndarray | None
    eps: float
    first: int = 0
    """The sample number of ``t[0]``."""


@dataclass
class ShortlistFilled(Message):
    """A ranking for the Shortlist (:class:`tsarchive.index.look.Ranking`: rows best first, and what it
    is based on)."""

    rows: object


@dataclass
class ExportDone(Message):
    """``Archive.export`` wrote ``path`` (None: the export failed and nothing was written)."""

    path: Path | None
