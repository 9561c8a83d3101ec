"""The batch bench's inputs (tsarchive/bench/batch.py): the short logs it makes are what it says."""

from __future__ import annotations

import numpy as np

import tsarchive
from tsarchive.bench.batch import copy_streams, make_short_logs


def test_short_logs_are_one_hour_at_1_hz_with_four_channels_and_repeat_byte_for_byte(tmp_path):
    [a] = make_short_logs(tmp_path / "a", 1)
    [b] = make_short_logs(tmp_path / "b", 1)
    assert a.read_bytes() == b.read_bytes()                      # made from a seed: the same file every run
    rec = tsarchive.inspect_source(a)
    assert rec.n_samples == 3600 and rec.rate == 1.0 and len(rec.channels) == 4
    assert [c.unit for c in rec.channels] == ["degC", "degC", "%RH", "kPa"]
    lines = a.read_text().splitlines()
    assert lines[1].startswith("2031-04-02T06:00:00Z,") and lines[-1].startswith("2031-04-02T06:59:59Z,")
    # values with two decimals, as written by "%.2f" (Python's format spec)
    assert all(len(v.split(".")[1]) == 2 for v in lines[1].split(",")[1:])
    assert np.ptp(rec.data[:, 0]) > 0


def test_stream_copies_keep_their_bytes(tmp_path):
    src = tmp_path / "streams"
    src.mkdir()
    (src / "x.csv").write_bytes(b"time,a\n0,1\n")
    (src / "README.md").write_text("not a recording")
    copies = copy_streams(src, tmp_path / "out", 3)
    assert [p.relative_to(tmp_path / "out").as_posix() for p in copies] == [
        "copy000/x.csv", "copy001/x.csv", "copy002/x.csv"]
    assert all(p.read_bytes() == b"time,a\n0,1\n" for p in copies)
