"""The window length of a pack without ``--window``: the one of :data:`WINDOW_CHOICES` whose archive a
planned and coded sample of the recording estimates smallest (:func:`choose_window`)."""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor

from .encoder import coded_bytes, sample_windows
from .modelrun import _gather
from .quantize import Grid
from .recording import Recording
from .windows import DEFAULT_WINDOW, spread
from .workers import workers as worker_count

WINDOW_CHOICES = tuple(DEFAULT_WINDOW << k for k in range(4))   # without --window: 1024 … 8192
WINDOW_EVAL_SAMPLES = 1 << 18  # samples (all channels) that the window choice plans and codes
WINDOW_EVAL_MIN = 1 << 15      # per channel at least (and no choice on a recording shorter than this)
WINDOW_EVAL_CHANNELS = 4       # channels (evenly spread) that the window choice looks at
WINDOW_MARGIN = 0.03           # a longer window must save this share of the estimate (its noise is ~±3 %)
WINDOW_ROW_BYTES = 10.5        # measured framing of one window row (CRC, level, score, lengths; Parquet+zstd)


def choose_window(rec: Recording, grids: list[Grid]) -> tuple[int, str]:
    """The window length (of ``WINDOW_CHOICES``) whose archive is estimated smallest, and why.

    Every candidate plans and range codes the same contiguous spans of the
    recording (at most ``WINDOW_EVAL_SAMPLES`` in all, of at most
    ``WINDOW_EVAL_CHANNELS`` evenly spread channels), fitting its own LPC
    sets (sets fitted on short windows would overrate long ones: a set needs
    enough windows of its own), and is charged
    ``WINDOW_ROW_BYTES`` per window row; a longer window must save
    ``WINDOW_MARGIN`` to be chosen, since shorter windows browse finer.
    Longer windows pay where residuals are cheap (coarse budgets, quiet
    signals): the framing of a row and the predictor's start-up are shared
    by more samples.
    """
    n, span = rec.n_samples, max(WINDOW_CHOICES)
    chans = spread(len(rec.channels), WINDOW_EVAL_CHANNELS).tolist()   # evenly spread channels stand for the rest
    C = len(chans)
    per_channel = max(WINDOW_EVAL_MIN, WINDOW_EVAL_SAMPLES // C)
    spans = sample_windows(n, span, per_channel // span)
    if len(spans) < WINDOW_EVAL_MIN // span:
        return DEFAULT_WINDOW, f"window {DEFAULT_WINDOW} (too short a recording to compare window lengths)"
    every = _gather(rec, spans, span)
    sampled = [every[c] for c in chans]
    est: dict[int, float] = {}
    for W in WINDOW_CHOICES:            # shortest first; stop once a longer window stops paying
        total = WINDOW_ROW_BYTES * C * (len(spans) * span // W)
        with ThreadPoolExecutor(worker_count(C)) as pool:   # channels side by side
            total += sum(pool.map(lambda k: coded_bytes(sampled[k].reshape(-1, W), n // W, grids[chans[k]], W),
                                  range(C)))
        best_so_far = min(est.values(), default=math.inf)
        est[W] = 8.0 * total / (C * len(spans) * span)
        if est[W] >= best_so_far:
            break
    best = min(est, key=lambda w: (est[w], w))
    if est[best] > est[DEFAULT_WINDOW] * (1 - WINDOW_MARGIN):
        best = DEFAULT_WINDOW
    return best, f"window {best} (estimated bits/sample: " + ", ".join(f"{w}: {e:.3f}" for w, e in est.items()) + ")"
