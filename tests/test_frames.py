"""tsarchive.frames: pandas, polars and xarray frames hold Archive.read's values bit for bit on Archive.times'
time axis, with the interval start <= t - t[0] < end, naive times naive, a zone kept, and the units."""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pytest

import tsarchive
from tsarchive.frames import to_pandas, to_polars, to_xarray

pd = pytest.importorskip("pandas")
pl = pytest.importorskip("polars")
xr = pytest.importorskip("xarray")

N, RATE = 600, 10.0
T0 = datetime(2026, 3, 4, 8, 0, 0)


def _write(path, zone: str):
    """A logged CSV: ISO times (with ``zone`` appended), a float channel in degC, an integer count with gaps."""
    rng = np.random.default_rng(5)
    temp = 20.0 + np.cumsum(rng.standard_normal(N)) * 0.01
    count = np.arange(N) * 3
    rows = []
    for k in range(N):
        t = (T0 + timedelta(milliseconds=100 * k)).isoformat(timespec="milliseconds") + zone
        rows.append(f"{t},{float(temp[k])!r},{'' if k % 97 == 5 else count[k]}")
    path.write_text("time,temp [degC],count [n]\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return rows


@pytest.fixture(scope="module", params=["", "+05:30", "+01:00"], ids=["naive", "offset-half-hour", "offset-hour"])
def logged(request, tmp_path_factory):
    d = tmp_path_factory.mktemp("frames")
    rows = _write(d / "log.csv", request.param)
    tsarchive.pack(d / "log.csv", d / "log.tsarchive", "temp=0.01,count=lossless")
    return {"arc": tsarchive.open(d / "log.tsarchive"), "zone": request.param, "rows": rows}


def _same_bits(a, b) -> bool:
    """Equal as stored: the same dtype and bytes; masked samples the same (numpy byte views)."""
    a_mask, b_mask = np.ma.getmaskarray(a), np.ma.getmaskarray(b)
    da, db = np.ma.getdata(a), np.ma.getdata(b)
    return da.dtype == db.dtype and np.array_equal(a_mask, b_mask) and \
        np.array_equal(da[~a_mask].view(np.uint8), db[~b_mask].view(np.uint8))


def _expected_rows(start, end):
    """Samples with start <= t - t0 < end, from the times this file wrote (every 100 ms): plain arithmetic."""
    k = np.arange(N)
    return k[(k * 0.1 >= start) & (k * 0.1 < end)] if start is not None else k


def test_pandas_frame(logged):
    arc, zone = logged["arc"], logged["zone"]
    df = to_pandas(arc, start=1.0, end=3.0)
    k = _expected_rows(1.0, 3.0)
    assert len(df) == len(k) == 20                          # 1.0 s included, 3.0 s excluded
    t = arc.times(1.0, 3.0)
    idx = df.index.tz_convert("UTC") if zone else df.index
    assert np.array_equal(idx.asi8, t.values)              # the archive's own time axis, to the ns
    assert df.index[0].isoformat(timespec="milliseconds") == logged["rows"][k[0]].split(",")[0]  # as logged
    assert (df.index.tz is None) == (zone == "")
    assert _same_bits(df["temp"].to_numpy(), arc.read("temp", 1.0, 3.0))
    whole = to_pandas(arc)
    count = arc.read("count")
    assert np.ma.isMaskedArray(count) and count.mask.any()
    got = whole["count"].array
    assert np.array_equal(np.asarray(got.isna()), count.mask)
    assert _same_bits(np.ma.MaskedArray(got._data, got._mask), count)
    assert df.attrs["units"] == {"temp": "degC", "count": "n"} and df.attrs["budgets"]["count"] == "lossless"


def test_polars_frame(logged):
    arc, zone = logged["arc"], logged["zone"]
    df, units = to_polars(arc, channels=["temp"], start=1.0, end=3.0)
    t = arc.times(1.0, 3.0)
    assert df.columns == [t.name, "temp"] and units == {"temp": "degC"}
    assert np.array_equal(df[t.name].to_numpy().astype("datetime64[ns]").view(np.int64), t.values)
    tz = df.schema[t.name].time_zone
    assert tz == {"": None, "+05:30": "UTC", "+01:00": "Etc/GMT-1"}[zone]   # polars' names (IANA Etc zones)
    assert _same_bits(df["temp"].to_numpy(), arc.read("temp", 1.0, 3.0))
    whole, _ = to_polars(arc)
    assert np.array_equal(whole["count"].is_null().to_numpy(), arc.read("count").mask)


def test_xarray_dataset(logged):
    arc, zone = logged["arc"], logged["zone"]
    ds = to_xarray(arc, start=1.0, end=3.0)
    t = arc.times(1.0, 3.0)
    assert np.array_equal(ds[t.name].values.view(np.int64), t.values)
    assert ds[t.name].attrs.get("zone") == (zone or None)
    assert ds["temp"].attrs["units"] == "degC" and ds["count"].attrs["units"] == "n"
    assert _same_bits(ds["temp"].values, arc.read("temp", 1.0, 3.0))


def test_seconds_axis_and_no_zone(tmp_path):
    x = np.sin(np.arange(500) / 9.0)
    np.save(tmp_path / "s.npy", x)
    tsarchive.pack(tmp_path / "s.npy", tmp_path / "s.tsarchive", "0.001", rate=50.0)
    arc = tsarchive.open(tmp_path / "s.tsarchive")
    df = to_pandas(arc, start=0.5, end=1.5)
    t = arc.times(0.5, 1.5)
    assert len(df) == 50 and df.index.dtype == np.float64 and t.kind == "seconds"
    assert np.array_equal(df.index.to_numpy(), t.values)
    assert _same_bits(df.iloc[:, 0].to_numpy(), arc.read(arc.channels[0].name, 0.5, 1.5))
    ds = to_xarray(arc)
    assert ds[t.name].attrs["units"] == "s"
