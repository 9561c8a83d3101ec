"""A classic channel's grid phase chosen by the classic coder's own bytes (tsarchive.encoder.classic_phase,
issue 12): where the compressor codes the channel smaller at another of the grid's phases than at the one
the first differences' cost chose, the channel takes it; every sample stays within budget.

Outside references: the samples are quantized with numpy (``rint((x - offset) / step)``, the grid of
DEVELOPERS.md), the block's stream is numpy's ``diff`` from the window's level (the rounded mean, half
away from zero: DEVELOPERS.md, levels), and the payload is compared byte for byte with the ``zstandard``
package's output on those values (zstd's frame format, RFC 8878, level 19 as the classic coder states);
the bound |x - x̂| <= ε per sample in float64 (the archive's promise; common practice (no source)).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import zstandard

import tsarchive
from tsarchive.ingest import read_recording
from tsarchive.options import PackOptions
from tsarchive.pipeline import _grids
from tsarchive.store.binding import read_manifest

from test_classic_channel import _rows, library_samples

W = 1024
N = 40_000               # 39 full windows and a short one: one block holds them all
BUDGET = "2%"


def walk_with_flips(n: int = N) -> np.ndarray:
    """A random walk of 700 whole numbers repeated exactly, 5 % of the samples one off (a logger's last
    digit), and white noise (synthetic test data, not a reference; seed 20 of a search for a walk whose
    compressor and first-difference phases differ)."""
    rng = np.random.default_rng(20)
    walk = np.cumsum(rng.integers(-5, 6, 700)).astype(np.float64)
    x = np.resize(walk, n) + rng.integers(-1, 2, n) * (rng.random(n) < 0.05)
    return np.stack([x, rng.standard_normal(n) * 40.0], axis=1)


@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    d = tmp_path_factory.mktemp("phase")
    np.save(d / "s.npy", walk_with_flips())
    tsarchive.pack(d / "s.npy", d / "a.tsa", BUDGET, rate=10.0, window=W, code_size=0, segment=0)
    first_diff = _grids(read_recording(d / "s.npy", rate=10.0), PackOptions.parse(BUDGET).budget)[0]
    return d / "a.tsa", read_manifest(d / "a.tsa"), first_diff


def _levels(q: np.ndarray) -> np.ndarray:
    m = q.reshape(-1, W).mean(axis=1)
    return (np.sign(m) * np.floor(np.abs(m) + 0.5)).astype(np.int64)     # rounded mean, half away from zero


def _stream(x: np.ndarray, offset: float, step: float, n: int) -> np.ndarray:
    """The first ``n`` samples on the grid at ``offset`` as one block codes them: the first against window
    0's level, then first differences."""
    q = np.rint((x[:n] - offset) / step).astype(np.int64)
    return np.concatenate([[q[0] - _levels(q[:W])[0]], np.diff(q)])


def _zstd_bytes(v: np.ndarray) -> bytes:
    width = next(b for b in (1, 2, 4, 8) if -(2 ** (8 * b - 1)) <= v.min() and v.max() < 2 ** (8 * b - 1))
    return zstandard.ZstdCompressor(level=19).compress(v.astype(f"<i{width}").tobytes())


def test_the_classic_channel_takes_the_phase_its_compressor_codes_smallest(packed):
    archive, m, first_diff = packed
    ch = m["channels"][0]
    coder, grid = ch["coder"], ch["grid"]
    assert (coder["id"], coder["compressors"], coder["orders"], coder["shuffles"]) == \
        ("classic", ["zstd"], [0], [False])
    step = grid.get("step", 2 * grid["eps"])
    before = first_diff[0].offset
    assert math.isclose(step, first_diff[0].step)
    # the offset is a multiple of the step (phase 0), the first differences' cost had chosen another
    assert grid["offset"] == round(grid["offset"] / step) * step
    assert before != round(before / step) * step
    x = walk_with_flips()[:, 0]
    full = N // W * W                     # what the packer measured: the full windows, as one block
    at = {off: len(_zstd_bytes(_stream(x, off, step, full))) for off in (grid["offset"], before)}
    assert at[grid["offset"]] * 128 < at[before] * 127, at   # at least the packer's margin smaller (failed before)
    rows = _rows(archive, 0)
    payloads = [p for p in rows["residual"] if p]
    assert len(payloads) == 1 and payloads[0][0] == 0           # one block: zstd, order 0, 1-byte values, unshuffled
    assert payloads[0][1:] == _zstd_bytes(_stream(x, grid["offset"], step, N))   # byte for byte the library's
    np.testing.assert_array_equal(library_samples(ch, rows),
                                  (grid["offset"] + np.rint((x - grid["offset"]) / step) * step).astype(np.float32))


def test_every_sample_within_budget_and_other_channels_keep_their_phase(packed):
    archive, m, first_diff = packed
    x = walk_with_flips()
    a = tsarchive.open(archive)
    for j, ch in enumerate(a.channels):
        assert np.all(np.abs(a.read(ch.name).astype(np.float64) - x[:, j]) <= ch.eps), ch.name
    noise = m["channels"][1]
    assert noise.get("coder", {}).get("id") != "classic"
    assert noise["grid"]["offset"] == first_diff[1].offset


def test_packing_again_gives_the_same_bytes(packed, tmp_path):
    archive, _, _ = packed
    np.save(tmp_path / "s.npy", walk_with_flips())
    tsarchive.pack(tmp_path / "s.npy", tmp_path / "a.tsa", BUDGET, rate=10.0, window=W, code_size=0, segment=0)
    for f in sorted(p.name for p in archive.iterdir()):
        assert (tmp_path / "a.tsa" / f).read_bytes() == (archive / f).read_bytes(), f


def lattice_walk(n: int = N) -> np.ndarray:
    """A random walk of 700 steps on multiples of 5 (an integer logger counting in fives) repeated
    exactly, 5 % of the samples a few counts off (synthetic test data; seed 2 of a search for a walk whose
    compressor phase differs from the first differences' one)."""
    rng = np.random.default_rng(2)
    walk = np.cumsum(rng.integers(-50, 51, 700))
    return ((np.resize(walk, n) + rng.integers(-3, 4, n) * (rng.random(n) < 0.05)) * 5 + 1000).astype(np.int32)


def test_an_integer_channel_on_multiples_moves_along_them_only(tmp_path):
    # the phases of a channel logged on multiples of 5 shift by multiples of 5 (gridphase.candidates' mult),
    # so every decoded value is still a logged value; before, the classic channel's grid moved by a quarter
    # of its step whatever the multiple (origin 1316: every value 1 off the multiples of 5)
    x = lattice_walk()
    np.save(tmp_path / "s.npy", x[:, None])
    tsarchive.pack(tmp_path / "s.npy", tmp_path / "a.tsa", BUDGET, rate=10.0, window=W, code_size=0, segment=0)
    ch = read_manifest(tmp_path / "a.tsa")["channels"][0]
    first_diff = _grids(read_recording(tmp_path / "s.npy", rate=10.0), PackOptions.parse(BUDGET).budget)[0][0]
    assert ch["coder"]["id"] == "classic" and ch["grid"]["origin"] != first_diff.origin     # it moved
    a = tsarchive.open(tmp_path / "a.tsa")
    xh = a.read(a.channels[0].name)
    assert xh.dtype == np.int32
    diff = [int(v) - int(u) for u, v in zip(x.tolist(), xh.tolist())]       # exact, in Python integers
    assert max(map(abs, diff)) <= a.channels[0].eps
    assert all((int(v) - 1000) % 5 == 0 for v in xh.tolist())               # on the logged lattice
