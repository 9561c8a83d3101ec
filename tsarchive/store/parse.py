"""Validate a manifest read from an archive into frozen dataclasses.

An archive may come from anywhere, so nothing in ``manifest.json`` is
trusted: every field the reader uses is checked here for its type and
range (and against the caps in :mod:`tsarchive.store.schema`) before
anything is allocated from it.  A bad field raises
:class:`~tsarchive.errors.ArchiveCorrupt` with a one-line message naming it.
Redundant fields (a channel's ε and its grid's ε, the share of the budget
used, the predictor counts and the window count) must agree.

Unknown fields are left alone: newer writers may add optional ones, and the
binding (:mod:`tsarchive.store.binding`) covers every field whatever it is.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import datetime

from ..budget import parse_budget, parse_budget_spec
from ..errors import ArchiveCorrupt, BudgetError
from ..predict import PREDICTORS
from ..predict.lpc import LpcCoefs
from ..quantize import Grid
from ..windows import MAX_WINDOW, MIN_WINDOW
from . import schema as S
from .compact import expand

_HEX64 = re.compile(r"[0-9a-f]{64}")
_MEMBER_NAME = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.-]{0,99}")


@dataclass(frozen=True)
class ChannelMeta:
    """A channel as the manifest describes it."""

    name: str
    unit: str
    rate: float
    start: datetime | None
    dtype: str
    n_samples: int
    budget: str
    eps: float
    decimals: int | None
    window: int
    grid: Grid
    scale: int
    lpc: tuple[LpcCoefs, ...]
    worst_error: float
    used_pct: float
    ratio: float
    bits_per_sample: float
    n_exceptions: int
    modes: tuple[tuple[str, int], ...]
    note: str = ""

    @property
    def duration(self) -> float:
        return self.n_samples / self.rate if self.rate > 0 else 0.0

    @property
    def n_windows(self) -> int:
        return -(-self.n_samples // self.window) if self.n_samples else 0


@dataclass(frozen=True)
class TableEntry:
    """One entropy table of a channel as stored (``freqs`` still base64 text)."""

    mode: int
    table: int
    coder: str
    freqs: str


@dataclass(frozen=True)
class Member:
    """A member file listed in the manifest, with its size and SHA-256."""

    name: str
    bytes: int
    sha256: str
    prefix: bool = False     # bytes and SHA-256 of the file's first bytes only (format 6's windows.parquet rows)


@dataclass(frozen=True)
class ModelSpec:
    """The manifest's description of the integer decoder (checked against model.parquet)."""

    sizes: tuple[int, ...]
    n_params: int


def corrupt(what: str) -> ArchiveCorrupt:
    return ArchiveCorrupt(f"manifest field {what}; the archive is damaged or was edited")


def obj(d, key: str, where: str = "", optional: bool = False) -> dict | None:
    v = d.get(key) if isinstance(d, dict) else None
    if v is None and optional:
        return None
    if not isinstance(v, dict):
        raise corrupt(f"{where}{key} is missing or not an object")
    return v


def integer(d: dict, key: str, lo: int, hi: int, where: str = "", optional: bool = False, default=None):
    v = d.get(key)
    if v is None and optional:
        return default
    if type(v) is not int or not lo <= v <= hi:   # bool is not an int here
        raise corrupt(f"{where}{key} is {_show(v)}, not an integer in {lo}..{hi}")
    return v


def number(d: dict, key: str, where: str = "", lo: float = -math.inf, finite: bool = True) -> float:
    v = d.get(key)
    if type(v) not in (int, float) or (finite and not math.isfinite(v)) or math.isnan(v) or v < lo:
        what = "a finite number" if finite else "a number"
        raise corrupt(f"{where}{key} is {_show(v)}, not {what}" + (f" >= {lo:g}" if lo > -math.inf else ""))
    return float(v)


def text(d: dict, key: str, where: str = "", optional: bool = False, limit: int = 4096) -> str:
    v = d.get(key)
    if v is None and optional:
        return ""
    if not isinstance(v, str) or len(v) > limit:
        raise corrupt(f"{where}{key} is {_show(v)}, not a text of at most {limit} characters")
    return v


def _show(v) -> str:
    s = "missing" if v is None else f"{type(v).__name__} {v!r}"
    return s if len(s) <= 40 else s[:37] + "..."


def format_version(m) -> int:
    if not isinstance(m, dict) or m.get("format") != S.FORMAT_NAME:
        raise ArchiveCorrupt("not a tsarchive archive (the manifest does not name the format); "
                             "pass an archive folder")
    v = m.get("format_version")
    if type(v) is not int:
        raise corrupt(f"format_version is {_show(v)}, not an integer")
    return v


def expanded(m: dict, version: int) -> dict:
    """The manifest in its full shape: format 5's compact form expanded (store/compact.py), older as stored."""
    if version < S.LEAN_FROM_VERSION:
        return m
    return expand(m, tuple(p.name for p in PREDICTORS.values()))


def members(m: dict, version: int = S.FORMAT_VERSION) -> tuple[Member, ...]:
    """The member files the manifest lists (format 6 lists every file but windows.parquet, which holds it)."""
    d = obj(m, "members")
    if len(d) > S.MAX_MEMBERS:
        raise corrupt(f"members lists {len(d)} files, more than {S.MAX_MEMBERS}")
    out = []
    for name, info in d.items():
        if not _MEMBER_NAME.fullmatch(name) or name == S.MANIFEST:
            raise corrupt(f"members names {name[:40]!r}, which is not a plain member file name")
        where = f"members.{name}."
        if not isinstance(info, dict):
            raise corrupt(f"{where[:-1]} is not an object")
        sha = text(info, "sha256", where, limit=64)
        if not _HEX64.fullmatch(sha):
            raise corrupt(f"{where}sha256 is not 64 lowercase hex digits")
        out.append(Member(name, integer(info, "bytes", 0, S.MAX_MEMBER_BYTES, where), sha))
    names = {x.name for x in out}
    inside = version >= S.INSIDE_FROM_VERSION
    for need in S.REQUIRED_MEMBERS:
        if (need in names) == inside:
            raise corrupt(f"members {'lists' if inside else 'does not list'} {need}")
    if inside:
        d = obj(m, "data")
        sha = text(d, "sha256", "data.", limit=64)
        if not _HEX64.fullmatch(sha):
            raise corrupt("data.sha256 is not 64 lowercase hex digits")
        out.append(Member(S.WINDOWS, integer(d, "bytes", 4, S.MAX_MEMBER_BYTES, "data."), sha, prefix=True))
    if (S.MODEL in names) != (m.get("model") is not None):
        raise corrupt(f"model and members disagree on whether {S.MODEL} exists")
    return tuple(out)


def model_spec(m: dict, window: int) -> ModelSpec | None:
    d = obj(m, "model", optional=True)
    code_size = integer(m, "code_size", 0, S.MAX_CODE_SIZE)
    if d is None:
        if code_size:
            raise corrupt(f"code_size is {code_size} but there is no model")
        return None
    sizes = d.get("sizes")
    if not isinstance(sizes, list) or not 2 <= len(sizes) <= S.MAX_LAYERS + 1 or \
            any(type(s) is not int or not 1 <= s <= MAX_WINDOW for s in sizes):
        raise corrupt("model.sizes is not a list of 2..17 layer widths")
    if sizes[0] != code_size or sizes[-1] != window:
        raise corrupt(f"model.sizes {sizes[:1]}..{sizes[-1:]} disagree with code_size {code_size} and window {window}")
    n_params = sum(a * b + b for a, b in zip(sizes, sizes[1:]))
    if n_params > S.MAX_MODEL_PARAMS:
        raise corrupt(f"model has {n_params} parameters, more than {S.MAX_MODEL_PARAMS}")
    return ModelSpec(tuple(sizes), n_params)


def facts(m: dict) -> None:
    """The reported facts outside the channels: the source's name, size and SHA-256, the raw size."""
    src = obj(m, "source")
    text(src, "name", "source.")
    integer(src, "bytes", 0, S.MAX_MEMBER_BYTES, "source.", optional=True)
    text(src, "sha256", "source.", optional=True, limit=64)
    integer(obj(m, "summary"), "raw_bytes", 0, S.MAX_MEMBER_BYTES, "summary.")
    for key in ("tool_version", "created_utc", "budget_spec", "model_note"):
        text(m, key, optional=True, limit=1 << 16)


def window(m: dict) -> int:
    return integer(m, "window", MIN_WINDOW, MAX_WINDOW)


def channel_list(m: dict) -> list[dict]:
    chans = m.get("channels")
    if not isinstance(chans, list) or len(chans) > S.MAX_CHANNELS or not all(isinstance(c, dict) for c in chans):
        raise corrupt(f"channels is not a list of at most {S.MAX_CHANNELS} objects")
    names = [c.get("name") for c in chans]
    if len(set(map(repr, names))) != len(names):
        raise corrupt("channels repeats a channel name")
    return chans


def grids_of_version(channels, version: int) -> None:
    """Refuse a grid kind that the archive's format version does not have (a crafted or mixed archive)."""
    for c in channels:
        since = S.GRIDS_OF_VERSION.get(c.grid.kind, S.OLDEST_READABLE)
        if version < since:
            raise corrupt(f"channel {c.name[:40]!r}: a {c.grid.kind} grid in a format {version} archive "
                          f"({c.grid.kind} grids are format {since} on)")


def channel_meta(d: dict, W: int) -> ChannelMeta:
    """One validated channel entry (see the module doc for what is checked)."""
    name = text(d, "name", "channels[].", limit=1024)
    if not name:
        raise corrupt("channels[].name is empty")
    at = f"channel {name[:40]!r}: "
    s = obj(d, "summary", at)
    grid = Grid.from_dict(obj(d, "grid", at))
    eps = number(d, "eps", at, lo=0.0)
    if eps != grid.eps:
        raise corrupt(f"{at}eps {eps!r} differs from its grid's eps {grid.eps!r}")
    budget = text(d, "budget", at)
    _check_budget(at, budget, eps)
    n = integer(d, "n_samples", 0, S.MAX_SAMPLES, at)
    start = d.get("start")
    if start is not None:
        try:
            start = datetime.fromisoformat(text(d, "start", at, limit=64).replace("Z", "+00:00"))
        except ValueError:
            raise corrupt(f"{at}start {start[:40]!r} is not an ISO 8601 time") from None
    worst = number(s, "worst_error", at + "summary.", lo=0.0)
    used = number(s, "used_pct", at + "summary.", lo=0.0, finite=False)
    expected = 100.0 * worst / eps if eps > 0 else (0.0 if worst == 0 else math.inf)
    if not (used == expected or (math.isfinite(expected) and abs(used - expected) <= 1e-5 * max(expected, 1e-300))):
        raise corrupt(f"{at}summary.used_pct {used!r} disagrees with worst_error / eps ({expected:.6g})")
    modes = s.get("modes", {})
    known = {p.name for p in PREDICTORS.values()}
    if not isinstance(modes, dict) or any(k not in known or type(v) is not int or v < 0 for k, v in modes.items()):
        raise corrupt(f"{at}summary.modes is not a count per known predictor")
    n_windows = -(-n // W)
    if modes and sum(modes.values()) != n_windows:
        raise corrupt(f"{at}summary.modes counts {sum(modes.values())} windows, not {n_windows}")
    lpc = d.get("lpc")
    if not isinstance(lpc, list) or not lpc or len(lpc) > 127 or not all(isinstance(c, dict) for c in lpc):
        raise ArchiveCorrupt("linear-prediction sets are missing or malformed; the archive is damaged")
    return ChannelMeta(
        name=name, unit=text(d, "unit", at, optional=True), rate=number(d, "rate", at, lo=S.MIN_RATE),
        start=start, dtype=text(d, "dtype", at, limit=32), n_samples=n, budget=budget,
        eps=eps, decimals=integer(d, "decimals", 0, 30, at, optional=True), window=W, grid=grid,
        scale=integer(d, "scale", 1, 1 << 62, at), lpc=tuple(LpcCoefs.from_dict(c) for c in lpc),
        worst_error=worst, used_pct=used, ratio=number(s, "ratio", at + "summary.", lo=0.0, finite=False),
        bits_per_sample=number(s, "bits_per_sample", at + "summary.", lo=0.0, finite=False),
        n_exceptions=integer(s, "n_exceptions", 0, max(n, 0), at + "summary.", optional=True, default=0),
        modes=tuple(sorted(modes.items())), note=text(d, "note", at, optional=True, limit=1 << 16))


def _check_budget(at: str, budget: str, eps: float) -> None:
    """A channel's budget text and its ε must agree: lossless is ε 0, an absolute budget is ε itself
    (or 0 where the logged resolution already serves it exactly)."""
    try:
        b = parse_budget(budget)
    except BudgetError:
        raise corrupt(f"{at}budget {budget[:40]!r} is not a budget") from None
    if (b.kind == "lossless" and eps != 0) or \
            (b.kind == "abs" and eps != 0 and not math.isclose(eps, b.value, rel_tol=1e-11)):
        raise corrupt(f"{at}eps {eps!r} disagrees with its budget {budget}")


def budget_spec_agrees(m: dict, channels) -> None:
    """The archive's budget spec (when stored) names each channel's budget as the channel does."""
    spec = m.get("budget_spec")
    if spec is None:
        return
    try:
        parsed = parse_budget_spec(text(m, "budget_spec", limit=1 << 16))
    except BudgetError:
        raise corrupt(f"budget_spec {spec[:40]!r} is not a budget spec") from None
    for c in channels:
        if parsed.for_channel(c.name).spec != c.budget:
            raise corrupt(f"budget_spec gives channel {c.name[:40]!r} {parsed.for_channel(c.name).spec}, "
                          f"the channel says {c.budget}")


def tables(d: dict) -> tuple[TableEntry, ...]:
    """A channel's entropy table entries, checked for type and count (the bytes are decoded by the reader)."""
    raw = d.get("tables", [])
    if not isinstance(raw, list) or len(raw) > S.MAX_TABLES:
        raise ArchiveCorrupt(f"channel {str(d.get('name'))[:40]}: an entropy table entry is malformed; "
                             "the archive is damaged")
    out = []
    for t in raw:
        if not isinstance(t, dict) or type(t.get("mode")) is not int or type(t.get("table")) is not int \
                or not isinstance(t.get("coder"), str) or not isinstance(t.get("freqs"), str) \
                or len(t["freqs"]) > S.MAX_TABLE_CHARS or not -128 <= t["table"] <= 127:
            raise ArchiveCorrupt(f"channel {str(d.get('name'))[:40]}: an entropy table entry is malformed; "
                                 "the archive is damaged")
        out.append(TableEntry(t["mode"], t["table"], t["coder"], t["freqs"]))
    return tuple(out)
