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
