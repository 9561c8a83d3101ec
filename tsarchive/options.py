"""Pack settings, parsed once at the boundary (CLI, app or API) into one frozen dataclass.

Every check here is of the user's input and raises :class:`~tsarchive.errors.BadInput`
(a budget: :class:`~tsarchive.errors.BudgetError`) naming what to write instead.
How the source is read (time zone, missing tokens, names…) is
:class:`tsarchive.ingest.options.ReadOptions`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .budget import BudgetSpec, parse_budget_spec
from .errors import BadInput
from .store.schema import MAX_CODE_SIZE
from .windows import MAX_WINDOW, MIN_WINDOW

DEFAULT_CODE_SIZE = 8
DEFAULT_TRAIN_SECONDS = 60.0


def parse_window(window: int | None) -> int | None:
    """Samples per window, or None (chosen from a sample of the recording)."""
    if window is None:
        return None
    if not (MIN_WINDOW <= int(window) <= MAX_WINDOW):
        raise BadInput(f"window {window} is out of range; choose {MIN_WINDOW}..{MAX_WINDOW} samples")
    return int(window)


def parse_code_size(k: int | None) -> int | None:
    """The autoencoder's code length, or None (the default, kept only where it pays)."""
    if k is None:
        return None
    if not (0 <= int(k) <= MAX_CODE_SIZE):
        raise BadInput(f"code size {k} is out of range; choose 0..{MAX_CODE_SIZE} (0 = no autoencoder)")
    return int(k)


def parse_segment(segment: int | None) -> int | None:
    """Samples per browse segment of the learned index: None (the default), 0 (no index) or 2..MAX_SEGMENT."""
    if segment is None or segment == 0:
        return segment
    from .index.segments import choose_segment
    return choose_segment(0, segment)


def parse_train_seconds(seconds: float) -> float:
    """Nominal training seconds (a work budget, not a time limit)."""
    if not (math.isfinite(float(seconds)) and float(seconds) >= 0):
        raise BadInput(f"training time {seconds!r} is not a number of seconds >= 0; give e.g. 60")
    return float(seconds)


@dataclass(frozen=True)
class PackOptions:
    """How to pack: the budget per channel, window, code size and the training's work budget.

    ``window=None`` picks the window length from a sample; ``code_size=None``
    trains the default code size and keeps the model only where it pays (an
    explicit ``code_size > 0`` always keeps it; ``0`` packs without one).
    """

    budget: BudgetSpec
    window: int | None = None
    code_size: int | None = None
    train_seconds: float = DEFAULT_TRAIN_SECONDS
    seed: int = 0
    segment: int | None = None        # the learned index's samples per browse segment (None: default, 0: none)

    @classmethod
    def parse(cls, budget=None, window: int | None = None, code_size: int | None = None,
              train_seconds: float = DEFAULT_TRAIN_SECONDS, seed: int = 0,
              segment: int | None = None) -> "PackOptions":
        """Check and parse every setting (``budget``: a spec text, a number, a Budget or a BudgetSpec)."""
        return cls(parse_budget_spec(budget), parse_window(window), parse_code_size(code_size),
                   parse_train_seconds(train_seconds), int(seed), parse_segment(segment))

    @property
    def explicit_code(self) -> bool:
        """A code size was asked for (the model is then kept whatever it saves)."""
        return self.code_size is not None

    @property
    def code(self) -> int:
        """The code length to train (the default when none was asked for)."""
        return DEFAULT_CODE_SIZE if self.code_size is None else self.code_size
