"""The interval start <= t - t[0] < end is the same in unpack, the API and the app on a seconds axis:
a time typed as the logger wrote it (``--end 1.92``) leaves out the sample logged at 1.92."""

from __future__ import annotations

from fractions import Fraction

import tsarchive
from tsarchive.cli import main


def test_unpack_end_leaves_out_the_sample_logged_at_that_time(tmp_path, capsys):
    times = [f"{k / 100:.2f}" for k in range(400)]                   # 0.00 .. 3.99 s, as a logger writes them
    (tmp_path / "s.csv").write_text("t,x\n" + "".join(f"{t},{k % 7}\n" for k, t in enumerate(times)))
    tsarchive.pack(tmp_path / "s.csv", tmp_path / "s.tsarchive", "lossless")
    assert main(["unpack", str(tmp_path / "s.tsarchive"), "-o", str(tmp_path / "o.csv"),
                 "--start", "0.5", "--end", "1.92"]) == 0
    rows = [r.split(",")[0] for r in (tmp_path / "o.csv").read_text().splitlines()[1:] if not r.startswith("#")]
    rows = [r for r in rows if r and r[0].isdigit()]
    # the logged texts as exact decimals (Python's Fraction): 0.5 <= t < 1.92
    assert [Fraction(r) for r in rows] == [Fraction(t) for t in times if Fraction("0.5") <= Fraction(t) < Fraction("1.92")]
    assert len(rows) == len(tsarchive.open(tmp_path / "s.tsarchive").read("x", 0.5, 1.92)) == 142
