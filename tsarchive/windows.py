"""Recording <-> fixed windows.

A channel of ``n`` samples is cut into windows of ``W`` samples starting at
``0, W, 2W, …``; the last window is short when ``W`` does not divide ``n``.
Each window carries a *level* (its rounded mean on the integer grid) and is
normalised for the autoencoder by a per-channel integer *scale*.
"""

from __future__ import annotations

import math

import numpy as np

from .predict.exactls import gram

DEFAULT_WINDOW = 1024
#: samples per channel read, encoded, decoded or compared per step: bounds every stage's memory
CHUNK_SAMPLES = 1 << 20


def spread(n: int, count: int) -> np.ndarray:
    """Up to ``count`` indices of ``0..n-1`` spread evenly (first and last included, rounded to the
    nearest, no repeats), int64: the one way tsarchive picks a sample of windows or channels."""
    if n <= 0 or count <= 0:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.linspace(0, n - 1, min(n, count)).round().astype(np.int64))
MIN_WINDOW, MAX_WINDOW = 8, 65536


def n_windows(n: int, window: int) -> int:
    return -(-n // window) if n else 0


def batches(n: int, window: int, first: int, last: int) -> list[tuple[int, int, int]]:
    """Group windows ``first..last-1`` into batches of equal length.

    Returns ``(w0, w1, length)``: windows ``w0..w1-1`` all have ``length``
    samples (only the channel's last window can be shorter).
    """
    full_last = min(last, n // window)
    out = []
    if full_last > first:
        out.append((first, full_last, window))
    if last > full_last and full_last * window < n:
        out.append((full_last, full_last + 1, n - full_last * window))
    return out


def levels(q: np.ndarray) -> np.ndarray:
    """Rounded (half away from zero) integer mean of each row, exactly in integers."""
    n = q.shape[1]
    s = q.sum(axis=1)
    return np.where(s >= 0, (2 * s + n) // (2 * n), -((-2 * s + n) // (2 * n))).astype(np.int64)


def pad_to(q: np.ndarray, window: int) -> np.ndarray:
    """Pad rows on the right to ``window`` samples by repeating the last sample."""
    if q.shape[1] >= window:
        return q
    return np.concatenate([q, np.repeat(q[:, -1:], window - q.shape[1], axis=1)], axis=1)


def normalise(q: np.ndarray, level: np.ndarray, scale: int, window: int) -> np.ndarray:
    """Autoencoder input: ``(q - level) / scale`` as float32, padded to ``window``."""
    return (pad_to(q, window) - level[:, None]).astype(np.float32) / np.float32(scale)


def channel_scale(q_sample: np.ndarray, level: np.ndarray) -> int:
    """Integer normalisation scale: RMS deviation from the window level, rounded half up (>= 1).

    Exact (it is stored, and it shapes every code): the sum of squares in integers
    (:func:`.predict.exactls.gram`), then ``floor(sqrt(S / N) + 1/2) = (isqrt(4 S // N) + 1) // 2``.
    """
    if q_sample.size == 0:
        return 1
    dev = np.ascontiguousarray(q_sample - level[:, None], dtype=np.int64).reshape(-1, 1)
    return max(1, (math.isqrt(4 * gram(dev)[0][0] // dev.size) + 1) // 2)
