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
import pyarrow as pa
import pytest
import zstandard
from hypothesis import given, settings, strategies as st

import tsarchive
from tsarchive.coding import fallback
from tsarchive.coding.classic import MAX_BLOCK, ClassicCoder
from tsarchive.errors import ArchiveCorrupt
from tsarchive.store.binding import read_manifest

from crafting import copy, rebind, replace_column
from test_classic_channel import _library_decompress, library_samples

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
    assert _coder(archive, 0)["block"] == SMALL_BLOCK and _coder(archive, 0)["tail"] == 1
    cells = _rows(archive, 0)["residual"]
    # window w starts a block where w is a multiple of the block; the short last window (41) ends block 40
    starts = [w for w, p in enumerate(cells) if p]
    assert starts == list(range(0, 41, SMALL_BLOCK))


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


TAIL_N = 10 * W + W // 2     # 10.5 windows: the short last window (10) falls in block 0 of the default length


@pytest.fixture(scope="module")
def tail_archive(tmp_path_factory) -> Path:
    return _pack(tmp_path_factory.mktemp("tail") / "t.tsa", long_repeats_and_noise(TAIL_N), None)


@pytest.mark.parametrize("which, window, change, why", [
    ("archive", 2, lambda c: [b""] + c[1:], "an empty cell where the block's payload should be"),
    ("archive", 2, lambda c: c[:1] + [b"\x00"] + c[2:], "bytes in a cell inside a block"),
    ("archive", 2, lambda c: [c[0][:1] + zstandard.ZstdCompressor().compress(bytes(64 << 20))] + c[1:],
     "a stream inflating past the block's values (64 MiB of zeros)"),
    ("tail_archive", 10, lambda c: [b""] + c[1:], "the head cell of a block with the short window emptied"),
    ("tail_archive", 10, lambda c: c[:10] + [b"\x00"] + c[11:], "bytes in the joined short window's cell"),
    ("tail_archive", 10, lambda c: c[:10] + [c[0]] + c[11:], "a whole payload in the joined short window's cell"),
])
def test_damage_in_a_block_is_one_error_not_a_traceback(request, tmp_path, which, window, change, why):
    a = _damaged(request.getfixturevalue(which), tmp_path, change)
    arc = tsarchive.open(a)
    with pytest.raises(ArchiveCorrupt, match="damaged"):
        arc.decode_windows(arc.channels[0].name, window, window + 1)
    assert not tsarchive.verify(a).ok, why


def test_the_short_last_window_joins_its_block_and_decodes_with_the_libraries_alone(tail_archive):
    rows = _rows(tail_archive, 0)
    cells = rows["residual"]
    assert _coder(tail_archive, 0)["block"] > 10
    assert len(cells) == 11 and cells[0] and cells[1:] == [b""] * 10     # the short window's cell is empty
    assert _coder(tail_archive, 0)["tail"] == 1
    _, raw, _, width = _library_decompress(cells[0])
    assert len(raw) // width == TAIL_N                                   # one stream: 10 windows and the tail
    ch = read_manifest(tail_archive)["channels"][0]
    np.testing.assert_array_equal(library_samples(ch, rows), tsarchive.open(tail_archive).read(ch["name"]))


@pytest.mark.parametrize("n, starts", [(16 * W, [0, 8]), (16 * W + 300, [0, 8, 16])])
def test_without_a_short_window_to_join_nothing_changes(tmp_path, n, starts):
    # no short window, or one that starts a block itself (window 16 of blocks of 8): both rules code the
    # channel alike, so the config says nothing new ("tail" absent: the bytes archives had before it)
    a = _pack(tmp_path / "n.tsa", long_repeats_and_noise(n), SMALL_BLOCK * W)
    assert _coder(a, 0)["block"] == SMALL_BLOCK and "tail" not in _coder(a, 0)
    assert [w for w, p in enumerate(_rows(a, 0)["residual"]) if p] == starts


def test_the_joined_tail_takes_fewer_bytes_than_the_tail_alone(tail_archive):
    # the channel's own coder on both: the block's first differences (numpy diff) with the short window,
    # and without it plus the short window's own (as the rule before "tail" codes it)
    # (the samples back on the grid: (x - offset) / step, exact to far below half a step in float64)
    level = _rows(tail_archive, 0)["level"]
    ch = read_manifest(tail_archive)["channels"][0]
    step = ch["grid"].get("step", 2 * ch["grid"]["eps"])
    x = tsarchive.open(tail_archive).read(ch["name"]).astype(np.float64)
    q = np.rint((x - ch["grid"]["offset"]) / step).astype(np.int64)
    coder = ClassicCoder.from_config(_coder(tail_archive, 0))
    joined = len(coder.encode(np.diff(q, prepend=level[0])))
    alone = len(coder.encode(np.diff(q[:10 * W], prepend=level[0]))) + \
        len(coder.encode(np.diff(q[10 * W:], prepend=level[10])))
    assert joined < alone, (joined, alone)


def test_random_access_to_the_joined_tail_is_the_full_read(tail_archive):
    a = tsarchive.open(tail_archive)
    name = a.channels[0].name
    whole = a.read(name)
    for w0, w1 in ((10, 11), (9, 10), (3, 4), (9, 11), (10, 12)):
        got, windows, bad = a.decode_windows(name, w0, w1)
        assert not bad and list(windows) == list(range(w0, min(w1, 11)))
        np.testing.assert_array_equal(got, whole[w0 * W:min(w1, 11) * W])
    rate = 100.0                                                          # the rate _pack gives
    np.testing.assert_array_equal(a.read(name, 10 * W / rate), whole[10 * W:])
    np.testing.assert_array_equal(a.read(name, 9 * W / rate, 9.5 * W / rate), whole[9 * W:9 * W + W // 2])


def test_every_sample_of_the_joined_tail_within_eps(tail_archive):
    x = long_repeats_and_noise(TAIL_N)
    a = tsarchive.open(tail_archive)
    for j, ch in enumerate(a.channels):
        assert np.all(np.abs(a.read(ch.name).astype(np.float64) - x[:, j].astype(np.float64)) <= ch.eps), ch.name


_BLOCK8 = {"id": "classic", "compressors": ["zstd"], "orders": [0], "shuffles": [False], "block": 8}


@pytest.mark.parametrize("key", ["tails", "next", "window"])
def test_an_unknown_config_key_is_refused_not_ignored(key):
    # a key this version does not know may carry a rule it does not follow (as "tail" would for a reader
    # before it): refused with one line saying to upgrade, never decoded under the wrong rule
    with pytest.raises(ArchiveCorrupt, match="upgrade"):
        ClassicCoder.from_config({**_BLOCK8, key: 1})


@pytest.mark.parametrize("config", [{"tail": 0}, {"tail": 2}, {"tail": True}, {"tail": "1"}, {"tail": 1, "block": 1}])
def test_a_tail_other_than_1_with_blocks_is_refused(config):
    with pytest.raises(ArchiveCorrupt):
        ClassicCoder.from_config({**_BLOCK8, **config})
    assert ClassicCoder.from_config({**_BLOCK8, "tail": 1}).tail and not ClassicCoder.from_config(_BLOCK8).tail


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
def test_blocks_round_trip_exactly_under_the_rule_before_tail(block, first_block, k, n, tail, seed, name, order,
                                                              shuffle):
    # windows first..first+k-1 of n values each (first a multiple of the block), then maybe a short last
    # window, a block of its own (no "tail": archives written before it): encode_blocks -> one binary
    # column (cells concatenated, offsets) -> decode_blocks, exact
    rng = np.random.default_rng(seed)
    coder = ClassicCoder((name,), (order,), (shuffle,), block)
    first = first_block * block
    wins = rng.integers(-2 ** 40, 2 ** 40, (k, n)) >> rng.integers(0, 40)
    lens = np.full(k, n)
    if tail and tail < n:
        wins = np.concatenate([wins.reshape(-1), rng.integers(-9, 9, tail)])
        lens = np.append(lens, tail)
    windows = np.arange(first, first + len(lens))
    heads = coder.block_heads(windows, lens != n)
    assert heads[-1] if tail and tail < n else True                  # the short window starts its own block
    cells = coder.encode_blocks(wins.reshape(-1), lens, heads) if len(lens) else []
    assert np.array_equal(_through_column(coder, cells, windows, lens, lens != n), wins.reshape(-1))


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
    values = fallback.joined(q.reshape(-1), level, n, heads).reshape(k, n)
    for a in range(0, k, block):
        with np.errstate(over="ignore"):
            want = np.diff(q[a:a + block].reshape(-1), prepend=level[a])
        assert np.array_equal(values[a:a + block].reshape(-1), want)
    assert np.array_equal(fallback.unjoined(values.reshape(-1), level, n, heads), res.reshape(-1))


@settings(max_examples=60, deadline=None)
@given(block=st.integers(2, 9), k=st.integers(1, 30), n=st.integers(2, 40), short=st.integers(0, 1000),
       seed=st.integers(0, 2 ** 32 - 1), name=st.sampled_from(["zstd", "xz", "bzip2"]),
       order=st.sampled_from([-1, 0, 1]), shuffle=st.booleans())
def test_a_block_with_its_short_last_window_round_trips_exactly(block, k, n, short, seed, name, order, shuffle):
    # k windows of n samples, then a short last window in the block its number falls in ("tail"): the
    # streams are each block's first differences (numpy diff from the block's first level), one cell a
    # block through one binary column and back, then each window's previous-sample residuals by their
    # definition (r[0] = q[0] - level, then numpy diff)
    rng = np.random.default_rng(seed)
    lens = np.append(np.full(k, n), 1 + short % (n - 1))
    offs = np.concatenate([[0], np.cumsum(lens)])
    q = rng.integers(-2 ** 40, 2 ** 40, int(offs[-1])) >> rng.integers(0, 40)
    level = rng.integers(-2 ** 40, 2 ** 40, k + 1) >> rng.integers(0, 40)
    coder = ClassicCoder((name,), (order,), (shuffle,), block, True)
    heads = coder.block_heads(np.arange(k + 1), lens != n)
    assert np.array_equal(heads, np.arange(k + 1) % block == 0)
    values = fallback.joined(q, level, lens, heads)
    for a in range(0, k + 1, block):
        b = min(a + block, k + 1)
        assert np.array_equal(values[offs[a]:offs[b]], np.diff(q[offs[a]:offs[b]], prepend=level[a]))
    cells = coder.encode_blocks(values, lens, heads)
    assert [bool(c) for c in cells] == heads.tolist()                # the short window's cell: only if it starts
    assert np.array_equal(_through_column(coder, cells, np.arange(k + 1), lens, lens != n), values)
    want = np.concatenate([np.diff(q[a:b], prepend=lv) for a, b, lv in zip(offs[:-1], offs[1:], level)])
    assert np.array_equal(fallback.unjoined(values, level, lens, heads), want)


@settings(max_examples=25, deadline=None)
@given(block=st.integers(2, 6), k=st.integers(1, 20), short=st.integers(1, 31), seed=st.integers(0, 2 ** 32 - 1))
def test_windows_with_a_joined_tail_round_trip_through_the_window_codec(block, k, short, seed):
    # integer samples on the exact grid (lossless: bit for bit), coded as the packer's calls code them
    # (the last block's full windows with the short window), decoded whole and from the last block alone
    from tsarchive.channelcodec import ChannelCodec
    from tsarchive.encoder import coder_tables, plan_channel
    from tsarchive.pipeline import _calls
    from tsarchive.quantize import make_grid
    from tsarchive.windowcodec import decode_windows, encode_windows
    n_w = 32
    rng = np.random.default_rng(seed)
    x = np.cumsum(rng.integers(-3, 4, k * n_w + short)).astype(np.int32)
    grid = make_grid(0.0, 0, x.dtype)
    coder = ClassicCoder(("zstd",), (0,), (False,), block, True)
    plan = plan_channel(x[:k * n_w].reshape(k, n_w), None, k + 1, grid, n_w, None, 1)
    codec = ChannelCodec.for_tables("c", n_w, grid, 1, plan.lpc, coder_tables(coder, plan.tables), residual_coder=coder)
    parts = []
    for a, b, L, tail in _calls(len(x), n_w, 0, k + 1, block, block):
        lo, hi = a * n_w, a * n_w + (b - a) * L
        parts.append(encode_windows(x[lo:hi].reshape(b - a, L), a, codec, tail=x[hi:hi + tail] if tail else None)[0])
    rows = pa.concat_tables(parts)
    lens = np.append(np.full(k, n_w), short)
    assert rows["window"].to_pylist() == list(range(k + 1)) and (rows["residual"][k].as_py() == b"") == bool(k % block)
    back, bad = decode_windows(rows, lens, {}, codec)
    assert not bad and np.array_equal(back, x)
    last = k // block * block
    back, bad = decode_windows(rows.slice(last), lens[last:], {}, codec)
    assert not bad and np.array_equal(back, x[last * n_w:])


def _through_column(coder, cells, windows, lens, short):
    buf = np.frombuffer(b"".join(cells), np.uint8)
    offs = np.concatenate([[0], np.cumsum([len(c) for c in cells])]).astype(np.int64)
    return coder.decode_blocks(buf, offs[:-1], offs[1:], lens, coder.block_heads(windows, short))


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
