"""Building the index of a recording: facts, a learned coder and codes for every browse segment.

Two passes over each channel in blocks of whole segments (bounded memory on
long recordings): the first computes the segment facts and keeps an evenly
spaced sample of at most :data:`LEARN_SEGMENTS` segments and
:data:`LEARN_SAMPLES` samples to learn the coder from
(:mod:`tsarchive.index.learn`); the second codes every segment and
measures what the codes miss (per segment, and the preview's worst error per
channel).  The same recording, settings and tool version give the same bits.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tsarchive.model import exact

from . import learn
from .segments import as_segments, choose_segment, facts, log_code, squares

LEARN_SEGMENTS = 20000
LEARN_SAMPLES = LEARN_SEGMENTS * 256   # and samples: the byte budget's long segments must not take a whole channel
BLOCK_SAMPLES = 1 << 20

# the per-segment byte columns, in order; "edge" (samples at the segment's extremes, log-coded against 1) came
# later: archives packed before it have no such column, and it reads as zeros there (OPTIONAL_FACTS)
FACT_NAMES = ("slope", "flat", "miss", "miss_peak", "edge")
OPTIONAL_FACTS = ("edge",)
LEVEL_PARTS = 16             # a segment's mean is kept on a power-of-two grid of at most ref / 16


@dataclass(frozen=True, eq=False)
class Source:
    """What :func:`build_channel` was given, kept at pack time so the byte budget
    (:mod:`tsarchive.index.budget`) can build the channel again with longer segments or fewer codes."""

    column: Callable
    itemsize: int
    seed: int
    try_nonlinear: bool
    asked: int | None                  # the segment the user gave (it wins over the budget), else None


@dataclass(frozen=True, eq=False)
class ChannelIndex:
    """The index of one channel: ``level`` (n,) int64 (segment means in units of ``level_step``), ``codes``
    (n, K) int16, ``facts`` (n, 5) uint8 (FACT_NAMES; magnitudes log-coded against ``ref``, the channel's
    spread), ``worst`` the code-only preview's worst error (channel units, measured when packing)."""

    name: str
    segment: int
    n_samples: int
    ref: float
    coder: learn.Coder
    level: np.ndarray
    level_step: float
    codes: np.ndarray
    facts: np.ndarray
    worst: float
    source: Source | None = None       # pack time only (not stored): how to build it again coarser


    @property
    def n_segments(self) -> int:
        return len(self.level)

    @property
    def mean(self) -> np.ndarray:
        return self.level * self.level_step

    def fact(self, name: str) -> np.ndarray:
        return self.facts[:, FACT_NAMES.index(name)]

    @property
    def tail_shift(self) -> int:
        """How far the last segment's coded samples reach back: a short last segment is coded as the
        recording's last ``segment`` samples (overlapping its neighbour), so its code describes a whole
        stretch; its own samples are the final ones of that stretch."""
        return _tail_shift(self.n_samples, self.segment)

    def own(self, a: int = 0, b: int | None = None) -> np.ndarray:
        """(b - a, S) bool: where segment ``i``'s own samples lie in its coded stretch."""
        return _own(self.n_samples, self.segment, a, self.n_segments if b is None else b)

    def lengths(self) -> np.ndarray:
        n = np.full(self.n_segments, self.segment, dtype=np.int64)
        if self.n_segments:
            n[-1] = self.n_samples - self.segment * (self.n_segments - 1)
        return n


def _tail_shift(n: int, S: int) -> int:
    return (S - n % S) if n % S and n >= S else 0


def _own(n: int, S: int, a: int, b: int) -> np.ndarray:
    L = _lengths(n, S, a, b)
    pos = np.arange(S)[None, :]
    own = pos < L[:, None]
    last = -(-n // S) - 1
    if a <= last < b and _tail_shift(n, S):
        own[last - a] = pos[0] >= _tail_shift(n, S)
    return own


def _lengths(n_samples: int, S: int, a: int, b: int) -> np.ndarray:
    """Real lengths of segments a..b-1."""
    ends = np.minimum(np.arange(a + 1, b + 1, dtype=np.int64) * S, n_samples)
    return ends - np.arange(a, b, dtype=np.int64) * S


def build_channel(column, name: str, n_samples: int, segment: int | None = None, seed: int = 0,
                  itemsize: int = 8, try_nonlinear: bool = True, *, longer: int = 1,
                  max_codes: int | None = None, basis_bits: int = 7, coder: learn.Coder | None = None) -> ChannelIndex:
    """The index of one channel; ``column(a, b)`` returns its samples ``a..b-1``.  ``longer`` multiplies
    the default segment (not an explicit ``segment``), ``max_codes`` caps the codes per segment (0: facts
    only), ``basis_bits`` (< 7) stores a linear basis coarser; all three are how :mod:`tsarchive.index.budget` makes an index smaller.
    ``coder``: one learned elsewhere (a batch's shared model), used instead of learning one where its segment
    and code size are this channel's."""
    S = choose_segment(n_samples, segment) * (1 if segment else longer)
    n_seg = -(-n_samples // S)
    step = max(1, BLOCK_SAMPLES // S)
    n_pick = min(n_seg, LEARN_SEGMENTS, max(1, LEARN_SAMPLES // S))
    pick = set(np.unique(np.linspace(0, n_seg - 1, n_pick).round().astype(np.int64)).tolist()) if n_seg else set()
    mean = np.zeros(n_seg, dtype=np.float64)
    f = np.zeros((n_seg, len(FACT_NAMES)), dtype=np.uint8)
    mags = np.zeros((2, n_seg))                      # spread, slope in channel units
    sample = []
    for a in range(0, n_seg, step):                  # pass 1: facts and the learning sample
        b = min(n_seg, a + step)
        rows = as_segments(column(a * S, min(n_samples, b * S)), S, 0.0)
        L = _lengths(n_samples, S, a, b)
        fa = facts(rows, L)
        mean[a:b], mags[:, a:b], f[a:b, 1] = fa.mean, (fa.spread, fa.slope), fa.flat
        f[a:b, 4] = log_code(fa.edge, 1.0)
        keep = [i - a for i in range(a, b) if i in pick]
        sample.append(rows[keep] - fa.mean[keep, None])
    ref = float(np.sqrt(exact.total(squares(mags[0])) / max(n_seg, 1))) or 1.0
    f[:, 0] = log_code(mags[1], ref)
    level_step = math.ldexp(1.0, math.frexp(ref / LEVEL_PARTS)[1] - 1)
    top = float(np.max(np.abs(mean))) if n_seg else 0.0      # levels must fit int64: at most 2**52 steps
    level_step = max(level_step, math.ldexp(1.0, math.frexp(top)[1] - 52))
    shift = _tail_shift(n_samples, S)
    if shift:                                        # the short last segment is coded as the last S samples
        tail = as_segments(column(n_samples - S, n_samples), S, 0.0)
        mean[-1] = exact.total(tail, axis=1)[0] / S
    level = np.rint(mean / level_step).astype(np.int64)
    X = np.concatenate(sample) / ref if sample else np.zeros((0, S))
    K = learn.code_size_for(n_seg, n_samples, S)
    K = K if max_codes is None else min(K, max_codes)
    if coder is None or coder.segment != S or coder.code_size != K or basis_bits != 7:
        coder = learn.choose(X, K, n_samples * itemsize, seed, try_nonlinear, basis_bits) if K else \
            learn.facts_only(S, "facts only: codes did not fit the index's byte budget")
    codes = np.zeros((n_seg, coder.code_size), dtype=np.int16)
    worst = 0.0
    for a in range(0, n_seg, step):                  # pass 2: codes and what they miss
        b = min(n_seg, a + step)
        raw = column(a * S, min(n_samples, b * S))
        rows = as_segments(raw, S, 0.0)
        if shift and b == n_seg:
            rows[-1] = tail[0]
        L = _lengths(n_samples, S, a, b)
        codes[a:b] = coder.encode((rows - mean[a:b, None]) / ref)
        approx = (level[a:b, None] * level_step) + coder.decode(codes[a:b]) * ref
        inside = _own(n_samples, S, a, b)
        miss = np.where(inside, approx - rows, 0.0)
        f[a:b, 2] = log_code(np.sqrt(exact.total(squares(miss), axis=1) / L), ref)
        f[a:b, 3] = log_code(np.abs(miss).max(axis=1), ref)
        full = as_segments(raw, S, np.nan, limit=None)     # the samples as logged (NaN where not finite)
        if shift and b == n_seg:
            full[-1] = as_segments(column(n_samples - S, n_samples), S, np.nan, limit=None)[0]
        err = np.abs(approx - full)[inside]
        seen = err[np.isfinite(err)]
        worst = max(worst, float(seen.max()) if seen.size else 0.0)
    return ChannelIndex(name, S, n_samples, ref, coder, level, level_step, codes, f, worst,
                        Source(column, itemsize, seed, try_nonlinear, segment))


def build_index(rec, segment: int | None = None, seed: int = 0, try_nonlinear: bool = True,
                coders=()) -> list[ChannelIndex]:
    """The index of every channel of a :class:`~tsarchive.recording.Recording` (``segment=0``: none, an
    empty list); ``coders``: per channel (in order) a coder learned elsewhere, or none."""
    out = []
    if segment == 0:
        return out
    for j, ch in enumerate(rec.channels):
        def column(a: int, b: int, j=j):
            return rec.rows(a, b)[:, j]
        out.append(build_channel(column, ch.name, rec.n_samples, segment, seed, np.dtype(ch.dtype).itemsize,
                                 try_nonlinear, coder=coders[j] if j < len(coders) else None))
    return out
