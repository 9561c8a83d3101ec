"""The lean container (format 6): window facts in one fixed-width column (store/lean6.py), row groups mapped by
the manifest's ``groups``, shared by the channels' last windows, and the compact manifest (store/compact.py)
inside windows.parquet's footer (store/inside.py).  The references are the source samples (numpy), pyarrow's
and zstandard's own reading of the file, and the format's byte layout as DEVELOPERS.md states it."""

from __future__ import annotations

import json
from pathlib import Path

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


def _stored(out) -> dict:
    """The manifest as stored, read with pyarrow, numpy and zstandard only (the documented recipe, DEVELOPERS.md:
    7-bit text, seven bits a byte, back to the zstd frame)."""
    import zstandard
    t = np.frombuffer(pq.read_metadata(out / S.WINDOWS).metadata[b"tsarchive.manifest"], np.uint8)
    bits = np.unpackbits(t[:, None], axis=1)[:, 1:].ravel()
    blob = np.packbits(bits[:len(bits) // 8 * 8]).tobytes()
    d = zstandard.ZstdCompressionDict((Path(tsarchive.__file__).parent / "store" / "manifest7.zdict").read_bytes(),
                                      dict_type=zstandard.DICT_TYPE_RAWCONTENT)
    return json.loads(zstandard.ZstdDecompressor(dict_data=d).decompress(blob))


def test_row_groups_hold_one_channel_or_the_channels_last_windows(lean_arc):
    out, _ = lean_arc
    meta = pq.ParquetFile(out / S.WINDOWS).metadata               # pyarrow's reading of the footer
    groups = _stored(out)["groups"]
    spans = sorted((c, w, meta.row_group(g).num_rows) for g, (c, w) in enumerate(groups))
    # 256 = ROW_GROUP_WINDOWS rows a channel, then 3 x 45 rows together starting at channel 0's window 256
    assert spans == [(0, 0, 256), (0, 256, 135), (1, 0, 256), (2, 0, 256)]
    assert meta.schema.to_arrow_schema().names == ["facts", "residual"]
    for g in range(meta.num_row_groups):      # no statistics: the manifest maps the groups
        assert all(not meta.row_group(g).column(c).is_stats_set for c in range(meta.num_columns))


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


# the facts' 20 bytes as DEVELOPERS.md lists them (little-endian), as a numpy record
LAYOUT = np.dtype([("crc32", "<u4"), ("level", "<i8"), ("score", "<f4"), ("worst", "u1"), ("table", "i1"),
                   ("lpc_set", "i1"), ("mode", "i1")])


def test_facts_unpack_as_the_documented_byte_layout(lean_arc):
    out, _ = lean_arc
    arc = tsarchive.open(out)
    f = pq.ParquetFile(out / S.WINDOWS)
    groups = _stored(out)["groups"]
    for g, (c, w) in enumerate(groups):
        col = f.read_row_group(g, columns=["facts"])["facts"].combine_chunks()
        facts = np.frombuffer(col.buffers()[1], np.uint8)[:20 * len(col)].view(LAYOUT)
        if w + len(col) <= WINDOWS:               # a group of one channel: its windows w, w + 1, ...
            rows = arc.rows(arc.channels[c].name, w, w + len(col))
        else:                                     # the shared group: 45 windows of each channel in turn
            rows = [arc.rows(ch.name, 256, WINDOWS) for ch in arc.channels]
            rows = {k: np.concatenate([r[k].to_numpy() for r in rows]) for k in LAYOUT.names}
        for k in LAYOUT.names:
            got = rows[k] if isinstance(rows, dict) else rows[k].to_numpy()
            np.testing.assert_array_equal(got, facts[k])


def test_the_manifest_stores_shared_facts_once(lean_arc):
    out, x = lean_arc
    assert sorted(p.name for p in out.iterdir()) == [S.WINDOWS]     # the manifest is inside it
    stored = _stored(out)
    assert stored["format_version"] == 8 == S.FORMAT_VERSION
    assert stored["channel_defaults"]["n_samples"] == len(x) and stored["channel_defaults"]["rate"] == 10.0
    assert "time" not in stored              # seconds from 0 at the rate: what a reader assumes without one
    for c in stored["channels"]:
        assert not {"rate", "n_samples", "eps", "note"} & set(c) and "used_pct" not in c["summary"]
        assert "out_dtype" not in c["grid"] and "step" not in c["grid"] and "ratio" not in c["summary"]
    arc = tsarchive.open(out)                     # expanded for every reader of Archive.manifest
    assert arc.manifest["time"] == {"kind": "seconds", "zone": None, "columns": [], "runs": [[0, "0x0.0p+0"]]}
    np.testing.assert_array_equal(arc.times().values, np.arange(len(x)) / 10.0)   # k / rate, numpy's division
    for c, d in zip(arc.channels, arc.manifest["channels"]):
        assert d["rate"] == 10.0 and d["n_samples"] == len(x) and d["eps"] == d["grid"]["eps"] == c.eps
        assert d["grid"]["out_dtype"] == "float32" and sum(d["summary"]["modes"].values()) == WINDOWS
        assert d["summary"]["used_pct"] == 100.0 * d["summary"]["worst_error"] / d["eps"]
        assert d["grid"]["step"] == 2 * d["eps"] == c.grid.step                # exact: doubling a double
        # float32 (4 bytes) = 32 bits a sample: the ratio is 32 / bits per sample, to 6 significant digits
        assert d["summary"]["ratio"] == float(f"{32 / d['summary']['bits_per_sample']:.6g}")


def test_compact_then_expand_gives_the_full_manifest_back():
    # by hand: two channels sharing everything but their names and grids; a channel's own value wins
    full = {"format": "tsarchive", "time": {"kind": "seconds", "zone": None, "columns": [], "runs": [[0, "0x0.0p+0"]]},
            "channels": [
        {"name": n, "unit": "V", "dtype": "float64", "rate": 5.0, "start": None, "n_samples": 9, "budget": "1%",
         "note": "",
         "eps": e, "grid": {"kind": "step", "eps": e, "out_dtype": "float64", "step": 2 * e}, "scale": s,
         "summary": {"worst_error": e / 2, "used_pct": 50.0, "n_exceptions": 0, "modes": {"prev": 2, "lpc": 0},
                     "bits_per_sample": 3.0, "ratio": r}}
        for n, e, s, r in (("a", 0.5, 1, 21.3333), ("b", 0.25, 2, 21.3))]}   # 64 / 3 = 21.3333 (6 digits)
    small = compact(full)
    assert small["channel_defaults"] == {"unit": "V", "dtype": "float64", "rate": 5.0, "start": None,
                                         "n_samples": 9, "budget": "1%", "note": ""}
    assert "time" not in small                            # the plain axis: no start, seconds from 0
    assert small["channels"][0]["summary"] == {"worst_error": 0.25, "modes": {"prev": 2}, "bits_per_sample": 3.0}
    assert small["channels"][1] == {"name": "b", "grid": {"kind": "step", "eps": 0.25}, "scale": 2,
                                    "summary": {"worst_error": 0.125, "modes": {"prev": 2}, "bits_per_sample": 3.0,
                                                "ratio": 21.3}}     # not what its bits give: kept
    assert expand(small, ("prev", "lpc")) == full
