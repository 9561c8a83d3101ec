"""Logger files as loggers write them: encodings, delimiters, decimal commas, preambles, time forms, text columns.

Every fixture is written byte for byte by the test itself.  Expected times are
computed with the standard library's datetime arithmetic (proleptic Gregorian
calendar, Python docs "datetime"), independently of tsarchive's integer date code.
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tsarchive.cli import main
from tsarchive.errors import BadInput
from tsarchive.ingest import ReadOptions, read_recording
from tsarchive.ingest.survey import survey_source
from tsarchive.ingest.timeparse import parse_datetimes

_EPOCH = datetime(1970, 1, 1)


def ns(dt: datetime) -> int:
    """Nanoseconds since 1970-01-01 by stdlib datetime arithmetic (aware -> the UTC instant)."""
    if dt.tzinfo is not None:
        dt = dt.astimezone(timezone.utc).replace(tzinfo=None)
    return (dt - _EPOCH) // timedelta(microseconds=1) * 1000


def write(tmp_path, name: str, data: bytes):
    p = tmp_path / name
    p.write_bytes(data)
    return p


# --- encodings -----------------------------------------------------------------------------------

@pytest.mark.parametrize("encoding,prefix", [("utf-8", b""), ("utf-8", b"\xef\xbb\xbf"), ("cp1252", b""),
                                             ("utf-16", b"")])
def test_encodings_keep_the_degree_sign(tmp_path, encoding, prefix):
    # A cp1252 header with "°C" used to end in a UnicodeDecodeError traceback (exit 1).
    text = "time,Temp [°C],Druck [hPa]\n0,21.5,1013.2\n1,21.6,1013.1\n"
    p = write(tmp_path, "t.csv", prefix + text.encode(encoding))   # Python's codecs write the reference bytes
    rec = read_recording(p)
    assert [(c.name, c.unit) for c in rec.channels] == [("Temp", "°C"), ("Druck", "hPa")]
    assert rec.data.tolist() == [[21.5, 1013.2], [21.6, 1013.1]]
    assert main(["pack", str(p), "--dry-run"]) == 0


def test_latin1_bytes_that_cp1252_leaves_undefined(tmp_path):
    # 0x81 is undefined in Windows-1252 (Microsoft's code page table) but is a control character in Latin-1.
    p = write(tmp_path, "l.csv", b"time,Temp\x81 [\xb0C]\n0,1.5\n1,2.5\n")
    rec = read_recording(p)
    assert (rec.channels[0].name, rec.channels[0].unit) == ("Temp\x81", "°C")   # ISO 8859-1: byte b = U+00bb
    assert survey_source(p).encoding == "latin-1"


# --- delimiters, decimal comma, preambles -----------------------------------------------------------

@pytest.mark.parametrize("sep", [",", ";", "\t"])
def test_delimiters_are_detected(tmp_path, sep):
    rows = [sep.join(["time", "a [V]", "b [A]"])] + [sep.join([str(i), f"{i * 0.5:.1f}", str(-i)]) for i in range(5)]
    p = write(tmp_path, "d.csv", ("\n".join(rows) + "\n").encode())
    rec = read_recording(p)
    assert rec.rate == 1.0 and rec.data[:, 0].tolist() == [0.0, 0.5, 1.0, 1.5, 2.0]
    assert rec.data[:, 1].tolist() == [0, -1, -2, -3, -4]


def test_decimal_comma_with_semicolons(tmp_path):
    p = write(tmp_path, "c.csv", b"t;x [mV];y\r\n0;1,25;-3,5\r\n1;2,5;1e3\r\n2;-0,125;7\r\n")
    rec = read_recording(p)
    # Reference: the same numbers written with a decimal point, parsed by Python's float() (correctly rounded).
    assert rec.column(0).tolist() == [float("1.25"), float("2.5"), float("-0.125")]
    assert rec.column(1).tolist() == [-3.5, 1000.0, 7.0]
    s = survey_source(p)
    assert (s.delimiter, s.decimal) == ("semicolon", ",")


def test_quoted_decimal_commas_with_a_comma_delimiter(tmp_path):
    p = write(tmp_path, "q.csv", b'time,x\n0,"1,5"\n1,"-2,25"\n2,"3"\n')
    assert read_recording(p).column(0).tolist() == [1.5, -2.25, 3.0]


def test_a_point_beside_decimal_commas_is_not_read_as_a_decimal_point(tmp_path):
    # "1.234" in a decimal-comma file is one thousand two hundred thirty-four, or a typo: kept as text, not 1.234.
    p = write(tmp_path, "k.csv", b"t;a;b\n0;1,5;1.234\n1;2,5;2,0\n2;3,5;3,0\n")
    rec = read_recording(p)
    assert [c.name for c in rec.channels] == ["a"] and rec.extra.column("b").to_pylist() == ["1.234", "2,0", "3,0"]


def test_elapsed_seconds_with_decimal_commas_and_a_channel_named_t(tmp_path):
    p = write(tmp_path, "s.csv", b"Zeit [s];T [degC];Nr\n0,0;20,5;1\n0,5;20,6;2\n1,0;20,7;3\n")
    rec = read_recording(p)
    assert rec.time.values.tolist() == [0.0, 0.5, 1.0] and rec.rate == 2.0
    assert [c.name for c in rec.channels] == ["T", "Nr"]     # a "T" right of the time column is a channel
    p = write(tmp_path, "n.csv", b"Nr;T [degC]\n1;20,5\n2;20,6\n")
    assert [c.name for c in read_recording(p, rate=1).channels] == ["Nr", "T"]


def test_trailing_delimiters_and_dash_tokens(tmp_path):
    # Many loggers end every line with the delimiter and write "--" or "-" for a missing value.
    p = write(tmp_path, "tr.csv", b"time;a;b;\n0;1,5;--;\n1;-;2;\n2;3,5;4;\n")
    rec = read_recording(p)
    assert [c.name for c in rec.channels] == ["a", "b"] and rec.extra is None
    assert np.isnan(rec.column(0)[1]) and rec.column(1)[2] == 4
    # an integer column with a missing cell is held masked in its own dtype (never rounded through float64)
    assert rec.column(1).dtype.kind == "i" and np.ma.getmaskarray(rec.column(1)).tolist() == [True, False, False]


def test_read_options_round_trip_through_json():
    import json
    opts = ReadOptions.build(rate=2, zone="-0530", without_time=True, missing="ERR,-9999", skip_text=True,
                             names="a,b", units="V,")
    assert ReadOptions.from_dict(json.loads(json.dumps(opts.to_dict()))) == opts
    assert ReadOptions().to_dict() == {} and ReadOptions.from_dict({}) == ReadOptions()
    with pytest.raises(BadInput, match="zone"):
        ReadOptions.from_dict({"zone": "Mars"})


def test_verify_rereads_the_source_with_the_options_pack_used(tmp_path, capsys):
    # Packed with --missing, the source used to be re-read without it, and verify failed a sound archive.
    p = write(tmp_path, "m.csv", b"time,a,b\n0,1.5,-9999\n1,ERR,2\n2,2.5,3\n3,3.5,4\n")
    out = tmp_path / "m.tsa"
    assert main(["pack", str(p), "-o", str(out), "--missing", "ERR,-9999", "--code-size", "0"]) == 0
    assert main(["verify", str(out), "--against", str(p)]) == 0, capsys.readouterr().out


def test_names_are_refused_for_tables(tmp_path):
    p = write(tmp_path, "h.csv", b"a,b\n1,2\n")
    with pytest.raises(BadInput, match="header names"):
        read_recording(p, rate=1, options=ReadOptions.build(names="x,y"))


def test_hash_preamble_and_station_lines_become_notes(tmp_path):
    text = ("# exported by a logger\n#   operator: A. Smith\nStation,North hall\nSerial,4711\n\n"
            "time,temp [degC]\n0,20.0\n1,20.5\n")
    rec = read_recording(write(tmp_path, "p.csv", text.encode()))
    assert rec.notes == ("# exported by a logger", "#   operator: A. Smith", "Station,North hall", "Serial,4711")
    assert rec.column(0).tolist() == [20.0, 20.5]


# --- time columns --------------------------------------------------------------------------------

def test_naive_iso_stays_naive_and_a_stated_zone_applies(tmp_path):
    # "2024-03-05 14:00:00" used to be taken as UTC.
    p = write(tmp_path, "n.csv", b"Timestamp,x\n2024-03-05 14:00:00,1\n2024-03-05 14:00:01,2\n")
    rec = read_recording(p)
    assert rec.time.zone is None and rec.start == datetime(2024, 3, 5, 14) and rec.start.tzinfo is None
    assert rec.time.values.tolist() == [ns(datetime(2024, 3, 5, 14)), ns(datetime(2024, 3, 5, 14, 0, 1))]
    rec = read_recording(p, options=ReadOptions.build(zone="+01:00"))
    plus1 = timezone(timedelta(hours=1))
    assert rec.time.zone == "+01:00" and rec.start == datetime(2024, 3, 5, 14, tzinfo=plus1)
    assert rec.time.values[0] == ns(datetime(2024, 3, 5, 14, tzinfo=plus1))


@pytest.mark.parametrize("a,b,zone", [
    ("2024-03-05T14:00:00.5", "2024-03-05T14:00:01.5", None),          # Arrow's parser (the fast path)
    ("2024-03-05T14:00:00,5", "2024-03-05T14:00:01,5", None),          # ISO 8601 decimal comma: the regex path
    ("2024-03-05 14:00:00.500", "2024-03-05 14:00:01.500", None),
    ("2024-3-5 14:00:00.5", "2024-3-5 14:00:01.5", None),              # unpadded fields
    ("2024/03/05 14:00:00.5", "2024/03/05 14:00:01.5", None),
    ("2024-03-05T14:00:00.5+01:00", "2024-03-05T14:00:01.5+01:00", "+01:00"),
    ("2024-03-05T14:00:00.5+0100", "2024-03-05T14:00:01.5+0100", "+01:00"),
    ("2024-03-05T13:00:00.5Z", "2024-03-05T13:00:01.5Z", "Z"),
    ("2024-03-05T13:00:00.5z", "2024-03-05T13:00:01.5z", "Z"),
])
def test_iso_spellings_give_the_same_instants(tmp_path, a, b, zone):
    p = write(tmp_path, "iso.csv", f"time;x\n{a};1\n{b};2\n".encode())
    rec = read_recording(p)
    wall = datetime(2024, 3, 5, 14, 0, 0, 500000)
    if zone is not None:   # 14:00:00.5+01:00 and 13:00:00.5Z are the same instant
        wall = wall.replace(tzinfo=timezone(timedelta(hours=1)))
    assert rec.time.zone == zone and rec.time.values.tolist() == [ns(wall), ns(wall + timedelta(seconds=1))]


def test_a_zone_named_in_the_time_header(tmp_path):
    p = write(tmp_path, "utc.csv", b"Timestamp (UTC),x\n2024-03-05 14:00:00,1\n2024-03-05 14:00:01,2\n")
    rec = read_recording(p)
    assert rec.time.zone == "Z" and rec.start == datetime(2024, 3, 5, 14, tzinfo=timezone.utc)
    rec = read_recording(p, options=ReadOptions.build(zone="+01:00"))     # the user's word comes first
    assert rec.time.zone == "+01:00"


def test_iso_offsets_are_kept_as_logged(tmp_path):
    p = write(tmp_path, "o.csv", b"time,x\n2024-03-05T14:00:00.250+01:00,1\n2024-03-05T14:00:00.750+01:00,2\n")
    rec = read_recording(p)
    t0 = datetime(2024, 3, 5, 14, 0, 0, 250000, tzinfo=timezone(timedelta(hours=1)))
    assert rec.time.zone == "+01:00" and rec.time.values[0] == ns(t0) and rec.rate == 2.0
    assert rec.start == t0 and rec.start.utcoffset() == timedelta(hours=1)


def test_day_month_year_with_dots(tmp_path):
    # day.month.year: the usual German date form (common practice (no source)).
    p = write(tmp_path, "g.csv", "Zeit;T\n31.12.2023 23:59:59;1\n01.01.2024 00:00:00;2\n".encode())
    rec = read_recording(p)
    assert rec.time.values.tolist() == [ns(datetime(2023, 12, 31, 23, 59, 59)), ns(datetime(2024, 1, 1))]


def test_us_month_day_year(tmp_path):
    # month/day/year: the usual US form (common practice (no source)).
    p = write(tmp_path, "u.csv", b"Date Time,T\n02/28/2024 23:59:59,1\n02/29/2024 00:00:00,2\n")
    rec = read_recording(p)
    assert rec.time.values.tolist() == [ns(datetime(2024, 2, 28, 23, 59, 59)), ns(datetime(2024, 2, 29))]


def test_slash_dates_with_a_first_field_above_12_are_day_first(tmp_path):
    p = write(tmp_path, "e.csv", b"time,T\n12/03/2024 10:00:00,1\n13/03/2024 10:00:00,2\n")
    rec = read_recording(p)
    assert rec.time.values.tolist() == [ns(datetime(2024, 3, 12, 10)), ns(datetime(2024, 3, 13, 10))]


def test_date_and_time_columns_with_end_of_day_2400(tmp_path):
    # ISO 8601 (clause 4.2.3 in the 2004 edition): 24:00 is the end of a day, the same instant as 00:00 of the next.
    text = "Date;Time;v\n2024-02-29;23:59:58;1\n2024-02-29;23:59:59;2\n2024-02-29;24:00;3\n2024-03-01;00:00:01;4\n"
    rec = read_recording(write(tmp_path, "dt.csv", text.encode()))
    base = datetime(2024, 2, 29, 23, 59, 58)
    assert rec.time.values.tolist() == [ns(base + timedelta(seconds=k)) for k in range(4)]
    assert rec.time.columns == ("Date", "Time") and rec.rate == 1.0
    text = ("Datum;Uhrzeit;v\n29.02.2024;23:59:58;1\n29.02.2024;23:59:59;2\n29.02.2024;24:00:00;3\n"
            "01.03.2024;00:00:01;4\n")
    rec = read_recording(write(tmp_path, "dt2.csv", text.encode()))
    assert rec.time.values.tolist() == [ns(base + timedelta(seconds=k)) for k in range(4)]


def test_us_logger_export_with_two_digit_years_pm_and_a_zone_in_the_header(tmp_path):
    # The layout of a common US logger's CSV export (from memory): a title line, a record-number column, the
    # zone in the time column's header, two-digit years and a 12-hour clock, serial numbers in parentheses.
    text = ('"Plot Title: 10556143"\r\n'
            '"#","Date Time, GMT-05:00","Temp, \u00b0F (LGR S/N: 10556143)","RH, % (LGR S/N: 10556143)"\r\n'
            '1,03/05/24 11:45:00 AM,68.123,45.67\r\n2,03/05/24 12:00:00 PM,68.200,45.50\r\n'
            '3,03/05/24 12:15:00 PM,68.250,45.25\r\n4,03/06/24 12:30:00 AM,60.000,50.00\r\n')
    rec = read_recording(write(tmp_path, "hobo.csv", text.encode("utf-8")))
    minus5 = timezone(timedelta(hours=-5))    # "24" is 2024 as POSIX strptime %y reads it (00-68 -> 20xx)
    expect = [datetime(2024, 3, 5, 11, 45, tzinfo=minus5), datetime(2024, 3, 5, 12, tzinfo=minus5),
              datetime(2024, 3, 5, 12, 15, tzinfo=minus5), datetime(2024, 3, 6, 0, 30, tzinfo=minus5)]
    assert rec.time.zone == "-05:00" and rec.time.values.tolist() == [ns(t) for t in expect]
    assert rec.notes == ('"Plot Title: 10556143"',) and rec.rate == 1 / 900
    assert [(c.name, c.unit) for c in rec.channels] == [
        ("#", ""), ("Temp, \u00b0F (LGR S/N: 10556143)", ""), ("RH, % (LGR S/N: 10556143)", "")]
    assert rec.column(1).tolist() == [68.123, 68.2, 68.25, 60.0]


def test_a_units_row_under_the_names(tmp_path):
    text = "Messung 12\nZeit;Temp;Feuchte;Kommentar\ns;°C;%RH;\n0,0;21,5;45;ok\n1,0;21,6;46;\n"
    rec = read_recording(write(tmp_path, "u.csv", text.encode("cp1252")))
    assert [(c.name, c.unit) for c in rec.channels] == [("Temp", "°C"), ("Feuchte", "%RH")]
    assert rec.time.values.tolist() == [0.0, 1.0] and rec.notes == ("Messung 12",)
    # a row of one-letter names is not a units row, though "a" is also the ampere's symbol
    rec = read_recording(write(tmp_path, "ab.csv", b"Run 7;x;y\nt;a;v\n0;1;2\n1;3;4\n"))
    assert [c.name for c in rec.channels] == ["a", "v"] and rec.notes == ("Run 7;x;y",)
    # a preamble line of the same width above the names is not mistaken for the names
    text = "Station;Halle 3\nZeit;Temp\n0;21,5\n1;21,6\n"
    rec = read_recording(write(tmp_path, "p2.csv", text.encode()))
    assert [c.name for c in rec.channels] == ["Temp"] and rec.notes == ("Station;Halle 3",)


def test_campbell_toa5_file(tmp_path):
    # The TOA5 layout of Campbell Scientific loggers (their manuals; from memory): environment line, field names,
    # units, processing, then data; "NAN" marks a missing value.
    text = ('"TOA5","CR1000","CR1000","1234","CR1000.Std.32","CPU:weather.CR1","12345","Hourly"\r\n'
            '"TIMESTAMP","RECORD","BattV_Min","AirTC_Avg","RH"\r\n'
            '"TS","RN","Volts","Deg C","%"\r\n'
            '"","","Min","Avg","Smp"\r\n'
            '"2024-03-05 14:00:00",0,12.51,21.3,45\r\n'
            '"2024-03-05 15:00:00",1,12.5,"NAN",46\r\n'
            '"2024-03-05 16:00:00",2,12.49,21.1,47\r\n')
    rec = read_recording(write(tmp_path, "CR1000_Hourly.dat", text.encode()))
    assert rec.time.values.tolist() == [ns(datetime(2024, 3, 5, 14 + k)) for k in range(3)]
    assert rec.rate == 1 / 3600 and rec.time.zone is None
    assert [(c.name, c.unit) for c in rec.channels] == [
        ("RECORD", "RN"), ("BattV_Min", "Volts"), ("AirTC_Avg", "Deg C"), ("RH", "%")]
    assert rec.column(1).tolist() == [12.51, 12.5, 12.49] and np.isnan(rec.column(2)[1])
    assert rec.notes[0].startswith('"TOA5"') and rec.notes[1] == '"","","Min","Avg","Smp"'


def test_epoch_and_elapsed_seconds(tmp_path):
    p = write(tmp_path, "ep.csv", b"epoch,x\n1709647200.5,1\n1709647201.5,2\n")
    rec = read_recording(p)
    assert rec.time.kind == "seconds" and rec.time.values.tolist() == [1709647200.5, 1709647201.5]
    # Reference: POSIX time counts seconds since 1970-01-01T00:00Z; stdlib datetime arithmetic.
    assert rec.start == datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(seconds=1709647200.5)
    p = write(tmp_path, "el.csv", b"Elapsed (s),x [V]\n0.000,1\n0.125,2\n0.250,3\n")
    rec = read_recording(p)
    assert rec.time.kind == "seconds" and rec.time.zone is None and rec.start is None
    assert rec.time.values.tolist() == [0.0, 0.125, 0.25] and rec.rate == 8.0 and rec.channels[0].unit == "V"


def test_a_gap_is_kept_and_the_rate_is_nominal(tmp_path):
    # A 1 Hz file with a 60-row gap, packed with --rate 1, used to unpack every later sample 60 s early.
    t0 = datetime(2024, 3, 5, 14)
    stamps = [t0 + timedelta(seconds=k) for k in range(100)] + [t0 + timedelta(seconds=160 + k) for k in range(100)]
    text = "time,x\n" + "".join(f"{s.isoformat()},{i}\n" for i, s in enumerate(stamps))
    p = write(tmp_path, "gap.csv", text.encode())
    for rate in (None, 1.0):
        rec = read_recording(p, rate=rate)
        assert rec.rate == 1.0 and rec.time.values.tolist() == [ns(s) for s in stamps]
    timing = survey_source(p).timing
    assert "1 gap(s), the largest 61 s" in timing


def test_nominal_rate_of_a_3_hz_clock_with_a_gap(tmp_path):
    # 1/3 s steps printed to the millisecond (333 or 334 ms), then a 10 s gap: the median step is 333 ms,
    # within the 1 ms tolerance of 1/3 s, so the nominal rate is 3 Hz (not 3.003003...).
    t0 = datetime(2024, 1, 1)
    stamps = [t0 + timedelta(milliseconds=round(1000 * k / 3)) for k in range(60)]
    stamps += [s + timedelta(seconds=30) for s in stamps]
    text = "time,x\n" + "".join(f"{s.isoformat(timespec='milliseconds')},{k}\n" for k, s in enumerate(stamps))
    rec = read_recording(write(tmp_path, "g3.csv", text.encode()))
    assert rec.rate == 3.0 and rec.time.values.tolist() == [ns(s) for s in stamps]


@pytest.mark.parametrize("gap", [False, True])
def test_a_15_minute_logger_has_rate_one_over_900(tmp_path, gap):
    # 15 min = 900 s; the nominal rate is the float nearest 1/900 Hz (IEEE-754 division), not 0.00111111.
    t0 = datetime(2024, 1, 1)
    stamps = [t0 + timedelta(minutes=15 * k + (600 if gap and k > 5 else 0)) for k in range(10)]
    text = "time,x\n" + "".join(f"{s:%Y-%m-%dT%H:%M:%S},{k}\n" for k, s in enumerate(stamps))
    assert read_recording(write(tmp_path, "q.csv", text.encode())).rate == 1 / 900


def test_jitter_and_a_clock_set_back_are_accepted(tmp_path):
    steps_ms = [1000, 1003, 997, 1000, -3000, 1000, 1000]
    t, lines = 0, []
    for k, s in enumerate([0] + steps_ms):
        t += s
        lines.append(f"{(datetime(2024, 1, 1) + timedelta(milliseconds=t)).isoformat(timespec='milliseconds')},{k}")
    rec = read_recording(write(tmp_path, "j.csv", ("time,x\n" + "\n".join(lines) + "\n").encode()))
    assert np.diff(rec.time.values).tolist() == [s * 1_000_000 for s in steps_ms] and rec.rate == 1.0
    timing = survey_source(tmp_path / "j.csv").timing
    assert "1 step(s) back in time" in timing and "2 jittered step(s)" in timing and "repeated" not in timing
    p = write(tmp_path, "rep.csv", b"time,x\n0,1\n1,2\n1,3\n2,4\n3,5\n")
    assert "1 repeated time(s)" in survey_source(p).timing


def test_rate_beside_a_time_column_must_agree_and_without_time_is_explicit(tmp_path):
    p = write(tmp_path, "r.csv", b"time,x\n2024-01-01T00:00:00,1\n2024-01-01T00:00:01,2\n2024-01-01T00:00:02,3\n")
    with pytest.raises(BadInput, match="disagrees") as err:
        read_recording(p, rate=10)
    assert "--without-time" not in str(err.value)     # never advise the option that throws time away
    rec = read_recording(p, rate=10, options=ReadOptions(without_time=True))
    assert rec.time is None and rec.rate == 10.0 and rec.start == datetime(2024, 1, 1)
    with pytest.raises(BadInput, match="--rate"):
        read_recording(p, options=ReadOptions(without_time=True))


def test_last_sample_after_2262_is_refused_at_ingest_with_the_store_limit(tmp_path):
    # int64 nanoseconds since 1970 end on 2262-04-11 (numpy datetime64[ns] range, numpy docs): a span ending in
    # 2270 cannot be stored, so ingest must refuse it with the same limit the store uses (was: 2300 at ingest).
    p = write(tmp_path, "late.csv", b"time,x\n2250-01-01T00:00:00,1\n2250-01-01T00:00:01,2\n2250-01-01T00:00:02,3\n")
    rate = 2 / ((datetime(2270, 1, 1) - datetime(2250, 1, 1)).total_seconds())   # 3 samples from 2250 to 2270
    with pytest.raises(BadInput, match="after 2262"):
        read_recording(p, rate=rate, options=ReadOptions(without_time=True))


def test_absurd_rates_are_refused(tmp_path):
    p = write(tmp_path, "z.csv", b"time,x\n2024-01-01T00:00:00,1\n2024-01-01T00:00:01,2\n2024-01-01T00:00:02,3\n")
    with pytest.raises(BadInput, match="after 2262"):    # 3 samples at 1e-10 Hz: 317 years apart each
        read_recording(p, rate=1e-10, options=ReadOptions(without_time=True))
    with pytest.raises(BadInput, match="share a nanosecond"):
        read_recording(p, rate=1e12, options=ReadOptions(without_time=True))
    with pytest.raises(BadInput, match="does not advance"):   # duplicate timestamps: no rate at all
        read_recording(write(tmp_path, "dup.csv", b"time,x\n2024-01-01T00:00:00,1\n2024-01-01T00:00:00,2\n"
                                                   b"2024-01-01T00:00:00,3\n"))


def test_a_single_row_keeps_its_time_with_a_given_rate(tmp_path):
    p = write(tmp_path, "one.csv", b"time,x\n2024-01-01T00:00:00Z,1.5\n")
    with pytest.raises(BadInput, match="single row"):
        read_recording(p)
    rec = read_recording(p, rate=2)
    assert rec.rate == 2.0 and rec.time.values.tolist() == [ns(datetime(2024, 1, 1))] and rec.time.zone == "Z"


def test_no_time_column_needs_a_rate(tmp_path):
    p = write(tmp_path, "nt.csv", b"a,b\n1,2\n3,4\n")
    with pytest.raises(BadInput, match="--rate"):
        read_recording(p)
    assert read_recording(p, rate=5).time is None


# --- text columns and missing values --------------------------------------------------------------

def test_status_and_note_columns_are_kept_as_text(tmp_path):
    # RFC 4180: a quoted field may hold the delimiter ("door, open").
    text = 'time,temp,status,note\n0,1.5,OK,\n1,NA,ALARM,"door, open"\n2,2.5,OK,NA\n'
    p = write(tmp_path, "s.csv", text.encode())
    rec = read_recording(p)
    assert [c.name for c in rec.channels] == ["temp"] and np.isnan(rec.column(0)[1])
    assert rec.extra.column("status").to_pylist() == ["OK", "ALARM", "OK"]
    assert rec.extra.column("note").to_pylist() == [None, "door, open", "NA"]   # text kept as written
    rec = read_recording(p, options=ReadOptions(skip_text=True))
    assert rec.extra is None and rec.n_samples == 3


def test_missing_tokens_and_sentinels(tmp_path):
    # "NaN" and empty cells meaning "no value": common practice (no source); -9999 is the user's sentinel.
    text = "time,a,b\n0,1.5,-9999\n1,ERR,2\n2,,-9999.0\n3,NaN,4\n"
    p = write(tmp_path, "m.csv", text.encode())
    rec = read_recording(p)                 # ERR is not a known token: column a is text
    assert [c.name for c in rec.channels] == ["b"] and rec.extra.column("a").to_pylist()[1] == "ERR"
    rec = read_recording(p, options=ReadOptions.build(missing="ERR,-9999"))
    a, b = rec.column(0), rec.column(1)
    assert a[0] == 1.5 and np.isnan(a[1:]).tolist() == [True, True, True]
    assert b.tolist() == [-9999.0, 2.0, -9999.0, 4.0]              # sentinels are kept as logged
    assert [c.sentinels for c in rec.channels] == [(-9999.0,), (-9999.0,)]
    cols = {c.header: c for c in survey_source(p, options=ReadOptions.build(missing="ERR,-9999")).columns}
    assert cols["a"].missing == 3 and set(cols["a"].tokens) == {"", "ERR", "NaN"} and cols["b"].sentinels == 2


# --- .npy names and units, dry run -----------------------------------------------------------------

def test_npy_names_and_units_from_the_command_line(tmp_path):
    p = tmp_path / "x.npy"
    np.save(p, np.zeros((10, 2), dtype=np.float32))
    rec = read_recording(p, rate=100, options=ReadOptions.build(names="strain, load", units="ue,kN"))
    assert [(c.name, c.unit) for c in rec.channels] == [("strain", "ue"), ("load", "kN")]
    with pytest.raises(BadInput, match="2 column"):
        read_recording(p, rate=100, options=ReadOptions.build(names="strain"))
    out = tmp_path / "x.tsa"
    assert main(["pack", str(p), "-o", str(out), "--rate", "100", "--names", "strain,load", "--units", "ue,kN",
                 "--code-size", "0"]) == 0
    from tsarchive import open as open_archive
    assert [(c.name, c.unit) for c in open_archive(out).channels] == [("strain", "ue"), ("load", "kN")]


def test_dry_run_reports_and_writes_nothing(tmp_path, capsys):
    text = "# logger 7\ntime;temp [°C];status\n2024-01-01 00:00:00;21,5;OK\n2024-01-01 00:00:01;NA;OK\n"
    p = write(tmp_path, "dry.csv", text.encode("cp1252"))
    before = sorted(tmp_path.iterdir())
    assert main(["pack", str(p), "--dry-run", "-o", str(tmp_path / "out.tsa")]) == 0
    out = capsys.readouterr().out
    assert sorted(tmp_path.iterdir()) == before
    for word in ("cp1252", "semicolon", "comma", "1 line(s)", "# logger 7", "°C", "text", "regular, 1 Hz", "'NA'"):
        assert word in out, word
    import json
    assert main(["pack", str(p), "--dry-run", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert [(c["header"], c["role"], c["unit"], c["missing"]) for c in d["columns"]] == [
        ("time", "time", "", 0), ("temp [°C]", "channel", "°C", 1), ("status", "text", "", 0)]
    assert d["preamble"] == ["# logger 7"] and d["encoding"] == "cp1252" and sorted(tmp_path.iterdir()) == before


# --- end to end ----------------------------------------------------------------------------------

def test_a_german_logger_file_packs_and_verifies(tmp_path):
    # ;-separated, decimal commas, a station preamble, a status column and a 30 s gap: used to be refused whole.
    t0 = datetime(2024, 3, 5, 14)
    rows, temps = [], []
    for k in range(400):
        t = t0 + timedelta(seconds=k + (30 if k >= 200 else 0))
        temps.append(round(20 + 0.01 * k, 2))
        decimal_comma = f"{temps[-1]:.2f}".replace(".", ",")
        rows.append(f"{t:%d.%m.%Y %H:%M:%S};{decimal_comma};OK")
    text = "Station;Halle 3\r\nLogger;XY-200\r\nZeit;Temp [°C];Status\r\n" + "\r\n".join(rows) + "\r\n"
    p = write(tmp_path, "halle.csv", text.encode("cp1252"))
    out = tmp_path / "halle.tsa"
    assert main(["pack", str(p), "-o", str(out), "--budget", "lossless", "--code-size", "0"]) == 0
    from tsarchive import open as open_archive
    arc = open_archive(out)
    assert arc.channels[0].rate == 1.0 and arc.channels[0].unit == "°C"
    # Reference: Python's float() of the "%.2f" text written above.
    assert arc.read("Temp").tolist() == [float(f"{v:.2f}") for v in temps]
    assert main(["verify", str(out), "--against", str(p)]) == 0


def test_a_naive_start_is_stored_as_logged_whatever_the_machine_zone(tmp_path, monkeypatch):
    # datetime.astimezone() on a naive time takes it as the machine's local time (Python docs, "datetime"):
    # a naive logger start must not move with the packing machine's TZ.
    import time as _time
    p = write(tmp_path, "tz.csv", b"time,x\n2024-03-05 14:00:00,1\n2024-03-05 14:00:01,2\n2024-03-05 14:00:02,3\n")
    monkeypatch.setenv("TZ", "America/New_York")
    _time.tzset()
    try:
        out = tmp_path / "tz.tsa"
        assert main(["pack", str(p), "-o", str(out), "--code-size", "0"]) == 0
    finally:
        monkeypatch.delenv("TZ")
        _time.tzset()
    from tsarchive import open as open_archive
    assert open_archive(out).channels[0].start == datetime(2024, 3, 5, 14)



@settings(max_examples=200, deadline=None)
@given(st.lists(st.datetimes(min_value=datetime(1900, 1, 1), max_value=datetime(2261, 12, 31)), min_size=1,
                max_size=5),
       st.sampled_from(["%Y-%m-%dT%H:%M:%S.%f", "%Y-%m-%d %H:%M:%S,%f", "%d.%m.%Y %H:%M:%S.%f",
                        "%m/%d/%Y %H:%M:%S.%f"]))
def test_time_forms_match_the_standard_library(stamps, fmt):
    # Reference: datetime.strftime writes the text, stdlib datetime arithmetic gives the nanoseconds.
    found = parse_datetimes(pa.array([t.strftime(fmt) for t in stamps]), "time", None)
    assert found is not None and found.axis.zone is None
    assert found.axis.values.tolist() == [ns(t) for t in stamps]
