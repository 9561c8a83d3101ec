"""Entropy coding: exact round trips, coded size against the order-0 entropy, damage handling.

Reference for the entropy: ``scipy.stats.entropy(counts, base=2)`` (the plug-in
Shannon entropy of the empirical distribution), times the number of symbols.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.stats import entropy as scipy_entropy

from tsarchive import codecs, entropy as E
from tsarchive.checksum import window_crc
from tsarchive.errors import ArchiveCorrupt, BadInput, UnknownCodec

from kit import check_codec

I64_MIN, I64_MAX = -(2**63), 2**63 - 1
# mostly small residuals with escapes anywhere in int64 (hypothesis also favours the extremes)
int64_arrays = arrays(np.int64, st.integers(0, 300),
                      elements=st.one_of(st.integers(-40, 40), st.integers(I64_MIN, I64_MAX)))
EXTREMES = np.array([I64_MIN, I64_MIN + 1, I64_MAX, I64_MAX - 1, 0, -1, 1, 2**32, -(2**32)], dtype=np.int64)


def laplace(n, scale, seed=0):
    return np.rint(np.random.default_rng(seed).laplace(0.0, scale, n)).astype(np.int64)


@pytest.fixture(scope="module")
def small_table():
    return E.build_table(laplace(20_000, 3.0, seed=1))


def ref_tokens(values, table):
    """Token / raw-bits definition of the module docstring, in plain Python ints (reference)."""
    d, m = table.direct_bits, table.mantissa_bits
    toks, raws = [], []
    for v in values.tolist():
        x = (v - table.center) % 2**64
        x = x - 2**64 if x >= 2**63 else x
        u = 2 * x if x >= 0 else -2 * x - 1  # zigzag
        if u < 2**d:
            toks.append(u)
            continue
        e = u.bit_length() - 1
        toks.append(2**d + ((e - d) << m) + ((u >> (e - m)) & (2**m - 1)))
        raws.append((u & (2 ** (e - m) - 1), e - m))
    return toks, raws


# ---------------------------------------------------------------- round trips

@given(int64_arrays)
def test_round_trip_arbitrary_int64(small_table, values):
    payload = E.encode(values, small_table)
    assert np.array_equal(E.decode(payload, len(values), small_table), values)


@given(int64_arrays)
def test_round_trip_with_table_fitted_to_the_data(values):
    table = E.build_table(values)
    assert np.array_equal(E.decode(E.encode(values, table), len(values), table), values)


@pytest.mark.parametrize("values", [
    EXTREMES,
    np.zeros(0, np.int64),
    np.full(1000, 7, np.int64),
    np.full(1000, I64_MIN, np.int64),
    np.full(1000, I64_MAX, np.int64),
], ids=["extremes", "empty", "all-7", "all-min", "all-max"])
def test_round_trip_edge_cases(small_table, values):
    assert np.array_equal(E.decode(E.encode(values, small_table), len(values), small_table), values)


def test_round_trip_when_the_final_interval_straddles_a_carry(small_table, monkeypatch):
    # Windows decoded from a point 0x..FFFFFFFF.. end with an interval that
    # crosses a 2**64 boundary (pending carry); sealing must handle both its
    # own shortest point and the fallback to constriction's seal.  The spy
    # sees the constriction reference path; the compiled coder must give the
    # same bytes on every one of these windows.
    hits, real_seal = set(), E._seal

    def spy(enc):
        lower, size = enc.pos()[1]
        hits.add("fallback" if lower + 2**32 - 1 >= 2**64 else "carry" if lower + size > 2**64 else "plain")
        return real_seal(enc)

    monkeypatch.setattr(E, "_seal", spy)
    for pre in range(1, 30):
        point = bytes([pre]) * 4 + b"\xff" * 32
        for k in range(8, 40):
            values = E.decode(point, k, small_table, strict=False)
            ref = E.encode_reference([values], small_table)[0]
            assert E.encode(values, small_table) == ref
            assert np.array_equal(E.decode(ref, k, small_table), values)
    assert {"fallback", "carry"} <= hits


def test_window_of_center_values_is_empty(small_table):
    assert E.encode(np.full(700, small_table.center, np.int64), small_table) == b""


def test_batch_equals_single_calls(small_table):
    rng = np.random.default_rng(2)
    windows = [laplace(int(k), 3.0, seed=i) for i, k in enumerate(rng.integers(0, 600, 40))]
    windows[5][::7] = rng.integers(I64_MIN, I64_MAX, len(windows[5][::7]))  # spikes -> raw-bit path
    windows.append(EXTREMES)
    many = E.encode_many(windows, small_table)
    assert many == [E.encode(w, small_table) for w in windows]
    back = E.decode_many(many, [len(w) for w in windows], small_table)
    assert all(np.array_equal(a, b) for a, b in zip(back, windows))


def test_encoding_is_deterministic(small_table):
    x = np.concatenate([laplace(5000, 40.0, seed=3), EXTREMES])
    assert E.encode(x, small_table) == E.encode(x.copy(), small_table)
    assert E.build_table(x) == E.build_table(x.copy())


def test_tokenize_matches_reference_definition(small_table):
    x = np.concatenate([laplace(3000, 200.0, seed=4), EXTREMES])
    tok, raw, nbits = E.tokenize(x, small_table)
    ref_tok, ref_raw = ref_tokens(x, small_table)
    assert tok.tolist() == ref_tok
    assert list(zip(raw.tolist(), nbits.tolist())) == ref_raw


def test_rejects_non_integer_input(small_table):
    with pytest.raises(BadInput):
        E.encode(np.array([1.5, 2.0]), small_table)


# ---------------------------------------------------------------- tables

def test_build_table_invariants():
    t = E.build_table(laplace(50_000, 1000.0), max_symbols=600)
    assert len(t.freqs) == E.n_tokens(t.direct_bits, t.mantissa_bits) <= 600
    assert sum(t.freqs) == 2**24 and min(t.freqs) >= 1
    with pytest.raises(BadInput):
        E.build_table(laplace(100, 1.0), max_symbols=10)


def test_table_bytes_and_dict_round_trip():
    t = E.build_table(np.concatenate([laplace(20_000, 25.0), EXTREMES]))
    assert E.FreqTable.from_bytes(t.to_bytes()) == t
    assert E.FreqTable.from_dict(json.loads(json.dumps(t.to_dict()))) == t
    assert hash(E.FreqTable.from_bytes(t.to_bytes())) == hash(t)


@pytest.mark.parametrize("damage", ["truncate", "version", "trailing", "sum"])
def test_table_bytes_damage_is_detected(damage):
    b = bytearray(E.build_table(laplace(5000, 2.0)).to_bytes())
    if damage == "truncate":
        b = b[:-1]
    elif damage == "version":
        b[0] = 99
    elif damage == "trailing":
        b += b"\x01"
    else:
        b[-1] ^= 0x01  # last frequency changes -> the sum is no longer 2**24
    with pytest.raises(ArchiveCorrupt):
        E.FreqTable.from_bytes(bytes(b))


@pytest.mark.parametrize("d", [
    {},
    {"center": 0, "direct_bits": 40, "mantissa_bits": 0, "freqs": []},
    {"center": 0, "direct_bits": 2, "mantissa_bits": 3, "freqs": []},
    {"center": 0, "direct_bits": 0, "mantissa_bits": 0, "freqs": [0]},
    {"center": "x", "direct_bits": 0, "mantissa_bits": 0, "freqs": []},
])
def test_table_dict_nonsense_is_rejected(d):
    with pytest.raises(ArchiveCorrupt):
        E.FreqTable.from_dict(d)


def test_model_reproduces_table_in_a_real_coder():
    # A constriction model that quantised the table differently would change the
    # size of a long message by many bits; the ideal length -sum log2(f/2**24) is
    # Shannon's code length for the table's integer probabilities.
    x = laplace(100_000, 6.0, seed=9)
    x[::5000] = 10**15  # a few tokens of frequency 1
    t = E.build_table(laplace(100_000, 6.0, seed=8))
    coded = 8 * len(E.encode(x, t))
    ideal = E.cost_bits(x, t)
    # range coding loses < 0.05 % to the truncation of its range (common practice (no source))
    assert ideal - 16 <= coded <= ideal * 1.0005 + 16


def test_model_probe_refuses_a_differently_quantised_model(monkeypatch):
    import constriction

    real = constriction.stream.model.Categorical
    monkeypatch.setattr(constriction.stream.model, "Categorical",
                        lambda p, perfect: real(p + 1.0, perfect=perfect))  # every weight shifted
    t = E.build_table(laplace(1000, 2.0, seed=21))
    with pytest.raises(ArchiveCorrupt):
        t.model


# ---------------------------------------------------------------- size against order-0 entropy

def mostly_zero(n, seed=0):
    rng = np.random.default_rng(seed)
    x = np.zeros(n, np.int64)
    nz = rng.random(n) >= 0.97  # p0 = 0.97
    s = np.rint(rng.laplace(0.0, 2.0, nz.sum())).astype(np.int64)
    x[nz] = np.where(s == 0, 1, s)
    return x


def spiky(n, seed=0):
    x = laplace(n, 5.0, seed)
    hit = np.random.default_rng(seed + 1).random(n) < 1e-3  # 0.1 % spikes anywhere in int64
    x[hit] = np.random.default_rng(seed + 2).integers(I64_MIN, I64_MAX, hit.sum(), endpoint=True)
    return x


# Sizes: 204800 symbols per case; windows of 512 samples, except 1024 for the
# mostly-zero stream (0.29 bits/sample: such streams come from loose budgets,
# where longer windows are used), so the ~3 bits of framing per window are
# amortised as in real use.
SIZE_CASES = {
    "p0=0.97": (mostly_zero(204_800), 1024),
    "laplace 0.5": (laplace(204_800, 0.5), 512),
    "laplace 10": (laplace(204_800, 10.0), 512),
    "laplace 1000": (laplace(204_800, 1000.0), 512),
    "spikes": (spiky(204_800), 512),
}


@pytest.mark.parametrize("name", list(SIZE_CASES))
def test_coded_size_within_3_percent_of_order0_entropy(name):
    x, w = SIZE_CASES[name]
    counts = np.unique(x, return_counts=True)[1]
    h_bits = scipy_entropy(counts, base=2) * len(x)  # scipy reference: plug-in entropy in bits
    assert E.order0_entropy_bits(x) == pytest.approx(h_bits, rel=1e-9)
    table = E.build_table(x)
    payloads = E.encode_many(x.reshape(-1, w), table)
    coded = 8 * sum(map(len, payloads))
    # Shannon: no code fitted to these samples beats the plug-in entropy (Gibbs' inequality).
    assert h_bits * 0.999 <= coded <= 1.03 * h_bits
    # framing: each window costs at most a few bits over its ideal length under the table
    framing = (coded - E.cost_bits(x, table)) / len(payloads)
    assert framing <= 6.0


# ---------------------------------------------------------------- damage

@pytest.mark.parametrize("damage", ["append", "zero-end"])
def test_damaged_payload_raises(damage):
    t = E.build_table(laplace(20_000, 4.0))
    p = E.encode(laplace(512, 4.0, seed=11), t)
    p = p + b"\x5a" if damage == "append" else p + b"\x00"
    with pytest.raises(ArchiveCorrupt):
        E.decode(p, 512, t)


@pytest.mark.parametrize("damage", ["drop-last", "drop-first", "flip", "garbage"])
def test_damage_never_passes_as_the_original(damage):
    # A range code has no redundancy: damage either raises or decodes to other
    # values, which the window CRC then rejects.
    t = E.build_table(laplace(20_000, 4.0))
    x = laplace(512, 4.0, seed=11)
    p = bytearray(E.encode(x, t))
    if damage == "drop-last":
        p = p[:-1]
    elif damage == "drop-first":
        p = p[1:]
    elif damage == "flip":
        p[len(p) // 2] ^= 0x10
    else:
        p = bytearray(np.random.default_rng(12).integers(1, 256, len(p), dtype=np.uint8).tobytes())
    try:
        y = E.decode(bytes(p), 512, t)
    except ArchiveCorrupt:
        return
    assert window_crc(y) != window_crc(x)


def test_wrong_table_raises():
    x = laplace(512, 4.0, seed=13)
    p = E.encode(x, E.build_table(laplace(20_000, 4.0)))
    with pytest.raises(ArchiveCorrupt):
        E.decode(p, 512, E.build_table(laplace(20_000, 400.0)))


def test_wrong_length_raises(small_table):
    p = E.encode(laplace(512, 3.0), small_table)
    with pytest.raises(ArchiveCorrupt):
        E.decode(p, 511, small_table)
    with pytest.raises(ArchiveCorrupt):
        E.decode(p, -1, small_table)


@given(st.binary(max_size=64), st.integers(0, 2000))
def test_garbage_never_crashes(small_table, payload, n):
    try:
        out = E.decode(payload, n, small_table)
    except ArchiveCorrupt:
        return
    assert out.shape == (n,) and out.dtype == np.int64


# ---------------------------------------------------------------- coders and registry

@given(int64_arrays)
def test_zstd_round_trip(values):
    z = E.ZstdCoder(level=3)
    assert np.array_equal(z.decode(z.encode(values), len(values)), values)


def test_zstd_damage_raises():
    z = E.ZstdCoder()
    p = z.encode(laplace(512, 300.0))
    for bad in (p[:-3], b"\x07" + p[1:], p[:1] + b"junk"):
        with pytest.raises(ArchiveCorrupt):
            z.decode(bad, 512)


def test_registry_config_round_trip_and_unknown_id():
    coder = E.RangeCoder.fit(laplace(10_000, 8.0))
    for c in (coder, E.ZstdCoder(level=7)):
        check_codec("coder", c, [laplace(300, 8.0, seed=5), np.zeros(4, np.int64), np.array([2**40, -3])])
    assert {"range", "zstd"} <= set(codecs.ids("coder"))
    with pytest.raises(UnknownCodec):
        codecs.from_config("coder", "lzma-9000", {})
