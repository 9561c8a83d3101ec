"""Error budgets: parse ``--budget`` specs and turn them into a per-channel ε.

Spec grammar (one line, no spaces needed)::

    0.02                 absolute, in the channel's own units
    0.1%                 0.1 % of the channel's value range (max - min of finite samples)
    lossless             exact at the logged resolution (integer or decimal-grid channels only)
    temp=0.05,accel=0.1% per channel; a bare entry in the list applies to every channel not named

The default, when no spec is given, is :data:`DEFAULT_SPEC` (0.1 % of range).
Every decoded sample x̂ then satisfies ``|x̂ - x| <= eps`` for its channel.
A budget of ``0`` is refused (write ``lossless`` for an exact archive).

The budget's path: the CLI, the app and the API turn the user's text into a
:class:`BudgetSpec` once (:func:`parse_budget_spec`, :func:`spec_from_fields`);
packing resolves it to ε per channel (:meth:`Budget.resolve`) and stores ε in
the channel's grid; reading takes ε from there
(:class:`tsarchive.channelcodec.ChannelCodec`).  Whether a worst error is within
its budget is decided by :func:`within_budget` alone.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

from typing import Sequence

from .errors import BudgetError

#: The budget when none is given: 0.1 % of each channel's range (the one place this default is spelled).
DEFAULT_SPEC = "0.1%"

_NUMBER = re.compile(r"^[+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?$")


@dataclass(frozen=True)
class Budget:
    """One channel's budget as the user wrote it: ``kind`` is abs, pct or lossless."""

    kind: str
    value: float = 0.0

    def __post_init__(self) -> None:
        if self.kind not in ("abs", "pct", "lossless"):
            raise BudgetError(f"unknown budget kind {self.kind!r}; use a number, a percentage or 'lossless'")
        if self.kind != "lossless" and not (math.isfinite(self.value) and self.value > 0):
            raise BudgetError(f"budget must be a positive finite number, got {self.value!r}; e.g. 0.02 or 0.1%")
        if self.kind == "pct" and self.value > 100:
            raise BudgetError(f"budget {self.value}% is over 100 % of the range; use a smaller percentage")

    @property
    def spec(self) -> str:
        if self.kind == "lossless":
            return "lossless"
        text = f"{self.value:.12g}"
        return text + "%" if self.kind == "pct" else text

    def resolve(self, value_range: float, name: str = "") -> float:
        """ε in channel units: 0.0 for lossless, the value itself for an absolute budget, and
        ``value`` % of ``value_range`` for a percentage.

        A percentage of a channel whose finite values span zero range
        (constant, or all NaN) or an infinite one gives 0.0: the channel is
        then stored exactly, and packing notes why.
        """
        if self.kind == "lossless":
            return 0.0
        if self.kind == "abs":
            return float(self.value)
        eps = float(self.value) / 100.0 * float(value_range)
        if not (math.isfinite(eps) and eps > 0):
            return 0.0
        return eps


@dataclass(frozen=True)
class BudgetSpec:
    """A parsed ``--budget`` spec: a default plus named per-channel overrides."""

    default: Budget
    per_channel: tuple[tuple[str, Budget], ...] = field(default=())

    def for_channel(self, name: str) -> Budget:
        return dict(self.per_channel).get(name, self.default)

    def check_names(self, names: list[str] | tuple[str, ...]) -> None:
        unknown = [n for n, _ in self.per_channel if n not in names]
        if unknown:
            raise BudgetError(f"budget names unknown channel(s) {', '.join(unknown)}; channels are: {', '.join(names)}")

    @property
    def spec(self) -> str:
        parts = [f"{n}={b.spec}" for n, b in self.per_channel]
        return ",".join([self.default.spec, *parts])


def parse_budget(text: str) -> Budget:
    """Parse one budget entry: ``0.02``, ``0.1%`` or ``lossless``."""
    t = text.strip().lower()
    if t in ("lossless", "exact"):
        return Budget("lossless")
    kind = "abs"
    if t.endswith("%"):
        kind, t = "pct", t[:-1].strip()
    if not _NUMBER.match(t):
        raise BudgetError(
            f"cannot read budget {text!r}; write an absolute value like 0.02, a percentage like 0.1% or 'lossless'")
    if float(t) == 0:
        raise BudgetError(f"budget {text.strip()!r} is zero; write 'lossless' for an exact archive, or a positive "
                          "budget such as 0.02 or 0.1%")
    return Budget(kind, float(t))


def parse_budget_spec(spec: str | Budget | BudgetSpec | None) -> BudgetSpec:
    """Parse a full spec such as ``temp=0.05,accel=0.1%`` (see module docstring)."""
    if spec is None:
        spec = DEFAULT_SPEC
    if isinstance(spec, BudgetSpec):
        return spec
    if isinstance(spec, Budget):
        return BudgetSpec(spec)
    if isinstance(spec, (int, float)):
        return BudgetSpec(parse_budget(repr(float(spec))))
    default: Budget | None = None
    named: dict[str, Budget] = {}
    entries = [e for e in str(spec).split(",") if e.strip()]
    if not entries:
        raise BudgetError("empty budget; write e.g. 0.1% or temp=0.05,accel=0.1%")
    for entry in entries:
        if "=" in entry:
            name, _, value = entry.partition("=")
            name = name.strip()
            if not name:
                raise BudgetError(f"budget entry {entry!r} has no channel name; write name=value")
            if name in named:
                raise BudgetError(f"budget names channel {name!r} twice; give it once")
            named[name] = parse_budget(value)
        else:
            if default is not None:
                raise BudgetError(f"budget has two defaults ({default.spec} and {entry.strip()}); name the channels")
            default = parse_budget(entry)
    return BudgetSpec(default or parse_budget(DEFAULT_SPEC), tuple(named.items()))


def spec_from_fields(names: Sequence[str], texts: Sequence[str], default: str = DEFAULT_SPEC) -> BudgetSpec:
    """One :class:`BudgetSpec` from one text field per channel (the app's form); an empty field takes
    ``default``.  Each field must be a single budget (``0.02``, ``0.1%`` or ``lossless``)."""
    cleaned = [(t.strip() or default) for t in texts]
    for name, text in zip(names, cleaned):
        if "," in text or "=" in text:
            raise BudgetError(f"budget for {name!r} must be one value such as 0.02, 0.1% or lossless")
    budgets = [parse_budget(t) for t in cleaned]
    if len(set(cleaned)) <= 1:                      # one budget for all, as typed
        return BudgetSpec(budgets[0] if budgets else parse_budget(default))
    return BudgetSpec(parse_budget(DEFAULT_SPEC), tuple(zip(names, budgets)))


def within_budget(worst_error: float | None, eps: float) -> bool:
    """Whether a channel's worst error keeps its budget ε (the one place this is decided; ``None``,
    an error that could not be measured, does not)."""
    return worst_error is not None and float(worst_error) <= float(eps)


def used_pct(worst_error: float, eps: float) -> float:
    """The worst error as a percentage of ε (an exact channel: 0 when exact, else infinite)."""
    return 100.0 * worst_error / eps if eps > 0 else (0.0 if worst_error == 0 else math.inf)
