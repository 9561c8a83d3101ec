"""Per-window predictors on the integer grid, and their registry.

Contract (every predictor): ``residuals(q, level, ae) -> r`` and
``reconstruct(r, level, ae) -> q`` are exact inverses on int64 arrays of
shape ``(n_windows, n)``; ``level`` is each window's rounded mean (stored per
window) and ``ae`` the autoencoder's integer prediction (``None`` when the
predictor does not use it).  Each predictor has a stable integer ``id``
stored in the archive's ``mode`` column and a short ``name`` shown to users.
Only integer arithmetic is used, so decoding is bit-exact everywhere.

* ``prev``   previous sample (Lorenzo predictor, order 1)
* ``prev2``  linear extrapolation from the two previous samples (order 2)
* ``ae``     the autoencoder's reconstruction from the window's code
* ``ae+prev`` previous-sample prediction of the autoencoder's error
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..errors import UnknownCodec


def _first(q: np.ndarray, level: np.ndarray) -> np.ndarray:
    return q[:, :1] - level[:, None]


def _prev_res(q, level, ae):
    return np.concatenate([_first(q, level), np.diff(q, axis=1)], axis=1)


def _prev_rec(r, level, ae):
    return level[:, None] + np.cumsum(r, axis=1)


def _prev2_res(q, level, ae):
    d = np.diff(q, axis=1)
    return np.concatenate([_first(q, level), d[:, :1], np.diff(d, axis=1)], axis=1)


def _prev2_rec(r, level, ae):
    q = np.empty_like(r)
    q[:, :1] = level[:, None] + r[:, :1]
    if r.shape[1] > 1:
        d = np.cumsum(r[:, 1:], axis=1)
        q[:, 1:] = q[:, :1] + np.cumsum(d, axis=1)
    return q


def _ae_res(q, level, ae):
    return q - ae


def _ae_rec(r, level, ae):
    return ae + r


def _aeprev_res(q, level, ae):
    e = q - ae
    return np.concatenate([e[:, :1], np.diff(e, axis=1)], axis=1)


def _aeprev_rec(r, level, ae):
    return ae + np.cumsum(r, axis=1)


@dataclass(frozen=True)
class Predictor:
    id: int
    name: str
    uses_ae: bool
    residuals: Callable[[np.ndarray, np.ndarray, np.ndarray | None], np.ndarray]
    reconstruct: Callable[[np.ndarray, np.ndarray, np.ndarray | None], np.ndarray]


PREDICTORS: dict[int, Predictor] = {p.id: p for p in (
    Predictor(0, "prev", False, _prev_res, _prev_rec),
    Predictor(1, "prev2", False, _prev2_res, _prev2_rec),
    Predictor(2, "ae", True, _ae_res, _ae_rec),
    Predictor(3, "ae+prev", True, _aeprev_res, _aeprev_rec),
)}
BY_NAME = {p.name: p for p in PREDICTORS.values()}


def get_predictor(mode: int) -> Predictor:
    try:
        return PREDICTORS[int(mode)]
    except KeyError:
        raise UnknownCodec(f"predictor mode {mode} is unknown to this version; upgrade tsarchive to read the archive") from None


def mode_name(mode: int) -> str:
    return get_predictor(mode).name
