"""Every packing decision that reaches the archive is exact: the LPC fit (integer covariances, a
rational solve) and the cost estimates (fixed-point log2), so the archive bytes cannot depend on the
CPU, the BLAS build or its thread count."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from tsarchive import entropy, fixedlog
from tsarchive.codec import proxy_bits, spread_class
from tsarchive.entropy_table import build_table
from tsarchive.predict import exactls
from tsarchive.predict import lpc

from conftest import make_signal


# ------------------------------------------------------------------ references (independent of the code)

def _rows(q: np.ndarray, level: np.ndarray, order: int) -> tuple[list[list[int]], list[int]]:
    """Every regression row of every window, in Python integers (the model of lpc's docstring)."""
    rows, tgt = [], []
    for w in range(q.shape[0]):
        y = [int(v) - int(level[w]) for v in q[w]]
        for i in range(order, len(y)):
            rows.append([y[i - k] for k in range(1, order + 1)])
            tgt.append(y[i])
    return rows, tgt


def _ref_coefs(q: np.ndarray, level: np.ndarray, order: int) -> tuple[int, ...]:
    """Least squares by the normal equations, Gauss-Jordan in fractions.Fraction (exact rational
    arithmetic), rounded half to even (Python's round, as np.rint) and clipped as lpc documents."""
    rows, tgt = _rows(q, level, order)
    m = [[Fraction(sum(r[a] * r[b] for r in rows)) for b in range(order)]
         + [Fraction(sum(r[a] * t for r, t in zip(rows, tgt)))] for a in range(order)]
    for c in range(order):
        piv = next(r for r in range(c, order) if m[r][c] != 0)
        m[c], m[piv] = m[piv], m[c]
        for r in range(order):
            if r != c and m[r][c]:
                f = m[r][c] / m[c][c]
                m[r] = [x - f * y for x, y in zip(m[r], m[c])]
    return tuple(max(-lpc.MAX_COEF, min(lpc.MAX_COEF, round(m[k][order] / m[k][k] * (1 << lpc.SHIFT))))
                 for k in range(order))


def _loud_smooth(seed: int, n: int = 12, w: int = 64) -> tuple[np.ndarray, np.ndarray]:
    """A sine of amplitude 2**33 with a little noise: its float64 normal equations lose every digit."""
    rng = np.random.default_rng(seed)
    i = np.arange(n * w)
    x = 2.0 ** 33 * np.sin(0.002 * i + rng.uniform(0, 6)) + rng.normal(0, 2.0 ** int(rng.integers(0, 8)), len(i))
    return np.rint(x).astype(np.int64).reshape(n, w), np.zeros(n, dtype=np.int64)


# ------------------------------------------------------------------ the fit

@pytest.mark.parametrize("seed", range(4))
def test_fit_is_the_exact_least_squares_solution(seed):
    # reference: exact rational least squares (fractions.Fraction); float64 normal equations gave
    # (16384, 8192, 0, -8192) here whatever the data: their sums passed 2**53
    q, level = _loud_smooth(seed)
    assert lpc._fit_order(q, level, 4).coefs == _ref_coefs(q, level, 4)


def test_fit_of_a_recorded_like_signal_matches_the_reference():
    # reference: exact rational least squares (fractions.Fraction), on an ordinary test signal
    x = make_signal(12 * 64)[:, 0]
    q = np.rint(x * 1000).astype(np.int64).reshape(12, 64)
    level = q.mean(axis=1).round().astype(np.int64)
    assert lpc._fit_order(q, level, 8).coefs == _ref_coefs(q, level, 8)


def test_gram_is_exact_against_python_integers():
    # reference: Python integer arithmetic (exact); values up to 2**36 as lpc allows, products 2**72
    rng = np.random.default_rng(5)
    a = rng.integers(-(1 << 36) + 1, 1 << 36, size=(700, 5))
    a[:, 0] = (1 << 36) - 1                      # the extremes too
    a[:3, 1] = -(1 << 36) + 1
    cols = [[int(v) for v in a[:, j]] for j in range(a.shape[1])]
    want = [[sum(x * y for x, y in zip(ci, cj)) for cj in cols] for ci in cols]
    assert exactls.gram(a) == want
    assert exactls.gram(a[rng.permutation(len(a))]) == want        # row order cannot matter


def test_solve_leading_solves_every_leading_block_exactly():
    # reference: substitution back into the equations in fractions.Fraction (exact)
    rng = np.random.default_rng(2)
    x = rng.integers(-1000, 1000, size=(40, 6))
    x[:, 3] = x[:, 1] - x[:, 2]                  # a dependent column: a zero pivot, left free
    G = exactls.gram(x)
    g = [int(v) for v in x.T @ rng.integers(-50, 50, 40)]
    for p, a in exactls.solve_leading(G, g, (2, 4, 6)).items():
        assert all(sum(G[i][j] * a[j] for j in range(p)) == g[i] for i in range(p))


@pytest.mark.parametrize("threads", [1, 2])
def test_fit_sets_identical_under_blas_thread_counts(threads):
    # common practice (no source): the result with the BLAS on 1 or 2 threads equals the default's
    x = make_signal(200 * 128, seed=3)[:, 0]
    q = np.rint(x * 2 ** 20).astype(np.int64).reshape(200, 128)
    level = q[:, 0].copy()
    want = lpc.fit_sets(q, level, proxy_bits)
    with threadpool_limits(limits=threads, user_api="blas"):
        assert lpc.fit_sets(q, level, proxy_bits) == want


# ------------------------------------------------------------------ the costs

def test_log2q_is_within_one_unit_of_math_log2():
    # reference: Python's math.log2 (C libm, within an ulp), in units of 2**-16 bit
    rng = np.random.default_rng(0)
    one = np.uint64(1)
    x = np.concatenate([np.arange(1, 5000, dtype=np.uint64), rng.integers(1, 2 ** 63, 20000).astype(np.uint64),
                        one << np.arange(64, dtype=np.uint64), (one << np.arange(1, 64, dtype=np.uint64)) - one,
                        np.array([2 ** 64 - 1], dtype=np.uint64)])
    got = fixedlog.log2q(x)
    want = np.array([math.log2(int(v)) * 65536 for v in x])
    assert np.abs(got - want).max() <= 1.0
    assert np.array_equal(fixedlog.small_table()[1:1000], got[:999])


def test_log2q_exact_powers_of_two():
    # reference: log2(2**e) = e exactly (definition)
    e = np.arange(64)
    assert np.array_equal(fixedlog.log2q((np.uint64(1) << e.astype(np.uint64))), e << 16)


def test_proxy_bits_order_free_and_near_the_formula():
    # reference: sum of math.log2(1 + 2|r|) + 1 per sample (the documented formula), within one
    # unit of 2**-16 bit per sample; and the same bits for any order of a window's samples
    rng = np.random.default_rng(1)
    r = np.concatenate([rng.integers(-40, 40, size=(30, 200)), rng.integers(-2 ** 40, 2 ** 40, size=(30, 200))])
    got = proxy_bits(r)
    want = np.array([sum(math.log2(1 + 2 * abs(int(v))) + 1 for v in row) for row in r])
    assert np.abs(got - want).max() <= 200 / 65536
    perm = rng.permuted(r, axis=1)
    assert np.array_equal(proxy_bits(perm), got)
    assert np.all(got * 65536 == np.rint(got * 65536))             # whole units: sums stay exact


def test_spread_class_is_decided_exactly():
    # reference: class k iff 1.5 log2(1 + S/n) >= k  <=>  (n + S)**3 >= 4**k n**3 (Python integers,
    # exact), wherever S/n is not within 2**-19 of a boundary (our thresholds are rounded at 2**-20)
    rng = np.random.default_rng(4)
    r = rng.integers(-1, 2, size=(400, 50)) * rng.integers(0, 3000, size=(400, 1))
    got = spread_class(r)
    n = r.shape[1]
    for row, k in zip(np.abs(r).sum(axis=1).tolist(), got.tolist()):
        want = max([c for c in range(16) if (n + row) ** 3 >= 4 ** c * n ** 3])
        near = any(abs(Fraction(n + row, n) ** 3 / 4 ** c - 1) < Fraction(1, 2 ** 19) for c in range(1, 16))
        assert k == want or near
    assert np.array_equal(spread_class(rng.permuted(r, axis=1)), got)


def test_token_costs_are_whole_units_near_the_formula():
    # reference: 24 - math.log2(freq) (ideal code length of probability freq / 2**24), within 2**-16 bit
    t = build_table(np.random.default_rng(3).laplace(0, 30, 50000).round().astype(np.int64))
    want = np.array([24 - math.log2(f) for f in t.freqs])
    assert np.abs(t.token_cost - want).max() <= 1 / 65536
    assert np.all(t.token_cost * 65536 == np.rint(t.token_cost * 65536))


def test_build_table_and_cost_ignore_sample_order():
    # common practice (no source): a histogram-based choice cannot depend on the order of the samples
    rng = np.random.default_rng(6)
    a = np.concatenate([rng.laplace(0, 300, 200000), rng.laplace(0, 5, 300000)]).round().astype(np.int64)
    b = rng.permutation(a)
    ta, tb = build_table(a), build_table(b)
    assert ta == tb
    assert entropy.cost_bits(a, ta) == entropy.cost_bits(b, ta)


@pytest.mark.parametrize("threads", [1, 2])
def test_gram_identical_and_exact_on_any_blas_thread_count(monkeypatch, threads):
    # reference: Python integer arithmetic (exact) for three of the columns; the product itself runs
    # on the BLAS with 1 or 2 threads (the module's own one-thread limit is lifted for this test)
    monkeypatch.setattr(exactls, "_one_blas_thread", lambda: threadpool_limits(limits=threads, user_api="blas"))
    rng = np.random.default_rng(8)
    a = rng.integers(-(1 << 35), 1 << 35, size=(lpc.FIT_ROWS, 33))
    got = exactls.gram(a)
    cols = [[int(v) for v in a[:, j]] for j in (0, 17, 32)]
    want = [[sum(x * y for x, y in zip(ci, cj)) for cj in cols] for ci in cols]
    assert [[got[i][j] for j in (0, 17, 32)] for i in (0, 17, 32)] == want


@pytest.mark.parametrize("threads", [1, 2])
def test_mode_choice_identical_under_blas_thread_counts(threads):
    # common practice (no source): predictor, class, LPC set and table choices with the BLAS on 1 or 2
    # threads equal the default's
    from tsarchive.codec import choose_modes
    from tsarchive.encoder import _tables
    from tsarchive.predict import Context
    x = make_signal(150 * 64, seed=5)[:, 0]
    q = np.rint(x * 2 ** 14).astype(np.int64).reshape(150, 64)
    level = q.mean(axis=1).round().astype(np.int64)

    def run():
        sets = lpc.fit_sets(q, level, proxy_bits)
        tables, bits = _tables([(q, level, None)], sets, use_ae=False)
        modes, cls, res, chosen = choose_modes(q, Context(level, None, sets), tables)
        return sets, bits, sorted(tables.tables.items()), modes.tolist(), cls.tolist(), chosen.tolist()
    want = run()
    with threadpool_limits(limits=threads, user_api="blas"):
        assert run() == want


@pytest.mark.parametrize("k, j", [(46341, 46339), (40001, 50001)])
def test_channel_scale_is_the_exactly_rounded_rms(k, j):
    # reference: Python integers, floor(sqrt(S/N) + 1/2) = (isqrt(4S // N) + 1) // 2.  The samples
    # r±k, r±j have mean square r**2 + r with r = (k**2 + j**2) / 2 odd, an RMS just below r + 1/2:
    # the float64 mean rounded it to r + 1/2 exactly and round() then gave r + 1
    from tsarchive.windows import channel_scale
    r = (k * k + j * j) // 2
    q = np.array([[r + k, r - k, r + j, r - j]], dtype=np.int64)
    s = sum(int(v) ** 2 for v in q[0])
    assert channel_scale(q, np.zeros(1, dtype=np.int64)) == (math.isqrt(4 * s // 4) + 1) // 2 == r
    big = np.random.default_rng(9).integers(-(1 << 33), 1 << 33, size=(300, 64))
    lv = big.mean(axis=1).round().astype(np.int64)
    s = sum(int(v) ** 2 for v in (big - lv[:, None]).ravel())
    assert channel_scale(big, lv) == (math.isqrt(4 * s // big.size) + 1) // 2
