"""The residual study's pieces (tsarchive/bench/residual_study.py) and the real sets it adds.

References: the archive's own stored payload bytes and reader (the streams
the study extracts must re-encode to exactly those bytes and decode to what
``Archive.read`` returns), the calendar (8760 hours in 2015), the classic
yearly Wolfer sunspot numbers (1700-1704: 5, 11, 16, 23, 36), the line count
of obspy's KARC file.
"""

from __future__ import annotations

import gzip

import numpy as np
import pytest

import tsarchive
from tsarchive.bench import realdata, residual_study
from tsarchive.bench.archive_bytes import breakdown
from tsarchive.coding.adaptive import AdaptiveCoder


@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("study")
    rng = np.random.default_rng(0)
    t = np.arange(20000)
    x = np.column_stack([np.sin(2 * np.pi * t / 250) * 100 + rng.normal(0, 1, t.size),
                         np.cumsum(rng.normal(0, 1, t.size))]).astype(np.float32)
    src = tmp / "two.npy"
    np.save(src, x)
    arc = tmp / "two.tsarchive"
    tsarchive.pack(src, arc, budget="0.1%", rate=100.0, train_seconds=0.1)
    return arc


def test_streams_are_the_archives_own(packed):
    streams = residual_study.channel_streams(packed)
    arc = tsarchive.open(packed)
    assert sum(s.payload_bytes for s in streams.values()) == breakdown(packed).payload
    for meta in arc.channels:
        s = streams[meta.name]
        q = np.concatenate(s.q)
        assert np.array_equal(meta.grid.decode(q[None, :])[0], arc.read(meta.name))
        assert sum(map(len, s.res)) == len(q) == meta.n_samples
        # a range-coded channel stores its tables; one the packer codes with a single coder stores none
        assert (s.table_bytes > 0) == (arc.codec(meta.name).residual_coder is None)


def test_ltp_bits_never_exceed_plain_plus_flags():
    rng = np.random.default_rng(1)
    noise = [np.rint(rng.laplace(0, 3, 1024)).astype(np.int64) for _ in range(4)]
    periodic = [np.tile(rng.integers(-200, 200, 100), 11)[:1024] + rng.integers(-1, 2, 1024) for _ in range(2)]
    c = AdaptiveCoder()
    for windows in (noise, periodic):
        bits, on = residual_study.ltp_bits(c, windows)
        plain = 8 * sum(map(len, c.encode_many(windows)))
        assert bits <= plain + len(windows)
    bits, on = residual_study.ltp_bits(c, periodic)
    assert on == 2 and bits < 0.5 * 8 * sum(map(len, c.encode_many(periodic)))


def test_new_real_sets():
    loaded = [realdata.load(n) for n in ("airq_pvlib", "sunspots_yearly", "seismo_karc_lhz")]
    for note in (r for r in loaded if isinstance(r, str)):
        pytest.skip(note)
    airq, spots, karc = loaded
    assert airq.data.shape == (365 * 24, 3) and np.isfinite(airq.data).all()
    assert (airq.data[:, 0] == 0).mean() > 0.5                  # hours without rain
    assert spots.data.shape == (2008 - 1700 + 1, 1)
    assert spots.data[:5, 0].tolist() == [5, 11, 16, 23, 36]
    with gzip.open(karc.file, "rt") as f:
        assert karc.data.shape == (sum(1 for _ in f), 1) == (86399, 1)


def test_study_command(tmp_path, capsys):
    from tsarchive.bench.__main__ import main

    if isinstance(realdata.load("sunspots_yearly"), str):
        pytest.skip("statsmodels is not installed")
    out = tmp_path / "study.json"
    assert main(["--study", "residuals", "--cases", "sunspots_yearly", "--budgets", "1e-2", "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert "sunspots_yearly" in text and "per-case winner" in text
    import json
    (row,) = json.loads(out.read_text())["study"]
    assert row["n"] == 309 and row["winner"] in ("today", "adaptive", "fitted", "+ltp", "classic")
    assert min(row["today"], row["adaptive"], row["classic"]) > 0 and row["windows"] == 1
