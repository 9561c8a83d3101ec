"""What the index answers without decoding the archive: unusual segments, look-alikes, a code-only preview.

* :func:`unusual_scores` -- per segment, the largest of several weighted robust
  z-scores (distance from the channel's median in units of 1.4826 x the
  median absolute deviation, a consistent estimate of the standard deviation
  for normal data), each against the segment's neighbours where slow changes
  of the recording would otherwise dominate, scaled by the part's own 97th
  percentile and weighted (:data:`WEIGHTS`): what the code misses (RMS and
  peak; the reconstruction error of an autoencoder used for anomaly
  detection), a larger or smaller swing (spread), rougher or smoother
  (first-difference RMS, against the whole channel and against the segment's
  neighbours: noise bursts), repeated samples (a stuck sensor), samples held
  at the segment's extremes (clipping), the jump of
  the segment's mean from its neighbours' median (level shifts, dropouts),
  and a sharp peak (the crest factor of what the code misses: spikes).
  All of it comes from the stored facts: nothing is decoded.
* :class:`CodeCache` / :func:`shortlist` -- nearest codes (Euclidean, in the
  coder's latent units, with what the code misses as one more coordinate)
  from float32 latents and norms made once per channel, in bounded chunks, so
  ten million segments fit well inside 1 GiB; :func:`alike` re-ranks that
  shortlist on the decoded segments (mean removed, Euclidean), decoding only
  those, and widens it while the codes cannot rule out a nearer segment.
* :func:`preview` -- the approximate signal from codes alone, with the worst
  error measured when the archive was packed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tsarchive.errors import BadInput

from .build import ChannelIndex
from .segments import STEPS_PER_OCTAVE, log_value

SHORTLIST = 64               # segments re-ranked on decoded samples per look-alike query, at least
MOST_DECODED = 512           # and at most (the shortlist doubles up to this while a nearer one may be outside)
REST_ALIGNED = 0.5           # how aligned two segments' rests are taken to be when ordering the shortlist (alike)
CHUNK = 1 << 20              # codes compared per step (bounded temporaries)
TYPICAL = 0.97               # each part is scaled by its own 97th percentile: a part whose extremes are common
                             # (a wandering baseline's jumps) cannot drown a part that is rarely high
# Weights chosen on the injection bench's tuning seeds only (tsarchive/bench/injection.py TUNING_SEEDS; the
# bench reports other seeds): quieter-than-usual stretches occur naturally in real recordings, roughness
# (the first-difference RMS, the strongest simple baseline) and a lone sharp peak rarely do.  A sum of the
# parts or a rank fusion of them ranked worse there (0.34 and 0.26 against 0.42 precision@k on average):
# a fault shows in one or two parts, and summing lets the others' natural spread drown it.
WEIGHTS = {"smaller swing": 0.4, "smoother": 0.4, "level jump": 1.0, "rougher": 2.0, "sharp peak": 1.5,
           "peak the code misses": 0.5, "rougher than its neighbours": 6.0, "held at its extremes": 2.0}
_MAD_NORMAL = 1.4826         # 1 / Phi^-1(3/4): MAD -> standard deviation for normal data (common practice)


def robust_z(f: np.ndarray, floor: float) -> np.ndarray:
    """``(f - median) / max(1.4826 * MAD, floor)``."""
    med = np.median(f)
    mad = _MAD_NORMAL * np.median(np.abs(f - med))
    return (f - med) / max(mad, floor)


def _log2(code: np.ndarray) -> np.ndarray:
    """Stored log codes back to log2 units (0 = zero, taken as 2 octaves below the smallest code)."""
    c = np.asarray(code, dtype=np.float64)
    return np.where(c == 0, -2 * STEPS_PER_OCTAVE, c) / STEPS_PER_OCTAVE


def local(f: np.ndarray, reach: int = 3) -> np.ndarray:
    """``f`` minus the median of the ``reach`` segments either side (a fault is a change against its
    neighbours; slow changes of the recording are not)."""
    f = np.asarray(f, dtype=np.float64)
    n = len(f)
    if n < 2:
        return np.zeros(n)
    pad = np.concatenate([np.full(reach, f[0]), f, np.full(reach, f[-1])])
    near = np.stack([pad[reach + d:reach + d + n] for d in range(-reach, reach + 1) if d], axis=1)
    return f - np.median(near, axis=1)


def level_jump(ci: ChannelIndex, reach: int = 3) -> np.ndarray:
    """|mean - median of the ``reach`` segments either side| / the channel's spread."""
    return np.abs(local(ci.mean, reach)) / ci.ref


def spread_log2(ci: ChannelIndex) -> np.ndarray:
    """log2 of each segment's spread relative to ``ref``: what the code holds plus what it misses."""
    held = ci.coder.decode(ci.codes, exact_sums=False)
    L = ci.lengths()
    inside = ci.own()
    held = np.where(inside, held - (held * inside).sum(axis=1, keepdims=True) / L[:, None], 0.0)
    miss = 2.0 ** _log2(ci.fact("miss"))
    s2 = (held * held).sum(axis=1) / L + miss * miss
    return 0.5 * np.log2(np.maximum(s2, 2.0 ** -40))


@dataclass(frozen=True)
class Unusual:
    """Per-segment score and the fact that gave it (``because``: names, one per segment)."""

    score: np.ndarray
    because: tuple[str, ...]


def parts(ci: ChannelIndex) -> dict[str, np.ndarray]:
    """Every part of the score (module doc), each a one-sided robust z-score (0 where not unusual)."""
    flat = ci.fact("flat").astype(np.float64)
    spread = robust_z(local(spread_log2(ci)), 0.25)
    rough = robust_z(_log2(ci.fact("slope")), 0.25)
    return {
        "code misses it": np.maximum(robust_z(local(_log2(ci.fact("miss"))), 0.25), 0.0),
        "peak the code misses": np.maximum(robust_z(local(_log2(ci.fact("miss_peak"))), 0.25), 0.0),
        "larger swing": np.maximum(spread, 0.0),
        "smaller swing": np.maximum(-spread, 0.0),
        "rougher": np.maximum(rough, 0.0),
        "smoother": np.maximum(-rough, 0.0),
        "rougher than its neighbours": np.maximum(robust_z(local(_log2(ci.fact("slope"))), 0.25), 0.0),
        "repeated samples": np.maximum(robust_z(local(flat), 1.0), 0.0),
        # how many samples sit at the segment's largest or smallest value: a clipped signal holds them
        "held at its extremes": np.maximum(robust_z(local(_log2(ci.fact("edge"))), 0.25), 0.0),
        "level jump": np.maximum(robust_z(level_jump(ci), 0.05), 0.0),
        # the peak of what the code misses over its RMS (a crest factor): one sample far off, a spike
        "sharp peak": np.maximum(robust_z(_log2(ci.fact("miss_peak")) - _log2(ci.fact("miss")), 0.25), 0.0),
    }


def unusual_scores(ci: ChannelIndex) -> Unusual:
    """The combined score of every segment (module doc); higher is more unusual."""
    got = parts(ci)
    names = list(got)
    stack = np.stack([WEIGHTS.get(n, 1.0) * got[n] / max(float(np.quantile(got[n], TYPICAL)), 1.0)
                      for n in names], axis=1)
    which = np.argmax(stack, axis=1)
    return Unusual(score=stack[np.arange(len(which)), which], because=tuple(names[i] for i in which))


def ranked(score: np.ndarray, k: int) -> np.ndarray:
    """Indices of the ``k`` highest scores, highest first, ties by position."""
    return np.lexsort((np.arange(len(score)), -np.asarray(score)))[:k]


def latent(ci: ChannelIndex) -> np.ndarray:
    """Every segment's point for the look-alike shortlist (float32 rows): a linear coder's codes times their
    step followed by the norm of what the code misses (:func:`with_miss`), a nonlinear coder's codes as
    stored; without codes, a segment's roughness and swing stand in for its shape."""
    if ci.coder.kind == "facts":
        return np.stack([_log2(ci.fact("slope")), _log2(ci.fact("miss"))], axis=1).astype(np.float32)
    if ci.coder.kind == "nonlinear":
        return ci.codes.astype(np.float32)
    return with_miss(ci.codes, ci.coder.step, ci.fact("miss"), ci.segment)


def with_miss(codes: np.ndarray, step: float, miss: np.ndarray, segment: int) -> np.ndarray:
    """A linear coder's codes (n, K) times their ``step`` and one more column: the norm of what the code
    misses (the stored ``miss`` fact), in the same units; float32, made in place (ten million rows).

    A segment is its projection onto the basis plus a rest orthogonal to it, so the distance of two
    segments is at least the distance of their projections and of their rests' norms together
    (Pythagoras and the triangle inequality): a lower bound from the index alone, tight where the code
    holds the segment and telling quiet from loud where it does not (noise-like recordings)."""
    n, K = codes.shape
    out = np.empty((n, K + 1), dtype=np.float32)
    out[:, :K] = codes
    out[:, :K] *= np.float32(step)
    out[:, K] = log_value(miss, 1.0) * np.sqrt(segment)     # the stored RMS miss over ``ref``, as a norm
    return out


class CodeCache:
    """A channel's codes ready for look-alike queries: float32 latents and their squared norms, made once.

    A query is then one thin matrix-vector product and a partial sort: the distance is
    ``|c|^2 - 2 c.q + |q|^2`` (the last term is the same for every row and left out).  Ten million
    codes of 8 and their miss take 360 MB of latents and 40 MB of norms; the query's temporaries stay near ``CHUNK``
    rows.
    """

    def __init__(self, latents: np.ndarray) -> None:
        self.latents = np.ascontiguousarray(latents, dtype=np.float32)
        self.norms = np.einsum("ij,ij->i", self.latents, self.latents)

    def nearest(self, query: np.ndarray, m: int, exclude: int | None = None) -> np.ndarray:
        """The ``m`` rows nearest to ``query`` (K,), nearest first (ties by position)."""
        q = np.asarray(query, dtype=np.float32)
        best_i, best_d = np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.float32)
        for a in range(0, len(self.latents), CHUNK):
            d = self.norms[a:a + CHUNK] - 2.0 * (self.latents[a:a + CHUNK] @ q)
            if exclude is not None and a <= exclude < a + len(d):
                d[exclude - a] = np.inf
            take = np.argpartition(d, m)[:m] if len(d) > m else np.arange(len(d))
            best_i, best_d = np.concatenate([best_i, take + a]), np.concatenate([best_d, d[take]])
            keep = np.lexsort((best_i, best_d))[:m]
            best_i, best_d = best_i[keep], best_d[keep]
        return best_i[np.isfinite(best_d)]


def shortlist(codes: np.ndarray, query: np.ndarray, m: int, exclude: int | None = None) -> np.ndarray:
    """The ``m`` rows of ``codes`` (n, K) nearest to ``query`` (K,), nearest first (see :class:`CodeCache`)."""
    return CodeCache(codes).nearest(query, m, exclude)


def centred(rows: np.ndarray) -> np.ndarray:
    return rows - rows.mean(axis=1, keepdims=True)


def alike(ci: ChannelIndex, seg: int, k: int, segments_of, m: int = SHORTLIST,
          most: int = MOST_DECODED) -> list[tuple[int, float]]:
    """The ``k`` segments most like segment ``seg``: a shortlist by code (:func:`latent`), re-ranked by the
    Euclidean distance of the decoded segments with their means removed; ``segments_of(ids)`` returns
    those segments' samples (len(ids), S).  The first ``m`` are decoded.  For a linear coder the shortlist
    is ordered by the projections' distance with the rests' norms taken as half aligned (REST_ALIGNED:
    between fully aligned, the lower bound of :func:`with_miss`, and unrelated, as noise is: recall@5 0.82
    against 0.59 for the lower bound on seismo_karc_lhz cut into 1350 segments), and it doubles, up to
    ``most``, while a segment left in it has a lower bound (less the codes' rounding) below the ``k``-th
    distance found.  Returns ``(segment, distance)`` nearest first."""
    if not 0 <= seg < ci.n_segments:
        raise BadInput(f"segment {seg} is out of range 0..{ci.n_segments - 1}; pick one the index lists")
    lat = latent(ci)
    widen = ci.coder.kind == "linear"
    point = lat[seg].copy()
    if widen:           # |c - q|^2 + r^2 + r_q^2 - 2 a r r_q is the distance to (q, a r_q), up to a constant
        point[-1] *= np.float32(REST_ALIGNED)
    cand = shortlist(lat, point, max(most if widen else m, k), exclude=seg)
    low = (np.sqrt(((lat[cand].astype(np.float64) - lat[seg]) ** 2).sum(axis=1))
           - np.sqrt(ci.coder.code_size / 6.0) * ci.coder.step) * ci.ref    # less two codes' rounding (RMS)
    query = centred(segments_of(np.array([seg])))[0]
    d = np.zeros(0)
    n = min(max(m, k), len(cand))
    while True:
        rows = centred(segments_of(cand[len(d):n]))
        d = np.concatenate([d, np.sqrt(((rows - query) ** 2).sum(axis=1))])
        if not widen or n >= len(cand) or low[n:].min() > np.sort(d)[min(k, len(d)) - 1]:
            break
        n = min(len(cand), 2 * n)
    ids = cand[:n]
    order = np.lexsort((ids, d))[:k]
    return [(int(ids[i]), float(d[i])) for i in order]


def preview(ci: ChannelIndex, a: int = 0, b: int | None = None) -> np.ndarray:
    """Approximate samples ``a..b-1`` from the codes alone (float64); within ``ci.worst`` of the recording
    (measured when packing)."""
    b = ci.n_samples if b is None else min(int(b), ci.n_samples)
    a = max(0, int(a))
    if b <= a:
        return np.zeros(0)
    s0, s1 = a // ci.segment, -(-b // ci.segment)
    x = ci.coder.decode(ci.codes[s0:s1], exact_sums=False, scale=ci.ref)
    x += ci.mean[s0:s1, None]
    if ci.tail_shift and s1 == ci.n_segments:   # the last segment's own samples are the end of its stretch
        x[-1, :ci.segment - ci.tail_shift] = x[-1, ci.tail_shift:].copy()
    return x.reshape(-1)[a - s0 * ci.segment:b - s0 * ci.segment]
