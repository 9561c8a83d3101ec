"""Linear prediction (LPC) with integer coefficients, fitted once per channel.

Within a window, ``y = q - level`` is predicted from ``y[i-1], …, y[i-p]``
(zero before the window start) as ``P = (Σ A_k y[i-k] + 2**(S-1)) >> S``.
The integer coefficients ``A_k`` are fitted by least squares
(numpy.linalg.lstsq) on a sample of the channel's windows, for a few orders,
keeping the cheapest; they are stored in the manifest.  All arithmetic is
int64 and exact; decoding runs the recursion sample by sample, vectorised
across windows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import ArchiveCorrupt

SHIFT = 14                 # fixed-point bits of the coefficients
MAX_COEF = 1 << 18         # |A_k| bound
MAX_Y = 1 << 36            # windows with larger deviations do not use this predictor (int64 headroom)
MAX_ORDER = 32
ORDERS = (2, 4, 8, 16, 32)
FIT_ROWS = 400_000


@dataclass(frozen=True)
class LpcCoefs:
    coefs: tuple[int, ...]
    shift: int = SHIFT

    def __post_init__(self) -> None:
        if len(self.coefs) > MAX_ORDER or any(abs(int(a)) > MAX_COEF for a in self.coefs) or self.shift != SHIFT:
            raise ArchiveCorrupt("linear-prediction coefficients are out of range; the archive is damaged")

    @property
    def order(self) -> int:
        return len(self.coefs)

    def to_dict(self) -> dict:
        return {"coefs": list(self.coefs), "shift": self.shift}

    @classmethod
    def from_dict(cls, d: dict | None) -> "LpcCoefs":
        if d is None:
            return cls(())
        try:
            return cls(tuple(int(a) for a in d["coefs"]), int(d["shift"]))
        except (KeyError, TypeError, ValueError):
            raise ArchiveCorrupt("linear-prediction coefficients are unreadable; the archive is damaged") from None


def usable(q: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Windows whose deviations from their level are small enough for exact int64 prediction."""
    return np.abs(q - level[:, None]).max(axis=1, initial=0) < MAX_Y


def _fit_order(y: np.ndarray, order: int) -> LpcCoefs:
    rows = y.shape[1] - order
    X = np.stack([y[:, order - k:order - k + rows] for k in range(1, order + 1)], axis=2).reshape(-1, order)
    t = y[:, order:].reshape(-1)
    if len(t) > FIT_ROWS:
        pick = np.linspace(0, len(t) - 1, FIT_ROWS).astype(np.int64)
        X, t = X[pick], t[pick]
    a, *_ = np.linalg.lstsq(X, t, rcond=None)
    A = np.clip(np.rint(a * (1 << SHIFT)), -MAX_COEF, MAX_COEF).astype(np.int64)
    return LpcCoefs(tuple(int(v) for v in A))


def fit(q: np.ndarray, level: np.ndarray, cost) -> LpcCoefs:
    """The cheapest of the candidate orders on windows ``q`` under ``cost(residuals) -> bits``."""
    ok = usable(q, level)
    q, level = q[ok], level[ok]
    if len(q) == 0:
        return LpcCoefs(())
    y = (q - level[:, None]).astype(np.float64)
    best, best_bits = None, np.inf
    for order in ORDERS:
        if q.shape[1] <= 2 * order:
            break
        c = _fit_order(y, order)
        bits = float(cost(residuals(q, level, c)).sum()) + 32 * order
        if bits < best_bits:
            best, best_bits = c, bits
    return best or LpcCoefs(())


def residuals(q: np.ndarray, level: np.ndarray, lpc: LpcCoefs) -> np.ndarray:
    y = q - level[:, None]
    acc = np.full_like(y, 1 << (lpc.shift - 1))
    for k, a in enumerate(lpc.coefs, start=1):
        if a and k < y.shape[1]:
            acc[:, k:] += a * y[:, :-k]
    return y - (acc >> lpc.shift)


def reconstruct(r: np.ndarray, level: np.ndarray, lpc: LpcCoefs) -> np.ndarray:
    n = r.shape[1]
    rt = np.ascontiguousarray(r.T)           # (n, windows): each step reads contiguous rows
    y = np.zeros_like(rt)
    coefs = [(k, np.int64(a)) for k, a in enumerate(lpc.coefs, start=1) if a]
    half = np.int64(1 << (lpc.shift - 1))
    acc = np.empty(r.shape[0], dtype=np.int64)
    tmp = np.empty(r.shape[0], dtype=np.int64)
    for i in range(n):
        acc.fill(half)
        for k, a in coefs:
            if k > i:
                break
            np.multiply(y[i - k], a, out=tmp)
            acc += tmp
        np.right_shift(acc, lpc.shift, out=acc)
        np.add(rt[i], acc, out=y[i])
    return level[:, None] + y.T
