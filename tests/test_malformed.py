"""The malformed-input catalogue: each file is refused by ``tsarchive pack`` with one line, exit 2, nothing written.

Every file is written byte for byte here (or by numpy / pyarrow for .npy and
.parquet), as a broken logger, a careless export or a damaged copy would leave it.
"""

from __future__ import annotations

import io
import struct
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from tsarchive.cli import main


def _wav(tag=1, nch=1, rate=8000, bits=16, payload=b"\x01\x00\x02\x00", data_size=None, riff=b"RIFF",
         data=True, align=None) -> bytes:
    """A RIFF WAVE file (Microsoft RIFF spec 1991), optionally broken in one field."""
    align = nch * bits // 8 if align is None else align
    fmt = struct.pack("<HHIIHH", tag, nch, rate, rate * max(align, 1), align, bits)
    body = b"WAVE" + b"fmt " + struct.pack("<I", 16) + fmt
    if data:
        body += b"data" + struct.pack("<I", len(payload) if data_size is None else data_size) + payload
    return riff + struct.pack("<I", len(body)) + body


def _npy(arr, allow_pickle=False) -> bytes:
    buf = io.BytesIO()
    np.save(buf, arr, allow_pickle=allow_pickle)
    return buf.getvalue()


def _parquet(table: pa.Table) -> bytes:
    buf = io.BytesIO()
    pq.write_table(table, buf)
    return buf.getvalue()


def _edf_full() -> bytes:
    """pyedflib's reference file tests/data/test_generator.edf (EDF+C)."""
    pyedflib = pytest.importorskip("pyedflib")
    return (Path(pyedflib.__file__).parent / "tests" / "data" / "test_generator.edf").read_bytes()


def _edf_head() -> bytes:
    return _edf_full()[:1000]


ISO3 = b"time,x\n2024-01-01T00:00:00,1\n2024-01-01T00:00:01,2\n2024-01-01T00:00:02,3\n"

# (file name, content, extra pack arguments, a word the one-line message must contain)
CATALOGUE = [
    ("empty.csv", b"", [], "empty"),
    ("blank_lines.csv", b"\n\n   \n\t\n", [], "empty"),
    ("header_only.csv", b"time,x [V]\n", [], "no data"),
    ("no_header.csv", b"1,2\n3,4\n5,6\n", ["--rate", "1"], "header"),
    ("words_only.csv", b"alpha,beta\ngamma,delta\n", ["--rate", "1"], "no data rows"),
    ("nul_bytes.csv", b"time,x\n0,1\x00\x00\x00\n", [], "NUL"),
    ("bad_bom.csv", b"\xef\xbb\xbftime,x\n0,\xff\n", [], "UTF-8"),
    ("bad_utf16.csv", b"\xff\xfet\x00i\x00m", [], "UTF-16"),
    ("short_row.csv", b"time,a,b\n0,1,2\n1,2\n2,3,4\n3,4,5\n", [], "row"),
    ("long_row.csv", b"time,a\n0,1\n1,2,3\n2,3\n3,4\n", [], "row"),
    ("time_gap_cell.csv", b"time,x\n0,1\n,2\n2,3\n3,4\n", [], "row 2"),
    ("toa5_cut.dat", b'"TOA5","CR1000"\r\n"TIMESTAMP","RECORD"\r\n', [], "cut short"),
    ("toa5_ragged.dat", b'"TOA5","CR1000"\r\n"TIMESTAMP","RECORD","T"\r\n"TS","RN"\r\n"","",""\r\n'
                        b'"2024-01-01 00:00:00",0,1\r\n', [], "damaged"),
    ("binary.dat", bytes(range(256)) * 4, [], "NUL"),
    ("time_of_day.csv", b"Time,x\n23:59:58,1\n23:59:59,2\n00:00:00,3\n", [], "without dates"),
    ("time_words.csv", b"time,x\nmonday,1\ntuesday,2\nwednesday,3\n", [], "neither a date"),
    ("feb_30.csv", b"time,x\n2024-02-29T00:00:00,1\n2024-02-30T00:00:00,2\n2024-03-01T00:00:00,3\n", [], "row 2"),
    ("hour_25.csv", b"time,x\n2024-01-01 23:00:00,1\n2024-01-01 25:00:00,2\n2024-01-02 00:00:00,3\n", [], "row 2"),
    ("end_of_day_2430.csv", b"Date,Time,x\n2024-01-01,23:00,1\n2024-01-01,24:30,2\n2024-01-02,01:00,3\n", [],
     "row 2"),
    ("year_1850.csv", b"time,x\n1850-01-01T00:00:00,1\n1850-01-01T00:00:01,2\n1850-01-01T00:00:02,3\n", [], "1900"),
    ("year_2400.csv", b"time,x\n2400-01-01T00:00:00,1\n2400-01-01T00:00:01,2\n2400-01-01T00:00:02,3\n", [], "2261"),
    ("mixed_zones.csv", b"time,x\n2024-01-01T00:00:00Z,1\n2024-01-01T00:00:01,2\n2024-01-01T00:00:02Z,3\n", [],
     "offset"),
    ("one_row.csv", b"time,x\n2024-01-01T00:00:00,1\n", [], "single row"),
    ("quoted_open.csv", b'time,x\n0,1\n1,"2\n2,3\n3,4\n', [], "row"),
    ("same_time.csv", b"time,x\n2024-01-01T00:00:00,1\n2024-01-01T00:00:00,2\n2024-01-01T00:00:00,3\n", [],
     "does not advance"),
    ("backwards.csv", b"time,x\n3,1\n2,2\n1,3\n0,4\n", [], "does not advance"),
    ("text_only.csv", b"time,status\n0,OK\n1,OK\n2,ALARM\n", [], "no numeric column"),
    ("twice.csv", b"time,a [V],a [mV]\n0,1,2\n1,2,3\n2,3,4\n", [], "twice"),
    ("unnamed.csv", b"time,a,\n0,1,5\n1,2,6\n2,3,7\n", [], "no name"),
    ("no_time.csv", b"a,b\n1,2\n3,4\n5,6\n", [], "--rate"),
    ("rate_disagrees.csv", ISO3, ["--rate", "50"], "disagrees"),
    ("rate_zero.csv", b"a,b\n1,2\n3,4\n", ["--rate", "0"], "positive"),
    ("rate_negative.csv", b"a,b\n1,2\n3,4\n", ["--rate", "-5"], "positive"),
    ("rate_nan.csv", b"a,b\n1,2\n3,4\n", ["--rate", "nan"], "positive"),
    ("rate_terahertz.csv", b"a,b\n1,2\n3,4\n", ["--rate", "1e12"], "nanosecond"),
    ("without_time_no_rate.csv", ISO3, ["--without-time"], "--rate"),
    ("without_time_slow.csv", ISO3, ["--without-time", "--rate", "1e-10"], "2262"),
    ("bad_zone.csv", ISO3, ["--zone", "+25:00"], "zone"),
    ("named_zone.csv", ISO3, ["--zone", "Berlin"], "zone"),
    ("empty_missing_item.csv", ISO3, ["--missing", "NA,,x"], "empty item"),
    ("epoch_millis.csv", b"epoch,x\n1709647200000,1\n1709647201000,2\n", [], "milliseconds"),
    ("elapsed_inf.csv", b"Elapsed (s),x\n0,1\ninf,2\n2,3\n", [], "row 2"),
    ("sheet.xlsx", b"PK\x03\x04 not a table", [], "unsupported"),
    ("fake.parquet", b"PAR1 not really parquet", [], "Parquet"),
    ("strings.parquet", lambda: _parquet(pa.table({"time": [0.0, 1.0], "s": ["a", "b"]})), [], "no numeric"),
    ("no_rows.parquet", lambda: _parquet(pa.table({"x": pa.array([], pa.float64())})), ["--rate", "1"], "no data"),
    ("null_stamp.parquet", lambda: _parquet(pa.table({"t": pa.array([0, None, 2_000_000_000], pa.timestamp("ns")),
                                                       "x": [1.0, 2.0, 3.0]})), [], "empty cells"),
    ("objects.npy", lambda: _npy(np.array([1, "x"], dtype=object), allow_pickle=True), ["--rate", "1"], "numeric"),
    ("cube.npy", lambda: _npy(np.zeros((2, 2, 2))), ["--rate", "1"], "dimensions"),
    ("no_rate.npy", lambda: _npy(np.zeros(4)), [], "--rate"),
    ("cut.npy", lambda: _npy(np.arange(1000.0))[:300], ["--rate", "1"], ".npy"),
    ("few_names.npy", lambda: _npy(np.zeros((4, 3))), ["--rate", "1", "--names", "a,b"], "3 column"),
    ("many_units.npy", lambda: _npy(np.zeros((4, 1))), ["--rate", "1", "--units", "V,A"], "1 column"),
    ("same_names.npy", lambda: _npy(np.zeros((4, 2))), ["--rate", "1", "--names", "a,a"], "twice"),
    ("not_riff.wav", b"OggS" + b"\x00" * 40, [], "not a WAV"),
    ("rf64.wav", b"RF64" + b"\xff" * 4 + b"WAVE" + b"\x00" * 40, [], "RF64"),
    ("cut_data.wav", _wav(data_size=4000), [], "cut short"),
    ("no_data.wav", _wav(data=False), [], "no 'data'"),
    ("mulaw.wav", _wav(tag=7, bits=8, payload=b"\x01\x02"), [], "mu-law"),
    ("zero_channels.wav", _wav(nch=0, align=2), [], "channel"),
    ("odd_frames.wav", _wav(nch=2, payload=b"\x01\x00\x02\x00\x03\x00"), [], "whole number"),
    ("zero_rate.wav", _wav(rate=0), [], "sample rate"),
    ("silent.wav", _wav(payload=b""), [], "no samples"),
    ("wav_rate.wav", _wav(), ["--rate", "44100"], "disagrees"),
    ("garbage.edf", b"0       " + b"x" * 300, [], "EDF"),
    ("cut.edf", _edf_head, [], "EDF"),
    ("gaps.edf", lambda: _edf_full()[:192] + b"EDF+D".ljust(44) + _edf_full()[236:], [], "discontinuous"),
]


def test_the_catalogue_is_large_enough():
    assert len(CATALOGUE) >= 40 and len({c[0] for c in CATALOGUE}) == len(CATALOGUE)


@pytest.mark.parametrize("name,content,args,word", CATALOGUE, ids=[c[0] for c in CATALOGUE])
def test_malformed_source_is_refused_cleanly(tmp_path, capsys, name, content, args, word):
    src = tmp_path / name
    src.write_bytes(content() if callable(content) else content)
    before = sorted(p.name for p in tmp_path.iterdir())
    code = main(["pack", str(src), "-o", str(tmp_path / "out.tsa"), "--code-size", "0", *args])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("tsarchive: error: "), err
    assert "Traceback" not in err and word in lines[0].replace(name, ""), lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == before        # nothing written beside the source


def test_folder_and_missing_sources(tmp_path, capsys):
    (tmp_path / "dir.csv").mkdir()
    assert main(["pack", str(tmp_path / "dir.csv"), "-o", str(tmp_path / "o.tsa")]) == 2
    assert main(["pack", str(tmp_path / "gone.csv"), "-o", str(tmp_path / "o.tsa")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and "folder" in err[0] and "no such file" in err[1]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dir.csv"]


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from tsarchive.errors import BadInput  # noqa: E402
from tsarchive.ingest import read_recording  # noqa: E402

# Pieces loggers' files are made of; any text of them is either read or refused with BadInput, never a crash.
_PIECES = ["0", "1", "25", "9", ".", ",", ";", "\t", "\n", "\r\n", "-", ":", "T", "Z", "+01:00", " ", "NA", '"', "#",
           "2024-01-01", "05.03.2024", "03/05/2024", "12:00:00", "24:00", "°", "[V]", "(s)", "time", "Date", "Time",
           "Elapsed (s)", "epoch", "nan", "inf", "OK", "-9999"]


@settings(max_examples=150, deadline=None)
@given(st.lists(st.sampled_from(_PIECES), max_size=60), st.booleans(), st.sampled_from(["utf-8", "cp1252"]))
def test_any_logger_like_text_is_read_or_refused_with_bad_input(tmp_path_factory, pieces, with_rate, encoding):
    p = tmp_path_factory.mktemp("fz") / "f.csv"
    p.write_bytes("".join(pieces).encode(encoding))
    try:
        rec = read_recording(p, rate=1.0 if with_rate else None)
    except BadInput:
        return
    assert rec.n_samples >= 1 and rec.data.shape[1] == len(rec.channels) >= 1
