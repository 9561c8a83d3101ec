"""Long-term (periodic) prediction (tsarchive.predict.longterm), after GSM 06.10's LTP.

References: numpy's exact integer ``np.correlate`` for the correlations and
the lag (argmax of R(L)**2 / S(L) over the same range, computed here in
Python integers), and the GSM 06.10 decision levels for the gain.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from tsarchive.predict import longterm as LT


def _numpy_lag(d: np.ndarray, lo: int, hi: int) -> int:
    x = LT._search_values(d)
    n = len(x)
    R = np.correlate(x, x, "full")[n - 1:]             # exact int64 correlation (numpy)
    best, key = None, None
    for L in range(lo, hi + 1):
        r, s = int(R[L]), int(np.dot(x[:n - L], x[:n - L]))
        if r > 0 and s > 0 and (key is None or r * r * key[1] > key[0] * s):
            best, key = L, (r * r, s)
    return best


@pytest.mark.parametrize("period,n", [(137, 4096), (50, 1024), (800, 2048), (7, 300)])
def test_period_is_recovered(period, n):
    rng = np.random.default_rng(period)
    shape = rng.integers(-500, 500, period)
    d = np.tile(shape, n // period + 1)[:n] + rng.integers(-4, 5, n)
    lt = LT.search(d)
    assert lt is not None
    assert lt.lag == _numpy_lag(d, LT.MIN_LAG, n - LT.MIN_OVERLAP) == period
    assert lt.gain == 3                                # R / S near 1 > 0.8, GSM's top decision level
    e = LT.apply(d, lt)
    assert np.abs(e[period:]).mean() < 0.1 * np.abs(d[period:]).mean()


@given(arrays(np.int64, st.integers(20, 400), elements=st.integers(-(2**20), 2**20)))
def test_correlations_are_exact(d):
    x = LT._search_values(d)
    assert np.array_equal(LT.correlations(x), np.correlate(x, x, "full")[len(x) - 1:])


@given(arrays(np.int64, st.integers(1, 300), elements=st.one_of(st.integers(-50, 50),
                                                                 st.integers(-(2**45), 2**45))),
       st.integers(1, 299), st.integers(0, 3))
def test_inverse_is_exact(d, lag, gain):
    lt = LT.LongTerm(min(lag, len(d)), gain)
    e = LT.apply(d, lt)
    assert np.array_equal(LT.invert(e, lt), d)
    assert np.array_equal(e[:lt.lag], d[:lt.lag])
    # the prediction is GSM's mult_r: (QLB * d + 2**14) >> 15, checked in Python integers
    k = min(lt.lag, len(d) - 1)
    if lt.lag < len(d):
        assert int(d[k]) - int(e[k]) == (LT.QLB[gain] * int(d[k - lt.lag]) + (1 << 14)) >> 15


def test_no_prediction_when_it_cannot_help_or_could_overflow():
    assert LT.search(np.zeros(100, np.int64)) is None                 # no positive correlation
    assert LT.search(np.arange(5, dtype=np.int64)) is None            # too short
    big = np.full(200, 2**46, np.int64)
    assert LT.search(big) is None
    alt = np.array([1, -1] * 100, np.int64)                            # only odd lags correlate negatively
    lt = LT.search(alt)
    assert lt is not None and lt.lag % 2 == 0


def test_gain_levels_follow_gsm():
    # GSM 06.10 (4.2.11, table DLB = 6554, 16384, 26214 in 2**-15): bc = number of levels R / S exceeds
    assert [LT.gain_index(r, 100) for r in (10, 19, 21, 49, 51, 79, 81, 150)] == [0, 0, 1, 1, 2, 2, 3, 3]
    assert [LT.gain_index(r, 32768) for r in (6554, 6555, 16384, 16385, 26214, 26215)] == [0, 1, 1, 2, 2, 3]
    assert LT.LongTerm(300, 2).side_bits(1024) == 10 + 2
