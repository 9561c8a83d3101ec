"""tsarchive: error-bounded archives of data-logger recordings.

A small autoencoder learned from the recording turns each window into a
short integer code; residuals on a 2ε grid keep every sample within the
budget ε set per channel.  Archives are Parquet + zstd.

    >>> import tsarchive                                   # doctest: +SKIP
    >>> tsarchive.pack("run.csv", "run.tsarchive", budget="0.1%")  # doctest: +SKIP
    >>> arc = tsarchive.open("run.tsarchive")                    # doctest: +SKIP
    >>> arc.read("temp", start=60, end=120)                # doctest: +SKIP

Importing this package loads numpy and pyarrow only; textual is imported
when the app starts.  Training is numpy: torch is needed by no part of the
tool (the tests use it as a reference for the integer decoder).
"""

from .version import __version__

from .budget import DEFAULT_SPEC, Budget, BudgetSpec, parse_budget_spec
from .errors import (ArchiveCorrupt, ArchiveExists, ArchiveNotFound, BadInput, BoundViolation, BudgetError,
                     Cancelled, FormatVersionError, NeedsRate, SourceNotFound, TsArchiveError, UnknownCodec)
from .ingest import ReadOptions, read_recording
from .ingest.survey import SourceSurvey, survey_source
from .options import PackOptions
from .pipeline import pack, unpack
from .recording import ChannelInfo, Recording
from .results import ChannelCheck, ChannelSummary, PackResult, Progress, VerifyReport
from .archive import Archive, ChannelMeta, open_archive
from .browse import WindowTable
from .store.timeaxis import Times


def open(path) -> Archive:  # noqa: A001 - the natural name for the API
    """Open an archive directory for reading (numpy + pyarrow only)."""
    return open_archive(path)


def verify(archive, against=None, progress=None, **options) -> VerifyReport:
    """Verify an archive alone (checksums) or against its source recording (``rate``, ``even_if_changed``)."""
    from .verifier import verify_archive
    arc = archive if isinstance(archive, Archive) else open_archive(archive, strict=False)
    return verify_archive(arc, against=against, progress=progress, **options)


def inspect_source(path, rate: float | None = None, options: ReadOptions | None = None) -> Recording:
    """Read a recording's channels, units, rate and detected resolution (no packing)."""
    return read_recording(path, rate=rate, options=options)


__all__ = [
    "__version__", "pack", "unpack", "open", "verify", "inspect_source", "read_recording", "ReadOptions", "survey_source", "SourceSurvey",
    "Archive", "ChannelMeta", "WindowTable", "PackOptions", "Budget", "BudgetSpec", "DEFAULT_SPEC", "parse_budget_spec",
    "ChannelInfo", "Recording", "Times", "Progress", "PackResult", "ChannelSummary", "VerifyReport", "ChannelCheck",
    "TsArchiveError", "BadInput", "BudgetError", "SourceNotFound", "ArchiveNotFound", "ArchiveExists",
    "ArchiveCorrupt", "FormatVersionError", "UnknownCodec", "BoundViolation", "Cancelled", "NeedsRate",
]
