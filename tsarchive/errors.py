"""One typed error hierarchy for tsarchive.

Every error message says what was wrong and what to do about it, in one
line.  The CLI prints ``str(error)`` on stderr and exits with code 2.
Where it helps callers, an error is also the matching built-in exception.
"""

from __future__ import annotations


class TsArchiveError(Exception):
    """Base class of every error tsarchive raises on purpose."""


class BadInput(TsArchiveError, ValueError):
    """A source recording or an argument cannot be used as given."""


class NeedsRate(BadInput):
    """A source has no time axis and no rate was given (e.g. a .npy): give the samples per second."""


class BudgetError(BadInput):
    """An error-budget spec cannot be parsed or cannot be met."""


class SourceNotFound(TsArchiveError, FileNotFoundError):
    """A source recording does not exist."""


class ArchiveNotFound(TsArchiveError, FileNotFoundError):
    """An archive does not exist."""


class ArchiveExists(TsArchiveError, FileExistsError):
    """The output archive already exists and overwriting was not asked for."""


class ArchiveCorrupt(TsArchiveError):
    """An archive is damaged, incomplete or not a tsarchive archive."""


class FormatVersionError(ArchiveCorrupt):
    """An archive uses a format version this tool cannot read."""


class UnknownCodec(TsArchiveError, KeyError):
    """A stage id stored in an archive is not in the registry."""

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else "unknown codec"


class BoundViolation(TsArchiveError):
    """A decoded sample lies outside its error budget (pack refuses to finish)."""


class Cancelled(TsArchiveError):
    """Work was cancelled by the user; nothing was written."""
