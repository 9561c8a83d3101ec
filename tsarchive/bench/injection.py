"""Injection bench: does the index find what was done to a real recording, better than simple baselines?

    python -m tsarchive.bench --injection [--injection-seeds 3] [--injection-sets ecg_mitbih208,...]

For every real recording the bench ships (:mod:`tsarchive.bench.realdata`;
the first channel, at most 2**18 samples, sets of at least 4096 samples),
every kind of fault, both severities and several seeds: ``N_INJECT``
segments (not neighbours) get one fault each (seeds from :data:`REPORTED_FROM`; the
score was designed on :data:`TUNING_SEEDS`, which the bench never reports), the index is built on the
changed recording exactly as ``pack`` builds it, and each method ranks the
same segments.  Precision@k with k = the number of faulty segments: the
share of the top k that are faulty.

Baselines on the same segments, computed in the same run:

* ``diff-rms`` -- RMS of the first difference, ranked by distance from the median;
* ``pca8`` -- numpy SVD of the mean-removed segments, 8 components, peak residual;
* ``mad-z`` -- rolling median / MAD z-score of every sample (window = one
  segment), the segment's largest.

Look-alikes (``recall_at_5``): 50 query segments of each unchanged
recording; exact = the 5 nearest segments by Euclidean distance with means
removed (on the recording's samples: a decoded archive is within its budget
of them); ours = :func:`tsarchive.index.query.alike` (shortlist by code,
re-ranked on those segments).

The same cases packed with the defaults, ranked by what ``tsarchive unusual`` answers there (a stored
or derived index, or windows): :mod:`tsarchive.bench.injection_packed`; the faults themselves:
:mod:`tsarchive.bench.injection_faults`.

Which coder (linear or nonlinear) a recording gets is decided once, on the
unchanged recording, as ``pack`` decides it; the changed copies retrain the
nonlinear coder only where it won there (training it for every run would
multiply the bench's time to repeat that decision).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from tsarchive.index import build_channel
from tsarchive.index import query as Q

from . import realdata
from .injection_faults import (KINDS, MAX_SAMPLES, N_INJECT, REPORTED_FROM, SEVERITIES, TUNING_SEEDS,
                               inject, pick_segments, reported_seeds)
from .index_costs import BUDGETS, REPEATS, archive_cost, cost_table, query_cost

METHODS = ("index", "diff-rms", "pca8", "mad-z")
MIN_SAMPLES = 4096


def precision_at_k(score: np.ndarray, truth: np.ndarray) -> float:
    """Share of the ``len(truth)`` highest scores (ties by position) that are in ``truth``."""
    k = len(truth)
    if k == 0:
        return float("nan")
    top = Q.ranked(score, k)
    return len(set(top.tolist()) & set(np.asarray(truth).tolist())) / k


def segments(x: np.ndarray, S: int) -> np.ndarray:
    n = len(x) // S * S
    rows = x[:n].reshape(-1, S)
    if n < len(x):
        tail = np.full(S, x[-1])
        tail[:len(x) - n] = x[n:]
        rows = np.vstack([rows, tail])
    return rows


def baseline_diff_rms(rows: np.ndarray) -> np.ndarray:
    r = np.sqrt(np.mean(np.diff(rows, axis=1) ** 2, axis=1))
    return np.abs(r - np.median(r))


def baseline_pca8(rows: np.ndarray) -> np.ndarray:
    c = Q.centred(rows)
    _, _, vt = np.linalg.svd(c, full_matrices=False)
    v = vt[:8]
    return np.abs(c - (c @ v.T) @ v).max(axis=1)


def baseline_mad_z(x: np.ndarray, S: int) -> np.ndarray:
    from scipy.ndimage import median_filter
    w = S + 1 - S % 2
    med = median_filter(x, size=w, mode="nearest")
    dev = np.abs(x - med)
    mad = median_filter(dev, size=w, mode="nearest")
    z = dev / (Q._MAD_NORMAL * mad + 1e-12 * (np.std(x) or 1.0))
    return segments(z, S).max(axis=1)


@dataclass
class InjectionResult:
    """precision[(kind, severity, method)] -> list over sets and seeds; recall[set] -> recall@5."""

    precision: dict = field(default_factory=dict)
    recall: dict = field(default_factory=dict)
    sets: list = field(default_factory=list)
    kinds_of_coder: dict = field(default_factory=dict)

    def mean(self, kind: str | None, severity: str | None, method: str) -> float:
        vals = [v for (k, s, m), vs in self.precision.items() for v in vs
                if m == method and (kind is None or k == kind) and (severity is None or s == severity)]
        return float(np.mean(vals)) if vals else float("nan")


def scores_for(y: np.ndarray, try_nonlinear: bool, seed: int = 0):
    """Every method's segment scores on recording ``y`` (1-D), and the index built on it."""
    ci = build_channel(lambda a, b: y[a:b], "x", len(y), seed=seed, try_nonlinear=try_nonlinear)
    rows = segments(y, ci.segment)
    return {"index": Q.unusual_scores(ci).score, "diff-rms": baseline_diff_rms(rows),
            "pca8": baseline_pca8(rows), "mad-z": baseline_mad_z(y, ci.segment)}, ci


def recall_at_5(x: np.ndarray, ci, queries: int = 50) -> float:
    rows = segments(x, ci.segment)
    cen = Q.centred(rows)
    hits = 0
    qs = np.unique(np.linspace(0, len(rows) - 1, min(queries, len(rows))).round().astype(np.int64))
    for q in qs:
        d = np.sqrt(((cen - cen[q]) ** 2).sum(axis=1))
        d[q] = np.inf
        exact = set(np.lexsort((np.arange(len(d)), d))[:5].tolist())
        ours = {s for s, _ in Q.alike(ci, int(q), 5, lambda ids: rows[ids])}
        hits += len(exact & ours)
    return hits / (5 * len(qs))


def _long_enough(name: str) -> bool:
    got = realdata.load(name, MAX_SAMPLES)
    return not isinstance(got, str) and len(got.data) >= MIN_SAMPLES


def run(sets=None, seeds: int = 3, kinds=KINDS, severities=SEVERITIES, try_nonlinear: bool = True,
        log=lambda m: None, tuning: bool = False) -> InjectionResult:
    """The bench on the reported seeds, or (``tuning``) on :data:`TUNING_SEEDS`, where a change of the
    score is to be chosen (the reported seeds then say how it does on faults it was not chosen on)."""
    res = InjectionResult()
    for name in sets or realdata.names():
        got = realdata.load(name, MAX_SAMPLES)
        if isinstance(got, str):
            log(got)
            continue
        x = np.asarray(got.data[:, 0], dtype=np.float64)
        if len(x) < MIN_SAMPLES:
            continue
        res.sets.append(name)
        sigma = float(np.std(x)) or 1.0
        base = build_channel(lambda a, b: x[a:b], "x", len(x), try_nonlinear=try_nonlinear)
        res.recall[name] = recall_at_5(x, base)
        res.kinds_of_coder[name] = base.coder.kind
        S, n_seg = base.segment, base.n_segments
        log(f"{name}: {len(x)} samples, segments of {S}, coder {base.coder.kind}, recall@5 {res.recall[name]:.3f}")
        for kind in kinds:
            for sev in severities:
                for seed in (TUNING_SEEDS if tuning else reported_seeds(seeds)):
                    rng = np.random.default_rng([seed, KINDS.index(kind), SEVERITIES.index(sev)])
                    y = x.copy()
                    truth = pick_segments(n_seg, N_INJECT, rng)
                    for s in truth:
                        inject(y, int(s), S, kind, sev, sigma, rng)
                    sc, _ = scores_for(y, try_nonlinear and base.coder.kind == "nonlinear")
                    for m in METHODS:
                        res.precision.setdefault((kind, sev, m), []).append(precision_at_k(sc[m], truth))
    return res


def table(res: InjectionResult) -> str:
    head = f"{'kind':<12} {'severity':<8} " + " ".join(f"{m:>9}" for m in METHODS) + "  best baseline  ours better"
    lines = [head, "-" * len(head)]
    for kind in KINDS:
        for sev in SEVERITIES + (None,):
            vals = [res.mean(kind, sev, m) for m in METHODS]
            if np.isnan(vals[0]):
                continue
            best = max(vals[1:])
            lines.append(f"{kind:<12} {sev or 'both':<8} " + " ".join(f"{v:9.3f}" for v in vals)
                         + f"  {best:13.3f}  {'yes' if vals[0] > best else 'no'}")
    vals = [res.mean(None, None, m) for m in METHODS]
    lines.append(f"{'all':<12} {'both':<8} " + " ".join(f"{v:9.3f}" for v in vals)
                 + f"  {max(vals[1:]):13.3f}  {'yes' if vals[0] > max(vals[1:]) else 'no'}")
    lines.append("")
    lines.append("look-alikes, recall@5 against exact search (mean removed, Euclidean): "
                 + ", ".join(f"{n} {r:.3f} ({res.kinds_of_coder[n]})" for n, r in res.recall.items()))
    return "\n".join(lines)


def run_all(args, out, log) -> dict:
    """The ``--injection`` mode of ``python -m tsarchive.bench``: both tables; returns them for ``--json``."""
    import tempfile
    sets = [t.strip() for t in args.injection_sets.split(",")] if args.injection_sets else None
    packed = ([], [])
    if args.injection:
        res = run(sets, seeds=args.injection_seeds, log=log)
        out(f"\ninjection: {N_INJECT} faulty segments per recording and run, {args.injection_seeds} seed(s); "
            f"precision@k (k = {N_INJECT}), mean over sets {', '.join(res.sets)} and reported seeds "
            f"{REPORTED_FROM}..{REPORTED_FROM + args.injection_seeds - 1} (the score was designed on seeds "
            f"{', '.join(map(str, TUNING_SEEDS))} only)")
        out(table(res))
        from . import injection_packed as P
        packed = P.run(res.sets, log=log)
        out(f"\npacked with the defaults at {P.BUDGET} (seed {REPORTED_FROM}, the cases above): what `tsarchive "
            "unusual` answers (look: stored or derived index, or windows) against the per-window outlier score; "
            "precision@k in segments, and the fallback's in windows (tsarchive/bench/injection_packed.py)")
        out(P.table(*packed))
    else:
        res = InjectionResult(sets=[n for n in (sets or realdata.names()) if _long_enough(n)])
    with tempfile.TemporaryDirectory(prefix="tsbench-index-") as tmp:
        costs = [c for b in BUDGETS for c in (archive_cost(n, tmp, b, log=log) for n in res.sets) if c is not None]
    q = query_cost()
    out("\nindex costs (packed with the defaults at each budget; decode = the channel in full through the reader, "
        f"preview = codes only, best of {REPEATS}; worst/eps = the preview's worst error over the budget):")
    out(cost_table(q, costs))
    return {"precision": {"|".join(k): v for k, v in res.precision.items()}, "recall_at_5": res.recall,
            "packed": [c.__dict__ for c in packed[1]],
            "query": q.__dict__, "archives": [c.__dict__ for c in costs]}
