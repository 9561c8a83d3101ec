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


def test_edge_fact_counts_samples_at_the_extremes_like_numpy():
    from tsarchive.index.segments import facts
    rng = np.random.default_rng(5)
    rows = rng.integers(-3, 4, size=(40, 16)).astype(np.float64)     # small integers: many ties
    lengths = rng.integers(2, 17, size=40)
    got = facts(rows, lengths).edge
    for r, L, g in zip(rows, lengths, got):                        # numpy, segment by segment (own samples only)
        own = r[:L]
        assert g == np.count_nonzero(own == own.max()) + np.count_nonzero(own == own.min()) \
            - (np.count_nonzero(own == own.max()) if own.max() == own.min() else 0)


def _wavy(n_seg: int, S: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n_seg * S)
    return np.sin(2 * np.pi * t / 37.0) + 0.5 * np.sin(2 * np.pi * t / 91.0) + 0.1 * rng.normal(size=len(t))


def test_unusual_finds_clipped_segments():
    S, x = 256, np.round(8 * _wavy(96, 256, 7))              # logged in whole steps: ties and flat runs are common
    truth = [20, 45, 70]
    for s in truth:                                            # clipped at 60 % of the segment's largest swing
        seg = x[s * S:(s + 1) * S]
        m = np.median(seg)
        c = 0.6 * np.max(np.abs(seg - m))
        np.clip(seg, m - c, m + c, out=seg)
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    u = Q.unusual_scores(ci)
    assert set(Q.ranked(u.score, 3).tolist()) == set(truth)
    assert {u.because[s] for s in truth} <= {"held at its extremes", "repeated samples"}


def test_unusual_finds_noise_bursts_over_a_slowly_rougher_recording():
    S, x = 256, _wavy(96, 256, 8)
    rng = np.random.default_rng(9)
    x *= np.linspace(1.0, 6.0, len(x))                         # the recording's roughness drifts by 6x
    truth = [15, 50, 80]
    for s in truth:                                            # noise over half the segment, 0.2 x the std
        x[s * S + 64:s * S + 192] += rng.normal(0.0, 0.2 * np.std(x), 128)
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    assert set(Q.ranked(Q.unusual_scores(ci).score, 3).tolist()) == set(truth)


def _loud_and_quiet(n_seg: int, S: int, seed: int) -> np.ndarray:
    """Noise-like segments, a few of them loud events: the channel's spread is the events', the quiet
    segments' shapes are noise the codes cannot hold (a long-period seismometer, seismo_karc_lhz)."""
    rng = np.random.default_rng(seed)
    x = 0.05 * rng.normal(size=n_seg * S)
    x = np.convolve(x, np.ones(3) / 3, mode="same")            # a little colour, as recorded noise has
    t = np.arange(S)
    for s in rng.choice(n_seg, n_seg // 20, replace=False):
        x[s * S:(s + 1) * S] += 20 * np.exp(-t / 40.0) * np.sin(2 * np.pi * t / 25.0)
    return x


def test_alike_recall_against_brute_force_on_noise_like_segments():
    S, n_seg = 128, 300
    x = _loud_and_quiet(n_seg, S, 4)
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    rows = x.reshape(n_seg, S)
    cen = rows - rows.mean(axis=1, keepdims=True)
    hits = total = 0
    for q in range(0, n_seg, 11):
        d = np.sqrt(((cen - cen[q]) ** 2).sum(axis=1))         # exact search, numpy brute force
        d[q] = np.inf
        exact = set(np.argsort(d, kind="stable")[:5].tolist())
        hits += len(exact & {s for s, _ in Q.alike(ci, q, 5, lambda ids: rows[ids])})
        total += 5
    assert hits / total >= 0.9


def test_shortlist_distance_is_a_lower_bound_of_the_decoded_distance():
    # Pythagoras and the triangle inequality (see query.with_miss): checked against numpy distances
    S, n_seg = 128, 200
    x = _loud_and_quiet(n_seg, S, 6) + _wavy(n_seg, S, 6)
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    rows = x.reshape(n_seg, S)
    cen = rows - rows.mean(axis=1, keepdims=True)
    lat = Q.latent(ci).astype(np.float64)
    slack = np.sqrt(ci.coder.code_size) * ci.coder.step       # each code rounds by at most step / 2
    for q in range(0, n_seg, 17):
        low = np.sqrt(((lat - lat[q]) ** 2).sum(axis=1)) * ci.ref
        true = np.sqrt(((cen - cen[q]) ** 2).sum(axis=1))
        # the stored miss is log-coded within 2**(1/16) (segments.log_code): at most that much over
        assert np.all(low <= true * 2 ** (1 / 16) + slack * ci.ref)


def test_alike_decodes_at_most_the_cap():
    S, n_seg = 64, 900
    x = _loud_and_quiet(n_seg, S, 2)
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    rows = x.reshape(n_seg, S)
    asked = []
    Q.alike(ci, 3, 5, lambda ids: asked.append(len(ids)) or rows[ids], most=100)
    assert sum(asked) <= 1 + 100


def test_stored_edge_codes_hold_the_numpy_counts_on_the_log_scale():
    S, x = 64, np.round(4 * _wavy(40, 64, 11))
    ci = build_channel(lambda a, b: x[a:b], "x", len(x), segment=S, try_nonlinear=False)
    rows = x.reshape(-1, S)
    count = (rows == rows.max(axis=1, keepdims=True)).sum(axis=1) + (rows == rows.min(axis=1, keepdims=True)).sum(axis=1)
    k = ci.fact("edge").astype(np.float64)
    # the log scale of segments.log_code: code k covers [2**((k-1)/8 - 16), 2**(k/8 - 16)) (numpy exp2)
    assert np.all(np.exp2((k - 1) / 8 - 16) <= count * (1 + 1e-12)) and np.all(count < np.exp2(k / 8 - 16))
