"""A whole channel in the classic coder (tsarchive.coding.fallback, issue 12): chosen where difference +
zstd/xz/bzip2 is smaller than the entropy coders, never on noise.

Outside references: the compressed bodies are decompressed and sizes computed with the libraries
themselves (the standard library's ``lzma`` and ``bz2``, the ``zstandard`` package), differences and
running sums with numpy's ``diff`` / ``cumsum``; the previous-sample predictor as its definition
(``r[0] = q[0] - level``, then first differences: DEVELOPERS.md, predictors); samples from the grid as the
manifest's ``offset + q * step`` in float64, then float32; the bound |x - x̂| <= ε per sample, in float64
(the archive's promise; common practice (no source)).
"""

from __future__ import annotations

import bz2
import json
import lzma
from pathlib import Path

import numpy as np
import pytest
import zstandard

import tsarchive
from tsarchive.coding import fallback
from tsarchive.store.binding import read_manifest

N = 60_000
PERIOD = 700
BUDGET = "0.1%"


def repetitive_and_noise(n: int = N) -> np.ndarray:
    """A pattern repeated exactly (a machine cycle: the compressors' long matches find it, a short
    predictor cannot) and white noise (synthetic test data, not a reference)."""
    rng = np.random.default_rng(11)
    pattern = np.cumsum(rng.standard_normal(PERIOD)) * 3.0
    return np.stack([np.resize(pattern, n), rng.standard_normal(n) * 40.0], axis=1).astype(np.float32)


def _pack(out: Path, x: np.ndarray, **kw) -> Path:
    out.parent.mkdir(parents=True, exist_ok=True)
    np.save(out.with_suffix(".npy"), x)
    tsarchive.pack(out.with_suffix(".npy"), out, BUDGET, rate=100.0, code_size=0, segment=0, **kw)
    return out


@pytest.fixture(scope="module")
def archive(tmp_path_factory) -> Path:
    return _pack(tmp_path_factory.mktemp("classic") / "a.tsa", repetitive_and_noise(), window=4096)


def _manifest(a: Path) -> dict:
    return read_manifest(a)


def _rows(a: Path, channel: int) -> dict:
    """Levels and payloads of channel number ``channel`` in window order, as stored (the store moves the
    bytes; nothing of the archive decodes them here)."""
    arc = tsarchive.open(a)
    ch = arc.channels[channel]
    t = arc.rows(ch.name, 0, ch.n_windows, ["level", "residual"]).to_pydict()
    return {c: t[c] for c in ("level", "residual")}


def _library_decompress(payload: bytes) -> tuple[int, bytes, bool, int]:
    """(order, raw bytes, shuffled, width) of a classic payload, its body inflated by the library its header names."""
    head = payload[0]
    kind, body = (head >> 2) & 3, payload[1:]
    raw = zstandard.ZstdDecompressor().decompress(body) if kind == 0 else \
        lzma.decompress(body) if kind == 1 else bz2.decompress(body)
    return (-1 if head & 3 == 3 else head & 3), raw, bool((head >> 4) & 1), 1 << (head >> 5)


def test_repetitive_channel_is_classic_noise_is_not_and_all_within_budget(archive):
    m = _manifest(archive)
    ch0, ch1 = m["channels"]
    assert ch0["coder"]["id"] == "classic" and ch0["tables"] == []
    assert ch0["summary"]["modes"] == {"prev": N // 4096 + 1}        # every window: the previous sample
    assert ch1.get("coder", {}).get("id") != "classic"
    x = repetitive_and_noise()
    a = tsarchive.open(archive)
    for j, ch in enumerate(a.channels):
        xh = a.read(ch.name)
        assert np.all(np.abs(xh.astype(np.float64) - x[:, j].astype(np.float64)) <= ch.eps), ch.name
        for w in (0, 5, ch.n_windows - 1):                           # a window alone decodes without the others
            got, _, bad = a.decode_windows(ch.name, w, w + 1)
            assert not bad
            np.testing.assert_array_equal(got, xh[w * 4096:(w + 1) * 4096])


def library_samples(ch: dict, rows: dict) -> np.ndarray:
    """A classic channel's samples from its stored rows by the libraries alone: each non-empty payload
    starts a block (one window when the coder has no ``block``; an empty cell continues the block), its
    body inflated by the library its header names -> numpy unshuffle / integrate -> first differences of
    the block's samples (the first against the block's first level: the previous-sample predictor's
    inverse over the block, DEVELOPERS.md) -> running sum from that level -> offset + q * step."""
    grid, parts = ch["grid"], []
    payloads, levels = rows["residual"], rows["level"]
    starts = [i for i, p in enumerate(payloads) if p] + [len(payloads)]
    for a, b in zip(starts, starts[1:]):
        order, raw, shuffled, width = _library_decompress(payloads[a])
        n = len(raw) // width
        if shuffled:
            raw = np.frombuffer(raw, np.uint8).reshape(width, n).T.tobytes()
        v = np.frombuffer(raw, f"<i{width}").astype(np.int64)
        r = np.diff(v, prepend=0) if order == -1 else v
        for _ in range(max(order, 0)):
            r = np.cumsum(r)
        q = levels[a] + np.cumsum(r)           # a block is one stream of first differences from its first level
        step = grid.get("step", 2 * grid["eps"])   # format 6 leaves out a step of exactly 2 eps (DEVELOPERS.md)
        parts.append((grid["offset"] + q.astype(np.float64) * step).astype(np.float32))
    return np.concatenate(parts)


def test_payloads_decode_with_the_libraries_alone(archive):
    # each block (or window) independently: bit for bit what the archive reads
    ch = _manifest(archive)["channels"][0]
    whole = tsarchive.open(archive).read(ch["name"])
    np.testing.assert_array_equal(library_samples(ch, _rows(archive, 0)), whole)


def _library_sizes(res: np.ndarray) -> dict[tuple[str, int, bool], int]:
    """Bytes of every combination on windows ``res`` (k, W), one header byte a window, by the libraries."""
    out = {}
    for order in (-1, 0, 1):
        for shuffled in (False, True):
            for name in ("zstd", "bzip2", "xz"):
                total = 0
                for w in res:
                    v = np.cumsum(w) if order == -1 else (np.diff(w, prepend=0) if order == 1 else w)
                    width = next(b for b in (1, 2, 4, 8) if -(2 ** (8 * b - 1)) <= v.min() and v.max() < 2 ** (8 * b - 1))
                    raw = v.astype(f"<i{width}").tobytes()
                    if shuffled and width > 1:
                        raw = np.frombuffer(raw, np.uint8).reshape(-1, width).T.tobytes()
                    total += 1 + len(zstandard.ZstdCompressor(level=19).compress(raw) if name == "zstd" else
                                     lzma.compress(raw, preset=9 | lzma.PRESET_EXTREME) if name == "xz" else
                                     bz2.compress(raw, 9))
                out[(name, order, shuffled)] = total
    return out


def _windows(x: np.ndarray, W: int = 4096) -> tuple[np.ndarray, np.ndarray]:
    q = np.rint(x[: len(x) // W * W] / 0.5).astype(np.int64).reshape(-1, W)
    level = np.floor(q.mean(axis=1) + 0.5).astype(np.int64)
    return q, level


def test_the_choice_is_the_libraries_smallest_and_strictly_below_the_bytes_to_beat():
    q, level = _windows(repetitive_and_noise(40_000)[:, 0].astype(np.float64))
    res = np.concatenate([q[:, :1] - level[:, None], np.diff(q, axis=1)], axis=1)   # previous-sample residuals
    assert np.array_equal(res, fallback.prev_residuals(q, level))
    sizes = _library_sizes(res)
    coder = fallback.classic_choice(q, level, len(q), 1 << 40)
    assert len(coder.compressors) == len(coder.orders) == len(coder.shuffles) == 1
    chosen = (coder.compressors[0], coder.orders[0], coder.shuffles[0])
    fast = {k: v for k, v in sizes.items() if k[0] != "xz"}
    assert sizes[chosen] <= min(fast.values())                        # zstd/bzip2 all tried; xz only where it is smaller
    # the channel's estimate: payload bytes (every window sampled here) + the config in compact JSON
    estimate = sizes[chosen] + len(json.dumps(coder.get_config(), separators=(",", ":")))
    assert fallback.classic_choice(q, level, len(q), estimate) is None     # a tie keeps the other coder
    assert fallback.classic_choice(q, level, len(q), estimate + 1) == coder


def test_noise_is_never_classic():
    # white noise: every combination of the libraries is above the entropy the range coder reaches, so the
    # classic coder loses against the bytes the archive's range-coded noise channel takes
    rng = np.random.default_rng(2)
    q, level = _windows(rng.standard_normal(8 * 4096) * 40.0)
    res = fallback.prev_residuals(q, level)
    best = min(_library_sizes(res).values())
    sigma = 40.0 / 0.5
    entropy_bytes = q.size * (0.5 * np.log2(2 * np.pi * np.e * sigma ** 2)) / 8    # Gaussian differential entropy
    assert best > entropy_bytes * 1.02
    assert fallback.classic_choice(q, level, len(q), int(entropy_bytes * 1.02)) is None


def test_repacking_gives_the_same_bytes(archive, tmp_path):
    again = _pack(tmp_path / "a.tsa", repetitive_and_noise(), window=4096)    # same source name
    names = sorted(p.name for p in archive.iterdir())
    assert names == sorted(p.name for p in again.iterdir()) and "windows.parquet" in names
    for name in names:
        assert (again / name).read_bytes() == (archive / name).read_bytes(), name


def test_the_window_choice_sees_the_repeats(tmp_path):
    # without --window the packer estimates each window length; the repeats of the classic channel pay
    # more in longer windows, so the longest is taken (the range coder alone keeps the shortest here)
    x = repetitive_and_noise(1 << 16)[:, :1]
    m = _manifest(_pack(tmp_path / "c.tsa", x))
    assert m["channels"][0]["coder"]["id"] == "classic" and m["window"] == 8192


def test_xz_is_tried_with_every_order_and_shuffle_and_the_smallest_wins(monkeypatch):
    # appliance_acsf1 at 0.01 %: unshuffled xz took 37081 B where the combination zstd liked (shuffled) took
    # 38361 with xz; only that one xz combination was tried before. The sizes are the payloads' own lengths,
    # each made by the stdlib lzma / bz2 and zstandard behind the coder.
    from tsarchive.coding import classic
    rng = np.random.default_rng(3)
    level = np.tile(np.repeat(rng.integers(-300, 300, 24), 37), 8)        # a repeating staircase of levels
    res = np.diff(np.concatenate([[0], level + rng.integers(-1, 2, level.size)]))[None, :].astype(np.int64)
    tried = []
    encode = classic.ClassicCoder.encode_many

    def spy(self, windows):
        tried.append((self.compressors[0], self.orders[0], self.shuffles[0]))
        return encode(self, windows)

    monkeypatch.setattr(classic.ClassicCoder, "encode_many", spy)
    coder, payloads = fallback._setting(res, lambda size: True)
    xz = {(o, f) for c, o, f in tried if c == "xz"}
    assert xz == {(o, f) for o in fallback.ORDERS for f in (False, True)}      # failed before: one combination
    sizes = {k: len(encode(classic.ClassicCoder((k[0],), (k[1],), (k[2],)), res)[0]) for k in set(tried)}
    assert len(payloads[0]) == min(sizes.values())
    assert (coder.compressors[0], coder.orders[0], coder.shuffles[0]) in {k for k, v in sizes.items()
                                                                          if v == min(sizes.values())}
