"""exceptions.parquet: the samples kept verbatim (NaN gaps, values off the grid), delta-packed.

References: parquet-format's Encodings.md (DELTA_BINARY_PACKED: deltas in bit-packed miniblocks, so a run of
equal deltas packs into no bits); pyarrow, DuckDB and polars as independent Parquet readers; IEEE 754 (a NaN
compares unequal to itself, so gaps are checked with numpy's isnan)."""

from __future__ import annotations

import numpy as np
import pyarrow.parquet as pq
import pytest

import tsarchive
from tsarchive.store import schema as S

DAYS, PER_DAY = 60, 96            # 15-minute samples, two months


def _solar_with_empty_nights() -> np.ndarray:
    rng = np.random.default_rng(12)
    t = np.arange(DAYS * PER_DAY)
    day = (t % PER_DAY) / PER_DAY
    p = np.clip(np.sin(np.pi * (day - 0.25) / 0.5), 0, None) * 5.0 + rng.normal(0, 0.05, t.size)
    p = np.round(p, 3)
    p[(day < 0.25) | (day >= 0.75)] = np.nan          # the logger writes nothing at night: empty cells
    return p


@pytest.fixture(scope="module")
def gaps(tmp_path_factory):
    d = tmp_path_factory.mktemp("gaps")
    x = _solar_with_empty_nights()
    src = d / "solar.csv"
    src.write_text("seconds,power_kw\n" + "".join(
        f"{i * 900},{'' if np.isnan(v) else f'{v:.3f}'}\n" for i, v in enumerate(x)))
    tsarchive.pack(src, d / "solar.tsarchive", "1%")
    return x, d / "solar.tsarchive"


def test_a_night_of_gaps_costs_almost_nothing(gaps):
    # failed before: positions and NaN bits PLAIN + zstd took 2594 B here (0.9 B per gap sample); delta-packed
    # 670 B, most of it the Parquet footer
    x, arc = gaps
    n_gap = int(np.isnan(x).sum())
    assert n_gap == DAYS * PER_DAY // 2
    size = (arc / S.EXCEPTIONS).stat().st_size
    assert size < 0.3 * n_gap, f"{size} B for {n_gap} gap samples"


def test_gaps_come_back_where_they_were_and_the_rest_within_budget(gaps):
    x, arc = gaps
    y = tsarchive.open(arc).read("power_kw")
    assert np.array_equal(np.isnan(y), np.isnan(x))
    ok = ~np.isnan(x)
    eps = 0.01 * (np.nanmax(x) - np.nanmin(x))
    assert np.max(np.abs(y[ok] - x[ok])) <= eps


def test_the_exceptions_member_is_delta_packed_and_reads_the_same_in_duckdb_and_polars(gaps):
    duckdb = pytest.importorskip("duckdb")
    polars = pytest.importorskip("polars")
    path = gaps[1] / S.EXCEPTIONS
    meta = pq.read_metadata(path).row_group(0)
    encodings = {meta.column(i).path_in_schema: meta.column(i).encodings for i in range(meta.num_columns)}
    assert "DELTA_BINARY_PACKED" in encodings["pos.list.element"]
    assert "DELTA_BINARY_PACKED" in encodings["bits.list.element"]
    ref = pq.read_table(path)
    rows = duckdb.sql(f"SELECT pos, bits FROM '{path}'").fetchall()
    assert [list(p) for p, _ in rows] == ref["pos"].to_pylist()
    assert [list(b) for _, b in rows] == ref["bits"].to_pylist()
    frame = polars.read_parquet(path)
    assert frame["pos"].to_list() == ref["pos"].to_pylist()
    assert frame["bits"].to_list() == ref["bits"].to_pylist()
    nan_bits = {int(b) for row in ref["bits"].to_pylist() for b in row}
    assert all(np.isnan(np.int64(b).view(np.float64)) for b in nan_bits)
