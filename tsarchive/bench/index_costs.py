"""The index's costs: a 10-million-segment look-alike query, the preview against a full decode, and the
index's bytes beside the archive's at each budget (``python -m tsarchive.bench --index-costs``)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tsarchive.index import query as Q

from . import realdata

REPEATS = 7
BUDGETS = ("1%", "0.1%", "0.01%")

@dataclass(frozen=True)
class QueryCost:
    segments: int
    code_size: int
    cache_seconds: float     # making the CodeCache (once per channel)
    seconds: float           # one query on it (best of REPEATS)
    peak_mib: float          # tracemalloc peak from the cache's making through the queries (numpy's buffers)
    codes_mib: float         # the int8-range codes and the miss fact (held as after reading the member)


def query_cost(n: int = 10_000_000, K: int = 8, seed: int = 0) -> QueryCost:
    """Time and memory of one look-alike shortlist over ``n`` simulated codes (normal, spread 4 steps) of a
    linear coder, with the stored miss (log codes around 8 below the channel's spread) as the shortlist's
    last coordinate, as :func:`tsarchive.index.query.latent` makes them."""
    import time
    import tracemalloc
    rng = np.random.default_rng(seed)
    codes = np.clip(np.rint(rng.normal(0.0, 4.0, (n, K))), -127, 127).astype(np.int16)
    miss = np.clip(np.rint(rng.normal(120.0, 8.0, n)), 0, 255).astype(np.uint8)
    tracemalloc.start()
    t0 = time.perf_counter()
    cache = Q.CodeCache(Q.with_miss(codes, 1.0, miss, 256))      # a linear coder with step 1
    made = time.perf_counter() - t0
    times = []
    for r in range(REPEATS):
        t0 = time.perf_counter()
        cache.nearest(cache.latents[(r + 1) * n // (REPEATS + 1)], Q.SHORTLIST, exclude=(r + 1) * n // (REPEATS + 1))
        times.append(time.perf_counter() - t0)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return QueryCost(n, K, made, min(times), peak / 2 ** 20, (codes.nbytes + miss.nbytes) / 2 ** 20)


@dataclass(frozen=True)
class ArchiveCost:
    name: str
    budget: str
    segments: int            # 0: no index (none fitted its byte budget)
    segment: int             # samples per segment
    index_bytes: int
    archive_bytes: int
    decode_s: float
    preview_s: float
    worst: float
    eps: float
    kind: str                # linear | nonlinear | facts | none


def archive_cost(name: str, tmp, budget: str = "0.1%", log=lambda m: None) -> ArchiveCost | None:
    """Pack the set's first channel with the defaults (index included where it fits its byte budget), then
    time a full decode of the channel against the code-only preview (best of :data:`REPEATS`, each on a
    fresh open with the files in the OS cache after the first; the machine's load makes single runs vary
    several-fold), and count the index's bytes."""
    import time
    from pathlib import Path

    import tsarchive
    from tsarchive.archive import open_archive
    from tsarchive.index import member
    got = realdata.load(name)
    if isinstance(got, str):
        log(got)
        return None
    src = Path(tmp) / f"{name}.npy"
    np.save(src, np.ascontiguousarray(got.data[:, 0]))
    out = Path(tmp) / f"{name}.tsarchive"
    tsarchive.pack(src, out, budget, rate=got.spec.rate, force=True, train_seconds=6.0)
    arc = open_archive(out)
    ch = arc.channels[0].name

    def best(fn) -> float:
        times = []
        for _ in range(REPEATS):
            arc = open_archive(out)
            t0 = time.perf_counter()
            fn(arc)
            times.append(time.perf_counter() - t0)
        return min(times)
    decode_s = best(lambda arc: arc.read(ch))
    if not member.has_index(arc):
        return ArchiveCost(name, budget, 0, 0, 0, arc.archive_bytes, decode_s, float("nan"), float("nan"),
                           arc.channel(ch).eps, "none")
    preview_s = best(lambda arc: Q.preview(member.read(arc, ch, facts=False)))
    ci = member.read(arc, ch)
    return ArchiveCost(name, budget, ci.n_segments, ci.segment, (out / member.NAME).stat().st_size,
                       arc.archive_bytes, decode_s, preview_s, ci.worst, arc.channel(ch).eps, ci.coder.kind)


def cost_table(query: QueryCost | None, rows: list[ArchiveCost]) -> str:
    lines = [] if query is None else [
        f"look-alike shortlist over {query.segments:,} simulated codes of {query.code_size}: "
        f"{query.seconds:.3f} s per query (best of {REPEATS}) after {query.cache_seconds:.2f} s making the "
        f"cache once; peak {query.peak_mib:.0f} MiB traced (cache and queries) beside the codes' "
        f"{query.codes_mib:.0f} MiB", ""]
    lines.append(f"{'set':<18} {'budget':>6} {'kept':>9} {'segment':>7} {'segments':>8} {'index B':>8} "
                 f"{'B/segment':>9} {'share':>6} {'decode s':>9} {'preview s':>9} {'speedup':>7} {'worst/eps':>9}")
    for r in rows:
        other = r.archive_bytes - r.index_bytes
        per = f"{r.index_bytes / r.segments:9.1f}" if r.segments else f"{'-':>9}"
        speed = f"{r.decode_s / r.preview_s:6.1f}x" if r.segments else f"{'-':>7}"
        lines.append(f"{r.name:<18} {r.budget:>6} {r.kind:>9} {r.segment:>7} {r.segments:>8} {r.index_bytes:>8} "
                     f"{per} {100 * r.index_bytes / other:>5.2f}% {r.decode_s:>9.4f} {r.preview_s:>9.4f} "
                     f"{speed} {r.worst / r.eps if r.eps else float('nan'):>9.1f}")
    lines.append("share = index bytes / the archive's other bytes (the byte budget allows "
                 "tsarchive.index.budget.SHARE_PERCENT % of the bytes staged before the index)")
    return "\n".join(lines)
