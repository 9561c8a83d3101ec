"""The classic fallback coder (tsarchive.coding.classic).

References: numpy's ``diff`` for the differences and the standard library's
``lzma`` / ``bz2`` and the ``zstandard`` package for the compressed bodies
(each payload's body is decompressed here with the library directly), and
the sizes of those libraries' outputs computed here for the "smallest" claim.
"""

from __future__ import annotations

import bz2
import json
import lzma

import numpy as np
import pytest
import zstandard
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from tsarchive.coding.classic import ClassicCoder
from tsarchive.errors import ArchiveCorrupt, BadInput

I64_MIN, I64_MAX = -(2**63), 2**63 - 1


@given(arrays(np.int64, st.integers(0, 200),
              elements=st.one_of(st.integers(-100, 100), st.integers(I64_MIN, I64_MAX))))
def test_round_trip(x):
    c = ClassicCoder(("zstd",))
    assert np.array_equal(c.decode(c.encode(x), len(x)), x)


def _body(payload: bytes) -> bytes:
    """The payload's body decompressed by the library its header names."""
    kind = (payload[0] >> 2) & 3
    if kind == 0:
        return zstandard.ZstdDecompressor().decompress(payload[1:])
    return lzma.decompress(payload[1:]) if kind == 1 else bz2.decompress(payload[1:])


def test_body_is_the_differenced_integers_and_smallest():
    rng = np.random.default_rng(0)
    q = np.cumsum(np.rint(rng.normal(0, 3, 20000))).astype(np.int64)
    p = ClassicCoder().encode(q)
    order, shuf, width = p[0] & 3, (p[0] >> 4) & 1, 1 << (p[0] >> 5)
    body = _body(p)
    r = q.copy()
    for _ in range(order):
        r = np.diff(r, prepend=0)                       # reference: numpy's diff with q[-1] = 0
    raw = r.astype(f"<i{width}").tobytes()
    if shuf:
        raw = np.frombuffer(raw, np.uint8).reshape(-1, width).T.tobytes()
    assert body == raw
    # no unshuffled candidate of the libraries (narrowest width) is smaller than the chosen body
    for k in range(3):
        rk = q.copy()
        for _ in range(k):
            rk = np.diff(rk, prepend=0)
        w = next(b for b in (1, 2, 4, 8) if np.abs(rk).max() < 2 ** (8 * b - 1))
        data = rk.astype(f"<i{w}").tobytes()
        for size in (len(zstandard.ZstdCompressor(level=19).compress(data)),
                     len(lzma.compress(data, preset=9 | lzma.PRESET_EXTREME)), len(bz2.compress(data, 9))):
            assert len(p) - 1 <= size


def test_repeats_are_found():
    # a repeated pattern: the LZ/BWT compressors find the period, an order-0 coder cannot
    rng = np.random.default_rng(1)
    q = np.tile(rng.integers(-1000, 1000, 500), 40)
    assert 8 * len(ClassicCoder().encode(q)) / len(q) < 0.5


def test_damage_raises():
    q = np.arange(3000, dtype=np.int64) % 17
    c = ClassicCoder()
    p = c.encode(q)
    for bad in (p[:-3], p[:1], b"", bytes([0xFF]) + p[1:], p[:1] + b"garbage" * 5):
        with pytest.raises(ArchiveCorrupt):
            c.decode(bad, len(q))
    with pytest.raises(ArchiveCorrupt):
        c.decode(p, len(q) - 1)                      # more values than asked: never inflated past the cap
    with pytest.raises(ArchiveCorrupt):
        c.decode(p, 0)
    assert c.encode(np.zeros(0, np.int64)) == b""


def test_config():
    c = ClassicCoder(("xz", "bzip2"))
    cfg = json.loads(json.dumps(c.get_config()))
    assert cfg["id"] == "classic" and ClassicCoder.from_config(cfg) == c
    with pytest.raises(BadInput):
        ClassicCoder(("gzip",))
    with pytest.raises(ArchiveCorrupt):
        ClassicCoder.from_config({"id": "classic", "compressors": ["lz4"]})
    with pytest.raises(ArchiveCorrupt):
        ClassicCoder.from_config({"id": "adaptive"})
    with pytest.raises(BadInput):
        c.encode(np.zeros((2, 2), np.int64))


def test_registry():
    from tsarchive import codecs
    from tsarchive.coding import AdaptiveCoder
    from tsarchive.errors import UnknownCodec

    # the one registry of tsarchive.codecs knows the leaf coders (issue 11: one contract, one registry)
    assert {"adaptive", "classic", "range", "zstd"} <= set(codecs.ids("coder"))
    for c in (ClassicCoder(("bzip2",)), AdaptiveCoder()):
        config = json.loads(json.dumps(c.get_config()))
        assert codecs.from_config("coder", config["id"], config) == c
    with pytest.raises(UnknownCodec):
        codecs.from_config("coder", "lz4", {"id": "lz4"})


@given(arrays(np.int64, st.integers(0, 200),
              elements=st.one_of(st.integers(-100, 100), st.integers(I64_MIN, I64_MAX))),
       st.sampled_from([-1, 0, 1, 2]), st.booleans())
def test_one_combination_round_trips(x, order, shuffled):
    c = ClassicCoder(("bzip2",), (order,), (shuffled,))
    p = c.encode(x)
    assert np.array_equal(c.decode(p, len(x)), x)
    if len(x):
        assert ({3: -1}.get(p[0] & 3, p[0] & 3), (p[0] >> 2) & 3) == (order, 2)     # header: order (-1 is 3), bzip2


def test_order_minus_one_is_one_running_sum():
    # reference: numpy's cumsum; the body is the running sum of the values, once
    x = np.array([3, -1, 4, 1, -5, 9, 2, -6], np.int64)
    p = ClassicCoder(("zstd",), (-1,), (False,)).encode(x)
    assert p[0] & 3 == 3 and _body(p) == np.cumsum(x).astype("<i1").tobytes()


def test_decode_flat_reads_windows_from_one_buffer():
    rng = np.random.default_rng(4)
    c = ClassicCoder(("zstd", "bzip2"), (-1, 0), (False, True))
    windows = [np.cumsum(rng.integers(-300, 300, 500)) for _ in range(5)]
    parts = c.encode_many(windows)
    ends = np.cumsum([len(p) for p in parts])
    buf = np.frombuffer(b"".join(parts), np.uint8)
    flat = c.decode_flat(buf, ends - [len(p) for p in parts], ends, 500)
    assert np.array_equal(flat, np.concatenate(windows))
    with pytest.raises(ArchiveCorrupt):
        c.decode_flat(buf, np.array([0]), np.array([len(buf) + 1]), 500)     # outside the column
    with pytest.raises(ArchiveCorrupt):
        c.decode_flat(buf, ends - [len(p) for p in parts], ends, 1 << 30)  # a garbled length


def test_config_of_one_combination_and_an_older_config():
    c = ClassicCoder(("xz",), (-1,), (True,))
    cfg = json.loads(json.dumps(c.get_config()))
    assert cfg == {"id": "classic", "compressors": ["xz"], "orders": [-1], "shuffles": [True]}
    assert ClassicCoder.from_config(cfg) == c
    assert ClassicCoder.from_config({"id": "classic", "compressors": ["zstd"]}) == ClassicCoder(("zstd",))
    for bad in ({"orders": [3]}, {"orders": []}, {"shuffles": ["yes"]}):
        with pytest.raises(ArchiveCorrupt):
            ClassicCoder.from_config({"id": "classic", **bad})
