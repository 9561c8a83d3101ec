"""Round-trip kit shared by the stage tests (so a new stage's test is mostly data)."""

from __future__ import annotations

import json

import numpy as np


def check_predictor_round_trip(pred, q: np.ndarray, ctx) -> np.ndarray:
    """``reconstruct(residuals(q))`` gives back ``q`` exactly; returns the residuals."""
    r = pred.residuals(q, ctx)
    assert r.dtype == np.int64 and r.shape == q.shape
    back = pred.reconstruct(r, ctx)
    assert back.dtype == np.int64
    np.testing.assert_array_equal(back, q)
    return r


def check_config_round_trip(obj) -> None:
    """``from_dict(to_dict())`` is the identity and the dict is JSON-safe."""
    d = obj.to_dict()
    assert json.loads(json.dumps(d)) == d
    assert type(obj).from_dict(d) == obj


def int_windows(rng, n_windows: int, n: int, scale: int = 1000) -> np.ndarray:
    walk = np.cumsum(rng.integers(-scale // 10 - 1, scale // 10 + 1, size=(n_windows, n)), axis=1)
    return walk + rng.integers(-scale, scale, size=(n_windows, 1))
