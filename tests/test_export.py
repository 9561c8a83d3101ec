"""write_table: formats, exact round trips through the readers, atomic writes."""

from __future__ import annotations

import os
from datetime import datetime, timedelta, timezone

import numpy as np
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tsarchive import export
from tsarchive.errors import BadInput
from tsarchive.export import write_table
from tsarchive.ingest import read_recording

UTC = timezone.utc
START = datetime(2031, 4, 2, 6, 0, 0, 250000, tzinfo=UTC)


def _columns(n: int = 300) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(7)
    a = rng.standard_normal(n) * 1e3
    a[[3, 4, 5, 6]] = [np.nan, np.inf, -np.inf, -0.0]
    return {"accel": a, "temp": np.round(rng.normal(25, 3, n), 2), "count": rng.integers(-10**12, 10**12, n)}


UNITS = {"accel": "m/s^2", "temp": "degC"}


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    """Bitwise equality of the values, except that any NaN equals any NaN (text keeps no NaN sign or payload)."""
    a, b = np.asarray(a), np.asarray(b)
    if a.dtype.kind == "f" or b.dtype.kind == "f":
        a, b = a.astype(np.float64), b.astype(np.float64)
        nan = np.isnan(a)
        return bool(np.array_equal(nan, np.isnan(b))
                    and np.array_equal(a[~nan].view(np.uint64), b[~nan].view(np.uint64)))
    return np.array_equal(a, b)


@pytest.mark.parametrize("ext", ["csv", "parquet"])
@pytest.mark.parametrize("start", [None, START])
@pytest.mark.parametrize("rate", [1.0, 3.0, 44.1, 2000.0, 10000.0])
def test_table_round_trip(tmp_path, ext, start, rate):
    cols = _columns()
    p = write_table(tmp_path / f"out.{ext}", cols, rate=rate, start=start, units=UNITS)
    rec = read_recording(p)
    assert rec.rate == rate and rec.start == start
    assert [(c.name, c.unit) for c in rec.channels] == [("accel", "m/s^2"), ("temp", "degC"), ("count", "")]
    assert rec.channels[2].dtype == "int64" and rec.channels[1].decimals == 2
    for j, v in enumerate(cols.values()):
        assert _same(rec.column(j), v)


@pytest.mark.parametrize("ext", ["csv", "parquet"])
def test_excerpt_start_is_shifted_by_t0(tmp_path, ext):
    # An excerpt whose first row is t0 = 90.5 s into the recording starts at start + 90.5 s.
    cols = {"x": np.arange(20, dtype=np.float64)}
    rec = read_recording(write_table(tmp_path / f"e.{ext}", cols, rate=4.0, start=START, t0=90.5, units={}))
    assert rec.start == START + timedelta(seconds=90.5) and rec.rate == 4.0
    rec = read_recording(write_table(tmp_path / f"f.{ext}", cols, rate=4.0, start=None, t0=90.5, units={}))
    assert rec.start is None and rec.rate == 4.0


def test_csv_layout(tmp_path):
    cols = {"v": np.array([0.1, 1e-7, np.nan]), "n": np.array([1, 2, 3])}
    p = write_table(tmp_path / "a.csv", cols, rate=2.0, start=None, units={"v": "V"})
    lines = p.read_text().splitlines()
    assert lines[0] == "time [s],v [V],n"
    # Reference: Python's repr(float), the shortest round-tripping text (Python docs); a missing value
    # is an empty cell (RFC 4180 allows empty fields; common practice (no source) for "no value").
    assert lines[1:] == ["0.0,0.1,1", "0.5,1e-07,2", "1.0,,3"]
    p = write_table(tmp_path / "b.csv", cols, rate=2.0, start=START, units={})
    lines = p.read_text().splitlines()
    assert lines[0] == "time,v,n"
    # ISO 8601 UTC with the coarsest exact fraction (here milliseconds: .250, .750, .250)
    assert [ln.split(",")[0] for ln in lines[1:]] == [
        "2031-04-02T06:00:00.250Z", "2031-04-02T06:00:00.750Z", "2031-04-02T06:00:01.250Z"]


def test_float32_values_survive_csv(tmp_path):
    x = np.random.default_rng(8).standard_normal(100).astype(np.float32)
    rec = read_recording(write_table(tmp_path / "c.csv", {"x": x}, rate=10.0, start=None, units={}))
    assert np.array_equal(rec.column(0).astype(np.float32), x)
    # Each value is written as the shortest float32 text (numpy's unique Dragon4 str of a float32 scalar)
    cells = [ln.split(",")[1] for ln in (tmp_path / "c.csv").read_text().splitlines()[1:]]
    assert cells == [str(v) for v in x]


def test_parquet_layout(tmp_path):
    cols = {"v": np.linspace(0, 1, 50, dtype=np.float32), "i": np.arange(50, dtype=np.int16)}
    p = write_table(tmp_path / "a.parquet", cols, rate=50.0, start=START, units={"v": "V"})
    schema = pq.read_schema(p)
    assert schema.names == ["time", "v", "i"]
    assert str(schema.field("time").type) == "timestamp[ns, tz=UTC]"
    assert schema.field("v").metadata == {b"unit": b"V"} and not schema.field("i").metadata
    meta = pq.ParquetFile(p).metadata
    assert {meta.row_group(0).column(k).compression for k in range(3)} == {"ZSTD"}
    rec = read_recording(p)
    assert [c.dtype for c in rec.channels] == ["float32", "int16"]
    assert _same(rec.column(0), cols["v"]) and _same(rec.column(1), cols["i"])


def test_npy_shapes(tmp_path):
    x = np.arange(10, dtype=np.float32)
    p = write_table(tmp_path / "one.npy", {"x": x}, rate=5.0, start=None, units={}, shape_1d=True)
    assert np.load(p).shape == (10,)
    rec = read_recording(p, rate=5.0)
    assert rec.shape == (10,) and _same(rec.column(0), x)
    p = write_table(tmp_path / "two.npy", {"x": x}, rate=5.0, start=None, units={})
    assert np.load(p).shape == (10, 1)
    both = write_table(tmp_path / "both.npy", {"x": x, "y": x * 2}, rate=5.0, start=None, units={}, shape_1d=True)
    arr = np.load(both)
    assert arr.shape == (10, 2) and arr.dtype == np.float32
    mixed = np.load(write_table(tmp_path / "m.npy", {"a": np.arange(3), "b": np.ones(3, np.float32)},
                                rate=1.0, start=None, units={}))
    assert mixed.dtype == np.float64


def test_rejects(tmp_path):
    ok = {"x": np.zeros(3)}
    with pytest.raises(BadInput, match=r"\.npy, \.csv, \.parquet"):
        write_table(tmp_path / "a.txt", ok, rate=1.0, start=None, units={})
    with pytest.raises(BadInput, match="folder"):
        write_table(tmp_path / "missing" / "a.csv", ok, rate=1.0, start=None, units={})
    with pytest.raises(BadInput, match="equal length"):
        write_table(tmp_path / "a.csv", {"x": np.zeros(3), "y": np.zeros(4)}, rate=1.0, start=None, units={})
    with pytest.raises(BadInput):
        write_table(tmp_path / "a.csv", {}, rate=1.0, start=None, units={})
    with pytest.raises(BadInput):
        write_table(tmp_path / "a.csv", {"x": np.array(["a"])}, rate=1.0, start=None, units={})
    with pytest.raises(BadInput):
        write_table(tmp_path / "a.csv", ok, rate=0.0, start=None, units={})
    assert os.listdir(tmp_path) == []


def test_csv_failure_leaves_no_partial_file(tmp_path, monkeypatch):
    target = tmp_path / "out.csv"
    target.write_text("old contents\n")
    monkeypatch.setattr(export, "CSV_CHUNK_ROWS", 10)
    from tsarchive import export_text
    real = export_text.cells
    calls = {"n": 0}

    def failing(values, fmt):
        calls["n"] += 1
        if calls["n"] > 4:  # fail in the third chunk, after two chunks were written
            raise OSError("disk full (simulated)")
        return real(values, fmt)

    monkeypatch.setattr(export_text, "cells", failing)
    with pytest.raises(OSError, match="simulated"):
        write_table(target, {"x": np.arange(100.0), "y": np.arange(100.0)}, rate=1.0, start=None, units={},
                    replace=True)
    assert calls["n"] > 4
    assert target.read_text() == "old contents\n"
    assert sorted(os.listdir(tmp_path)) == ["out.csv"]


def test_parquet_failure_leaves_no_partial_file(tmp_path, monkeypatch):
    real = pq.write_table

    def half_then_fail(table, where, **kw):
        real(table.slice(0, 5), where, **kw)  # a complete-looking but wrong file on disk
        raise KeyboardInterrupt

    monkeypatch.setattr(pq, "write_table", half_then_fail)
    with pytest.raises(KeyboardInterrupt):
        write_table(tmp_path / "out.parquet", {"x": np.arange(50.0)}, rate=1.0, start=None, units={})
    assert os.listdir(tmp_path) == []


def test_written_file_permissions_follow_umask(tmp_path):
    p = write_table(tmp_path / "p.csv", {"x": np.zeros(2)}, rate=1.0, start=None, units={})
    mask = os.umask(0)
    os.umask(mask)
    assert (p.stat().st_mode & 0o777) == (0o666 & ~mask)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(allow_nan=True, allow_infinity=True, width=64), min_size=1, max_size=40))
def test_csv_round_trip_any_double(tmp_path_factory, values):
    # Reference: repr(float) round-trips exactly (Python docs); pyarrow parses correctly rounded.
    d = tmp_path_factory.mktemp("rt")
    x = np.array(values, dtype=np.float64)
    # a single row carries no step, so the rate is passed (an explicit rate overrides the time column)
    rec = read_recording(write_table(d / "x.csv", {"x": x}, rate=1.0, start=None, units={}), rate=1.0)
    assert _same(rec.column(0), x)


# -- cell text (tsarchive.export_text) ------------------------------------------------------------------
from tsarchive.export_text import CellFormat, cells  # noqa: E402


def _digits(text: str) -> str:
    """Significant digits of a decimal text (sign, point, exponent and leading/trailing zeros dropped)."""
    mant = text.lower().lstrip("-").split("e")[0].replace(".", "")
    return mant.strip("0") or "0"


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=True, width=64), min_size=1, max_size=30))
def test_float64_cells_are_python_repr(values):
    x = np.array(values, dtype=np.float64)
    # Reference: Python's repr(float), the shortest text that round-trips (Python docs, "Floating Point
    # Arithmetic"); the re-parse must give the same bits.
    assert cells(x) == [repr(float(v)) for v in x]
    assert np.array_equal(np.array([float(c) for c in cells(x)]).view(np.uint64), x.view(np.uint64))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=32), min_size=1, max_size=30))
def test_float32_cells_are_the_shortest_float32_text(values):
    x = np.array(values, dtype=np.float32)
    out = cells(x)
    # Reference: numpy.format_float_scientific(unique=True), Dragon4's shortest digits that identify the float32
    ref = [np.format_float_scientific(v, unique=True, trim="-") for v in x]
    assert [_digits(c) for c in out] == [_digits(r) for r in ref]
    # the text parsed as a double and rounded to float32 gives the same bits back (IEEE-754 round to nearest)
    assert np.array_equal(np.array([float(c) for c in out]).astype(np.float32).view(np.uint32), x.view(np.uint32))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(-10**12, 10**12), min_size=1, max_size=30), st.integers(0, 6))
def test_decimal_channel_cells_have_the_logged_decimals(ks, d):
    x = np.array(ks, dtype=np.float64) / 10.0**d  # what a decimal parser makes of k * 10**-d (correctly rounded)
    out = cells(x, CellFormat(decimals=d))

    def text(k: int) -> str:  # the decimal written from the integer itself, no float involved
        s = str(abs(k)).rjust(d + 1, "0")
        return ("-" if k < 0 else "") + (s[:-d] + "." + s[-d:] if d else s)
    assert out == [text(k) for k in ks]
    assert np.array_equal(np.array([float(c) for c in out]).view(np.uint64), x.view(np.uint64))


def test_decimal_channel_keeps_exact_text_off_its_decimals():
    # a verbatim sample that is not a 2-decimal number keeps its exact text; missing is empty; inf spelled out
    x = np.array([24.95, 1e-300, 0.125, np.nan, -np.inf, -0.0])
    assert cells(x, CellFormat(decimals=2)) == ["24.95", "1e-300", "0.125", "", "-inf", "-0.00"]


def test_lossy_cells_without_logged_decimals_stay_within_eps_in_float64():
    rng = np.random.default_rng(11)
    orig = rng.normal(0, 3, 4000)
    eps, step, off = 0.01, 0.02, float(orig[0])
    dec = np.rint((orig - off) / step) * step + off  # quantize.Grid's x = offset + q * step (a 2ε uniform grid)
    worst = float(np.max(np.abs(dec - orig)))
    out = cells(dec, CellFormat(eps=eps, worst=worst, step=step, offset=off))
    back = np.array([float(c) for c in out])
    assert np.all(np.abs(back - orig) <= eps)  # numpy float64, the way a user would check
    assert np.array_equal(np.rint((back - off) / step), np.rint((dec - off) / step))
    assert all(len(c) <= len(repr(float(v))) for c, v in zip(out, dec))


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(-10**7, 10**7), min_size=2, max_size=200), st.integers(0, 4),
       st.sampled_from(["0.05", "0.5", "0.013", "1", "0.25"]))
def test_lossy_cells_of_a_decimal_original_stay_within_eps_as_decimals(ks, d, eps_text):
    from decimal import Decimal

    from tsarchive.quantize import make_grid, quantize

    orig_text = [f"{k / 10**d:.{d}f}" for k in ks]  # what a logger with d decimals writes
    orig = np.array([float(t) for t in orig_text])
    eps = float(eps_text)
    grid = make_grid(eps, d, np.dtype(np.float64), anchor=float(orig[0]))
    if grid.kind != "step":
        return  # a budget below half the resolution is served exactly: not the lossy case
    q, pos, bits = quantize(orig, grid)
    dec = grid.dequantize(q, pos, bits)
    worst = float(np.max(np.abs(dec - orig)))
    out = cells(dec, CellFormat(eps=eps, worst=worst, step=grid.step, offset=grid.offset, source_decimals=d))
    # Reference: Python's decimal module, exact arithmetic on the texts as both files show them
    assert all(abs(Decimal(c) - Decimal(t)) <= Decimal(eps_text) for c, t in zip(out, orig_text))
    back = np.array([float(c) for c in out])
    step_of = lambda v: np.rint((v - grid.offset) / grid.step)  # noqa: E731  quantize.Grid: x = offset + q*step
    assert np.array_equal(step_of(back), step_of(dec))
    assert all(len(c) <= len(repr(float(v))) for c, v in zip(out, dec))
