import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from tsarchive.codec import choose_modes, reconstruct
from tsarchive.errors import UnknownCodec
from tsarchive.codec import proxy_bits
from tsarchive.predict import PREDICTORS, Context, get_predictor
from tsarchive.predict import lpc
from tsarchive.windows import batches, levels, n_windows, pad_to

from kit import check_predictor_round_trip, int_windows


@pytest.mark.parametrize("mode", sorted(PREDICTORS))
@pytest.mark.parametrize("n", [1, 2, 3, 64])
def test_predictors_round_trip(mode, n):
    rng = np.random.default_rng(mode * 10 + n)
    q = int_windows(rng, 7, n)
    ae = q + rng.integers(-5, 5, size=q.shape)
    coefs = (lpc.LpcCoefs((20000, -5000, 1234)), lpc.LpcCoefs((8000,)))
    sets = rng.integers(0, 2, size=len(q)).astype(np.int8)
    check_predictor_round_trip(PREDICTORS[mode], q, Context(levels(q), ae, coefs, sets))


@given(st.lists(st.integers(-2**40, 2**40), min_size=1, max_size=50))
def test_predictors_round_trip_extremes(values):
    q = np.array([values], dtype=np.int64)
    ctx = Context(levels(q), q[::-1].copy(), (lpc.LpcCoefs((lpc.MAX_COEF, -lpc.MAX_COEF, 7)),))
    for p in PREDICTORS.values():
        check_predictor_round_trip(p, q, ctx)


def test_previous_sample_is_the_lorenzo_difference():
    # Lorenzo predictor in 1-D = previous-sample prediction (Ibarria et al. 2003; from memory)
    q = np.array([[5, 7, 4, 4, 10]])
    r = get_predictor(0).residuals(q, Context(np.array([5])))
    assert r.tolist() == [[0, 2, -3, 0, 6]]
    r2 = get_predictor(1).residuals(q, Context(np.array([5])))
    assert r2.tolist() == [[0, 2, -5, 3, 6]]  # second differences after the first step


def test_levels_are_rounded_integer_means():
    q = np.array([[1, 2], [-1, -2], [0, 0], [1, 1], [-3, -4]], dtype=np.int64)
    assert levels(q).tolist() == [2, -2, 0, 1, -4]  # half away from zero: 1.5->2, -1.5->-2, -3.5->-4


def test_choose_modes_picks_cheapest_and_inverts():
    rng = np.random.default_rng(3)
    t = np.arange(64)
    smooth = np.round(1000 * np.sin(t / 5.0)).astype(np.int64)[None, :].repeat(4, 0)
    noise = rng.integers(-3, 4, size=(4, 64))
    q = smooth + noise
    ae = smooth.copy()  # a perfect autoencoder for the smooth part
    ctx = Context(levels(q), ae)
    modes, _, res, _ = choose_modes(q, ctx, None)
    assert set(modes.tolist()) <= {2, 3}
    np.testing.assert_array_equal(reconstruct(modes, ctx, res), q)
    ctx = Context(levels(q))
    modes, _, res, _ = choose_modes(q, ctx, None)
    assert set(modes.tolist()) <= {0, 1}
    np.testing.assert_array_equal(reconstruct(modes, ctx, res), q)


def test_lpc_fit_beats_previous_sample_on_a_resonance():
    # An AR(2) resonance: x[i] = 2 r cos(w) x[i-1] - r^2 x[i-2] + noise (Yule-Walker textbook model);
    # least squares recovers the coefficients, so LPC residuals ~ the noise, cheaper than Lorenzo.
    rng = np.random.default_rng(5)
    r_, w = 0.99, 0.2
    x = np.zeros(64 * 200)
    e = rng.standard_normal(len(x)) * 20
    for i in range(2, len(x)):
        x[i] = 2 * r_ * np.cos(w) * x[i - 1] - r_ * r_ * x[i - 2] + e[i]
    q = np.round(x).astype(np.int64).reshape(200, 64)
    lv = levels(q)
    c = lpc.fit(q, lv, proxy_bits)
    assert c.order >= 2
    a = np.array(c.coefs[:2]) / 2**lpc.SHIFT
    assert abs(a[0] - 2 * r_ * np.cos(w)) < 0.1 and abs(a[1] + r_ * r_) < 0.1
    ctx = Context(lv, None, (c,))
    assert proxy_bits(get_predictor(4).residuals(q, ctx)).sum() < proxy_bits(get_predictor(0).residuals(q, ctx)).sum()


def _ar2(rng, n, r_, w, sigma=20.0):
    x = np.zeros(n)
    e = rng.standard_normal(n) * sigma
    for i in range(2, n):
        x[i] = 2 * r_ * np.cos(w) * x[i - 1] - r_ * r_ * x[i - 2] + e[i]
    return x


def test_lpc_sets_follow_a_change_of_character():
    # A linear chirp sin(2 pi (f0 t + (f1 - f0) t^2 / 2T)), f from 0.002 to 0.2 cycles/sample, plus N(0, 1):
    # no single short predictor fits every frequency of the sweep, several sets (each serving a stretch) do
    # better; windows pick their own set and still invert exactly.
    rng = np.random.default_rng(6)
    n = 64 * 400
    t = np.arange(n)
    x = 1000 * np.sin(2 * np.pi * (0.002 * t + (0.2 - 0.002) * t * t / (2 * n))) + rng.standard_normal(n)
    q = np.round(x).astype(np.int64).reshape(400, 64)
    lv = levels(q)
    sets = lpc.fit_sets(q, lv, proxy_bits)
    assert 2 <= len(sets) <= lpc.MAX_SETS
    _, _, res1, _ = choose_modes(q, Context(lv, None, sets[:1]), None)
    modes, _, res, chosen = choose_modes(q, Context(lv, None, sets), None)
    assert proxy_bits(res).sum() < 0.95 * proxy_bits(res1).sum()
    early, late = chosen[:100][modes[:100] == 4], chosen[300:][modes[300:] == 4]
    assert len(early) and len(late) and np.bincount(early).argmax() != np.bincount(late).argmax()
    np.testing.assert_array_equal(reconstruct(modes, Context(lv, None, sets, chosen), res), q)


def test_stationary_signal_keeps_one_lpc_set():
    rng = np.random.default_rng(7)
    q = np.round(_ar2(rng, 64 * 300, 0.99, 0.2)).astype(np.int64).reshape(300, 64)
    assert len(lpc.fit_sets(q, levels(q), proxy_bits)) == 1


def test_unknown_mode():
    with pytest.raises(UnknownCodec):
        get_predictor(99)


def test_window_batches_cover_everything():
    for n, W in [(1, 8), (8, 8), (9, 8), (1000, 64)]:
        covered = []
        for a, b, L in batches(n, W, 0, n_windows(n, W)):
            covered.extend(range(a * W, a * W + (b - a) * L))
        assert covered == list(range(n))
    assert pad_to(np.array([[1, 2]]), 4).tolist() == [[1, 2, 2, 2]]


def test_channel_codec_is_the_manifest_entry():
    # the golden archive's manifest (written by the format-4 writer, committed) is the reference
    import json
    from pathlib import Path
    import tsarchive
    from tsarchive.store import parse as P
    golden = Path(__file__).parent / "golden" / "v4" / "golden4"
    entries = json.loads((golden / "manifest.json").read_text())["channels"]
    arc = tsarchive.open(golden)
    for entry in entries:
        codec = arc.codec(entry["name"])
        assert codec.to_dict() == {k: entry[k] for k in ("eps", "grid", "scale", "lpc", "tables")}
        assert codec.eps == entry["eps"] and codec.decoder is arc.decoder
        assert [(t.mode, t.table) for t in P.tables(entry)] == sorted(codec.coders)
