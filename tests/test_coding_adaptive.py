"""The context-adaptive residual coder (tsarchive.coding.adaptive).

References: the compiled kernels against the plain Python-integer coder of
:mod:`tsarchive.coding.adaptive_ref` (bytes equal); code lengths against the
entropy of the source computed independently (scipy.stats for the quantized
Gaussian, the closed form for the quantized Laplacian, the binary entropy for
a first-order Markov source: Cover & Thomas, Elements of Information Theory,
ch. 2 and 4).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import example, given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats

from tsarchive.coding import adaptive as A
from tsarchive.coding import adaptive_ref as R
from tsarchive.coding.adaptive import AdaptiveCoder
from tsarchive.errors import ArchiveCorrupt, BadInput

I64_MIN, I64_MAX = -(2**63), 2**63 - 1
values_strategy = arrays(np.int64, st.integers(0, 300),
                         elements=st.one_of(st.just(0), st.just(0), st.integers(-20, 20), st.integers(-3000, 3000),
                                            st.integers(I64_MIN, I64_MAX)))
FITTED = AdaptiveCoder.fit([np.rint(np.random.default_rng(5).laplace(0, 4, 4096)).astype(np.int64)])


def _reference(coder: AdaptiveCoder, values) -> bytes:
    p0, n0 = A._initial_state(coder.init)
    return R.encode(values, p0, n0)


@given(values_strategy)
def test_kernel_bytes_equal_reference(x):
    for coder in (AdaptiveCoder(), FITTED):
        payload = coder.encode(x)
        assert payload == _reference(coder, x)          # reference: the Python-integer coder
        p0, n0 = A._initial_state(coder.init)
        assert R.decode(payload, len(x), p0, n0) == x.tolist()
        assert np.array_equal(coder.decode(payload, len(x)), x)


@given(st.lists(values_strategy, min_size=0, max_size=5))
def test_batches_equal_single_windows(windows):
    c = AdaptiveCoder()
    payloads = c.encode_many(windows)
    assert payloads == [c.encode(w) for w in windows]
    back = c.decode_many(payloads, [len(w) for w in windows])
    assert all(np.array_equal(a, b) for a, b in zip(back, windows))


ADVERSARIAL = {
    "empty": np.zeros(0, np.int64),
    "one zero": np.zeros(1, np.int64),
    "one value": np.array([-7], np.int64),
    "long zeros": np.zeros(70000, np.int64),
    "zeros then one": np.r_[np.zeros(5000, np.int64), 1],
    "extremes": np.array([I64_MIN, I64_MAX, 0, 0, 0, I64_MIN, 1, -1, I64_MAX] * 9, np.int64),
    "huge": np.array([(-1) ** i * (2**62 + i) for i in range(300)], np.int64),
    "alternating": np.array([(-1) ** i for i in range(4000)], np.int64),
    "alternating big": np.array([(-1) ** i * 1000 for i in range(4000)], np.int64),
    "sparse spikes": np.where(np.arange(9000) % 997 == 0, 2**40, 0).astype(np.int64),
}


@pytest.mark.parametrize("name", list(ADVERSARIAL))
def test_round_trip_adversarial(name):
    x = ADVERSARIAL[name]
    for coder in (AdaptiveCoder(), FITTED):
        payload = coder.encode(x)
        assert np.array_equal(coder.decode(payload, len(x)), x)
        assert payload == _reference(coder, x)
    assert AdaptiveCoder().encode(np.zeros(0, np.int64)) == b""


def test_without_numba_the_reference_codes(monkeypatch):
    x = np.r_[ADVERSARIAL["extremes"], np.rint(np.random.default_rng(1).laplace(0, 9, 2000)).astype(np.int64)]
    compiled = FITTED.encode(x)
    monkeypatch.setattr(A, "_kernels", lambda: None)
    assert FITTED.encode(x) == compiled
    assert np.array_equal(FITTED.decode(compiled, len(x)), x)


def _damaged(payload: bytes, n: int, coder=AdaptiveCoder()):
    """Decode a damaged payload: it must raise ArchiveCorrupt, or be the canonical code of what it gives."""
    try:
        back = coder.decode(payload, n)
    except ArchiveCorrupt:
        return None
    assert coder.encode(back) == payload            # strict decoding accepts canonical codes only
    return back


def test_damaged_payloads_never_pass_as_the_original():
    # An arithmetic code has no redundancy (every truncation below is itself the code of other values,
    # as with the range coder of tsarchive.entropy): damage raises or decodes to other values, which the
    # archive's per-window CRC-32 catches.  Structural damage always raises.
    rng = np.random.default_rng(2)
    x = np.rint(rng.laplace(0, 30, 3000)).astype(np.int64)
    c = AdaptiveCoder()
    p = c.encode(x)
    for cut in (1, 2, 5, len(p) // 2, len(p) - 1):
        back = _damaged(p[:cut], len(x))
        assert back is None or not np.array_equal(back, x)
    with pytest.raises(ArchiveCorrupt):
        c.decode(p + b"\x01", len(x))               # bytes past the code
    with pytest.raises(ArchiveCorrupt):
        c.decode(p + b"\x00", len(x))               # a trailing zero byte is never written
    with pytest.raises(ArchiveCorrupt):
        c.decode(b"\x01", 0)


@given(st.binary(min_size=0, max_size=64), st.integers(0, 3000))
def test_garbage_raises_or_is_canonical(blob, n):
    _damaged(blob, n)                               # and returns: no endless loop on any bytes


def test_flipped_bytes_raise_or_are_canonical():
    rng = np.random.default_rng(3)
    x = np.rint(rng.laplace(0, 5, 2000)).astype(np.int64)
    p = bytearray(AdaptiveCoder().encode(x))
    for k in range(200):
        q = bytearray(p)
        q[rng.integers(len(q))] ^= 1 << int(rng.integers(8))
        back = _damaged(bytes(q), len(x))
        assert back is None or not np.array_equal(back, x)


def test_lengths_are_capped():
    with pytest.raises(ArchiveCorrupt):
        AdaptiveCoder().decode(b"", A.MAX_N + 1)    # no allocation of a garbled length
    with pytest.raises(BadInput):
        AdaptiveCoder().decode_many([b""], [1, 2])
    with pytest.raises(BadInput):
        AdaptiveCoder().encode(np.zeros(3, np.float64))


def _gaussian_entropy(sigma: float) -> float:
    """Entropy of round(N(0, sigma^2)) from scipy.stats.norm's cdf (bins of width 1)."""
    k = np.arange(-int(12 * sigma) - 2, int(12 * sigma) + 3)
    p = stats.norm.cdf(k + 0.5, scale=sigma) - stats.norm.cdf(k - 0.5, scale=sigma)
    p = p[p > 0]
    return float(-(p * np.log2(p)).sum())


def _laplace_entropy(b: float) -> float:
    """Entropy of round(Laplace(0, b)), closed form: P(0) = 1 - e^{-1/(2b)},
    P(k) = sinh(1/(2b)) e^{-|k|/b} for k != 0 (integrating the density over [k - 1/2, k + 1/2])."""
    k = np.arange(1, int(60 * b) + 10)
    p0 = 1 - np.exp(-0.5 / b)
    pk = np.sinh(0.5 / b) * np.exp(-k / b)
    return float(-p0 * np.log2(p0) - 2 * (pk * np.log2(pk)).sum())


@pytest.mark.parametrize("kind,scale", [("gauss", 1.0), ("gauss", 10.0), ("laplace", 3.0), ("laplace", 40.0)])
def test_iid_streams_within_a_tenth_of_a_bit_of_their_entropy(kind, scale):
    rng = np.random.default_rng(4)
    n, w = 1 << 19, 8192
    draw = rng.normal(0, scale, n) if kind == "gauss" else rng.laplace(0, scale, n)
    x = np.rint(draw).astype(np.int64).reshape(-1, w)
    h = _gaussian_entropy(scale) if kind == "gauss" else _laplace_entropy(scale)
    plain = 8 * sum(map(len, AdaptiveCoder().encode_many(x))) / x.size
    fitted = AdaptiveCoder.fit(list(x[:4]))
    with_init = (8 * sum(map(len, fitted.encode_many(x))) + 8 * fitted.init_bytes) / x.size
    assert h <= plain < h + 0.1
    assert h <= with_init < h + 0.1


def test_markov_source_approaches_its_conditional_entropy():
    # binary first-order Markov chain, P(change) = 0.05: H(X_t | X_{t-1}) = h(0.05) (Cover & Thomas 4.2)
    rng = np.random.default_rng(6)
    flips = rng.random(1 << 19) < 0.05
    x = (np.cumsum(flips) % 2).astype(np.int64).reshape(-1, 8192)
    p = 0.05
    h = -(p * np.log2(p) + (1 - p) * np.log2(1 - p))
    bits = 8 * sum(map(len, AdaptiveCoder().encode_many(x))) / x.size
    h0 = 1.0                                       # order-0: both symbols equally frequent
    assert h <= bits < h + 0.03 < h0


def test_cost_estimate_matches_the_bytes():
    rng = np.random.default_rng(7)
    for x in (np.rint(rng.laplace(0, 2, 4096)), np.rint(rng.normal(0, 300, 1024)), np.zeros(2048),
              np.where(rng.random(8192) < 0.02, rng.integers(-5, 6, 8192), 0)):
        x = x.astype(np.int64)
        real = 8 * len(AdaptiveCoder().encode(x))
        est = AdaptiveCoder().cost_bits(x)
        assert abs(real - est) <= 40 + 0.002 * est     # termination: at most a few bytes per window


def test_config_round_trip():
    for coder in (AdaptiveCoder(), FITTED):
        cfg = json.loads(json.dumps(coder.get_config()))
        assert cfg["id"] == "adaptive"
        assert AdaptiveCoder.from_config(cfg) == coder
    assert FITTED.init_bytes == len(FITTED.init) > 0 and AdaptiveCoder().init_bytes == 0
    with pytest.raises(ArchiveCorrupt):
        AdaptiveCoder.from_config({"id": "range"})
    with pytest.raises(ArchiveCorrupt):
        AdaptiveCoder.from_config({"id": "adaptive", "init": "not base64!"})
    with pytest.raises(ArchiveCorrupt):
        AdaptiveCoder.from_config({"id": "adaptive", "init": "AAAA"})


def test_decode_flat_reads_a_column_buffer():
    rng = np.random.default_rng(8)
    x = np.rint(rng.laplace(0, 6, (5, 512))).astype(np.int64)
    c = AdaptiveCoder()
    parts = c.encode_many(x)
    buf = np.frombuffer(b"xx" + b"".join(parts), np.uint8)           # payloads at an offset, as in a column
    ends = 2 + np.cumsum([len(p) for p in parts])
    starts = ends - np.array([len(p) for p in parts])
    assert np.array_equal(c.decode_flat(buf, starts, ends, 512), x.ravel())
    with pytest.raises(ArchiveCorrupt):
        c.decode_flat(buf, starts, ends + 10**6, 512)                  # offsets past the buffer


def test_fit_sized_gives_the_rest_coders_sizes_and_the_same_fit():
    # the coder choice (encoder.choose_coder) takes the rest coder's sizes from the fitting pass: they must
    # be the lengths of what AdaptiveCoder() writes, window by window, and the fit the same as fit()'s
    x = np.rint(np.random.default_rng(8).laplace(0, 6, (12, 700))).astype(np.int64)
    x[3, 100:400] = 0
    fitted, sizes = AdaptiveCoder.fit_sized(x)
    assert fitted == AdaptiveCoder.fit(list(x))
    assert sizes.tolist() == [len(p) for p in AdaptiveCoder().encode_many(x)]


def _reference_or_corrupt(payload: bytes, n: int, coder: AdaptiveCoder):
    p0, n0 = A._initial_state(coder.init)
    try:
        return R.decode(payload, n, p0, n0)
    except ArchiveCorrupt:
        return None


@given(st.lists(st.tuples(st.binary(min_size=0, max_size=40), st.booleans()), min_size=1, max_size=6),
       st.integers(0, 400))
@example([(b"\x00" * 6 + b"\x01", False)], 9)      # the kernel stopped on the last byte and took it; the reference refuses
def test_reading_decodes_any_bytes_as_the_reference_does(cells, n):
    # The read path decodes with strict=False (the window CRC-32 checks instead), so whatever bytes a cell
    # holds, the kernel must give the reference's values or refuse where it refuses.  Reference: the
    # Python-integer decoder (adaptive_ref), window by window; half the cells are real codes.
    rng = np.random.default_rng(len(cells) * 1000 + n)
    for coder in (AdaptiveCoder(), FITTED):
        parts = [coder.encode(np.rint(rng.laplace(0, 2 + 40 * k, n)).astype(np.int64)) if real else blob
                 for k, (blob, real) in enumerate(cells)]
        want = [_reference_or_corrupt(p, n, coder) for p in parts]
        buf = np.frombuffer(b"\x07" + b"".join(parts), np.uint8)
        ends = 1 + np.cumsum([len(p) for p in parts])
        starts = ends - np.array([len(p) for p in parts])
        if any(w is None for w in want):
            with pytest.raises(ArchiveCorrupt):
                coder.decode_flat(buf, starts, ends, n, strict=False)
        else:
            got = coder.decode_flat(buf, starts, ends, n, strict=False)
            assert got.tolist() == [v for w in want for v in w]
