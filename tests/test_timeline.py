"""The time axis, notes and text columns: kept in the archive and given back exactly as logged."""

from __future__ import annotations

import csv
import json
import shutil
from datetime import datetime, timedelta, timezone
from fractions import Fraction

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import tsarchive
from crafting import manifest, rebind, write_manifest
from tsarchive.cli import main
from tsarchive.errors import ArchiveCorrupt, BadInput
from tsarchive.recording import ChannelInfo, Recording, TimeAxis
from tsarchive.store import timeaxis

NS = 10**9
T0 = int(np.datetime64("2024-03-05T14:00:00", "ns").astype(np.int64))   # numpy's own calendar arithmetic


def _signal(n: int) -> np.ndarray:
    return np.round(np.sin(np.arange(n) / 37.0) * 100, 2)


def _rec(n: int, times: np.ndarray | None = None, *, kind="datetime", zone=None, rate=1.0, **fields) -> Recording:
    time = None if times is None else TimeAxis(kind, times, zone, ("Timestamp",))
    return Recording.from_columns([_signal(n)], rate=rate, channels=[ChannelInfo("temp", "degC", decimals=2)],
                                  time=time, **fields)


def _pack(rec, path, **kw):
    tsarchive.pack(rec, path, "0.01", code_size=0, **kw)
    return tsarchive.open(path)


def _gapped(n: int = 3000, at: int = 100, rows: int = 60) -> np.ndarray:
    """A 1 Hz clock with ``rows`` missing rows before sample ``at``."""
    k = np.arange(n, dtype=np.int64)
    k[at:] += rows
    return T0 + k * NS


def _csv_rows(path):
    """The rows of an exported CSV after its reconstruction mark (the '#' lines the export writes first)."""
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(_unmarked(fh.read()).splitlines(keepends=True)))


def _unmarked(text: str) -> str:
    """An export's text without the leading reconstruction mark (tsarchive.export.Origin.comment_lines)."""
    from tsarchive.export import CSV_MARK
    lines = text.split("\n")
    if lines and lines[0].startswith(CSV_MARK):
        while lines and lines[0].startswith("#"):
            lines.pop(0)
    return "\n".join(lines)


# -- the user's cases ---------------------------------------------------------------
def test_a_60_row_gap_comes_back_exactly(tmp_path):
    times = _gapped()
    arc = _pack(_rec(len(times), times), tmp_path / "gap.tsa")
    assert main(["unpack", str(tmp_path / "gap.tsa"), "-o", str(tmp_path / "gap.csv")]) == 0
    rows = _csv_rows(tmp_path / "gap.csv")
    # reference: Python's datetime.fromisoformat parses each cell; numpy's datetime64 gives the expected times
    got = [datetime.fromisoformat(r[0]) for r in rows[1:]]
    want = [datetime.fromisoformat(str(np.datetime64(int(t), "ns").astype("datetime64[s]"))) for t in times]
    assert got[100] - got[99] == timedelta(seconds=61)
    assert got == want
    assert arc.manifest["time"]["runs"] == [[0, int(times[0])], [100, int(times[100])]]   # two runs, no member
    assert timeaxis.TIME_MEMBER not in arc.manifest["members"]
    np.testing.assert_array_equal(arc.times().values, times)


def test_naive_local_times_stay_naive(tmp_path):
    # a start without a zone: no Z in the manifest, the CSV or the Parquet export
    rec = _rec(500, start=datetime(2024, 3, 5, 14, 0, 0), rate=2.0)
    arc = _pack(rec, tmp_path / "naive.tsa")
    assert arc.manifest["channels"][0]["start"] == "2024-03-05T14:00:00"
    arc.export(tmp_path / "n.csv")
    rows = _csv_rows(tmp_path / "n.csv")
    assert rows[1][0] == "2024-03-05T14:00:00.000" and rows[2][0] == "2024-03-05T14:00:00.500"   # ms: coarsest exact
    arc.export(tmp_path / "n.parquet")
    t = pq.read_table(tmp_path / "n.parquet")
    assert t.schema.field("time").type == pa.timestamp("ns")                           # no zone attached
    assert t["time"][3].as_py() == datetime(2024, 3, 5, 14, 0, 1, 500000)


def test_offsets_are_kept_as_logged(tmp_path):
    # the instants are 13:00Z + i s; logged as +01:00 they read 14:00+01:00
    times = T0 - 3600 * NS + np.arange(400, dtype=np.int64) * NS
    arc = _pack(_rec(400, times, zone="+01:00"), tmp_path / "off.tsa")
    assert arc.manifest["channels"][0]["start"] == "2024-03-05T14:00:00+01:00"
    arc.export(tmp_path / "o.csv")
    rows = _csv_rows(tmp_path / "o.csv")
    assert rows[0][0] == "Timestamp" and rows[1][0] == "2024-03-05T14:00:00+01:00"
    cet = timezone(timedelta(hours=1))
    assert datetime.fromisoformat(rows[5][0]) == datetime(2024, 3, 5, 13, 0, 4, tzinfo=timezone.utc).astimezone(cet)
    arc.export(tmp_path / "o.parquet")
    col = pq.read_table(tmp_path / "o.parquet")["Timestamp"]
    assert col.type == pa.timestamp("ns", tz="+01:00")
    np.testing.assert_array_equal(col.cast(pa.int64()).to_numpy(), times)


def test_jittery_clock_is_listed_and_exact(tmp_path):
    rng = np.random.default_rng(3)
    times = T0 + np.arange(5000, dtype=np.int64) * 1_000_000 + rng.integers(-40_000, 40_000, 5000)
    arc = _pack(_rec(5000, times, rate=1000.0), tmp_path / "jit.tsa")
    assert arc.manifest["time"]["listed"] is True
    assert timeaxis.TIME_MEMBER in arc.manifest["members"]           # checksummed like every member
    # reference: the Parquet footer names the column's encodings (Parquet format spec)
    encodings = pq.ParquetFile(tmp_path / "jit.tsa" / timeaxis.TIME_MEMBER).metadata.row_group(0).column(0).encodings
    assert "DELTA_BINARY_PACKED" in encodings
    np.testing.assert_array_equal(arc.times().values, times)
    assert tsarchive.verify(tmp_path / "jit.tsa", against=_rec(5000, times, rate=1000.0)).ok
    # a clock that logs microseconds: stored in its own ticks (gcd of the distances: numpy.gcd)
    us = T0 + 7 + np.cumsum(rng.integers(990, 1010, 5000)) * 1000
    arc = _pack(_rec(5000, us, rate=1000.0), tmp_path / "us.tsa")
    assert (arc.manifest["time"]["tick"], arc.manifest["time"]["origin"]) == (1000, int(us.min()))
    np.testing.assert_array_equal(arc.times().values, us)


def test_seconds_axis_comes_back_bit_for_bit(tmp_path):
    # elapsed seconds accumulated in float64 by a logger (0.1 + 0.1 + ...): not i / rate
    secs = np.cumsum(np.full(2000, 0.1)) - 0.1
    secs[700:] += 12.5                                                  # a pause
    arc = _pack(_rec(2000, secs, kind="seconds", rate=10.0), tmp_path / "s.tsa")
    np.testing.assert_array_equal(arc.times().values.view(np.int64), secs.view(np.int64))
    arc.export(tmp_path / "s.csv")
    cells = [r[0] for r in _csv_rows(tmp_path / "s.csv")[1:]]
    # reference: float(repr(x)) == x for every double (Python's repr is the shortest round-tripping text)
    np.testing.assert_array_equal(np.array([float(c) for c in cells]).view(np.int64), secs.view(np.int64))
    # a clean axis i / 10 is one run: nothing but its start is stored
    clean = np.arange(2000) / 10.0
    arc2 = _pack(_rec(2000, clean, kind="seconds", rate=10.0), tmp_path / "c.tsa")
    assert arc2.manifest["time"]["runs"] == [[0, (0.0).hex()]]
    np.testing.assert_array_equal(arc2.times().values.view(np.int64), clean.view(np.int64))


@pytest.mark.parametrize("rate", [1.0, 3.0, 44.1, 0.1, 1 / 3, 7e5, 2.5e8])
def test_rate_rule_is_exact_rational_rounding(rate):
    # reference: exact rational arithmetic (Python fractions): k * 10^9 / rate ns, rounded half up,
    # the rate read as the decimal that repr prints
    k = np.array([0, 1, 2, 3, 7, 999, 10**6 + 3, 86_400_123])
    r = Fraction(repr(rate))
    want = [int((Fraction(int(i) * NS) / r + Fraction(1, 2)) // 1) for i in k]
    assert timeaxis.rule(k, rate, "datetime").tolist() == want


# -- time ranges --------------------------------------------------------------------
def test_time_range_selects_on_the_logged_axis(tmp_path):
    times = _gapped()
    arc = _pack(_rec(len(times), times), tmp_path / "gap.tsa")
    full = arc.read("temp")
    offsets = (times - times[0]) / NS
    for lo, hi in [(100, 170), (99, 161), (0.5, 100), (160, 160.5), (95, 3100)]:
        mask = (offsets >= lo) & (offsets < hi)                      # numpy on the logged times
        np.testing.assert_array_equal(arc.read("temp", start=lo, end=hi), full[mask])
        np.testing.assert_array_equal(arc.times(lo, hi).values, times[mask])
    # on the command line, an ISO time without a zone is the logger's wall clock
    assert main(["unpack", str(tmp_path / "gap.tsa"), "-o", str(tmp_path / "part.csv"),
                 "--start", "2024-03-05T14:02:40", "--end", "2024-03-05T14:02:43"]) == 0
    rows = _csv_rows(tmp_path / "part.csv")
    assert [r[0] for r in rows[1:]] == ["2024-03-05T14:02:40", "2024-03-05T14:02:41", "2024-03-05T14:02:42"]


def test_iso_range_is_exact_to_the_nanosecond(tmp_path):
    # the first time has 500 ns past the microsecond: a datetime (us) start would shift the range by 500 ns
    times = T0 + np.arange(50, dtype=np.int64) * 250_000_000
    times[0] += 500
    _pack(_rec(50, times, rate=4.0), tmp_path / "ns.tsa")
    assert main(["unpack", str(tmp_path / "ns.tsa"), "-o", str(tmp_path / "ns.csv"),
                 "--start", "2024-03-05T14:00:01.000000", "--end", "2024-03-05T14:00:02"]) == 0
    cells = [r[0] for r in _csv_rows(tmp_path / "ns.csv")[1:]]
    # numpy: times at or after 14:00:01 and before 14:00:02 on the ns axis
    want = times[(times >= T0 + NS) & (times < T0 + 2 * NS)]
    assert [int(np.datetime64(c, "ns").astype(np.int64)) for c in cells] == want.tolist()   # numpy parses ISO


def test_times_given_exactly():
    from tsarchive.timespec import parse_offset
    # 0.1 s is one tenth, not the double nearest to it (reference: Python fractions)
    assert parse_offset("0.1", None) == Fraction(1, 10)
    assert parse_offset("250ms", None) == Fraction(1, 4)
    start = datetime(2024, 3, 5, 14, 0, 0)
    assert parse_offset("2024-03-05T14:00:01.000001", start) == Fraction(1_000_001, 10**6)
    with pytest.raises(BadInput, match="without one"):
        parse_offset("2024-03-05T14:00:01Z", start)


def test_a_clock_set_back_is_kept_but_has_no_ranges(tmp_path):
    times = T0 + np.arange(300, dtype=np.int64) * NS
    times[150:] -= 3600 * NS                                       # the logger's clock was put back an hour
    arc = _pack(_rec(300, times), tmp_path / "back.tsa")
    np.testing.assert_array_equal(arc.times().values, times)
    with pytest.raises(BadInput, match="goes back .* at sample 150"):
        arc.read("temp", start=10)


def test_a_blank_seconds_time_is_kept_bit_for_bit(tmp_path):
    secs = np.arange(300) / 4.0
    secs[[7, 8]] = [np.nan, -np.inf]
    arc = _pack(_rec(300, secs, kind="seconds", rate=4.0), tmp_path / "nan.tsa")
    assert arc.manifest["time"]["listed"] is True
    np.testing.assert_array_equal(arc.times().values.view(np.int64), secs.view(np.int64))
    with pytest.raises(BadInput, match="at sample 7"):
        arc.read("temp", end=10)


# -- notes and text columns ---------------------------------------------------------
def test_notes_and_text_columns_come_back(tmp_path):
    n = 400
    status = pa.array((["ok", None, "", 'said "hi", left', "ölbad\nzwei", " pad "] * 100)[:n])
    field = pa.field("status", pa.string(), metadata={b"position": b"0"})   # first after the time
    extra = pa.Table.from_arrays([status, pa.array(np.arange(n) % 3 == 0)],
                                 schema=pa.schema([field, pa.field("flag", pa.bool_())]))
    notes = ("Logger: LX-7 serial 0042", "Operator: ÅB", "")
    times = T0 + np.arange(n, dtype=np.int64) * NS
    arc = _pack(_rec(n, times, notes=notes, extra=extra), tmp_path / "x.tsa")
    assert arc.notes == notes
    assert arc.extra().equals(extra)
    assert arc.extra(10, 20).equals(extra.slice(10, 10))
    arc.export(tmp_path / "x.parquet")
    back = pq.read_table(tmp_path / "x.parquet")
    assert back.column_names == ["Timestamp", "status", "temp", "flag"]     # status where it stood
    assert back["status"].equals(extra["status"]) and back["flag"].equals(extra["flag"])
    assert json.loads(back.schema.metadata[b"notes"]) == list(notes)
    arc.export(tmp_path / "x.csv")
    text = _unmarked((tmp_path / "x.csv").read_text(encoding="utf-8")).split("\n")
    assert tuple(text[:3]) == notes                          # the preamble, as found, before the header
    rows = _csv_rows(tmp_path / "x.csv")[3:]                # reference: Python's csv module (RFC 4180 quoting)
    assert rows[0] == ["Timestamp", "status", "temp [degC]", "flag"]
    assert [r[1] for r in rows[1:7]] == ["ok", "", "", 'said "hi", left', "ölbad\nzwei", " pad "]
    assert text[5].split(",")[1] == "" and text[6].split(",")[1] == '""'    # null vs empty string
    assert [r[3] for r in rows[1:4]] == ["true", "false", "false"]


# -- verify --against ---------------------------------------------------------------
def test_verify_against_compares_the_time_axis(tmp_path, capsys):
    times = _gapped()
    rec = _rec(len(times), times)
    arc = _pack(rec, tmp_path / "gap.tsa")
    assert arc.verify(against=rec).ok
    moved = times.copy()
    moved[1234] += 1                                            # one nanosecond
    rep = arc.verify(against=_rec(len(times), moved))
    assert not rep.ok and any("sample 1234" in p for p in rep.problems)
    regular = T0 + np.arange(len(times), dtype=np.int64) * NS   # the same rows without the gap
    rep = arc.verify(against=_rec(len(times), regular))
    assert not rep.ok and any("sample 100 " in p for p in rep.problems)
    naive_vs_utc = arc.verify(against=_rec(len(times), times, zone="Z"))
    assert not naive_vs_utc.ok and "zone" in naive_vs_utc.problems[0]


# -- rate sanity --------------------------------------------------------------------
@pytest.mark.parametrize("rate, needle", [(1e-9, "1900..2262"), (1e12, "cannot be told apart"),
                                          (float("nan"), "positive"), (-5.0, "positive")])
def test_pack_refuses_rates_that_break_the_clock(tmp_path, rate, needle):
    rec = _rec(1000, start=datetime(2024, 3, 5, 14), rate=rate)
    with pytest.raises(BadInput, match=needle):
        tsarchive.pack(rec, tmp_path / "r.tsa", "0.01", code_size=0)
    assert list(tmp_path.iterdir()) == []


def test_pack_refuses_an_unusable_time_axis(tmp_path):
    times = T0 + np.arange(100, dtype=np.int64) * NS
    for rec, needle in [(_rec(100, times, zone="CET"), "zone 'CET'"),
                        (_rec(100, times.astype(np.float64)), "int64 ns"),
                        (_rec(100, times[:99]), "99 rows"),
                        (_rec(100, times, rate=1e-9), "1900..2262"),         # a nominal rate beside the times
                        (_rec(100, times / 1e9, kind="seconds", rate=1e-9), "1900..2262")]:
        with pytest.raises(BadInput, match=needle):
            tsarchive.pack(rec, tmp_path / "r.tsa", "0.01", code_size=0)
    assert list(tmp_path.iterdir()) == []


def test_cli_rate_too_high_is_one_line(tmp_path, capsys):
    np.save(tmp_path / "x.npy", _signal(100))
    assert main(["pack", str(tmp_path / "x.npy"), "-o", str(tmp_path / "x.tsa"), "--rate", "1e12"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "nanosecond" in err and not (tmp_path / "x.tsa").exists()


@pytest.mark.parametrize("rate", ["NaN", "0", "-1", "Infinity"])
def test_a_damaged_manifest_rate_is_damage(tmp_path, rate):
    arc = _pack(_rec(200, start=datetime(2024, 3, 5, 14)), tmp_path / "a.tsa")
    m = manifest(tmp_path / "a.tsa")
    text = json.dumps(m).replace(f'"rate": {arc.channels[0].rate}', f'"rate": {rate}')
    assert text != json.dumps(m)
    write_manifest(tmp_path / "a.tsa", json.loads(text))
    with pytest.raises(ArchiveCorrupt, match="damaged"):
        tsarchive.open(tmp_path / "a.tsa")


def test_damaged_time_entries_are_named(tmp_path):
    rng = np.random.default_rng(1)
    times = T0 + np.cumsum(rng.integers(900_000, 1_100_000, 500))
    _pack(_rec(500, times, rate=1000.0), tmp_path / "j.tsa")
    bad = tmp_path / "bad.tsa"
    shutil.copytree(tmp_path / "j.tsa", bad)
    (bad / timeaxis.TIME_MEMBER).unlink()
    with pytest.raises(ArchiveCorrupt, match="time.parquet"):
        tsarchive.open(bad).times()
    _pack(_rec(500, _gapped(500)), tmp_path / "g.tsa")
    m = manifest(tmp_path / "g.tsa")
    m["time"]["runs"] = m["time"]["runs"][::-1]
    write_manifest(tmp_path / "g.tsa", m, seal=False)
    with pytest.raises(ArchiveCorrupt, match="was edited"):     # a plain edit: the binding refuses it
        tsarchive.open(tmp_path / "g.tsa")
    rebind(tmp_path / "g.tsa", m)                                # a forged one (binding recomputed) ...
    with pytest.raises(ArchiveCorrupt, match="time runs"):      # ... is still refused for what it says
        tsarchive.open(tmp_path / "g.tsa").times()
    m["time"]["runs"] = [[0, timeaxis.LATEST_NS - 10 * NS]]      # 500 samples at 1 Hz would pass April 2262
    rebind(tmp_path / "g.tsa", m)
    with pytest.raises(ArchiveCorrupt, match="time runs"):
        tsarchive.open(tmp_path / "g.tsa").times()
    rep = tsarchive.verify(tmp_path / "g.tsa")                   # verify names it
    assert not rep.ok and any("time runs" in p for p in rep.problems)


def test_golden_archive_without_a_time_entry_reads_start_plus_i_over_rate():
    arc = tsarchive.open("tests/golden/v3/golden.tsa")
    assert "time" not in arc.manifest
    t = arc.times()
    assert t.kind == "seconds"
    # reference: numpy, k / rate in float64
    np.testing.assert_array_equal(t.values, np.arange(arc.channels[0].n_samples) / arc.channels[0].rate)


def test_damaged_text_columns_are_named(tmp_path):
    extra = pa.table({"status": pa.array(["ok", None, "warm"] * 100)})
    _pack(_rec(300, notes=("a",), extra=extra, start=datetime(2024, 3, 5, 14)), tmp_path / "t.tsa")
    member = tmp_path / "t.tsa" / "extra.parquet"
    member.write_bytes(member.read_bytes()[: member.stat().st_size // 2])     # cut short
    with pytest.raises(ArchiveCorrupt, match="extra.parquet"):
        tsarchive.open(tmp_path / "t.tsa").extra()
    rep = tsarchive.verify(tmp_path / "t.tsa")
    assert not rep.ok and any("extra.parquet cannot be read" in p for p in rep.problems)


def test_report_describes_the_times_and_notes(tmp_path, capsys):
    times = _gapped()
    _pack(_rec(len(times), times, notes=("Logger LX-7",)), tmp_path / "gap.tsa")
    assert main(["report", str(tmp_path / "gap.tsa")]) == 0
    out = capsys.readouterr().out.splitlines()
    # the last time: 3000 rows, 60 missing, at 1 s (numpy's calendar)
    last = str(np.datetime64(int(times[-1]), "ns").astype("datetime64[s]"))
    assert f"times: no zone (wall clock as logged), 1 Hz with 1 break(s) (gaps or clock steps), " \
           f"2024-03-05T14:00:00 to {last}" in out
    assert "logger note: Logger LX-7" in out
    assert main(["report", str(tmp_path / "gap.tsa"), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["notes"] == ["Logger LX-7"]


def test_listed_times_are_read_a_row_group_at_a_time(tmp_path, monkeypatch):
    from tsarchive.store import timelist
    monkeypatch.setattr(timelist, "ROWS", 1000)
    rng = np.random.default_rng(5)
    times = T0 + np.cumsum(rng.integers(900_000, 1_100_000, 5000))
    arc = _pack(_rec(5000, times, rate=1000.0), tmp_path / "rg.tsa")
    assert pq.ParquetFile(tmp_path / "rg.tsa" / timeaxis.TIME_MEMBER).metadata.num_row_groups == 5
    tl = arc.timeline
    np.testing.assert_array_equal(tl.values(990, 3010), times[990:3010])
    assert len(tl.listed._cache) <= 2                              # never the whole axis at once
    off = times - times[0]
    mask = (off >= 1 * NS) & (off < 3 * NS)                         # numpy on the logged times
    np.testing.assert_array_equal(arc.times(1, 3).values, times[mask])
    back = times.copy()
    back[2000:] -= 10 * NS                                          # clock put back at a row-group boundary
    arc = _pack(_rec(5000, back, rate=1000.0), tmp_path / "back.tsa")
    with pytest.raises(BadInput, match="at sample 2000"):
        arc.read("temp", start=1)


def test_text_columns_return_to_their_source_positions(tmp_path):
    from tsarchive.export import TextParts, write_table
    # the source row (after its time column) was: x a y b z c w; channels fill the places not taken
    cols = {k: np.arange(3.0) for k in "abc"}
    extra = pa.table({k: pa.array(["1", "2", "3"]) for k in "xyzw"})
    p = write_table(tmp_path / "o.csv", cols, rate=1.0, start=None,
                    text=TextParts(extra=extra, positions=(0, 2, 4, 6)))
    assert _csv_rows(p)[0] == ["time [s]", "x", "a", "y", "b", "z", "c", "w"]
    p = write_table(tmp_path / "u.csv", cols, rate=1.0, start=None, text=TextParts(extra=extra))
    assert _csv_rows(p)[0] == ["time [s]", "a", "b", "c", "x", "y", "z", "w"]     # unknown: after the channels


def test_verify_against_a_source_without_a_time_column_checks_start_and_rate(tmp_path):
    rec = _rec(300, start=datetime(2024, 3, 5, 14), rate=2.0)
    arc = _pack(rec, tmp_path / "s.tsa")
    assert arc.verify(against=rec).ok
    later = _rec(300, start=datetime(2024, 3, 5, 14, 0, 1), rate=2.0)
    rep = arc.verify(against=later)
    assert not rep.ok and "sample 0 is at 2024-03-05T14:00:01" in rep.problems[0]
    faster = _rec(300, start=datetime(2024, 3, 5, 14), rate=4.0)
    rep = arc.verify(against=faster)
    assert not rep.ok and "sample 1 is at 2024-03-05T14:00:00.250" in rep.problems[0]
