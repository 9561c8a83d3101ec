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


def check_codec(kind: str, codec, samples) -> None:
    """The codec contract of :mod:`tsarchive.codecs`: the config is JSON-safe and rebuilds an equal codec
    through the registry, and the rebuilt codec decodes what the original encoded, exactly, for each
    int64 array of ``samples`` (coders: ``decode(encode(x), len(x)) == x``)."""
    from tsarchive import codecs
    cfg = json.loads(json.dumps(codec.get_config()))
    again = codecs.from_config(kind, codec.id, cfg)
    assert again == codec
    for x in samples:
        x = np.asarray(x, dtype=np.int64)
        back = again.decode(codec.encode(x), len(x))
        assert back.dtype == np.int64
        np.testing.assert_array_equal(back, x)


def int_windows(rng, n_windows: int, n: int, scale: int = 1000) -> np.ndarray:
    walk = np.cumsum(rng.integers(-scale // 10 - 1, scale // 10 + 1, size=(n_windows, n)), axis=1)
    return walk + rng.integers(-scale, scale, size=(n_windows, 1))
