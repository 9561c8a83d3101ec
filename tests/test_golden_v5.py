"""Format 5 (the lean container) frozen: ``tests/golden/v5/golden5`` is decoded bit for bit on every run.

A failure here means the archive format changed.  Changing it is deliberate:
a new FORMAT_VERSION, this archive still read, a new golden archive beside
it (DEVELOPERS.md, "Changing the format") and a CHANGELOG entry.
"""

import json
from pathlib import Path

import golden_checks
import pyarrow.parquet as pq
from tsarchive.predict import PREDICTORS
from tsarchive.store import lean
from tsarchive.store import schema as S
from tsarchive.store.binding import manifest_digest

HERE = Path(__file__).resolve().parent / "golden" / "v5"
ARC = HERE / "golden5"


def test_golden_decodes_bit_for_bit_and_within_budget_of_its_source():
    for check in (golden_checks.decodes_bit_for_bit, golden_checks.within_budget_of_source):
        check(HERE, ARC)


def test_golden_schema_and_manifest_are_version_5():
    manifest = json.loads((ARC / S.MANIFEST).read_text())
    assert manifest["format"] == "tsarchive" and manifest["format_version"] == 5 < S.FORMAT_VERSION
    assert S.BOUND_FROM_VERSION <= 5 and S.LEAN_FROM_VERSION == 5
    # the binding: the manifest's digest (without its members) in windows.parquet's footer
    footer = pq.read_schema(ARC / S.WINDOWS).metadata
    assert footer[S.BINDING_KEY].decode() == manifest_digest(manifest)
    assert footer[lean.LAYOUT_KEY] == lean.LAYOUT
    assert set(manifest["members"]) == {"windows.parquet", "index.parquet", "exceptions.parquet", "model.parquet", "time.parquet",
                                        "extra.parquet"}
    # the lean columns, by name and type as DEVELOPERS.md lists them (format 5)
    assert [(f.name, str(f.type), f.nullable) for f in pq.read_schema(ARC / S.WINDOWS).remove_metadata()] == [
        ("key", "int64", False), ("facts", "int64", False), ("level", "int64", False),
        ("code", "list<element: int8>", True), ("residual", "binary", False), ("score", "float", False)]
    assert [(f.name, str(f.type), f.nullable) for f in pq.read_schema(ARC / S.EXCEPTIONS).remove_metadata()] == [
        ("key", "int64", False), ("pos", "list<element: int32>", True), ("bits", "list<element: int64>", True)]
    # the compact manifest: shared facts once, eps in the grid only
    assert manifest["channel_defaults"]["rate"] == 50.0 and manifest["channel_defaults"]["n_samples"] == 8440
    assert all("eps" not in c and "rate" not in c for c in manifest["channels"])
    golden_checks.format_4_fields(manifest)
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
    golden_checks.text_column_and_gap_come_back(ARC)


def test_coders_golden_decodes_bit_for_bit_with_both_residual_coders_and_its_index():
    golden_checks.coders_bit_for_bit(HERE, HERE / "coders5", "index.parquet")
