"""The committed golden archive freezes format version 5 (the lean container).

If a change to the code makes this fail, the archive format changed: that
must be deliberate (bump FORMAT_VERSION, keep reading this archive, add a
golden archive for the new version with its own ``make_golden.py``, and say
so in the CHANGELOG).
"""

import json
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq

import tsarchive
from tsarchive.predict import PREDICTORS
from tsarchive.quantize import values_to_bits
from tsarchive.store import lean
from tsarchive.store import schema as S
from tsarchive.store.binding import manifest_digest

HERE = Path(__file__).resolve().parent / "golden" / "v5"
ARC = HERE / "golden5"
CHANNELS = ["strain", "temp", "counts", "serial"]


def test_golden_decodes_bit_for_bit():
    arc = tsarchive.open(ARC)
    expected = np.load(HERE / "expected.npz")
    assert [c.name for c in arc.channels] == CHANNELS
    for c in arc.channels:
        got = arc.read(c.name)
        assert got.dtype == expected[c.name].dtype
        np.testing.assert_array_equal(values_to_bits(np.ma.getdata(got)), values_to_bits(expected[c.name]))
        np.testing.assert_array_equal(np.ma.getmaskarray(got), expected[f"{c.name}.mask"])
    np.testing.assert_array_equal(arc.times().values, expected["times"])


def test_golden_is_within_budget_of_its_source():
    rep = tsarchive.verify(ARC, against=HERE / "source.csv")
    assert rep.ok and rep.checksums_ok and rep.compared, rep.problems
    arc = tsarchive.open(ARC)
    assert arc.channel("strain").eps == 0.5 and arc.channel("temp").eps == 0.0 and arc.channel("serial").eps == 3
    assert arc.manifest["model"] is not None  # the golden archive exercises the integer decoder


def test_golden_schema_and_manifest_are_version_5():
    manifest = json.loads((ARC / S.MANIFEST).read_text())
    assert manifest["format"] == "tsarchive" and manifest["format_version"] == 5 == S.FORMAT_VERSION
    assert S.BOUND_FROM_VERSION <= 5 and S.LEAN_FROM_VERSION == 5
    # the binding: the manifest's digest (without its members) in windows.parquet's footer
    footer = pq.read_schema(ARC / S.WINDOWS).metadata
    assert footer[S.BINDING_KEY].decode() == manifest_digest(manifest)
    assert footer[lean.LAYOUT_KEY] == lean.LAYOUT
    assert set(manifest["members"]) == {"windows.parquet", "exceptions.parquet", "model.parquet", "time.parquet",
                                        "extra.parquet"}
    # the lean columns, by name and type as DEVELOPERS.md lists them (format 5)
    assert [(f.name, str(f.type)) for f in pq.read_schema(ARC / S.WINDOWS).remove_metadata()] == [
        ("key", "int64"), ("facts", "int64"), ("level", "int64"), ("code", "list<element: int8>"),
        ("residual", "binary"), ("score", "float")]
    assert [(f.name, str(f.type)) for f in pq.read_schema(ARC / S.EXCEPTIONS).remove_metadata()] == [
        ("key", "int64"), ("pos", "list<element: int32>"), ("bits", "list<element: int64>")]
    # the compact manifest: shared facts once, eps in the grid only
    assert manifest["channel_defaults"]["rate"] == 50.0 and manifest["channel_defaults"]["n_samples"] == 8440
    assert all("eps" not in c and "rate" not in c for c in manifest["channels"])
    grids = {c["name"]: c["grid"] for c in manifest["channels"]}
    assert grids["temp"]["verbatim"] == [-9999.0]                               # a sentinel, kept verbatim
    assert isinstance(grids["serial"]["origin"], int) and "missing" in grids["serial"]   # beyond 2**53, a gap
    assert manifest["time"]["listed"] is True and manifest["time"]["zone"] is None      # jitter, naive times
    assert manifest["notes"] == ["# Rig 2 bench log (invented demo data)", "# operator shift B"]
    assert manifest["extra"]["columns"] == ["status"]
    t = pq.read_table(ARC / S.WINDOWS, columns=["key", "facts"])
    facts = t["facts"].to_numpy()
    assert set((facts >> 56).tolist()) == set(PREDICTORS)        # every predictor is frozen here (mode << 56)
    assert len(set(((facts >> 48) & 0xFF).tolist())) >= 2       # and more than one LPC set (lpc_set << 48)
    meta = pq.ParquetFile(ARC / S.WINDOWS).metadata
    spans = {(meta.row_group(g).column(0).statistics.min >> 32, meta.row_group(g).column(0).statistics.max >> 32,
              meta.row_group(g).num_rows) for g in range(meta.num_row_groups)}
    # 264 windows a channel: a full row group of 256 each, and one group of the 4 x 8 left over
    assert spans == {(0, 0, 256), (1, 1, 256), (2, 2, 256), (3, 3, 256), (0, 3, 32)}


def test_golden_text_column_and_gap_come_back():
    arc = tsarchive.open(ARC)
    status = arc.extra().column("status").to_pylist()
    assert status.count("door open") == 10 and None in status          # an empty cell stays a null
    steps = np.diff(arc.times().values)
    assert steps.max() == 61 * 20_000_000                                  # the 60 lost rows: one 1.22 s step
    assert arc.read("serial").mask.sum() == 1
