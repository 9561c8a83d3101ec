"""Property: every input dtype packs and reads back within its budget, checked exactly.

int8 … int64 and uint8 … uint64 across their whole ranges (extremes
included), float16/32/64 with subnormals, ±max, ±0, NaN and ±Inf; absolute,
%-of-range and lossless budgets.  The reference is computed apart from the
code under test: integers as Python ints, floats as exact rationals
(``fractions.Fraction`` of the IEEE-754 value), non-finite samples and
lossless channels by their bits.
"""

from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

import tsarchive
from tsarchive.errors import BudgetError
from tsarchive.ingest.grid import detect_decimals
from tsarchive.recording import ChannelInfo, Recording

INTS = ["int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64"]
FLOATS = ["float16", "float32", "float64"]


def _specials(dt: np.dtype) -> list:
    if dt.kind in "iu":
        info = np.iinfo(dt)
        return [info.min, info.max, info.min + 1, info.max - 1, 0]
    info = np.finfo(dt)
    tiny = np.nextafter(dt.type(0), dt.type(1))          # the smallest subnormal
    return [np.nan, np.inf, -np.inf, info.max, -info.max, dt.type(0.0), -dt.type(0.0), tiny, -tiny, info.tiny]


@st.composite
def columns(draw):
    dt = np.dtype(draw(st.sampled_from(INTS + FLOATS)))
    n = draw(st.integers(1, 90))
    small = draw(st.booleans())     # a narrow band (typical of a logger) or the whole range
    if dt.kind in "iu" and small:
        info = np.iinfo(dt)
        width = min(1000, (int(info.max) - int(info.min)) // 4)
        base = draw(st.integers(int(info.min), int(info.max) - width))
        x = np.array([base + draw(st.integers(0, width)) for _ in range(n)], dtype=dt)
    else:
        x = draw(hnp.arrays(dt, n, elements=hnp.from_dtype(dt, allow_subnormal=True) if dt.kind == "f"
                            else hnp.from_dtype(dt)))
    for i in draw(st.lists(st.integers(0, n - 1), max_size=4)):
        x[i] = draw(st.sampled_from(_specials(dt)))
    return x


def _exact(v) -> Fraction | int:
    """A finite sample as an exact number: Python int or Fraction of the IEEE-754 value."""
    return int(v) if isinstance(v, (np.integer, int)) else Fraction(float(v))


def _bits(a: np.ndarray) -> list[int]:
    return a.view(f"u{a.dtype.itemsize}").tolist() if a.dtype.kind == "f" else a.tolist()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(columns(), st.sampled_from(["lossless", "abs", "pct"]), st.sampled_from(["1", "3", "1e-3", "1e300"]),
       st.sampled_from(["0.5%", "1%", "37%"]))
def test_every_dtype_round_trips_within_budget(tmp_path_factory, x, kind, absolute, pct):
    dt = x.dtype
    decimals = 0 if dt.kind in "iu" else detect_decimals(x, dt.name)
    budget = {"lossless": "lossless", "abs": absolute, "pct": pct}[kind]
    rec = Recording(data=x[:, None], rate=10.0, channels=(ChannelInfo("s", dtype=dt.name, decimals=decimals),),
                    shape=x.shape)
    out = tmp_path_factory.mktemp("p") / "p.tsa"
    if kind == "lossless" and decimals is None and dt == np.float64:
        with pytest.raises(BudgetError):          # float64 off a decimal grid has no lossless budget
            tsarchive.pack(rec, out, budget, window=16, code_size=0)
        return                                    # (float32 and float16 take the ordered grid, format 8)
    tsarchive.pack(rec, out, budget, window=16, code_size=0)
    arc = tsarchive.open(out)
    xh = arc.read("s")
    eps = arc.channels[0].eps
    assert xh.dtype == dt and xh.shape == x.shape
    if kind == "lossless":
        assert eps == 0
    if kind == "abs":   # below half the logged step the channel is stored exactly (eps 0)
        assert eps in (0.0, float(absolute))
    worst = Fraction(0)
    for a, b in zip(x, xh):
        if dt.kind == "f" and not np.isfinite(a) or eps == 0:
            # non-finite samples and lossless channels: the very same bits (common practice (no source))
            assert _bits(np.array([a])) == _bits(np.array([b])), (a, b)
            continue
        err = abs(_exact(a) - _exact(b))            # exact: Python ints / rationals
        assert err <= Fraction(eps), (a, b, eps)
        worst = max(worst, Fraction(err))
    # the reported worst error is the exact one for integers below 2**53; otherwise within one unit in the
    # last place of it (a double cannot hold it: IEEE-754 spacing, numpy.spacing)
    reported = Fraction(arc.channels[0].worst_error)
    if dt.kind in "iu" and worst < 2**53:
        assert reported == worst
    else:
        assert abs(reported - worst) <= Fraction(float(np.spacing(max(float(reported), float(worst)))))
    assert arc.verify(against=rec).ok


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(columns(), st.data(), st.sampled_from(["lossless", "2", "1%"]))
def test_mixed_table_with_missing_samples_round_trips(tmp_path_factory, x, data, budget):
    # an integer column with nulls beside a float column: each held in its own dtype, the nulls kept
    if x.dtype.kind not in "iu":
        x = np.arange(len(x), dtype=np.int64) * 7 - 2**62        # large integers (float64 spacing 1024)
    gone = np.array(data.draw(st.lists(st.booleans(), min_size=len(x), max_size=len(x))))
    other = np.round(np.linspace(-3.0, 3.0, len(x)), 2)
    rec = Recording.from_columns([np.ma.MaskedArray(x, mask=gone), other], rate=10.0,
                                 channels=[ChannelInfo("n", dtype=x.dtype.name, decimals=0),
                                           ChannelInfo("f", dtype="float64", decimals=2)])
    out = tmp_path_factory.mktemp("m") / "m.tsa"
    tsarchive.pack(rec, out, budget, window=16, code_size=0)
    arc = tsarchive.open(out)
    back = arc.read("n")
    eps = arc.channel("n").eps
    assert back.dtype == x.dtype
    assert np.ma.getmaskarray(back).tolist() == gone.tolist()
    for a, b, g in zip(x.tolist(), np.ma.getdata(back).tolist(), gone.tolist()):
        if not g:
            assert abs(int(a) - int(b)) <= eps, (a, b, eps)        # exact: Python ints
    f_eps = arc.channel("f").eps
    assert all(abs(Fraction(a) - Fraction(b)) <= Fraction(f_eps) for a, b in zip(other.tolist(), arc.read("f").tolist()))
    assert arc.verify(against=rec).ok
