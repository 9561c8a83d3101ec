"""Format 5's lean container: window rows packed into key/facts (store/lean.py), row groups shared by the
channels' last windows, and the compact manifest (store/compact.py).  The references are the source samples
(numpy), pyarrow's own reading of the footer statistics, and the format's bit layout as DEVELOPERS.md states it."""

from __future__ import annotations

import json

import numpy as np
import pyarrow.parquet as pq
import pytest

import tsarchive
from tsarchive.store import schema as S
from tsarchive.store.compact import compact, expand

W, WINDOWS = 8, 301            # 301 windows a channel: one full row group of 256, then 45 left over


@pytest.fixture(scope="module")
def lean_arc(tmp_path_factory):
    d = tmp_path_factory.mktemp("lean")
    rng = np.random.default_rng(5)
    n = W * WINDOWS - 3                                          # the last window is short
    x = np.cumsum(rng.standard_normal((n, 3)), axis=0).astype(np.float32)
    np.save(d / "s.npy", x)
    out = d / "s.tsarchive"
    tsarchive.pack(d / "s.npy", out, "0.5%", rate=10.0, window=W, code_size=0)
    return out, x


def test_row_groups_hold_one_channel_or_the_channels_last_windows(lean_arc):
    out, _ = lean_arc
    meta = pq.ParquetFile(out / S.WINDOWS).metadata               # pyarrow's reading of the footer
    spans = []
    for g in range(meta.num_row_groups):
        st = meta.row_group(g).column(0).statistics
        assert meta.row_group(g).column(0).path_in_schema == "key" and st.has_min_max
        spans.append((st.min >> 32, st.min & 0xFFFFFFFF, st.max >> 32, st.max & 0xFFFFFFFF,
                      meta.row_group(g).num_rows))
    # 256 = ROW_GROUP_WINDOWS rows a channel, then 3 x 45 rows together: (channel, window) from and to, rows
    assert sorted(spans) == [(0, 0, 0, 255, 256), (0, 256, 2, 300, 135), (1, 0, 1, 255, 256), (2, 0, 2, 255, 256)]
    for g in range(meta.num_row_groups):      # only the key column carries statistics
        assert all(not meta.row_group(g).column(c).is_stats_set for c in range(1, meta.num_columns))


def test_any_range_reads_as_the_full_read_and_within_budget(lean_arc):
    out, x = lean_arc
    arc = tsarchive.open(out)
    for j, c in enumerate(arc.channels):
        full = arc.read(c.name)
        assert len(full) == len(x) and np.abs(full.astype(np.float64) - x[:, j]).max() <= c.eps
        for a, b in ((0.0, 0.8), (204.0, 206.5), (199.9, 240.0), (230.05, None), (None, 3.3)):
            lo = 0 if a is None else int(np.ceil(a * 10 - 1e-9))
            hi = len(x) if b is None else int(np.ceil(b * 10 - 1e-9))
            np.testing.assert_array_equal(arc.read(c.name, a, b), full[lo:max(lo, hi)])


def test_facts_unpack_as_the_documented_bit_layout(lean_arc):
    out, _ = lean_arc
    arc = tsarchive.open(out)
    t = pq.read_table(out / S.WINDOWS, columns=["key", "facts"])
    key, facts = t["key"].to_numpy(), t["facts"].to_numpy()
    for j, c in enumerate(arc.channels):
        rows = arc.rows(c.name, 0, WINDOWS)
        m = key >> 32 == j
        order = np.argsort(key[m] & 0xFFFFFFFF)
        f = facts[m][order]
        assert rows["window"].to_numpy().tolist() == list(range(WINDOWS)) == (key[m][order] & 0xFFFFFFFF).tolist()
        assert rows["crc32"].to_numpy().tolist() == (f & 0xFFFFFFFF).tolist()
        assert rows["worst"].to_numpy().tolist() == ((f >> 32) & 0xFF).tolist()
        assert rows["mode"].to_numpy().tolist() == (f >> 56).tolist()


def test_the_manifest_stores_shared_facts_once(lean_arc):
    out, x = lean_arc
    stored = json.loads((out / S.MANIFEST).read_text())
    assert stored["format_version"] == 5 == S.FORMAT_VERSION
    assert stored["channel_defaults"]["n_samples"] == len(x) and stored["channel_defaults"]["rate"] == 10.0
    assert "time" not in stored              # seconds from 0 at the rate: what a reader assumes without one
    for c in stored["channels"]:
        assert not {"rate", "n_samples", "eps", "note"} & set(c) and "used_pct" not in c["summary"]
        assert "out_dtype" not in c["grid"]
    arc = tsarchive.open(out)                     # expanded for every reader of Archive.manifest
    assert arc.manifest["time"] == {"kind": "seconds", "zone": None, "columns": [], "runs": [[0, "0x0.0p+0"]]}
    np.testing.assert_array_equal(arc.times().values, np.arange(len(x)) / 10.0)   # k / rate, numpy's division
    for c, d in zip(arc.channels, arc.manifest["channels"]):
        assert d["rate"] == 10.0 and d["n_samples"] == len(x) and d["eps"] == d["grid"]["eps"] == c.eps
        assert d["grid"]["out_dtype"] == "float32" and sum(d["summary"]["modes"].values()) == WINDOWS
        assert d["summary"]["used_pct"] == 100.0 * d["summary"]["worst_error"] / d["eps"]


def test_compact_then_expand_gives_the_full_manifest_back():
    # by hand: two channels sharing everything but their names and grids; a channel's own value wins
    full = {"format": "tsarchive", "time": {"kind": "seconds", "zone": None, "columns": [], "runs": [[0, "0x0.0p+0"]]},
            "channels": [
        {"name": n, "unit": "V", "dtype": "float64", "rate": 5.0, "start": None, "n_samples": 9, "budget": "1%",
         "note": "",
         "eps": e, "grid": {"kind": "step", "eps": e, "out_dtype": "float64"}, "scale": s,
         "summary": {"worst_error": e / 2, "used_pct": 50.0, "n_exceptions": 0, "modes": {"prev": 2, "lpc": 0}}}
        for n, e, s in (("a", 0.5, 1), ("b", 0.25, 2))]}
    small = compact(full)
    assert small["channel_defaults"] == {"unit": "V", "dtype": "float64", "rate": 5.0, "start": None,
                                         "n_samples": 9, "budget": "1%", "note": ""}
    assert "time" not in small                            # the plain axis: no start, seconds from 0
    assert small["channels"][1] == {"name": "b", "grid": {"kind": "step", "eps": 0.25}, "scale": 2,
                                    "summary": {"worst_error": 0.125, "modes": {"prev": 2}}}
    assert expand(small, ("prev", "lpc")) == full
