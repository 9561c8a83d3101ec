"""The grid's phase (tsarchive.gridphase): every shifted grid keeps the bound, and the chosen one
dithers less on a slow signal that sits on a step boundary of the grid as made.

Bounds are checked with numpy in float64 and, for integer channels, with Python integers (a uniform
quantizer's error is at most half its step wherever its offset: common practice (no source))."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from tsarchive.gridphase import candidates, choose_phase
from tsarchive.quantize import make_grid, quantize


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), eps_exp=st.integers(-6, 2), scale=st.sampled_from([1e-3, 1.0, 1e4]))
def test_every_candidate_keeps_the_bound(seed, eps_exp, scale):
    rng = np.random.default_rng(seed)
    x = np.cumsum(rng.standard_normal(2000)) * scale + rng.normal(0, 1e6)
    eps = 10.0 ** eps_exp * scale
    g0 = make_grid(eps, None, np.dtype(np.float64), float(x[0]))
    grids = candidates(g0)
    assert grids[0] == g0 and len(grids) == 5
    for g in grids:
        q, pos, bits = quantize(x, g)
        xh = g.dequantize(q, pos, bits)
        assert np.all(np.abs(x - xh) <= eps)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), eps=st.integers(1, 40), mult=st.sampled_from([1, 5]),
       dtype=st.sampled_from([np.int16, np.int32, np.int64]))
def test_integer_candidates_are_exact_and_within_budget(seed, eps, mult, dtype):
    rng = np.random.default_rng(seed)
    x = (np.cumsum(rng.integers(-3, 4, 3000)) * mult).astype(dtype)
    g0 = make_grid(float(eps * mult), 0, np.dtype(dtype), float(x[0]), mult, origin=int(x[0]))
    grids = candidates(g0, mult)
    assert len(grids) > 1 or g0.kind != "step"
    for g in grids:
        q, pos, bits = quantize(x, g)
        assert len(pos) == 0                         # no sample needs storing verbatim on a shifted grid
        xh = g.dequantize(q, pos, bits)
        assert xh.dtype == np.dtype(dtype)
        assert max(abs(int(a) - int(b)) for a, b in zip(x.tolist(), xh.tolist())) <= eps * mult
        assert all((int(v) - int(x[0])) % mult == 0 for v in xh.tolist())   # still on the logged lattice


def test_a_signal_on_a_step_boundary_is_moved_off_it():
    rng = np.random.default_rng(4)
    eps = 0.5                                        # step 1.0, the grid as made has a point at x[0] = 0
    x = np.concatenate([[0.0], 0.5 + rng.uniform(-0.05, 0.05, 8191)])   # sits on the boundary 0.5
    g0 = make_grid(eps, None, np.dtype(np.float64), 0.0)
    chosen = choose_phase(g0, x.reshape(8, 1024))
    flips = {}
    for name, g in (("made", g0), ("chosen", chosen)):
        q, _, _ = quantize(x, g)
        flips[name] = int(np.count_nonzero(np.diff(q)))
    assert flips["made"] > 1000 and flips["chosen"] <= 1         # about half the samples flip, then none


def test_lossless_and_decimal_grids_do_not_move():
    g = make_grid(0.0, 2, np.dtype(np.float64))
    assert candidates(g) == [g]
    x = np.arange(100.0).reshape(1, 100)
    assert choose_phase(g, x) is g


def test_ranked_phases_are_every_shift_the_cheapest_first():
    # the boundary signal above: the shifts are the grid's offset plus k/4 of a step and the step's multiple
    # below it (the module docstring); the grid as made (on the boundary) flips about half its samples and
    # comes last, the first flips at most once (flips counted with numpy)
    from tsarchive.gridphase import ranked_phases
    rng = np.random.default_rng(4)
    x = np.concatenate([[0.3], 0.5 + rng.uniform(-0.05, 0.05, 8191)])
    g0 = make_grid(0.5, None, np.dtype(np.float64), 0.3)           # step 1.0, offset 0.3
    ranked = ranked_phases(g0, x.reshape(8, 1024))
    assert sorted(g.offset for g in ranked) == sorted({0.3 + k * 1.0 / 4 for k in range(4)} | {0.0})
    flips = [int(np.count_nonzero(np.diff(quantize(x, g)[0]))) for g in ranked]
    assert flips[0] <= 1 and ranked[0] == choose_phase(g0, x.reshape(8, 1024))
    assert max(flips) == flips[-1] > 1000 and ranked[-1].offset == 0.0    # 0.5 sits on its boundary
