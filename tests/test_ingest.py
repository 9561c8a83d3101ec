"""Readers (.npy, .csv, .parquet), grid detection, the time-spec parser and the sample streams."""

from __future__ import annotations

import hashlib
import importlib.util
import math
from datetime import datetime, timedelta, timezone
from pathlib import Path

from decimal import Decimal

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tsarchive.errors import BadInput, SourceNotFound
from tsarchive.ingest import read_recording
from tsarchive.ingest import grid
from tsarchive.ingest.grid import detect_decimals
from tsarchive.timespec import parse_time

ROOT = Path(__file__).resolve().parents[1]
STREAMS = ROOT / "sample_streams"
UTC = timezone.utc


def _csv(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


# --- grid detection ----------------------------------------------------------------------------

@pytest.mark.parametrize("d", [1, 2, 3, 4, 5, 6])
def test_grid_detects_python_fixed_point_formatting(d):
    # Reference: Python's "%.{d}f" formatting and float() parsing, which is correctly rounded
    # (IEEE-754 round-to-nearest, Python docs "Floating point arithmetic").  Values are k / 10**d
    # with k not a multiple of 10, so d is the smallest grid they lie on.
    rng = np.random.default_rng(d)
    k = rng.integers(-10**7, 10**7, 5000)
    k[k % 10 == 0] += 1
    values = np.array([float("%.*f" % (d, kk / 10**d)) for kk in k.tolist()])
    assert detect_decimals(values, np.float64) == d


def test_grid_two_decimals_from_measurement_like_values():
    # Reference: Python's "%.2f" formatting (round-half-even on the binary value) then float().
    x = np.random.default_rng(1).normal(23.0, 5.0, 20000)
    values = np.array([float("%.2f" % v) for v in x.tolist()])
    assert detect_decimals(values, np.float64) == 2


def test_grid_float32_source():
    # Reference: numpy's string -> float32 conversion of "%.3f" text.
    x = np.random.default_rng(2).uniform(-50, 50, 5000)
    text = ["%.3f" % v for v in x.tolist()]
    text[0] = "1.001"  # ensure three decimals are needed
    values = np.array(text, dtype=np.float32)
    assert detect_decimals(values, np.float32) == 3
    assert detect_decimals(values.astype(np.float64), np.float64) is None  # the widened floats are off-grid


def test_grid_integers_nan_inf_and_none():
    assert detect_decimals(np.array([1, 2, 3], dtype=np.int16)) == 0
    assert detect_decimals(np.array([1.0, -7.0, 1e15, np.nan, np.inf, -np.inf])) == 0
    assert detect_decimals(np.array([0.5, np.nan, -np.inf, 2.25])) == 2
    assert detect_decimals(np.array([np.nan, np.nan])) == 0  # vacuous, documented
    assert detect_decimals(np.random.default_rng(3).standard_normal(1000)) is None
    # "%.7f" values need 7 decimals (MAX_DECIMALS was 6: they had no grid)
    assert detect_decimals(np.array([float("%.7f" % (1 + 1e-7 * k)) for k in range(1, 500, 7)])) == 7
    # beyond 6 decimals, no grid finer than an eighth of the floats' spacing (2**50 points for float64):
    # "%.8f" of values near 2e7 (2e7 * 1e8 > 2**50) has none
    assert detect_decimals(np.array([float("%.8f" % (2e7 + 1e-8 * k)) for k in range(1, 500, 7)])) is None
    # float32 has 24 significand bits: every float32 near 1 is the rounding of some 8-decimal number, so
    # 8 decimals would fit any float32 column; a grid is found only where it is coarser than 2**21 points
    noise = np.random.default_rng(5).uniform(0.5, 1.0, 1000).astype(np.float32)
    assert detect_decimals(noise, np.float32) is None
    assert detect_decimals(np.float32([1.234e-7, 5.5e-6, 2.001e-4]), np.float32) == 10


def _decimals_written(text: str) -> int:
    """Decimals a number as written needs (Python's decimal module: the exponent after dropping trailing
    zeros), the outside reference for the detected grid."""
    return max(0, -Decimal(text).normalize().as_tuple().exponent)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.integers(1000, 9999), st.integers(-12, -3)), min_size=1, max_size=40),
       st.booleans())
def test_grid_of_values_in_scientific_notation_spanning_decades(mantissas, upper):
    # A logger writing "%.3e" (an X-ray flux, a vacuum gauge's pressure): "1.234e-07" is 1234 / 10**10.
    # Reference: Python's float() of the text and the decimal module's count of the decimals written.
    text = [f"{m // 1000}.{m % 1000:03d}{'E' if upper else 'e'}{e:+03d}" for m, e in mantissas]
    values = np.array([float(t) for t in text])
    want = max(_decimals_written(t) for t in text)
    found = detect_decimals(values)
    assert found == want
    scale = 10.0 ** found
    assert np.array_equal(np.round(values * scale) / scale, values)


def test_grid_checks_a_strided_sample_of_long_columns(monkeypatch):
    monkeypatch.setattr(grid, "MAX_CHECKED", 100)
    values = np.round(np.linspace(0, 10, 1000), 1)
    values[5] = 0.123  # index 5 is not on the stride of 10, so it is not examined (documented)
    assert detect_decimals(values) == 1
    values[10] = 0.123  # on the stride
    assert detect_decimals(values) == 3


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(-10**9, 10**9), min_size=1, max_size=50), st.integers(0, 6))
def test_grid_never_exceeds_the_formatting_decimals(ks, d):
    # Reference: Python "%.{d}f" formatting; the detected grid is at most d decimals.
    values = np.array([float("%.*f" % (d, k / 10**d)) for k in ks])
    found = detect_decimals(values)
    assert found is not None and found <= d
    scale = 10.0 ** found
    assert np.array_equal(np.round(values * scale) / scale, values)


# --- dispatch and .npy -------------------------------------------------------------------------

def test_missing_and_unsupported(tmp_path):
    with pytest.raises(SourceNotFound):
        read_recording(tmp_path / "nope.csv")
    (tmp_path / "x.xyz").write_text("a\n1\n")
    with pytest.raises(BadInput, match=r"\.npy, \.csv, .*\.parquet"):
        read_recording(tmp_path / "x.xyz")


def test_npy_1d_is_memory_mapped_and_keeps_shape(tmp_path):
    p = tmp_path / "a.npy"
    arr = np.arange(1000, dtype=np.float32) * 0.5
    np.save(p, arr)
    rec = read_recording(p, rate=250)
    assert rec.shape == (1000,) and rec.data.shape == (1000, 1)
    assert isinstance(rec.data.base, np.memmap) or isinstance(rec.data, np.memmap)
    assert not rec.data.flags.writeable
    assert rec.rate == 250.0 and rec.start is None
    assert rec.channels[0].name == "ch0" and rec.channels[0].dtype == "float32" and rec.channels[0].decimals == 1
    assert np.array_equal(rec.column(0), arr)


def test_npy_2d_int(tmp_path):
    p = tmp_path / "b.npy"
    arr = np.arange(30, dtype=np.int16).reshape(10, 3)
    np.save(p, arr)
    rec = read_recording(p, rate=1.5)
    assert rec.shape == (10, 3) and [c.name for c in rec.channels] == ["ch0", "ch1", "ch2"]
    assert all(c.dtype == "int16" and c.decimals == 0 for c in rec.channels)
    assert np.array_equal(rec.data, arr)


def test_npy_needs_rate(tmp_path):
    p = tmp_path / "c.npy"
    np.save(p, np.zeros(5))
    with pytest.raises(BadInput, match="--rate"):
        read_recording(p)
    for bad in (0, -1, float("nan"), float("inf")):
        with pytest.raises(BadInput):
            read_recording(p, rate=bad)


@pytest.mark.parametrize("arr", [
    np.array([1 + 2j, 3j]), np.array([True, False]), np.array(3.0), np.zeros((2, 2, 2)),
    np.zeros((0, 3)), np.zeros(0), np.zeros(3, dtype=[("a", "f8")])])
def test_npy_rejects(tmp_path, arr):
    p = tmp_path / "d.npy"
    np.save(p, arr)
    with pytest.raises(BadInput):
        read_recording(p, rate=10)


def test_npy_object_array_is_refused_without_unpickling(tmp_path):
    p = tmp_path / "e.npy"
    # write a pickled .npy on purpose: the reader must refuse it without unpickling
    np.save(p, np.array([1, "x"], dtype=object), allow_pickle=True)
    with pytest.raises(BadInput, match="not a plain numeric"):
        read_recording(p, rate=10)


# --- .csv --------------------------------------------------------------------------------------

def test_csv_units_iso_start_and_rate(tmp_path):
    t0 = datetime(2030, 1, 2, 3, 4, 5, tzinfo=UTC)
    rows = [f"{(t0 + timedelta(seconds=0.25 * i)).isoformat().replace('+00:00', 'Z')},{i * 0.1:.2f},{i}"
            for i in range(50)]
    p = _csv(tmp_path / "a.csv", "time,temp [degC],count\n" + "\n".join(rows) + "\n")
    rec = read_recording(p)
    assert rec.rate == 4.0 and rec.start == t0
    assert [(c.name, c.unit) for c in rec.channels] == [("temp", "degC"), ("count", "")]
    assert [c.dtype for c in rec.channels] == ["float64", "int64"]
    assert [c.decimals for c in rec.channels] == [1, 0]  # i*0.1 printed with %.2f: one decimal suffices
    assert rec.data.dtypes == (np.float64, np.int64) and rec.shape == (50, 2)   # each channel in its own dtype
    assert rec.column(1).tolist() == list(range(50))


def test_csv_naive_and_offset_iso(tmp_path):
    # ISO 8601: "+02:00" means two hours ahead of UTC; a time without an offset stays naive.
    p = _csv(tmp_path / "b.csv", "when,x\n2030-06-01T12:00:00+02:00,1\n2030-06-01T12:00:01+02:00,2\n")
    rec = read_recording(p)
    assert rec.start == datetime(2030, 6, 1, 10, 0, 0, tzinfo=UTC) and rec.start.utcoffset() == timedelta(hours=2)
    assert rec.time.zone == "+02:00"
    p = _csv(tmp_path / "c.csv", "Timestamp,x\n2030-06-01 12:00:00,1\n2030-06-01 12:00:02,2\n")
    rec = read_recording(p)
    assert rec.start == datetime(2030, 6, 1, 12) and rec.start.tzinfo is None and rec.rate == 0.5
    assert rec.time.zone is None


def test_csv_millisecond_timestamps_at_3_hz(tmp_path):
    # 1/3 s steps printed to the millisecond are 333 or 334 ms apart: regular within 1 ms.
    base = datetime(2030, 1, 1, tzinfo=UTC)
    stamps = [(base + timedelta(milliseconds=round(1000 * i / 3))).isoformat(timespec="milliseconds") for i in range(300)]
    p = _csv(tmp_path / "d.csv", "t,x\n" + "\n".join(f"{s},{i}" for i, s in enumerate(stamps)) + "\n")
    assert read_recording(p).rate == 3.0


def test_csv_seconds_column(tmp_path):
    rate = 2048.0
    rows = [f"{i / rate!r},{float(np.sin(i))!r}" for i in range(500)]
    p = _csv(tmp_path / "e.csv", "time [s],v [mV]\n" + "\n".join(rows) + "\n")
    rec = read_recording(p)
    assert rec.rate == rate and rec.start is None
    assert rec.channels[0].unit == "mV"
    # Reference: repr(float) is the shortest string that round-trips (Python docs, "repr").
    assert np.array_equal(rec.column(0), np.sin(np.arange(500)))


def test_csv_irregular_time(tmp_path):
    p = _csv(tmp_path / "f.csv", "time,x\n0,1\n1,2\n2,3\n3.5,4\n4.5,5\n")
    rec = read_recording(p)  # irregular timing is kept, the rate is the median step's
    assert rec.rate == 1.0 and rec.n_samples == 5 and rec.time.values.tolist() == [0, 1, 2, 3.5, 4.5]
    rec = read_recording(p, rate=1.0)  # a rate that agrees keeps the time column
    assert rec.rate == 1.0 and rec.time is not None
    with pytest.raises(BadInput, match="disagrees"):  # one that does not is refused, never silently applied
        read_recording(p, rate=2.0)


def test_csv_without_time_column(tmp_path):
    p = _csv(tmp_path / "g.csv", "a,b (V)\n1,2\n3,4\n")
    with pytest.raises(BadInput, match="--rate"):
        read_recording(p)
    rec = read_recording(p, rate=100)
    # square brackets and parentheses carry a unit
    assert [(c.name, c.unit) for c in rec.channels] == [("a", ""), ("b", "V")]
    assert rec.data.dtype == np.int64 and rec.data.tolist() == [[1, 2], [3, 4]]


def test_csv_nan_inf_and_empty_cells(tmp_path):
    p = _csv(tmp_path / "h.csv", "a,b,c\n1.5,,inf\nnan,2,-inf\n-0.0,3,NaN\n")
    rec = read_recording(p, rate=1)
    a, b, c = (rec.column(j) for j in range(3))
    assert np.isnan(a[1]) and a[0] == 1.5 and np.signbit(a[2])
    # an integer column with an empty cell stays integer; the cell is missing (masked), not NaN
    assert np.ma.getmaskarray(b).tolist() == [True, False, False] and b[1:].tolist() == [2, 3]
    assert rec.channels[1].dtype == "int64"
    assert c[0] == np.inf and c[1] == -np.inf and np.isnan(c[2])


def test_csv_single_column_blank_cells(tmp_path):
    p = _csv(tmp_path / "i.csv", "x\n1.25\n\n3.5\n")
    rec = read_recording(p, rate=1)
    assert rec.n_samples == 3 and np.isnan(rec.column(0)[1])


def test_csv_rejects(tmp_path):
    rec = read_recording(_csv(tmp_path / "j.csv", "time,x,label\n0,1,on\n1,2,off\n"))  # text is kept aside
    assert rec.extra.column("label").to_pylist() == ["on", "off"]
    with pytest.raises(BadInput):
        read_recording(_csv(tmp_path / "k.csv", ""), rate=1)
    with pytest.raises(BadInput, match="no data rows"):
        read_recording(_csv(tmp_path / "l.csv", "a,b\n"), rate=1)
    with pytest.raises(BadInput, match="twice"):
        read_recording(_csv(tmp_path / "m.csv", "a [V],a [mV]\n1,2\n"), rate=1)
    with pytest.raises(BadInput, match="single row"):
        read_recording(_csv(tmp_path / "n.csv", "time,a\n0,2\n"))
    with pytest.raises(BadInput, match="neither a date and time"):
        read_recording(_csv(tmp_path / "o.csv", "time,a\nmonday,2\ntuesday,3\n"))


# --- .parquet ----------------------------------------------------------------------------------

def test_parquet_units_metadata_timestamp_and_float32(tmp_path):
    n, rate = 400, 500.0
    t0 = datetime(2029, 12, 31, 23, 59, 59, tzinfo=UTC)
    ns = np.int64(int(t0.timestamp()) * 10**9) + np.arange(n, dtype=np.int64) * 2_000_000
    x = np.random.default_rng(4).standard_normal(n).astype(np.float32)
    y = np.random.default_rng(5).standard_normal(n).astype(np.float32)
    schema = pa.schema([pa.field("stamp", pa.timestamp("ns", tz="Europe/Berlin")),
                        pa.field("strain", pa.float32(), metadata={b"unit": b"ue"}),
                        pa.field("load [kN]", pa.float32())])
    pq.write_table(pa.Table.from_arrays([pa.array(ns, type=schema.field(0).type), pa.array(x), pa.array(y)],
                                        schema=schema), tmp_path / "a.parquet")
    rec = read_recording(tmp_path / "a.parquet")
    assert rec.rate == rate and rec.start == t0  # the stored instant is UTC whatever the display zone
    assert [(c.name, c.unit, c.dtype) for c in rec.channels] == [("strain", "ue", "float32"), ("load", "kN", "float32")]
    assert rec.data.dtype == np.float32 and np.array_equal(rec.column(0), x)


def test_parquet_seconds_time_ints_with_nulls_and_strings(tmp_path):
    t = pa.table({"time": np.arange(6) * 0.1, "n": pa.array([1, None, 3, 4, 5, 6], type=pa.int32()),
                  "m": pa.array(np.arange(6, dtype=np.int32))})
    pq.write_table(t, tmp_path / "b.parquet")
    rec = read_recording(tmp_path / "b.parquet")
    assert rec.rate == 10.0 and rec.start is None
    # an integer column with nulls stays integer, the nulls missing (masked), not NaN
    assert [c.dtype for c in rec.channels] == ["int32", "int32"] and rec.data.dtypes == (np.int32, np.int32)
    assert np.ma.getmaskarray(rec.column(0)).tolist() == [False, True] + [False] * 4
    assert rec.column(0)[[0, 2, 3, 4, 5]].tolist() == [1, 3, 4, 5, 6] and rec.column(1).tolist() == list(range(6))
    pq.write_table(pa.table({"x": [1.0, 2.0], "s": ["a", "b"]}), tmp_path / "c.parquet")
    assert read_recording(tmp_path / "c.parquet", rate=1).extra.column("s").to_pylist() == ["a", "b"]
    (tmp_path / "d.parquet").write_bytes(b"PAR1 not really")
    with pytest.raises(BadInput, match="Parquet"):
        read_recording(tmp_path / "d.parquet", rate=1)


# --- time specs --------------------------------------------------------------------------------

def test_parse_time_forms():
    start = datetime(2031, 4, 2, 6, tzinfo=UTC)
    # Reference: SI prefixes / conventional minute and hour lengths (60 s, 3600 s).
    assert parse_time("12.5", None) == 12.5
    assert parse_time("250ms", None) == 0.25
    assert parse_time("90s", None) == 90.0
    assert parse_time("5min", None) == 300.0
    assert parse_time("2h", start) == 7200.0
    assert parse_time("2031-04-02T07:30:00Z", start) == 5400.0
    assert parse_time("2031-04-02T07:30:00", start) == 5400.0  # naive = UTC
    assert parse_time("2031-04-02T09:30:00+02:00", start) == 5400.0


@pytest.mark.parametrize("spec", ["-1", "5m", "abc", "", "nan", "1e999", "2031-04-02T05:00:00Z"])
def test_parse_time_rejects(spec):
    with pytest.raises(BadInput):
        parse_time(spec, datetime(2031, 4, 2, 6, tzinfo=UTC))


def test_parse_time_datetime_needs_start():
    with pytest.raises(BadInput, match="no start time"):
        parse_time("2031-04-02T07:30:00Z", None)


# --- sample streams ----------------------------------------------------------------------------

def test_sample_streams_load():
    soak = read_recording(STREAMS / "climate_soak.csv")
    assert soak.rate == 0.5 and soak.n_samples == 36 * 3600 // 2
    assert soak.start == datetime(2031, 4, 2, 6, tzinfo=UTC)
    assert [(c.name, c.unit, c.decimals) for c in soak.channels] == [
        ("chamber_temp", "degC", 2), ("board_temp", "degC", 2), ("room_temp", "degC", 2), ("chamber_rh", "%RH", 2)]
    shaker = read_recording(STREAMS / "shaker_run.npy", rate=2000)
    assert shaker.shape == (120000, 3) and shaker.data.dtype == np.float32
    # the 50 g shock: 50 x standard gravity 9.80665 m/s^2 (CGPM 1901, from memory) = 490 m/s^2
    assert float(np.max(np.abs(shaker.column(2)))) > 300
    psu = read_recording(STREAMS / "psu_ripple.parquet")
    assert psu.rate == 10000.0 and psu.n_samples == 200000
    assert [(c.name, c.unit, c.decimals) for c in psu.channels] == [("v_out", "V", 4), ("i_load", "A", 4)]


def _generator():
    spec = importlib.util.spec_from_file_location("generate_streams", STREAMS / "generate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_sample_stream_functions_are_accurate_without_simd_or_libm():
    # The generator's own sin/cos/exp (single IEEE-754 steps, the same bits on every machine) must still
    # be the functions they claim to be. Reference: Python's math module (the platform C library);
    # tolerances a few ulp of the results (common practice (no source)).
    mod = _generator()
    x = np.concatenate([np.linspace(-4.0, 4.0, 1001), np.linspace(-2.2e5, 2.2e5, 1001)])
    s, c = mod._sin_cos(x)
    assert max(abs(a - math.sin(v)) for a, v in zip(s.tolist(), x.tolist())) < 5e-16
    assert max(abs(a - math.cos(v)) for a, v in zip(c.tolist(), x.tolist())) < 5e-16
    y = np.linspace(-700.0, 700.0, 2001)
    assert max(abs(a / math.exp(v) - 1) for a, v in zip(mod._exp(y).tolist(), y.tolist())) < 4.5e-16
    # One-element arrays (numpy's scalar tail loop) and long ones (its SIMD loop) give the same bits.
    one = [float(mod._sin(np.array([v]))[0]) for v in x[::50].tolist()]
    assert one == mod._sin(x[::50]).tolist()


def test_sample_streams_regenerate_identically(tmp_path):
    # The committed files are exactly what generate.py writes (on any machine: it uses no CPU-dispatched
    # function, see its docstring).
    mod = _generator()
    for p in mod.generate(tmp_path):
        committed = STREAMS / p.name
        if p.suffix == ".parquet":
            # Parquet bytes carry the writer's version string: compare content, not bytes,
            # so a newer pyarrow from the registry does not fail this test.
            import pyarrow.parquet as pq
            assert pq.read_table(p).equals(pq.read_table(committed)), p.name
            continue
        assert hashlib.sha256(p.read_bytes()).hexdigest() == hashlib.sha256(committed.read_bytes()).hexdigest(), p.name


def test_npy_grid_sample_equals_a_plain_strided_read(tmp_path, monkeypatch):
    # The grid-detection sample is read in short stretches (fresh memory maps); it must be exactly x[::step].
    from tsarchive.ingest import npyfile
    monkeypatch.setattr(npyfile, "MAX_CHECKED", 1000)
    monkeypatch.setattr(npyfile, "SAMPLE_ROWS_PER_MAP", 7)
    x = np.random.default_rng(3).standard_normal((12345, 3)).astype(np.float32)
    np.save(tmp_path / "x.npy", x)
    step = -(-12345 // 1000)
    np.testing.assert_array_equal(npyfile._strided_sample(tmp_path / "x.npy", 12345), x[::step])
