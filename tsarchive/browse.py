"""Browsing an archive: code-only previews, per-window facts, outliers and look-alike windows.

Everything here reads through :class:`tsarchive.archive.Archive` (rows by
key, decoded windows, the channel's codec); :class:`~tsarchive.archive.Archive`
keeps thin methods of the same names (``preview``, ``windows``, ``outliers``,
``similar``) for the app and the API.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import BadInput
from .predict import mode_name
from .store import schema as S
from .store.rows import codes as _codes, lengths as _lengths
from .windowcodec import code_prediction
from .windows import CHUNK_SAMPLES


@dataclass(frozen=True)
class WindowTable:
    """Per-window facts of one channel, time-ordered (no residual payloads)."""

    index: np.ndarray
    start_sample: np.ndarray
    n: np.ndarray
    mode: tuple[str, ...]
    worst_error: np.ndarray      # per window, an upper bound (stored in 1/250ths of ε, rounded up)
    score: np.ndarray
    codes: np.ndarray


def preview(arc, channel: str, start: float | None = None, end: float | None = None) -> np.ndarray:
    """Code-only reconstruction (no residuals), float64: what the codes alone say."""
    meta = arc.channel(channel)
    a, b = arc.span(start, end)
    W = meta.window
    w0, w1 = a // W, -(-b // W)
    t = arc.rows(channel, w0, w1, ["level", "code"])
    lens = _lengths(meta, t["window"].to_numpy())
    level = t["level"].to_numpy()
    codes = _codes(t, t.num_rows)
    x = np.empty(int(lens.sum()), dtype=np.float64)
    offs = np.concatenate([[0], np.cumsum(lens)])
    for L in np.unique(lens):  # one decoder call per window length (the last window may be short)
        sel = np.flatnonzero(lens == L)
        ae = code_prediction(arc.codec(channel), codes[sel], level[sel], int(L))
        q = np.repeat(level[sel, None], int(L), axis=1) if ae is None else ae
        for k, i in enumerate(sel):
            x[offs[i]:offs[i + 1]] = meta.grid.values(q[k])
    return x[a - w0 * W:b - w0 * W]

def window_table(arc, channel: str) -> WindowTable:
    """Per-window facts of ``channel`` (predictor, worst error, outlier score, codes), time-ordered."""
    meta = arc.channel(channel)
    t = arc.rows(channel, 0, meta.n_windows, ["mode", "worst", "score", "code"])
    index = t["window"].to_numpy().astype(np.int64)
    worst = t["worst"].to_numpy().astype(np.float64) * (meta.eps / S.WORST_STEPS)
    return WindowTable(index=index, start_sample=index * meta.window, n=_lengths(meta, index),
                       mode=tuple(mode_name(m) for m in t["mode"].to_numpy()),
                       worst_error=worst, score=t["score"].to_numpy(), codes=_codes(t, t.num_rows))

def outliers(arc, channel: str, k: int = 20) -> list[int]:
    """Window numbers with the highest outlier score (code-only reconstruction error), highest first."""
    w = window_table(arc, channel)
    order = np.lexsort((w.index, -w.score))
    return [int(w.index[i]) for i in order[:k]]

def similar(arc, channel: str, window_index: int, k: int = 10) -> list[tuple[int, float]]:
    """The ``k`` windows whose codes are nearest (Euclidean) to window ``window_index``'s.

    An archive packed without an autoencoder has no codes; then each
    window is described by its decoded shape instead (the window's mean
    over 8 equal parts, centred and scaled by the channel's spread).
    """
    w = window_table(arc, channel)
    if not 0 <= window_index < len(w.index):
        raise BadInput(f"window {window_index} is out of range 0..{len(w.index) - 1}")
    c = w.codes.astype(np.float64) if w.codes.shape[1] else _shape_features(arc, channel)
    d = np.sqrt(((c - c[window_index]) ** 2).sum(axis=1))
    d[window_index] = np.inf
    order = np.lexsort((w.index, d))
    return [(int(w.index[i]), float(d[i])) for i in order[:k] if np.isfinite(d[i])]

def _shape_features(arc, channel: str, parts: int = 8) -> np.ndarray:
    meta = arc.channel(channel)
    W = meta.window
    feats = np.zeros((meta.n_windows, parts))
    per = max(1, CHUNK_SAMPLES // W)
    for w0 in range(0, meta.n_windows, per):
        w1 = min(meta.n_windows, w0 + per)
        x = arc.decode_windows(channel, w0, w1)[0].astype(np.float64)
        x = np.concatenate([x, np.full((w1 - w0) * W - len(x), x[-1] if len(x) else 0.0)])
        x = np.where(np.isfinite(x), x, 0.0).reshape(w1 - w0, W)[:, :(W // parts) * parts]
        x = x.reshape(w1 - w0, parts, W // parts)
        m = x.mean(axis=2)
        feats[w0:w1] = m - m.mean(axis=1, keepdims=True)
    spread = feats.std() or 1.0
    return feats / spread
