"""Properties of the stored time axis: any axis comes back exactly, any range selects what a reference selects."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from tsarchive.recording import ChannelInfo, Recording, TimeAxis
from tsarchive.store import timeaxis
from tsarchive.store.sidecar import stage_sidecar

NS = 10**9
T0 = int(np.datetime64("2024-03-05T14:00:00", "ns").astype(np.int64))   # numpy's own calendar arithmetic


@st.composite
def _axes(draw):
    """A datetime axis built from pieces: regular stretches at the nominal rate, gaps, steps back, jitter."""
    rate = draw(st.sampled_from([1.0, 3.0, 44.1, 1000.0, 0.1, 2.5e8]))
    step = int(round(1e9 / rate))
    pieces, t = [], T0 + draw(st.integers(-10**12, 10**12))
    for _ in range(draw(st.integers(1, 5))):
        n = draw(st.integers(1, 200))
        kind = draw(st.sampled_from(["rule", "jitter"]))
        if kind == "rule":
            piece = t + timeaxis.rule(np.arange(n), rate, "datetime")
        else:
            piece = t + np.cumsum(np.array(draw(st.lists(st.integers(1, 2 * step), min_size=n, max_size=n))))
        pieces.append(piece)
        t = int(piece[-1]) + draw(st.integers(-5 * step, 50 * step))
    return rate, np.concatenate(pieces).astype(np.int64)


@settings(max_examples=60, deadline=None)
@given(_axes(), st.data())
def test_any_axis_comes_back_exactly_and_ranges_match_numpy(tmp_path_factory, axis, data):
    rate, times = axis
    d = tmp_path_factory.mktemp("axis")
    rec = Recording.from_columns([np.zeros(len(times))], rate=rate, channels=[ChannelInfo("x")],
                                 time=TimeAxis("datetime", times))
    fields = stage_sidecar(d, rec)
    members = {p.name: {} for p in d.iterdir()}
    tl = timeaxis.load_timeline({**fields, "members": members}, d, len(times), rate, None)
    np.testing.assert_array_equal(tl.values(0, len(times)), times)
    a, b = sorted(data.draw(st.lists(st.integers(0, len(times)), min_size=2, max_size=2)))
    np.testing.assert_array_equal(tl.values(a, b), times[a:b])
    if np.all(np.diff(times) >= 0):
        lo = Fraction(data.draw(st.integers(0, int(times[-1] - times[0]) + 10)), NS)
        hi = lo + Fraction(data.draw(st.integers(1, 10**11)), NS)
        off = times - times[0]                       # numpy: start <= t - t0 < end, in integer ns
        mask = (off >= lo * NS) & (off < hi * NS)
        if mask.any():
            got = tl.span(lo, hi)
            idx = np.flatnonzero(mask)
            assert got == (int(idx[0]), int(idx[-1]) + 1)


@settings(max_examples=40, deadline=None)
@given(st.sampled_from([1.0, 10.0, 44.1, 0.3]), st.lists(st.tuples(st.integers(1, 150), st.booleans(),
                                                                      st.floats(-5, 500)), min_size=1, max_size=4),
       st.floats(0, 600), st.floats(0.01, 600))
def test_any_seconds_axis_comes_back_bit_for_bit(tmp_path_factory, rate, pieces, lo, width):
    rng = np.random.default_rng(len(pieces))
    parts, t = [], 0.0
    for n, regular, jump in pieces:
        part = t + (np.arange(n) / rate if regular else np.cumsum(rng.random(n)))
        parts.append(part)
        t = float(part[-1]) + jump
    secs = np.concatenate(parts)
    d = tmp_path_factory.mktemp("secs")
    rec = Recording.from_columns([np.zeros(len(secs))], rate=rate, channels=[ChannelInfo("x")],
                                 time=TimeAxis("seconds", secs))
    fields = stage_sidecar(d, rec)
    tl = timeaxis.load_timeline({**fields, "members": {p.name: {} for p in d.iterdir()}}, d, len(secs), rate, None)
    np.testing.assert_array_equal(tl.values(0, len(secs)).view(np.int64), secs.view(np.int64))
    if np.all(np.diff(secs) >= 0):
        # reference: exact rational comparisons (Python fractions) of t - t0 with the range
        start, end = Fraction(lo), Fraction(lo) + Fraction(width)
        inside = [start <= Fraction(float(x)) - Fraction(float(secs[0])) < end for x in secs]
        if any(inside):
            idx = [i for i, ok in enumerate(inside) if ok]
            assert tl.span(start, end) == (idx[0], idx[-1] + 1)
