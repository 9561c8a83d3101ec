"""Index queries: robust scores, the look-alike shortlist and re-ranking, checked against plain numpy."""

from __future__ import annotations

import numpy as np
import pytest

from tsarchive.index import build_channel
from tsarchive.index import query as Q


def test_robust_z_by_hand():
    f = np.array([1.0, 2.0, 3.0, 4.0, 100.0])
    # median 3, |f - 3| = 2, 1, 0, 1, 97 -> MAD 1; 1.4826 = 1 / Phi^-1(3/4) (common practice)
    assert np.allclose(Q.robust_z(f, 0.0), (f - 3.0) / 1.4826)
    assert np.allclose(Q.robust_z(np.ones(4), 0.5), 0.0)      # MAD 0: the floor applies


def test_local_subtracts_the_neighbours_median():
    f = np.array([0.0, 0, 0, 10, 0, 0, 0, 5, 5, 5, 5, 5])
    out = Q.local(f, reach=2)
    assert out[3] == 10.0 and out[0] == 0.0
    assert out[9] == 0.0                                       # inside a plateau: no change against neighbours


def test_shortlist_equals_brute_force_nearest():
    rng = np.random.default_rng(1)
    codes = rng.integers(-20, 21, size=(5000, 6)).astype(np.int16)
    q = codes[17].astype(np.float32)
    old = Q.CHUNK
    try:
        Q.CHUNK = 777                                          # several chunks, with a partial last one
        got = Q.shortlist(codes, q, 25, exclude=17)
    finally:
        Q.CHUNK = old
    d = ((codes.astype(np.int64) - codes[17]) ** 2).sum(axis=1)   # exact integer distances (numpy)
    d[17] = np.iinfo(np.int64).max
    want = np.lexsort((np.arange(len(d)), d))[:25]
    assert np.array_equal(got, want)


def test_alike_finds_the_exact_nearest_segments_of_a_recording():
    rng = np.random.default_rng(0)
    S, n_seg = 128, 400
    shapes = [np.sin(2 * np.pi * k * np.arange(S) / S) for k in (1, 2, 3, 5)]
    x = np.concatenate([shapes[i % 4] * (1 + 0.1 * rng.normal()) + 0.05 * rng.normal(size=S)
                        for i in range(n_seg)])
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    rows = x.reshape(n_seg, S)
    cen = rows - rows.mean(axis=1, keepdims=True)
    hits = 0
    for q in range(0, n_seg, 37):
        d = np.sqrt(((cen - cen[q]) ** 2).sum(axis=1))       # exact search, numpy
        d[q] = np.inf
        exact = set(np.argsort(d, kind="stable")[:5].tolist())
        got = Q.alike(ci, q, 5, lambda ids: rows[ids])
        hits += len(exact & {s for s, _ in got})
        assert all(s % 4 == q % 4 for s, _ in got)             # the same shape
    assert hits / (5 * len(range(0, n_seg, 37))) >= 0.9


def test_unusual_finds_a_stuck_stretch_and_a_spike():
    rng = np.random.default_rng(3)
    t = np.arange(64 * 256)
    x = np.sin(2 * np.pi * t / 50.0) + 0.1 * rng.normal(size=len(t))
    x[20 * 256:21 * 256] = x[20 * 256]                         # segment 20 stuck
    x[40 * 256 + 7] += 8.0                                      # segment 40: a spike
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), try_nonlinear=False)
    u = Q.unusual_scores(ci)
    assert set(Q.ranked(u.score, 2).tolist()) == {20, 40}


def test_preview_of_a_range_and_refusal():
    x = np.sin(np.arange(3000) / 7.0)
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), try_nonlinear=False)
    whole = Q.preview(ci)
    assert len(whole) == 3000 and np.array_equal(Q.preview(ci, 100, 260), whole[100:260])
    assert len(Q.preview(ci, 10, 5)) == 0
    from tsarchive.errors import BadInput
    with pytest.raises(BadInput, match="out of range"):
        Q.alike(ci, ci.n_segments, 3, lambda ids: None)
