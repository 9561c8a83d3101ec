"""Frozen result and progress records shared by the library, CLI and app."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable, Optional

from .budget import within_budget
from .predict import PREDICTORS


@dataclass(frozen=True)
class Progress:
    """One progress event.  ``stage`` is read, train, encode, write or check (pack)
    or verify (verify)."""

    stage: str
    done: int
    total: int
    message: str = ""
    loss: float | None = None
    eta_s: float | None = None


ProgressFn = Optional[Callable[[Progress], None]]


@dataclass
class ChannelTally:
    """One channel's counts while its rows are written (then its manifest summary): the worst error,
    the estimated bytes of its own rows, its verbatim samples, and windows per predictor."""

    worst_error: float = 0.0
    bytes_est: int = 0
    n_exceptions: int = 0
    modes: dict = field(default_factory=lambda: {p.name: 0 for p in PREDICTORS.values()})


@dataclass(frozen=True)
class ChannelSummary:
    """Per-channel outcome of a pack.

    ``ratio`` and ``bits_per_sample`` charge each channel its share of the
    archive's bytes (its own payloads, codes and exceptions, plus shared
    bytes such as the model in proportion to its samples).
    """

    name: str
    unit: str
    budget: str
    eps: float
    worst_error: float
    used_pct: float
    ratio: float
    bits_per_sample: float
    n_samples: int
    modes: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class PackResult:
    archive: Path
    channels: tuple[ChannelSummary, ...]
    source_bytes: int
    raw_bytes: int
    archive_bytes: int
    ratio: float
    elapsed_s: float

    @property
    def within_budget(self) -> bool:
        return all(within_budget(c.worst_error, c.eps) for c in self.channels)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["archive"] = str(self.archive)
        d["channels"] = [c.to_dict() for c in self.channels]
        return d


@dataclass(frozen=True)
class ChannelCheck:
    name: str
    eps: float
    worst_error: float | None  # None when no source was compared
    n_bad: int
    bad_windows: tuple[int, ...]
    bad_checksums: tuple[int, ...] = ()

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class VerifyReport:
    """Outcome of verifying an archive (against its source when ``compared``)."""

    ok: bool
    checksums_ok: bool
    compared: bool
    channels: tuple[ChannelCheck, ...]
    problems: tuple[str, ...] = ()
    #: whether the compared file is the one that was packed (size and SHA-256); None: not checked or not recorded
    source_same: bool | None = None
    #: that finding in one sentence ("" when no file was given)
    source_check: str = ""

    def to_dict(self) -> dict:
        return {"ok": self.ok, "checksums_ok": self.checksums_ok, "compared": self.compared,
                "source_same": self.source_same, "source_check": self.source_check,
                "channels": [c.to_dict() for c in self.channels], "problems": list(self.problems)}
