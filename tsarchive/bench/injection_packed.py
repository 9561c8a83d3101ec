"""Injection bench on packed archives: what ``tsarchive unusual`` answers on archives packed with the defaults.

The injection table (:mod:`tsarchive.bench.injection`) builds the index on each changed
recording directly, as ``pack`` would before its byte budget; but the budget keeps no index
for short or very compressible recordings, and there the command answers from an index
computed on opening (:mod:`tsarchive.index.derived`) or, above its cap, from the per-window
fallback.  Here every case of that table (the same recordings, faults and segments, on the
first reported seed) is packed at :data:`BUDGET` with the defaults and ranked twice:

* ``look`` -- :func:`tsarchive.index.look.unusual`, as the command answers (stored index,
  derived index, or windows: the ``kept`` column says which);
* ``fallback`` -- the stored per-window outlier score (:meth:`tsarchive.archive.Archive.outliers`).

Precision@k is taken twice.  In the table's *segments* (the injection table's unit, k = the
faulty segments): a ranking of longer units (windows) points at every segment of its first unit,
then of its second, and so on, as a user reading it would look.  And in each ranking's own unit
(k = the units holding samples of a faulty segment): a window holds many segments, so there the
fallback's k is smaller and its chance level (k / windows) far higher than the index's.
"""

from __future__ import annotations

import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import realdata
from .injection_faults import KINDS, MAX_SAMPLES, N_INJECT, SEVERITIES, inject, pick_segments, reported_seeds

BUDGET = "1%"
TRAIN_SECONDS = 6.0          # as the index-cost table packs (tsarchive/bench/index_costs.py)


@dataclass(frozen=True)
class PackedCase:
    name: str
    kind: str
    severity: str
    kept: str                # stored | derived | none (windows)
    look: float              # precision@k of look.unusual, in segments
    fallback: float          # precision@k of the per-window outlier score, in segments
    fallback_own: float      # the same in windows


@dataclass(frozen=True)
class PackedSet:
    name: str
    n_samples: int
    kept: str
    segment: int             # samples per segment of look's answer (0: windows)
    window: int
    derive_s: float          # building the derived index once (nan: a stored index, or none)


def _hits(starts: np.ndarray, size: int, spans: list[tuple[int, int]]) -> np.ndarray:
    """Whether each unit ``[start, start + size)`` holds samples of one of ``spans``."""
    return np.array([any(a < s + size and s < b for a, b in spans) for s in starts.tolist()], dtype=bool)


def unit_precision(n: int, size: int, spans: list[tuple[int, int]], ranked_starts) -> float:
    """Precision@k of a ranking of units of ``size`` samples (k = units holding a faulty span)."""
    k = int(_hits(np.arange(0, n, size), size, spans).sum())
    top = np.asarray(list(ranked_starts)[:k], dtype=np.int64)
    return float(_hits(top, size, spans).sum()) / k if k else float("nan")


def segment_precision(S: int, n: int, truth: np.ndarray, size: int, ranked_starts) -> float:
    """Precision@k (k = len(truth)) of the segments of ``S`` samples that a ranking of units of ``size``
    samples points at, unit by unit in rank order (each unit's segments in order, each segment once)."""
    order: list[int] = []
    for a in ranked_starts:
        order += [s for s in range(a // S, -(-min(n, a + size) // S)) if s not in order]
        if len(order) >= len(truth):
            break
    return len(set(order[:len(truth)]) & set(np.asarray(truth).tolist())) / len(truth)


def _pack(x: np.ndarray, rate: float, out: Path):
    import tsarchive
    from tsarchive.archive import open_archive
    np.save(out.with_suffix(".npy"), x)
    tsarchive.pack(out.with_suffix(".npy"), out, BUDGET, rate=rate, force=True, train_seconds=TRAIN_SECONDS)
    return open_archive(out)


def _kept(arc, name: str) -> str:
    from tsarchive.index import derived, member
    return "stored" if member.has_index(arc) else "derived" if derived.can_derive(arc, name) else "none"


def score_case(arc, S: int, truth: np.ndarray, n: int) -> tuple[float, float, float]:
    """(look, fallback) precision@k in segments of ``S``, and the fallback's in windows, on one packed
    archive (first channel) whose faulty segments are ``truth``."""
    from tsarchive.index import look
    name = arc.channels[0].name
    r = look.unusual(arc, name, k=n)
    W = arc.channel(name).window
    windows = [w * W for w in arc.outliers(name, k=-(-n // W))]
    spans = [(int(s) * S, min(n, (int(s) + 1) * S)) for s in truth]
    return (segment_precision(S, n, truth, r.size, [row.start for row in r.rows]),
            segment_precision(S, n, truth, W, windows), unit_precision(n, W, spans, windows))


def run(sets, kinds=KINDS, severities=SEVERITIES, log=lambda m: None) -> tuple[list[PackedSet], list[PackedCase]]:
    from tsarchive.archive import open_archive
    from tsarchive.index import derived
    from tsarchive.index.segments import choose_segment
    seed = reported_seeds(1)[0]
    per_set, cases = [], []
    with tempfile.TemporaryDirectory(prefix="tsbench-packed-") as tmp:
        for name in sets:
            got = realdata.load(name, MAX_SAMPLES)
            if isinstance(got, str):
                log(got)
                continue
            x = np.asarray(got.data[:, 0], dtype=np.float64)
            S, sigma = choose_segment(len(x)), float(np.std(x)) or 1.0     # the injection table's segments
            arc = _pack(x, got.spec.rate, Path(tmp) / f"{name}.tsarchive")
            ch, kept = arc.channels[0].name, _kept(arc, arc.channels[0].name)
            fresh, took = open_archive(arc.path), float("nan")
            if kept == "derived":
                t0 = time.perf_counter()
                derived.derive(fresh, ch)
                took = time.perf_counter() - t0
            per_set.append(PackedSet(name, len(x), kept, S if kept != "none" else 0, arc.window, took))
            log(f"{name}: packed at {BUDGET}, index {kept}")
            for kind in kinds:
                for sev in severities:
                    rng = np.random.default_rng([seed, KINDS.index(kind), SEVERITIES.index(sev)])
                    y = x.copy()
                    truth = pick_segments(-(-len(x) // S), N_INJECT, rng)
                    for s in truth:
                        inject(y, int(s), S, kind, sev, sigma, rng)
                    a = _pack(y, got.spec.rate, Path(tmp) / f"{name}-{kind}-{sev}.tsarchive")
                    cases.append(PackedCase(name, kind, sev, _kept(a, a.channels[0].name),
                                            *score_case(a, S, truth, len(y))))
    return per_set, cases


def table(per_set: list[PackedSet], cases: list[PackedCase]) -> str:
    lines = [f"{'set':<18} {'samples':>8} {'kept':>8} {'segment':>7} {'window':>6} {'derive s':>8}"]
    lines += [f"{s.name:<18} {s.n_samples:>8} {s.kept:>8} {s.segment:>7} {s.window:>6} {s.derive_s:>8.3f}"
              for s in per_set]
    lines.append("")
    head = f"{'kind':<12} {'kept':<8} {'cases':>5} {'look':>7} {'fallback':>8} {'fallback in windows':>19}"
    lines += [head, "-" * len(head)]
    present = [k for k in ("stored", "derived", "none") if any(c.kept == k for c in cases)]
    for kind in KINDS + (None,):
        for kept in present + ([None] if len(present) > 1 else []):
            got = [c for c in cases if (kind is None or c.kind == kind) and (kept is None or c.kept == kept)]
            if got:
                lines.append(f"{kind or 'all':<12} {kept or 'any':<8} {len(got):>5} "
                             f"{np.nanmean([c.look for c in got]):7.3f} {np.nanmean([c.fallback for c in got]):8.3f} "
                             f"{np.nanmean([c.fallback_own for c in got]):19.3f}")
    return "\n".join(lines)
