"""The classic fallback in blocks of consecutive windows (tsarchive.coding.fallback, issue 12): repeats
longer than a window are found, each block is one payload, every window keeps its own CRC.

Outside references: payloads are inflated by the libraries themselves (the standard library's ``lzma``
and ``bz2``, the ``zstandard`` package) and integrated with numpy's ``diff`` / ``cumsum``
(tests/test_classic_channel.py::library_samples); the bound |x - x̂| <= ε per sample is compared in
float64 and a lossless channel bit for bit (the archive's promise; common practice (no source)).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import zstandard
from hypothesis import given, settings, strategies as st

import tsarchive
from tsarchive.coding import fallback
from tsarchive.coding.classic import MAX_BLOCK, ClassicCoder, block_heads
from tsarchive.errors import ArchiveCorrupt
from tsarchive.store.binding import read_manifest

from crafting import copy, rebind, replace_column
from test_classic_channel import library_samples

W = 1024
N = 41 * W + 300          # 41 full windows and a short last one
PERIOD = 3 * W            # longer than a window: coded window by window, no compressor sees the repeat
SMALL_BLOCK = 8           # windows per block in the archives below (BLOCK_SAMPLES lowered), so there are several
PKG_ROOT = str(Path(tsarchive.__file__).resolve().parent.parent)


def long_repeats_and_noise(n: int = N) -> np.ndarray:
    """A random walk of PERIOD samples repeated exactly (a machine cycle longer than a window) and white
    noise (synthetic test data, not a reference)."""
    rng = np.random.default_rng(5)
    pattern = np.cumsum(rng.standard_normal(PERIOD)) * 3.0
    return np.stack([np.resize(pattern, n), rng.standard_normal(n) * 40.0], axis=1).astype(np.float32)


def _pack(out: Path, x: np.ndarray, block_samples: int | None, budget: str = "0.1%") -> Path:
    """Pack ``x`` with window W; ``block_samples`` lowers (or with 1 turns off) the block length."""
    out.parent.mkdir(parents=True, exist_ok=True)
    np.save(out.with_suffix(".npy"), x)
    with pytest.MonkeyPatch.context() as mp:
        if block_samples is not None:
            mp.setattr(fallback, "BLOCK_SAMPLES", block_samples)
        tsarchive.pack(out.with_suffix(".npy"), out, budget, rate=100.0, window=W, code_size=0, segment=0)
    return out


@pytest.fixture(scope="module")
def archive(tmp_path_factory) -> Path:
    return _pack(tmp_path_factory.mktemp("block") / "a.tsa", long_repeats_and_noise(), SMALL_BLOCK * W)


def _coder(a: Path, channel: int) -> dict:
    return read_manifest(a)["channels"][channel].get("coder", {})


def _payload_bytes(a: Path, channel: int) -> int:
    arc = tsarchive.open(a)
    ch = arc.channels[channel]
    return sum(len(p) for p in arc.rows(ch.name, 0, ch.n_windows, ["residual"])["residual"].to_pylist())


def _rows(a: Path, channel: int) -> dict:
    arc = tsarchive.open(a)
    ch = arc.channels[channel]
    return arc.rows(ch.name, 0, ch.n_windows, ["level", "residual"]).to_pydict()


def test_repeats_longer_than_a_window_take_blocks_and_fewer_bytes(tmp_path):
    # the default block length; per-window classic (blocks turned off) is what main packs
    x = long_repeats_and_noise()
    blocked = _pack(tmp_path / "b.tsa", x, None)
    per_window = _pack(tmp_path / "w.tsa", x, 1)
    assert _coder(blocked, 0).get("id") == "classic" and _coder(blocked, 0).get("block", 1) > 1
    assert _coder(blocked, 1).get("id") != "classic"                 # noise: never classic
    assert _coder(per_window, 0).get("block", 1) == 1
    assert _payload_bytes(blocked, 0) < _payload_bytes(per_window, 0)


def test_blocks_of_the_set_length_and_empty_cells_inside(archive):
    assert _coder(archive, 0)["block"] == SMALL_BLOCK
    cells = _rows(archive, 0)["residual"]
    # window w starts a block where w is a multiple of the block, and the short last window is its own
    starts = [w for w, p in enumerate(cells) if p]
    assert starts == list(range(0, 41, SMALL_BLOCK)) + [41]


def test_payloads_decode_with_the_libraries_alone(archive):
    ch = read_manifest(archive)["channels"][0]
    whole = tsarchive.open(archive).read(ch["name"])
    np.testing.assert_array_equal(library_samples(ch, _rows(archive, 0)), whole)


def test_every_sample_within_eps_and_random_access_is_the_full_read(archive):
    x = long_repeats_and_noise()
    a = tsarchive.open(archive)
    for j, ch in enumerate(a.channels):
        xh = a.read(ch.name)
        assert np.all(np.abs(xh.astype(np.float64) - x[:, j].astype(np.float64)) <= ch.eps), ch.name
    name = a.channels[0].name
    xh = a.read(name)
    for w0, w1 in ((0, 1), (3, 4), (7, 9), (13, 30), (39, 41), (40, 42), (41, 42), (5, 100)):
        got, windows, bad = a.decode_windows(name, w0, w1)
        assert not bad and list(windows) == list(range(w0, min(w1, 42)))
        np.testing.assert_array_equal(got, xh[w0 * W:min(w1, 42) * W])


def test_lossless_integers_bit_for_bit_in_blocks(tmp_path):
    rng = np.random.default_rng(9)
    pattern = np.cumsum(rng.integers(-50, 51, PERIOD))
    x = np.stack([np.resize(pattern, N), rng.integers(-1000, 1000, N)], axis=1).astype(np.int32)
    a = _pack(tmp_path / "l.tsa", x, SMALL_BLOCK * W, "lossless")
    assert _coder(a, 0).get("block") == SMALL_BLOCK
    arc = tsarchive.open(a)
    for j, ch in enumerate(arc.channels):
        got = arc.read(ch.name)
        assert got.dtype == x.dtype and np.array_equal(got, x[:, j])


def _damaged(archive: Path, tmp_path: Path, change) -> Path:
    """A copy whose first stored row group (channel 0's windows from 0: block 0 first) has its residual
    cells changed by ``change(cells) -> cells``, re-sealed so only the reader's own checks find it."""
    a = copy(archive, tmp_path, "d.tsa")
    done = []

    def rows(g):
        if done:
            return g
        done.append(1)
        return replace_column(g, "residual", change(g["residual"].to_pylist()))
    rebind(a, rows=rows)
    return a


def _flip(cells):
    p = bytearray(cells[0])
    p[len(p) // 2] ^= 0x40
    return [bytes(p)] + cells[1:]


def test_a_flipped_byte_in_a_block_names_its_windows(archive, tmp_path):
    a = _damaged(archive, tmp_path, _flip)
    arc = tsarchive.open(a)
    with pytest.raises(ArchiveCorrupt):
        arc.read(arc.channels[0].name)
    np.testing.assert_array_equal(arc.read(arc.channels[1].name), tsarchive.open(archive).read(arc.channels[1].name))
    rep = tsarchive.verify(a)
    assert not rep.ok
    named = {int(w) for p in rep.problems if arc.channels[0].name in p
             for w in p.rsplit("window(s) ", 1)[1].replace("..", ",").split(",") if w.strip().isdigit()}
    assert named and named <= set(range(SMALL_BLOCK)), rep.problems     # block 0's windows, no others
    got, _, _ = arc.decode_windows(arc.channels[0].name, SMALL_BLOCK, SMALL_BLOCK + 1)   # the next block reads
    np.testing.assert_array_equal(got, tsarchive.open(archive).decode_windows(arc.channels[0].name, SMALL_BLOCK,
                                                                              SMALL_BLOCK + 1)[0])


@pytest.mark.parametrize("change, why", [
    (lambda c: [b""] + c[1:], "an empty cell where the block's payload should be"),
    (lambda c: c[:1] + [b"\x00"] + c[2:], "bytes in a cell inside a block"),
    (lambda c: [c[0][:1] + zstandard.ZstdCompressor().compress(bytes(64 << 20))] + c[1:],
     "a stream inflating past the block's values (64 MiB of zeros)"),
])
def test_damage_in_a_block_is_one_error_not_a_traceback(archive, tmp_path, change, why):
    a = _damaged(archive, tmp_path, change)
    arc = tsarchive.open(a)
    with pytest.raises(ArchiveCorrupt, match="damaged"):
        arc.decode_windows(arc.channels[0].name, 2, 3)
    assert not tsarchive.verify(a).ok, why


@pytest.mark.parametrize("block", [0, MAX_BLOCK + 1, 1 << 40, "8", 8.0, True])
def test_a_declared_block_outside_its_range_is_refused(block):
    config = {**ClassicCoder(("zstd",), (0,), (False,), 8).get_config(), "block": block}
    with pytest.raises(ArchiveCorrupt):
        ClassicCoder.from_config(config)


def test_a_config_without_block_is_one_window_a_payload():
    # archives written before blocks: no "block" key
    c = ClassicCoder.from_config({"id": "classic", "compressors": ["zstd"], "orders": [0], "shuffles": [False]})
    assert c.block == 1 and "block" not in c.get_config()
    assert ClassicCoder.from_config(ClassicCoder(("xz",), (1,), (True,), 16).get_config()).block == 16


@settings(max_examples=40, deadline=None)
@given(block=st.integers(1, 9), first_block=st.integers(0, 3), k=st.integers(0, 30), n=st.integers(1, 40),
       tail=st.integers(0, 39), seed=st.integers(0, 2 ** 32 - 1), name=st.sampled_from(["zstd", "xz", "bzip2"]),
       order=st.sampled_from([-1, 0, 1]), shuffle=st.booleans())
def test_blocks_round_trip_exactly(block, first_block, k, n, tail, seed, name, order, shuffle):
    # windows first..first+k-1 of n values each (first a multiple of the block), then maybe a short last
    # window: encode_blocks -> one binary column (cells concatenated, offsets) -> decode_blocks, exact
    rng = np.random.default_rng(seed)
    coder = ClassicCoder((name,), (order,), (shuffle,), block)
    first = first_block * block
    wins = rng.integers(-2 ** 40, 2 ** 40, (k, n)) >> rng.integers(0, 40)
    cells = coder.encode_blocks(wins, block_heads(np.arange(first, first + k), block, True)) if k else []
    got = _through_column(coder, cells, np.arange(first, first + k), n, True)
    assert np.array_equal(got, wins.reshape(-1))
    if tail and tail < n:
        last = rng.integers(-9, 9, (1, tail))
        cell = coder.encode_blocks(last, block_heads([first + k], block, False))
        assert np.array_equal(_through_column(coder, cell, np.array([first + k]), tail, False), last[0])


@settings(max_examples=60, deadline=None)
@given(block=st.integers(1, 6), k=st.integers(1, 20), n=st.integers(1, 30), seed=st.integers(0, 2 ** 32 - 1))
def test_a_block_stream_is_the_first_differences_of_its_samples(block, k, n, seed):
    # what a block codes, by its definition: the block's samples flattened, first differences (numpy diff)
    # with the block's first level before its first sample; and back exactly to each window's residuals
    rng = np.random.default_rng(seed)
    q = rng.integers(-2 ** 62, 2 ** 62, (k, n)) >> rng.integers(0, 62)
    level = rng.integers(-2 ** 62, 2 ** 62, k) >> rng.integers(0, 62)
    heads = np.arange(k) % block == 0
    res = fallback.prev_residuals(q, level)
    values = fallback.joined(q, res, heads)
    for a in range(0, k, block):
        with np.errstate(over="ignore"):
            want = np.diff(q[a:a + block].reshape(-1), prepend=level[a])
        assert np.array_equal(values[a:a + block].reshape(-1), want)
    assert np.array_equal(fallback.unjoined(values, level, heads), res)


def _through_column(coder, cells, windows, n, full):
    buf = np.frombuffer(b"".join(cells), np.uint8)
    offs = np.concatenate([[0], np.cumsum([len(c) for c in cells])]).astype(np.int64)
    return coder.decode_blocks(buf, offs[:-1], offs[1:], n, block_heads(windows, coder.block, full))


_CHILD = r"""
import sys
sys.path.insert(0, {root!r})
import numpy as np, tsarchive
from tsarchive.coding import fallback
fallback.BLOCK_SAMPLES = {block}
tsarchive.pack(sys.argv[1], sys.argv[2], "0.1%", rate=100.0, window={W}, code_size=0, segment=0)
"""


def test_same_bytes_with_one_and_two_threads(tmp_path):
    src = tmp_path / "r.npy"
    np.save(src, long_repeats_and_noise())
    got = {}
    for n in (1, 2):
        env = dict(os.environ, TSARCHIVE_THREADS=str(n), OMP_NUM_THREADS=str(n), NUMBA_NUM_THREADS=str(n))
        out = tmp_path / f"t{n}.tsa"
        subprocess.run([sys.executable, "-c", _CHILD.format(root=PKG_ROOT, block=SMALL_BLOCK * W, W=W), str(src),
                        str(out)], env=env, check=True, capture_output=True, timeout=600)
        got[n] = {p.name: p.read_bytes() for p in sorted(out.iterdir())}
    assert _coder(tmp_path / "t1.tsa", 0).get("block") == SMALL_BLOCK
    assert sorted(got[1]) == sorted(got[2])
    for name in got[1]:
        assert got[1][name] == got[2][name], name
