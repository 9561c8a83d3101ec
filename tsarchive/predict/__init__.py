"""Per-window predictors on the integer grid, and their registry.

Contract (every predictor): ``residuals(q, ctx) -> r`` and
``reconstruct(r, ctx) -> q`` are exact inverses on int64 arrays of shape
``(n_windows, n)``.  ``ctx`` (:class:`Context`) carries each window's
``level`` (its rounded mean, stored per window), the autoencoder's integer
prediction ``ae`` (``None`` without a model), the channel's sets of integer
LPC coefficients ``lpc`` and, per window, which set it uses (``lpc_set``).  Each predictor has a stable integer ``id``
stored in the archive's ``mode`` column and a short ``name`` shown to users.
Only integer arithmetic is used, so decoding is bit-exact everywhere.

* ``prev``   previous sample (Lorenzo predictor, order 1)
* ``prev2``  linear extrapolation from the two previous samples (order 2)
* ``ae``     the autoencoder's reconstruction from the window's code
* ``ae+prev`` previous-sample prediction of the autoencoder's error
* ``lpc``    linear prediction with one of the channel's integer coefficient sets (:mod:`.lpc`)
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .. import codecs
from ..errors import UnknownCodec
from . import lpc as _lpc


@dataclass(frozen=True)
class Context:
    """What a predictor may use besides the window's own integers."""

    level: np.ndarray
    ae: np.ndarray | None = None
    lpc: tuple[_lpc.LpcCoefs, ...] = ()
    lpc_set: np.ndarray | None = None        # per window: index into ``lpc`` (None: set 0 everywhere)

    def take(self, sel) -> "Context":
        return Context(self.level[sel], None if self.ae is None else self.ae[sel], self.lpc,
                       None if self.lpc_set is None else self.lpc_set[sel])

    def with_set(self, k: int) -> "Context":
        """The same windows, all predicted with LPC set ``k``."""
        return Context(self.level, self.ae, self.lpc, np.full(len(self.level), k, dtype=np.int8))


def _first(q: np.ndarray, level: np.ndarray) -> np.ndarray:
    return q[:, :1] - level[:, None]


def _prev_res(q, c):
    return np.concatenate([_first(q, c.level), np.diff(q, axis=1)], axis=1)


def _prev_rec(r, c):
    return c.level[:, None] + np.cumsum(r, axis=1)


def _prev2_res(q, c):
    d = np.diff(q, axis=1)
    return np.concatenate([_first(q, c.level), d[:, :1], np.diff(d, axis=1)], axis=1)


def _prev2_rec(r, c):
    q = np.empty_like(r)
    q[:, :1] = c.level[:, None] + r[:, :1]
    if r.shape[1] > 1:
        d = np.cumsum(r[:, 1:], axis=1)
        q[:, 1:] = q[:, :1] + np.cumsum(d, axis=1)
    return q


def _ae_res(q, c):
    return q - c.ae


def _ae_rec(r, c):
    return c.ae + r


def _aeprev_res(q, c):
    e = q - c.ae
    return np.concatenate([e[:, :1], np.diff(e, axis=1)], axis=1)


def _aeprev_rec(r, c):
    return c.ae + np.cumsum(r, axis=1)


def _by_set(fn, a, c):
    sets = np.zeros(len(a), np.int8) if c.lpc_set is None else c.lpc_set
    used = np.unique(sets)
    for k in used:
        if not 0 <= k < len(c.lpc):
            raise UnknownCodec(f"linear-prediction set {k} is not among the channel's {len(c.lpc)}; "
                               "the archive is damaged or from a newer tsarchive")
    if len(used) == 1:                     # one set for all windows: no gather/scatter copies
        return fn(a, c.level, c.lpc[int(used[0])])
    out = np.empty_like(a, dtype=np.int64)
    for k in used:
        sel = sets == k
        out[sel] = fn(a[sel], c.level[sel], c.lpc[int(k)])
    return out


def _lpc_res(q, c):
    return _by_set(_lpc.residuals, q, c)


def _lpc_rec(r, c):
    return _by_set(_lpc.reconstruct, r, c)


@dataclass(frozen=True)
class Predictor:
    id: int
    name: str
    uses_ae: bool
    residuals: Callable[[np.ndarray, Context], np.ndarray]
    reconstruct: Callable[[np.ndarray, Context], np.ndarray]
    uses_lpc: bool = False

    def available(self, ctx: Context) -> bool:
        # an LPC of order 0 is still a predictor: the window's level (right for white noise)
        return (ctx.ae is not None or not self.uses_ae) and (not self.uses_lpc or len(ctx.lpc) > 0)

    # -- the codec contract (tsarchive.codecs): what it needs lives in the Context, so no config
    def encode(self, q: np.ndarray, ctx: Context) -> np.ndarray:
        return self.residuals(q, ctx)

    def decode(self, r: np.ndarray, ctx: Context) -> np.ndarray:
        return self.reconstruct(r, ctx)

    def get_config(self) -> dict:
        return {}


PREDICTORS: dict[int, Predictor] = {p.id: p for p in (
    Predictor(0, "prev", False, _prev_res, _prev_rec),
    Predictor(1, "prev2", False, _prev2_res, _prev2_rec),
    Predictor(2, "ae", True, _ae_res, _ae_rec),
    Predictor(3, "ae+prev", True, _aeprev_res, _aeprev_rec),
    Predictor(4, "lpc", False, _lpc_res, _lpc_rec, uses_lpc=True),
)}


for _p in PREDICTORS.values():
    codecs.register("predictor", _p.id, lambda config, p=_p: p)


def get_predictor(mode: int) -> Predictor:
    try:
        return PREDICTORS[int(mode)]
    except KeyError:
        raise UnknownCodec(f"predictor mode {mode} is unknown to this version; upgrade tsarchive to read the archive") from None


def mode_name(mode: int) -> str:
    return get_predictor(mode).name
