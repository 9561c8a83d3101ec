"""The injection bench's faults and where they go: shared by the direct table (:mod:`tsarchive.bench.injection`)
and the packed one (:mod:`tsarchive.bench.injection_packed`), so both rank the same cases."""

from __future__ import annotations

import numpy as np

KINDS = ("spike", "flatline", "level_shift", "noise_burst", "clipping", "dropout", "shape")
SEVERITIES = ("mild", "strong")
N_INJECT = 6
MAX_SAMPLES = 1 << 18
TUNING_SEEDS = (0, 1)        # the score's design was chosen on these seeds only (tsarchive/index/query.py)
REPORTED_FROM = 100          # the bench reports seeds 100, 101, ...: never the ones the design was tuned on


def _span(S: int, frac: float, rng: np.random.Generator) -> tuple[int, int]:
    L = max(1, int(S * frac))
    a = int(rng.integers(0, S - L + 1))
    return a, a + L


def inject(x: np.ndarray, seg: int, S: int, kind: str, severity: str, sigma: float,
           rng: np.random.Generator) -> None:
    """Put one fault of ``kind`` into segment ``seg`` of ``x`` (in place); ``sigma`` = the channel's std."""
    strong = severity == "strong"
    s = x[seg * S:(seg + 1) * S]
    sign = 1.0 if rng.random() < 0.5 else -1.0
    if kind == "spike":
        s[int(rng.integers(0, S))] += sign * (8.0 if strong else 3.0) * sigma
    elif kind == "flatline":
        a, b = _span(S, 1.0 if strong else 0.25, rng)
        s[a:b] = s[a]
    elif kind == "level_shift":
        s += sign * (2.0 if strong else 0.5) * sigma
    elif kind == "noise_burst":
        a, b = _span(S, 0.5, rng)
        s[a:b] += rng.normal(0.0, (1.0 if strong else 0.3) * sigma, b - a)
    elif kind == "clipping":
        m = np.median(s)
        c = (0.3 if strong else 0.6) * np.max(np.abs(s - m))
        np.clip(s, m - c, m + c, out=s)
    elif kind == "dropout":
        a, b = _span(S, 0.5 if strong else 0.125, rng)
        s[a:b] = 0.0
    elif kind == "shape":
        m, sd = s.mean(), s.std() or sigma
        t = np.arange(S)
        if strong:
            new = np.sign(np.sin(2 * np.pi * t / max(S / 4, 2)) + 1e-9)
        else:
            new = np.convolve(s - m, np.ones(9) / 9, mode="same")
        s[:] = m + sd * (new - new.mean()) / (new.std() or 1.0)
    else:
        raise ValueError(kind)


def pick_segments(n_seg: int, k: int, rng: np.random.Generator) -> np.ndarray:
    """``k`` distinct segments, no two neighbours, not the first or the last."""
    free = np.arange(1, n_seg - 1)
    out: list[int] = []
    while len(out) < k and len(free):
        c = int(rng.choice(free))
        out.append(c)
        free = free[np.abs(free - c) > 1]
    return np.sort(np.array(out, dtype=np.int64))


def reported_seeds(n: int) -> range:
    """The ``n`` seeds the bench reports (disjoint from :data:`TUNING_SEEDS`)."""
    return range(REPORTED_FROM, REPORTED_FROM + n)
