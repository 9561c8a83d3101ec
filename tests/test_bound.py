"""Property: the whole pack -> read path keeps every sample within budget.

Reference: a uniform quantizer with step Δ = 2ε has maximum error Δ/2 = ε
(textbook uniform quantization; e.g. Gersho & Gray 1992, ch. 5 — from
memory).  Here it must also survive float rounding, NaN/±Inf, constant
channels, huge and tiny magnitudes, short tails and every predictor.
"""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

import tsarchive
from tsarchive.quantize import values_to_bits
from tsarchive.recording import ChannelInfo, Recording

special = st.sampled_from([np.nan, np.inf, -np.inf, 0.0, -0.0, 1e300, -1e300, 1e-300, 5e-324])


@st.composite
def signals(draw):
    n = draw(st.integers(1, 400))
    kind = draw(st.sampled_from(["smooth", "noise", "const", "steps", "wild"]))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    scale = 10.0 ** draw(st.integers(-12, 12))
    t = np.arange(n)
    x = {"smooth": np.sin(t / 7.0) * scale, "noise": rng.standard_normal(n) * scale,
         "const": np.full(n, draw(st.floats(-1e6, 1e6))),
         "steps": np.repeat(rng.integers(-5, 5, size=n // 10 + 1), 10)[:n] * scale,
         "wild": draw(hnp.arrays(np.float64, n, elements=st.floats(-1e200, 1e200)))}[kind]
    if draw(st.booleans()):
        idx = draw(st.lists(st.integers(0, n - 1), max_size=5))
        for i in idx:
            x[i] = draw(special)
    dtype = draw(st.sampled_from([np.float64, np.float32]))
    with np.errstate(over="ignore"):
        return x.astype(dtype)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(signals(), st.sampled_from(["1%", "0.01%", "1e-6", "3", "0.5%"]), st.sampled_from([8, 16, 64]))
def test_pack_read_within_budget(tmp_path_factory, x, budget, window):
    rec = Recording(data=x[:, None], rate=10.0, channels=(ChannelInfo("s", dtype=x.dtype.name),), shape=x.shape)
    out = tmp_path_factory.mktemp("p") / "p.tsa"
    tsarchive.pack(rec, out, budget, window=window, code_size=0)
    arc = tsarchive.open(out)
    xh = arc.read("s")
    eps = arc.channels[0].eps
    assert xh.dtype == x.dtype and xh.shape == x.shape
    x64, xh64 = x.astype(np.float64), xh.astype(np.float64)
    fin = np.isfinite(x64)
    with np.errstate(invalid="ignore", over="ignore"):
        assert np.all(np.abs(xh64[fin] - x64[fin]) <= eps)
    assert np.array_equal(values_to_bits(xh[~fin]), values_to_bits(x[~fin]))
    assert arc.verify(against=rec).ok


@settings(max_examples=200, deadline=None)
@given(eps=st.floats(1e-30, 1e30), frac=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=50))
def test_stored_window_worst_never_understates(eps, frac):
    # The per-window worst error is stored in 1/250ths of eps, rounded up: the stored bound is >= the true error
    # and at most one step above it.
    from tsarchive.windowcodec import worst_steps
    worst = np.asarray(frac) * eps
    k = worst_steps(worst, eps)
    assert k.dtype == np.uint8 and (k <= 250).all()
    assert (k.astype(np.float64) * (eps / 250) >= worst * (1 - 1e-15)).all()
    assert (k.astype(np.float64) * (eps / 250) <= worst + eps / 250 * 1.000001).all()


@settings(max_examples=200, deadline=None)
@given(hnp.arrays(np.float64, st.integers(1, 50),
                  elements=st.one_of(st.just(0.0), st.floats(float(np.finfo(np.float32).tiny), 1e30))))
def test_stored_score_keeps_eight_significant_bits_and_order(score):
    # bfloat16 precision: relative rounding error <= 2**-8 (IEEE 754 round-half-up on the magnitude), order kept.
    # Normal float32 magnitudes only: subnormal scores (< 1.2e-38) keep fewer bits, which no ranking notices.
    from tsarchive.windowcodec import score_bf16
    s = score_bf16(score)
    ref = score.astype(np.float32).astype(np.float64)
    assert (np.abs(s - ref) <= ref * 2.0 ** -8).all()
    order = np.argsort(ref, kind="stable")
    assert (np.diff(s[order]) >= 0).all()
