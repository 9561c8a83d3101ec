"""The index's learning and facts, checked against outside references (numpy's SVD and plain numpy formulas)."""

from __future__ import annotations

import numpy as np
import pytest

from tsarchive.errors import BadInput
from tsarchive.index import build_channel
from tsarchive.index import learn
from tsarchive.index.segments import STEPS_PER_OCTAVE, LOG_FLOOR_OCTAVES, choose_segment, facts, log_code
from tsarchive.model.train import train_autoencoder


def _low_rank(n=600, S=32, r=3, seed=0):
    """Rows in an r-dimensional subspace plus a little noise, with a clear spectral gap."""
    rng = np.random.default_rng(seed)
    basis = np.linalg.qr(rng.normal(size=(S, r)))[0]
    z = rng.normal(size=(n, r)) * np.array([5.0, 3.0, 2.0])[:r]
    return z @ basis.T + 0.05 * rng.normal(size=(n, S))


def _principal_angles(A, B):
    """Principal angles between the column spaces (Bjorck & Golub 1973: cosines = singular values of Qa^T Qb)."""
    qa, qb = np.linalg.qr(A)[0], np.linalg.qr(B)[0]
    return np.arccos(np.clip(np.linalg.svd(qa.T @ qb, compute_uv=False), -1, 1))


def test_exact_principal_basis_spans_the_svd_subspace():
    X = _low_rank()
    V = learn.principal_basis(X, 3)
    ref = np.linalg.svd(X, full_matrices=False)[2][:3].T          # numpy SVD, the outside reference
    assert np.max(_principal_angles(V, ref)) < 1e-6
    assert np.allclose(V.T @ V, np.eye(3), atol=1e-12)


def test_linear_autoencoder_spans_the_principal_subspace():
    # Baldi & Hornik, Neural Networks 2(1), 1989: a linear autoencoder trained with squared error has its
    # minimum where the decoder spans the leading principal subspace; compared with numpy's SVD.
    X = _low_rank(n=800)
    X = X - X.mean(axis=0)
    model = train_autoencoder(X, 3, linear=True, max_epochs=200, seed=1)
    dec = model.decoder[0].weight.T                              # (S, K): the decoder's directions
    ref = np.linalg.svd(X, full_matrices=False)[2][:3].T
    assert np.degrees(np.max(_principal_angles(dec, ref))) < 3.0


def test_basis_is_the_same_bits_whatever_the_row_order():
    # exact sums (tsarchive.model.exact): the Gram matrix, hence the basis, cannot depend on the order
    X = _low_rank(seed=3)
    perm = np.random.default_rng(5).permutation(len(X))
    assert np.array_equal(learn.principal_basis(X, 3), learn.principal_basis(X[perm], 3))


def test_facts_match_plain_numpy():
    rng = np.random.default_rng(2)
    rows = rng.normal(size=(5, 64)) * 3 + 1
    rows[2, 10:40] = rows[2, 10]                                 # 29 repeated first differences
    L = np.array([64, 64, 64, 64, 40])
    f = facts(rows, L)
    for i in range(5):
        x = rows[i, :L[i]]
        d = np.diff(x)
        assert f.mean[i] == pytest.approx(x.mean(), rel=1e-12)
        assert f.spread[i] == pytest.approx(x.std(), rel=1e-12)           # population std (numpy ddof=0)
        assert f.slope[i] == pytest.approx(np.sqrt(np.mean(d * d)), rel=1e-12)
        assert f.peak[i] == pytest.approx(np.max(np.abs(x - x.mean())), rel=1e-12)
        assert f.flat[i] == int(np.floor(16 * np.count_nonzero(d == 0) / len(d) + 0.5))


def test_log_code_against_log2():
    rng = np.random.default_rng(4)
    v = 2.0 ** rng.uniform(-10, 6, 2000)
    want = np.floor(STEPS_PER_OCTAVE * (np.log2(v) + LOG_FLOOR_OCTAVES)) + 1     # definition, numpy log2
    near_edge = np.abs(STEPS_PER_OCTAVE * (np.log2(v) + LOG_FLOOR_OCTAVES) - np.rint(
        STEPS_PER_OCTAVE * (np.log2(v) + LOG_FLOOR_OCTAVES))) < 1e-9
    got = log_code(v, 1.0).astype(np.int64)
    assert np.array_equal(got[~near_edge], want[~near_edge].astype(np.int64))
    assert log_code(np.array([0.0]), 1.0)[0] == 0


def test_segment_choice_and_refusal():
    assert choose_segment(10 ** 6) == 256
    assert choose_segment(1000) == 16 and choose_segment(5000) == 64    # at least 64 segments where possible
    assert choose_segment(10 ** 6, 100) == 100
    for bad in (1, -5, 1 << 17, 2.5):
        with pytest.raises(BadInput, match="segment"):
            choose_segment(1000, bad)


def test_channel_index_is_deterministic_and_the_linear_code_reconstructs():
    rng = np.random.default_rng(0)
    t = np.arange(40000)
    x = np.sin(2 * np.pi * t / 97.0) + 0.01 * rng.normal(size=len(t))
    a = build_channel(lambda i, j: x[i:j], "x", len(x), try_nonlinear=False)
    b = build_channel(lambda i, j: x[i:j], "x", len(x), try_nonlinear=False)
    assert np.array_equal(a.codes, b.codes) and np.array_equal(a.facts, b.facts) and a.worst == b.worst
    assert a.coder.kind == "linear" and a.segment == 256
    from tsarchive.index.query import preview
    err = np.max(np.abs(preview(a) - x))                        # numpy against the source samples
    assert err <= a.worst * (1 + 1e-9) and err < 0.2


def test_huge_and_missing_samples_keep_the_index_finite():
    # found by tests/test_bound.py (hypothesis): a sample of 1e300 overflowed the squared deviations
    x = np.sin(np.arange(4000) / 9.0)
    x[5], x[700], x[2000], x[3000] = 1e300, -1e300, np.nan, 1e-310
    ci = build_channel(lambda i, j: x[i:j], "x", len(x), try_nonlinear=False)
    assert np.all(np.isfinite(ci.codes)) and np.isfinite(ci.worst) and ci.worst >= 9e299
    from tsarchive.index.query import unusual_scores, ranked
    u = unusual_scores(ci)
    assert np.all(np.isfinite(u.score))
    assert {5 // ci.segment, 700 // ci.segment} <= set(ranked(u.score, 3).tolist())


def test_levels_of_large_integers_stay_exact_enough():
    # found by the suite's warnings (tests/test_integers.py): an int64 channel near 2**62 with a small spread
    # overflowed the level's int64 cast
    x = (np.int64(2) ** 62 + np.arange(5000, dtype=np.int64) % 7)
    ci = build_channel(lambda i, j: x[i:j], "x", len(x), try_nonlinear=False)
    true_mean = np.array([float(np.mean(x[i:i + ci.segment].astype(np.float64)))
                          for i in range(0, len(x), ci.segment)])
    assert np.all(np.abs(ci.mean - true_mean) <= ci.level_step)   # numpy means, within one level step


def test_a_nonlinear_coder_too_big_to_keep_is_not_trained(monkeypatch):
    # speed (issue 12): the decoder's size is known before training; one that the byte rule would drop
    # anyway must not cost its training (it took 4 s a channel of the bench's speed record)
    X = _low_rank(n=700, S=32)
    K = 3
    lin = learn.choose(X, K, raw_bytes=10 ** 12, try_nonlinear=False)

    def refuse(*a, **k):
        raise AssertionError("trained a decoder that cannot be kept")
    monkeypatch.setattr(learn, "fit_nonlinear", refuse)
    small = 2 * (K * learn.AE_HIDDEN + learn.AE_HIDDEN + learn.AE_HIDDEN * 32 + 32)   # K -> hidden -> S, with biases
    got = learn.choose(X, K, raw_bytes=int(small / learn.MODEL_SHARE) - 1)
    assert got.kind == "linear" and np.isnan(got.heldout_nonlinear) and "not trained" in got.note
    assert np.array_equal(got.basis, lin.basis) and got.step == lin.step


def test_the_decoder_size_known_before_training_is_the_trained_one():
    X = _low_rank(n=80, S=32)
    model = train_autoencoder(X, 3, hidden=learn.AE_HIDDEN, work=1e6, seed=0)
    from tsarchive.model.spec import decoder_params
    assert model.int_decoder.n_params == decoder_params(3, learn.AE_HIDDEN, 32)


def test_compiled_gram_schmidt_equals_the_numpy_one():
    # the compiled Gram-Schmidt of the principal basis against its numpy form, bit for bit: the same
    # IEEE-754 operations in the same order (a vanished column restarts from a unit vector in both)
    if learn._kernels() is None:
        pytest.skip("numba is not installed")
    rng = np.random.default_rng(3)
    for S, K in ((256, 8), (32, 3), (5, 5), (1, 1)):
        V = rng.standard_normal((S, K)) * 10.0 ** rng.integers(-60, 60, (1, K))
        if K > 2:
            V[:, 2] = 3.0 * V[:, 0]                      # dependent: vanishes after projection
        got, ok = learn._kernels()[0](V, learn.exact._bits_for(S))
        assert ok and np.array_equal(got.view(np.int64), learn._orthonormal_numpy(V).view(np.int64))
    X = _low_rank()
    assert np.array_equal(learn.principal_basis(X, 3), _numpy_basis(X, 3))


def _numpy_basis(X, K):
    old = learn._kernels
    try:
        learn._kernels = lambda: None
        return learn.principal_basis(X, K)
    finally:
        learn._kernels = old
