"""The compiled range coder writes and reads constriction's bytes.

Reference: the ``constriction`` package (registry: constriction 0.5), whose
``RangeEncoder``/``RangeDecoder`` with 64-bit state and 32-bit words code the
same windows one Python call at a time (:func:`tsarchive.entropy.encode_reference`
and :func:`~tsarchive.entropy.decode_reference`).  Equality of bytes and of
decoded values, also on damaged payloads, is the check.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from tsarchive import entropy as E
from tsarchive import rangecoder
from tsarchive.errors import ArchiveCorrupt

I64_MIN, I64_MAX = -(2**63), 2**63 - 1
values_strategy = arrays(np.int64, st.integers(0, 400),
                         elements=st.one_of(st.integers(-20, 20), st.integers(-3000, 3000),
                                            st.integers(I64_MIN, I64_MAX)))


def _windows(values, cuts):
    cuts = sorted(min(c, len(values)) for c in cuts)
    return np.split(values, cuts)


def test_compiled_kernels_are_used():
    assert rangecoder.available(), "numba is a dependency: the compiled coder must be available"


@settings(max_examples=150, deadline=None)
@given(values_strategy, st.lists(st.integers(0, 400), max_size=5), st.sampled_from(["own", "laplace", "sparse"]))
def test_same_bytes_and_values_as_constriction(values, cuts, fit):
    rng = np.random.default_rng(len(values))
    train = {"own": values, "laplace": np.rint(rng.laplace(0, 4, 5000)).astype(np.int64),
             "sparse": (rng.random(5000) < 0.03).astype(np.int64)}[fit]
    table = E.build_table(train)
    windows = _windows(values, cuts)
    ref = E.encode_reference(windows, table)
    assert E.encode_many(windows, table) == ref
    got = E.decode_many(ref, [len(w) for w in windows], table)
    back = E.decode_reference(ref, [len(w) for w in windows], table)
    for w, g, b in zip(windows, got, back):
        assert np.array_equal(g, w) and np.array_equal(b, w)


@pytest.mark.parametrize("scale", [0.05, 0.5, 3.0, 40.0, 5000.0, 1e12])
def test_same_bytes_on_many_windows(scale):
    rng = np.random.default_rng(7)
    v = np.rint(rng.laplace(0, scale, 64 * 1024)).astype(np.int64).reshape(64, 1024)
    table = E.build_table(v[:8].ravel())
    assert E.encode_many(v, table) == E.encode_reference(v, table)


@settings(max_examples=200, deadline=None)
@given(st.binary(min_size=0, max_size=64), st.integers(0, 200))
def test_damaged_payloads_decode_as_constriction_does(payload, n):
    # Non-strict decoding of arbitrary bytes: both decoders give the same values, or both refuse
    table = E.build_table(np.rint(np.random.default_rng(3).laplace(0, 3, 4000)).astype(np.int64))
    outcome = []
    for fn in (E.decode_many, E.decode_reference):
        try:
            outcome.append(fn([payload], n, table, strict=False)[0].tolist())
        except ArchiveCorrupt:
            outcome.append("corrupt")
    assert outcome[0] == outcome[1]


def test_strict_decoding_refuses_a_non_canonical_payload():
    table = E.build_table(np.rint(np.random.default_rng(4).laplace(0, 3, 4000)).astype(np.int64))
    good = E.encode(np.arange(-5, 5, dtype=np.int64), table)
    bad = good[:-1] + bytes([good[-1] ^ 0x01 or 0x02])  # same length, other last byte
    with pytest.raises(ArchiveCorrupt):
        E.decode(bad + b"\x07", 10, table)          # an extended payload is not the canonical code
    try:
        out = E.decode(bad, 10, table)
    except ArchiveCorrupt:
        return
    assert not np.array_equal(out, np.arange(-5, 5))  # if it is canonical, it is another window


def test_flat_decoding_reads_windows_in_place():
    # The reader hands over the Parquet buffer with start/end offsets, in any order and with gaps.
    table = E.build_table(np.rint(np.random.default_rng(5).laplace(0, 9, 4000)).astype(np.int64))
    ws = [np.rint(np.random.default_rng(k).laplace(0, 9, 100 + k)).astype(np.int64) for k in range(6)]
    pays = E.encode_many(ws, table)
    buf = b"".join(b"\xaa" + p for p in pays)
    ends = np.cumsum([1 + len(p) for p in pays])
    starts = ends - [len(p) for p in pays]
    order = [4, 0, 5, 2]
    vals = E.decode_flat(np.frombuffer(buf, np.uint8), starts[order], ends[order], [len(ws[k]) for k in order], table)
    assert np.array_equal(vals, np.concatenate([ws[k] for k in order]))
    with pytest.raises(ArchiveCorrupt):
        E.decode_flat(np.frombuffer(buf, np.uint8), starts[order], ends[order] + 10**6, 1, table)


def test_reading_without_numba_gives_the_same_samples(monkeypatch):
    # The constriction path is the fallback: the golden archive decodes to the same bits through it.
    import tsarchive
    from pathlib import Path
    golden = Path(__file__).resolve().parent / "golden" / "v3" / "golden.tsa"
    want = {c.name: tsarchive.open(golden).read(c.name) for c in tsarchive.open(golden).channels}
    monkeypatch.setattr(rangecoder, "available", lambda: False)
    arc = tsarchive.open(golden)
    for name, ref in want.items():
        got = arc.read(name)
        assert got.dtype == ref.dtype and np.array_equal(got.view(np.uint8), ref.view(np.uint8))
    table = E.build_table(np.arange(-9, 9))
    assert E.encode_many([np.arange(-3, 3)], table) == E.encode_reference([np.arange(-3, 3)], table)
