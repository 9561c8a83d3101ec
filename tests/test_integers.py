"""Integers handled as integers, end to end: the users' reproductions.

Every check compares with Python ints (arbitrary precision), not with the
code under test: an int64 near 2**62 has float64 neighbours 1024 apart, so
any float64 detour shows here.
"""

from tsarchive.store.binding import read_manifest

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import tsarchive
from tsarchive.cli import main
from tsarchive.recording import ChannelInfo, Recording
from tsarchive.verifier import _out_of_budget


def _ints(a) -> list[int]:
    return [int(v) for v in np.asarray(a).tolist()]


def _max_err(x, y) -> int:
    return max(abs(a - b) for a, b in zip(_ints(x), _ints(y)))


def _pack_npy(tmp_path, x, budget):
    src, arc = tmp_path / "c.npy", tmp_path / "c.tsa"
    np.save(src, x)
    res = tsarchive.pack(src, arc, budget, rate=10.0, code_size=0)
    return src, arc, res


@pytest.mark.parametrize("budget", ["5", "1%"])
def test_int64_near_2_62_stays_within_budget_and_the_worst_error_is_exact(tmp_path, budget):
    rng = np.random.default_rng(0)
    x = (np.int64(2**62) + rng.integers(0, 1000, 5000)).astype(np.int64)
    src, arc, res = _pack_npy(tmp_path, x, budget)
    back = tsarchive.open(arc).read("ch0")
    eps = res.channels[0].eps
    assert back.dtype == np.int64
    assert _max_err(x, back) <= eps                        # exact: Python ints
    assert res.channels[0].worst_error == _max_err(x, back)
    assert tsarchive.verify(arc, against=src).ok


def test_uint64_above_2_63_stays_within_budget(tmp_path):
    rng = np.random.default_rng(1)
    x = (np.uint64(2**63) + rng.integers(0, 5000, 4000).astype(np.uint64) - np.uint64(2500))
    x[7] = np.iinfo(np.uint64).max                         # the very top of the range too
    x[8] = 0
    src, arc, res = _pack_npy(tmp_path, x, "5")
    back = tsarchive.open(arc).read("ch0")
    assert back.dtype == np.uint64 and _max_err(x, back) <= 5
    assert int(back[7]) == 2**64 - 1 and int(back[8]) == 0   # far from the grid: held verbatim, exactly
    assert res.channels[0].worst_error == _max_err(x, back)
    assert tsarchive.verify(arc, against=src).ok


def test_worst_error_between_2_53_and_2_62_is_reported_exactly(tmp_path):
    rng = np.random.default_rng(2)
    x = (np.int64(2**57) + rng.integers(-10**6, 10**6, 6000)).astype(np.int64)
    _, arc, res = _pack_npy(tmp_path, x, "900")
    back = tsarchive.open(arc).read("ch0")
    exact = _max_err(x, back)
    assert 0 < exact <= 900
    assert res.channels[0].worst_error == exact
    assert read_manifest(arc)["channels"][0]["summary"]["worst_error"] == exact


def test_verify_compares_integers_exactly():
    # 2**62 and 2**62 + 6 are the same float64 (spacing 1024 there, IEEE-754 binary64): a float64
    # comparison calls them equal; 6 > 5 is out of budget
    x = np.array([2**62, 2**62], dtype=np.int64)
    xh = np.array([2**62 + 6, 2**62 + 5], dtype=np.int64)
    bad, err = _out_of_budget(x, xh, 5.0)
    assert bad.tolist() == [True, False] and err.tolist() == [6.0, 5.0]
    bad, _ = _out_of_budget(x, xh, 0.0)                      # lossless: the very same value
    assert bad.tolist() == [True, True]


def test_verify_compares_floats_exactly():
    # IEEE-754 binary64 round to nearest: 2**53 - (-0.5) = 2**53 + 0.5 rounds to 2**53 (spacing 2 there),
    # so a float64 subtraction calls the error 2**53 although it is above that; Fraction gives the truth
    from fractions import Fraction
    x, xh = np.array([-0.5]), np.array([2.0**53])
    assert Fraction(2.0**53) - Fraction(-0.5) > 2**53 and float(xh[0] - x[0]) == 2.0**53
    bad, err = _out_of_budget(x, xh, 2.0**53)
    assert bad.tolist() == [True] and err[0] > 2.0**53
    bad, _ = _out_of_budget(x, xh, 2.0**53 + 2)
    assert bad.tolist() == [False]


def test_verify_lossless_compares_bits():
    # IEEE-754: -0.0 == 0.0 and NaN payloads compare unequal to nothing, yet the bits differ
    x = np.array([-0.0, np.float64(np.nan), 1.0])
    xh = np.array([0.0, np.array([0x7FF8000000000001], dtype=np.int64).view(np.float64)[0], 1.0])
    bad, _ = _out_of_budget(x, xh, 0.0)
    assert bad.tolist() == [True, True, False]


def test_mixed_csv_lossless_keeps_large_integers_exactly(tmp_path):
    n = 3000
    counts = [2**60 + 3 * i for i in range(n)]
    src = tmp_path / "m.csv"
    src.write_text("time,count,temp\n" + "".join(f"{i * 0.1:.1f},{counts[i]},{20 + 0.01 * (i % 7):.2f}\n"
                                                  for i in range(n)))
    arc = tmp_path / "m.tsa"
    tsarchive.pack(src, arc, "lossless", code_size=0)
    a = tsarchive.open(arc)
    assert _ints(a.read("count")) == counts
    temps = [float(line.split(",")[2]) for line in src.read_text().splitlines()[1:]]
    assert a.read("temp").tolist() == temps
    assert tsarchive.verify(arc, against=src).ok


def test_mixed_recording_holds_each_column_in_its_own_dtype():
    big = np.array([2**60 + 1, 2**60 + 3], dtype=np.int64)
    rec = Recording.from_columns([big, np.array([0.5, 1.5])], rate=1.0,
                                 channels=[ChannelInfo("n", dtype="int64"), ChannelInfo("f")])
    assert rec.rows(0, 2)[:, 0].dtype == np.int64 and _ints(rec.rows(0, 2)[:, 0]) == _ints(big)
    assert rec.column(1).tolist() == [0.5, 1.5] and rec.shape == (2, 2)


@pytest.mark.parametrize("budget", ["lossless", "4"])
def test_int64_parquet_with_nulls_keeps_them_missing(tmp_path, budget):
    n = 2000
    vals = [None if i % 10 == 3 else 2**62 + 7 * i for i in range(n)]
    src = tmp_path / "nulls.parquet"
    pq.write_table(pa.table({"time": pa.array(np.arange(n) * 0.1), "big": pa.array(vals, pa.int64())}), src)
    arc = tmp_path / "n.tsa"
    tsarchive.pack(src, arc, budget, code_size=0)
    back = tsarchive.open(arc).read("big")
    gone = np.ma.getmaskarray(back)
    assert gone.tolist() == [v is None for v in vals]
    eps = 0 if budget == "lossless" else 4
    assert all(abs(int(b) - v) <= eps for b, v in zip(np.ma.getdata(back).tolist(), vals) if v is not None)
    assert tsarchive.verify(arc, against=src).ok
    out = tmp_path / "n.parquet"
    tsarchive.open(arc).export(out)
    got = pq.read_table(out).column("big").to_pylist()
    assert [g is None for g in got] == [v is None for v in vals]
    if budget == "lossless":
        assert got == vals
    csv = tmp_path / "n.csv"
    tsarchive.open(arc).export(csv)
    lines = [line for line in csv.read_text().splitlines() if not line.startswith("#")]   # after the mark
    cells = [line.split(",")[1] for line in lines[1:]]
    assert [c == "" for c in cells] == [v is None for v in vals]


def test_csv_integer_column_with_empty_cells(tmp_path):
    rows = [f"{i},{'' if i % 9 == 4 else 2**61 + i}" for i in range(500)]
    src = tmp_path / "e.csv"
    src.write_text("time,count\n" + "\n".join(rows) + "\n")
    arc = tmp_path / "e.tsa"
    tsarchive.pack(src, arc, "lossless", code_size=0)
    back = tsarchive.open(arc).read("count")
    assert np.ma.getmaskarray(back).tolist() == [i % 9 == 4 for i in range(500)]
    assert [int(v) for v, g in zip(np.ma.getdata(back).tolist(), np.ma.getmaskarray(back)) if not g] == \
        [2**61 + i for i in range(500) if i % 9 != 4]
    assert tsarchive.verify(arc, against=src).ok


def test_huge_budget_packs_integer_and_float_channels(tmp_path, capsys):
    x = np.stack([np.arange(3000, dtype=np.int64) * 3 + 2**40, np.arange(3000, dtype=np.int64) % 17], axis=1)
    src = tmp_path / "h.npy"
    np.save(src, x)
    assert main(["pack", str(src), "-o", str(tmp_path / "h.tsa"), "--rate", "10", "--budget", "1e308"]) == 0
    back = tsarchive.open(tmp_path / "h.tsa").read("ch0")
    assert back.dtype == np.int64
    f = np.sin(np.arange(3000) / 10.0)
    np.save(tmp_path / "f.npy", f)
    assert main(["pack", str(tmp_path / "f.npy"), "-o", str(tmp_path / "f.tsa"), "--rate", "10",
                 "--budget", "1e308"]) == 0, capsys.readouterr().err
    assert tsarchive.verify(tmp_path / "f.tsa", against=tmp_path / "f.npy").ok


def test_sentinels_are_kept_exactly_and_left_out_of_the_range(tmp_path):
    t = np.arange(4000)
    temp = np.round(20 + 3 * np.sin(t / 50.0), 2)          # 17 .. 23 degC: range about 6
    temp[::97] = -9999.0
    rec = Recording.from_columns([temp], rate=1.0, channels=[ChannelInfo("temp", "degC", sentinels=(-9999.0,))])
    res = tsarchive.pack(rec, tmp_path / "s.tsa", "1%", code_size=0)
    arc = tsarchive.open(tmp_path / "s.tsa")
    back = arc.read("temp")
    hit = temp == -9999.0
    assert back[hit].tolist() == temp[hit].tolist()          # exactly
    real = temp[~hit]
    eps = res.channels[0].eps
    assert eps == pytest.approx(0.01 * (real.max() - real.min()), rel=1e-12)   # not 1 % of 10 000
    assert np.all(np.abs(back[~hit] - real) <= eps)
    note = arc.manifest["channels"][0]["note"]
    assert "-9999 left out of the range" in note and "degC" in note


def test_integer_sentinel_is_kept_exactly(tmp_path):
    x = (np.arange(3000, dtype=np.int64) * 5) % 700 + 2**55
    x[::50] = -1
    rec = Recording.from_columns([x], rate=1.0, channels=[ChannelInfo("n", dtype="int64", decimals=0,
                                                                      sentinels=(-1.0,))])
    res = tsarchive.pack(rec, tmp_path / "i.tsa", "2%", code_size=0)
    back = tsarchive.open(tmp_path / "i.tsa").read("n")
    hit = x == -1
    assert _ints(back[hit]) == [-1] * int(hit.sum())
    assert res.channels[0].eps == pytest.approx(0.02 * 695, rel=1e-12)
    assert _max_err(x[~hit], back[~hit]) <= res.channels[0].eps


@pytest.mark.parametrize("dtype", ["int8", "uint8", "int16", "uint16", "int32", "uint32", "int64", "uint64"])
def test_integer_channels_in_a_band_need_no_verbatim_samples(dtype):
    # bins of 2m+1 integers hold every sample within m (common practice (no source)): nothing verbatim
    from tsarchive.quantize import make_grid, quantize
    info = np.iinfo(dtype)
    rng = np.random.default_rng(3)
    # narrow dtypes clip a bin centre past the end of the range, as before; int64/uint64 wrap, so there a
    # sample whose nearest bin centre lies past the end is stored verbatim: bands inside the range here
    edge = 0 if info.bits < 64 else 1000
    for base in (int(info.min) + edge, int(info.max) - 60 - edge, 0 if info.min < 0 else 100):
        x = (np.array(base, dtype=object) + rng.integers(0, 60, 500).astype(object)).astype(dtype)
        g = make_grid(2.0, 0, np.dtype(dtype), float(x[0]), 1, origin=int(x[0]))
        q, pos, _ = quantize(x, g)
        assert len(pos) == 0
        back = g.dequantize(q)
        assert max(abs(int(a) - int(b)) for a, b in zip(x.tolist(), back.tolist())) <= 2


def test_nulls_beside_both_ends_of_the_range_take_a_free_value_or_are_refused(tmp_path):
    from tsarchive.errors import BadInput
    x = np.append(np.arange(-128, 128), [0]).astype(np.int8)
    gone = np.zeros(len(x), dtype=bool)
    gone[-1] = True
    every = Recording.from_columns([np.ma.MaskedArray(x, mask=gone)], rate=1.0,
                                   channels=[ChannelInfo("n", dtype="int8", decimals=0)])
    with pytest.raises(BadInput, match="missing samples") as err:      # all 256 values occur: no mark left
        tsarchive.pack(every, tmp_path / "x.tsa", "lossless", code_size=0)
    assert "\n" not in str(err.value) and not (tmp_path / "x.tsa").exists()
    gone[5] = True                                   # now -123 occurs nowhere: it can mark the missing ones
    rec = Recording.from_columns([np.ma.MaskedArray(x, mask=gone)], rate=1.0,
                                 channels=[ChannelInfo("n", dtype="int8", decimals=0)])
    tsarchive.pack(rec, tmp_path / "y.tsa", "lossless", code_size=0)
    back = tsarchive.open(tmp_path / "y.tsa").read("n")
    assert np.ma.getmaskarray(back).tolist() == gone.tolist()
    assert np.ma.getdata(back)[~gone].tolist() == x[~gone].tolist()


def test_percent_of_a_range_beyond_the_largest_double(tmp_path):
    # max - min of ±1e308 overflows float64 (IEEE-754 max about 1.798e308): the budget takes the largest
    # double as the range (a little below the true one, so never more than asked), not 0
    x = np.array([-1e308, 1e308, 0.0, 5.0, -7.5] * 20)
    rec = Recording(data=x[:, None], rate=1.0, channels=(ChannelInfo("w"),), shape=x.shape)
    res = tsarchive.pack(rec, tmp_path / "w.tsa", "1%", code_size=0)
    eps = res.channels[0].eps
    assert eps == 0.01 * float(np.finfo(np.float64).max)
    back = tsarchive.open(tmp_path / "w.tsa").read("w")
    from fractions import Fraction
    assert all(abs(Fraction(a) - Fraction(b)) <= Fraction(eps) for a, b in zip(x.tolist(), back.tolist()))


def test_npy_export_refuses_to_round_large_integers_beside_floats(tmp_path):
    from tsarchive.errors import BadInput
    big = np.arange(100, dtype=np.int64) + 2**60 + 1          # odd: float64 (spacing 256 here) cannot hold it
    rec = Recording.from_columns([big, np.linspace(0, 1, 100)], rate=1.0,
                                 channels=[ChannelInfo("n", dtype="int64", decimals=0), ChannelInfo("f")])
    tsarchive.pack(rec, tmp_path / "m.tsa", "n=lossless,0.01", code_size=0)
    arc = tsarchive.open(tmp_path / "m.tsa")
    with pytest.raises(BadInput, match="2\\*\\*53"):
        arc.export(tmp_path / "m.npy")
    assert not (tmp_path / "m.npy").exists()
    arc.export(tmp_path / "n.npy", channels=["n"])            # on its own it keeps its dtype
    assert _ints(np.load(tmp_path / "n.npy").ravel()) == _ints(big)
