"""The numba LPC decoder gives the numpy reference's bits, on any int64 input.

``lpc.reconstruct`` runs a compiled kernel; ``lpc._reconstruct_numpy`` is the
former vectorised decoder, kept as the reference and as the fallback without
numba.  Random residuals (not only ones made by ``residuals``) reach the
decoder from a damaged archive, so agreement is checked there too, overflow
(int64 wrap-around) included.
"""

import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from tsarchive.predict import lpc

ORDERS = (0, 1, 2, 5, 32)
LENGTHS = (1, 3, 1024)


def _coefs(rng, order: int) -> lpc.LpcCoefs:
    """Random coefficients over the full range, with some zeros and the bounds themselves."""
    a = rng.integers(-lpc.MAX_COEF, lpc.MAX_COEF + 1, size=order)
    a[rng.random(order) < 0.2] = 0
    a[rng.random(order) < 0.1] = lpc.MAX_COEF
    a[rng.random(order) < 0.1] = -lpc.MAX_COEF
    return lpc.LpcCoefs(tuple(int(v) for v in a))


def _residuals(rng, windows: int, n: int) -> np.ndarray:
    """Small, huge (|r| near MAX_Y) and zero residuals of both signs, mixed."""
    small = rng.integers(-100, 101, size=(windows, n))
    huge = rng.integers(-lpc.MAX_Y + 1, lpc.MAX_Y, size=(windows, n))
    edge = rng.choice([-lpc.MAX_Y + 1, lpc.MAX_Y - 1], size=(windows, n))
    pick = rng.integers(0, 4, size=(windows, n))
    return np.choose(pick, [small, huge, edge, np.zeros_like(small)]).astype(np.int64)


def _same(a: np.ndarray, b: np.ndarray) -> None:
    assert a.dtype == b.dtype == np.int64 and a.shape == b.shape
    np.testing.assert_array_equal(a, b)


def test_numba_kernel_is_used():
    kernels = lpc._kernels()
    assert kernels is not None, "numba is a dependency: the compiled kernels must be available"
    assert all(hasattr(k, "signatures") for k in kernels)  # numba dispatchers, not the plain Python functions


def test_importing_tsarchive_does_not_import_numba():
    code = "import sys, tsarchive, tsarchive.codec, tsarchive.predict.lpc; print('numba' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"


def test_hand_worked_recursions():
    level = np.array([10])
    # A_1 = 1.0 exactly: the recursion is a running sum
    r = np.array([[3, -1, 4, -1, -5, 9]])
    _same(lpc.reconstruct(r, level, lpc.LpcCoefs((1 << lpc.SHIFT,))), 10 + np.cumsum(r, axis=1))
    # A_1 = 0.5: y[i] = r[i] + floor((y[i-1] + 1) / 2), rounding half up and flooring negatives
    r = np.array([[5, 0, 0, 0, -7, 0]])
    _same(lpc.reconstruct(r, level, lpc.LpcCoefs((1 << (lpc.SHIFT - 1),))),
          np.array([[15, 13, 12, 11, 4, 7]]))
    # A_1 = 2**-14: P = floor(y / 2**14 + 1/2) exactly at the rounding boundaries (halves go up)
    r = np.array([[8191, 0], [8192, 0], [-8192, 0], [-8193, 0], [24575, 0], [24576, 0]])
    got = lpc.reconstruct(r, np.zeros(6, dtype=np.int64), lpc.LpcCoefs((1,)))
    assert got[:, 1].tolist() == [0, 1, 0, -1, 1, 2]
    # A_2 = 1.0 only (A_1 = 0): two interleaved running sums, and y[1] sees no y[-1]
    r = np.array([[1, 2, 3, 4, 5]])
    _same(lpc.reconstruct(r, level, lpc.LpcCoefs((0, 1 << lpc.SHIFT))), np.array([[11, 12, 14, 16, 19]]))


@pytest.mark.parametrize("n", LENGTHS)
@pytest.mark.parametrize("order", ORDERS)
def test_numba_matches_numpy_on_random_residuals(order, n):
    rng = np.random.default_rng(1000 * order + n)
    windows = 5 if n == 1024 else 40
    r = _residuals(rng, windows, n)
    level = rng.integers(-lpc.MAX_Y, lpc.MAX_Y, size=windows)
    c = _coefs(rng, order)
    _same(lpc.reconstruct(r, level, c), lpc._reconstruct_numpy(r, level, c))


@pytest.mark.parametrize("n", LENGTHS)
@pytest.mark.parametrize("order", ORDERS)
def test_round_trip_at_the_bounds(order, n):
    # deviations anywhere below MAX_Y (where `usable` admits the window) decode exactly
    rng = np.random.default_rng(7 + 1000 * order + n)
    windows = 5 if n == 1024 else 40
    level = rng.integers(-2**40, 2**40, size=windows)
    q = level[:, None] + _residuals(rng, windows, n)
    assert lpc.usable(q, level).all()
    c = _coefs(rng, order)
    r = lpc.residuals(q, level, c)
    _same(lpc.reconstruct(r, level, c), q)
    _same(lpc._reconstruct_numpy(r, level, c), q)


@given(y=hnp.arrays(np.int64, hnp.array_shapes(min_dims=2, max_dims=2, max_side=40),
                    elements=st.integers(-lpc.MAX_Y + 1, lpc.MAX_Y - 1)),
       coefs=st.lists(st.integers(-lpc.MAX_COEF, lpc.MAX_COEF), max_size=lpc.MAX_ORDER),
       base=st.integers(-2**40, 2**40))
def test_round_trip_random(y, coefs, base):
    level = np.arange(y.shape[0], dtype=np.int64) + base
    q = level[:, None] + y
    c = lpc.LpcCoefs(tuple(coefs))
    r = lpc.residuals(q, level, c)
    _same(lpc.reconstruct(r, level, c), q)
    _same(lpc.reconstruct(r, level, c), lpc._reconstruct_numpy(r, level, c))


@given(seed=st.integers(0, 2**32 - 1), order=st.sampled_from(ORDERS),
       n=st.sampled_from((1, 2, 3, 5, 31, 33, 64)))
def test_numba_matches_numpy_random(seed, order, n):
    rng = np.random.default_rng(seed)
    r = _residuals(rng, 4, n)
    level = rng.integers(-lpc.MAX_Y, lpc.MAX_Y, size=4)
    c = _coefs(rng, order)
    _same(lpc.reconstruct(r, level, c), lpc._reconstruct_numpy(r, level, c))


@pytest.mark.parametrize("shape", [(0, 8), (3, 0), (0, 0)])
@pytest.mark.parametrize("order", ORDERS)
def test_empty(shape, order):
    c = _coefs(np.random.default_rng(order), order)
    r = np.zeros(shape, dtype=np.int64)
    level = np.ones(shape[0], dtype=np.int64)
    _same(lpc.reconstruct(r, level, c), lpc._reconstruct_numpy(r, level, c))


def test_layouts_and_dtypes_share_one_compiled_kernel():
    rng = np.random.default_rng(3)
    c = _coefs(rng, 5)
    r = rng.integers(-1000, 1000, size=(16, 20))
    level = rng.integers(-1000, 1000, size=16)
    want = lpc._reconstruct_numpy(r, level, c)
    for rr in (r, np.asfortranarray(r), r.astype(np.int32), r.astype(np.int16)):
        _same(lpc.reconstruct(rr, level, c), want)
    _same(lpc.reconstruct(r[:, ::2], level, c), lpc._reconstruct_numpy(np.ascontiguousarray(r[:, ::2]), level, c))
    assert len(lpc._kernels()[0].signatures) == 1


def test_fallback_without_numba(monkeypatch):
    rng = np.random.default_rng(4)
    c = _coefs(rng, 5)
    r = _residuals(rng, 6, 50)
    level = rng.integers(-1000, 1000, size=6)
    want = lpc.reconstruct(r, level, c)
    monkeypatch.setattr(lpc, "_kernels", lambda: None)
    _same(lpc.reconstruct(r, level, c), want)


@pytest.mark.parametrize("order", [1, 2, 5, 32])
@pytest.mark.parametrize("n", [1, 3, 1024])
def test_numba_residuals_equal_the_numpy_reference(order, n):
    rng = np.random.default_rng(order * 7919 + n)
    c = _coefs(rng, order)
    q = _residuals(rng, 9, n)   # any int64 windows within the predictor's bounds
    level = rng.integers(-1000, 1000, size=9)
    _same(lpc.residuals(q, level, c), lpc._residuals_numpy(q - level[:, None], c))


# The kernels keep a window's history in int32 while its values fit (|y| < 2**31) and redo the
# window on int64 otherwise; these check both sides of that edge against the numpy reference.

NARROW_EDGES = (-lpc.NARROW - 1, -lpc.NARROW, lpc.NARROW - 1, lpc.NARROW)


@pytest.mark.parametrize("tiny", [False, True])
@pytest.mark.parametrize("order", [1, 2, 4, 5, 16, 32])
@pytest.mark.parametrize("edge", NARROW_EDGES)
def test_int32_history_edge_round_trips(order, edge, tiny):
    rng = np.random.default_rng(order * 31 + (edge & 0xFF))
    n = 300
    y = rng.integers(-50, 51, size=(6, n))
    y[1, 0] = edge                       # first sample
    y[2, n // 2] = edge                  # mid-window: the window leaves the int32 path part way
    y[3, n - 1] = edge                   # last sample
    y[4, :] = edge                       # every sample
    level = rng.integers(-1000, 1000, size=6)
    q = level[:, None] + y
    # tiny coefficients: a history value wrapped to int32 would shift a prediction by only
    # |A_k| * 2**18 and keep it in int32, so a wrong edge test would show in the output
    c = lpc.LpcCoefs(tuple(int(a) for a in rng.integers(-2, 3, order))) if tiny else _coefs(rng, order)
    r = lpc.residuals(q, level, c)
    _same(r, lpc._residuals_numpy(y, c))
    _same(lpc.reconstruct(r, level, c), q)
    _same(lpc.reconstruct(r, level, c), lpc._reconstruct_numpy(r, level, c))


@pytest.mark.parametrize("order", [1, 3, 8, 32])
def test_recursion_that_grows_past_int32_mid_window(order):
    # A_1 = 2: from small residuals the decoded values double every sample, so they pass 2**31
    # after about 30 samples and the kernel must finish the window on int64 with the same bits
    coefs = (2 << lpc.SHIFT,) + (0,) * (order - 1)
    c = lpc.LpcCoefs(coefs)
    rng = np.random.default_rng(order)
    r = rng.integers(-3, 4, size=(5, 80))
    r[0] = 0                              # stays at zero: the int32 path throughout
    level = rng.integers(-10, 10, size=5)
    got = lpc.reconstruct(r, level, c)
    _same(got, lpc._reconstruct_numpy(r, level, c))
    assert np.abs(got[1:] - level[1:, None]).max() >= lpc.NARROW    # the fallback did run


def test_fitted_predictor_on_a_smooth_signal_round_trips():
    # the common case, all windows on the int32 path: a fitted order-32 predictor on a noisy sum of tones
    rng = np.random.default_rng(5)
    t = np.arange(8 * 4096)
    x = np.rint(3000 * np.sin(t / 37.0) + 800 * np.sin(t / 5.3) + rng.normal(0, 4, t.size)).astype(np.int64)
    q = x.reshape(8, 4096)
    level = q[:, 0].copy()
    c = lpc.fit(q, level, lambda res: np.log2(1 + 2 * np.abs(res)).sum(axis=1))
    assert c.order >= 4
    r = lpc.residuals(q, level, c)
    _same(r, lpc._residuals_numpy(q - level[:, None], c))
    _same(lpc.reconstruct(r, level, c), q)


def test_levels_broadcast_and_mismatch_as_in_numpy():
    # The kernel adds each window's level itself; the levels must broadcast exactly as numpy's
    # ``level[:, None] + y`` does in the reference (numpy broadcasting rules), and a mismatch must raise
    # rather than read past the levels.
    rng = np.random.default_rng(9)
    c = _coefs(rng, 6)
    r = _residuals(rng, 5, 40)
    one = np.array([123456789], dtype=np.int64)
    _same(lpc.reconstruct(r, one, c), lpc._reconstruct_numpy(r, one, c))
    _same(lpc.reconstruct(r, one.astype(np.int32), c), lpc._reconstruct_numpy(r, one, c))
    with pytest.raises(ValueError):
        lpc._reconstruct_numpy(r, np.zeros(3, np.int64), c)
    with pytest.raises(ValueError):
        lpc.reconstruct(r, np.zeros(3, np.int64), c)
