"""Cutting a channel into browse segments and the per-segment facts the index stores.

A *segment* is the index's unit of browsing: ``segment`` consecutive samples
(the channel's last segment may be short), independent of the compression
window.  Each segment keeps a few facts, computed from the samples exactly as
the same bits on every machine (sums through :mod:`tsarchive.model.exact`,
everything else elementwise IEEE operations):

* ``mean`` -- the segment's mean (float32 in the member);
* ``spread`` -- RMS deviation from the mean;
* ``slope`` -- RMS of the first difference (noise and sharpness);
* ``peak`` -- largest distance of a sample from the mean;
* ``flat`` -- share of first differences that are exactly zero (a stuck sensor), in 1/16ths;
* ``edge`` -- how many samples equal the segment's largest or smallest value (a clipped signal
  holds its extremes: counting equal values is exact on every machine).

Magnitudes are stored as one byte each on a logarithmic scale of 8 steps
per octave relative to the channel's spread (:func:`log_code`): about 9 %
resolution, which is all a ranking needs and costs a few bits once entropy-coded.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tsarchive.errors import BadInput
from tsarchive.model import exact

MIN_SEGMENTS = 64            # a recording is cut into at least this many segments where it can be
DEFAULT_SEGMENT = 256        # samples per segment for recordings long enough
MIN_SEGMENT = 16
MAX_SEGMENT = 1 << 16
STEPS_PER_OCTAVE = 8
LOG_FLOOR_OCTAVES = 16       # code 1 is 2**-16 of the reference; 0 means "zero or below"


def choose_segment(n_samples: int, asked: int | None = None) -> int:
    """Samples per segment: ``asked`` if given, else 256, halved (down to 16) until the recording holds
    at least :data:`MIN_SEGMENTS` segments."""
    if asked is not None:
        if asked == 0:
            raise BadInput("segment 0 means no index; there is nothing to cut")
        if isinstance(asked, bool) or not isinstance(asked, (int, np.integer)) or not 2 <= asked <= MAX_SEGMENT:
            raise BadInput(f"segment {asked!r} is not a whole number of samples in 2..{MAX_SEGMENT}; "
                           "choose e.g. 256")
        return int(asked)
    s = DEFAULT_SEGMENT
    while s > MIN_SEGMENT and n_samples < MIN_SEGMENTS * s:
        s //= 2
    return s


def _log_table() -> np.ndarray:
    """Thresholds 2**((k - 1) / 8 - 16) for k = 1..255, from sqrt and products only (each correctly rounded)."""
    r = float(np.sqrt(np.sqrt(np.sqrt(2.0))))     # 2**(1/8)
    steps = [1.0]
    for _ in range(STEPS_PER_OCTAVE - 1):
        steps.append(steps[-1] * r)
    out = [np.ldexp(steps[k % STEPS_PER_OCTAVE], k // STEPS_PER_OCTAVE - LOG_FLOOR_OCTAVES) for k in range(255)]
    return np.array(out, dtype=np.float64)


_TABLE = _log_table()


def log_code(v: np.ndarray, ref: float) -> np.ndarray:
    """uint8 codes of magnitudes ``v`` relative to ``ref``: 0 below 2**-16, else 1 + the step at or below."""
    ratio = np.asarray(v, dtype=np.float64) / (ref if ref > 0 else 1.0)
    return np.searchsorted(_TABLE, ratio, side="right").astype(np.uint8)


def log_value(code: np.ndarray, ref: float) -> np.ndarray:
    """The magnitude a :func:`log_code` stands for (the middle of its step, in the reference's units)."""
    c = np.asarray(code, dtype=np.int64)
    mid = _TABLE[np.clip(c - 1, 0, 254)] * 2.0 ** (0.5 / STEPS_PER_OCTAVE)
    return np.where(c == 0, 0.0, mid) * (ref if ref > 0 else 1.0)


TINY = 1e-100                # squares of smaller magnitudes are taken as 0 (exact sums need a finite grid scale)
LIMIT = 1e150                # samples beyond +-LIMIT are clipped for the index: squares and sums stay finite


def as_segments(x: np.ndarray, segment: int, fill: float, limit: float | None = LIMIT) -> np.ndarray:
    """(n_segments, segment) float64: ``x`` cut into rows; non-finite samples and a short last row are
    filled (the last row with its last value, else ``fill``); magnitudes beyond ``limit`` are clipped, and
    (with a ``limit``) those below :data:`TINY` are taken as 0."""
    if isinstance(x, np.ma.MaskedArray):
        x = x.astype(np.float64).filled(np.nan)
    x = np.asarray(x, dtype=np.float64)
    x = np.where(np.isfinite(x), x, fill)
    if limit is not None:
        x = np.where(np.abs(x) < TINY, 0.0, np.clip(x, -limit, limit))
    n = len(x)
    rows = -(-n // segment)
    out = np.empty(rows * segment, dtype=np.float64)
    out[:n] = x
    out[n:] = x[-1] if n else fill
    return out.reshape(rows, segment)


def squares(a: np.ndarray) -> np.ndarray:
    """``a * a`` with magnitudes below :data:`TINY` taken as 0 (their squares would be subnormal)."""
    a = np.where(np.abs(a) < TINY, 0.0, a)
    return a * a


@dataclass(frozen=True, eq=False)
class Facts:
    """Per-segment facts of one channel block (see module doc), float64 except ``flat`` (uint8) and ``edge`` (int64)."""

    mean: np.ndarray
    spread: np.ndarray
    slope: np.ndarray
    peak: np.ndarray
    flat: np.ndarray
    edge: np.ndarray


def facts(rows: np.ndarray, lengths: np.ndarray) -> Facts:
    """Facts of segments ``rows`` (n, S) whose real lengths are ``lengths`` (the padding is left out)."""
    n, S = rows.shape
    inside = np.arange(S)[None, :] < lengths[:, None]
    x = np.where(inside, rows, 0.0)
    mean = exact.total(x, axis=1) / lengths
    dev = np.where(inside, rows - mean[:, None], 0.0)
    spread = np.sqrt(exact.total(squares(dev), axis=1) / lengths)
    d = np.where(inside[:, 1:], np.diff(rows, axis=1), 0.0)
    pairs = np.maximum(lengths - 1, 1)
    slope = np.sqrt(exact.total(squares(d), axis=1) / pairs)
    still = ((d == 0) & inside[:, 1:]).sum(axis=1).astype(np.int64)
    flat = ((still * 16 + pairs // 2) // pairs).astype(np.uint8)
    top = np.where(inside, rows, -np.inf).max(axis=1, keepdims=True)
    low = np.where(inside, rows, np.inf).min(axis=1, keepdims=True)
    edge = (inside & ((rows == top) | (rows == low))).sum(axis=1).astype(np.int64)
    return Facts(mean=mean, spread=spread, slope=slope, peak=np.abs(dev).max(axis=1), flat=flat, edge=edge)
