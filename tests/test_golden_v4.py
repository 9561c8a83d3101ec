"""The committed golden archive freezes format version 4.

If a change to the code makes this fail, the archive format changed: that
must be deliberate (bump FORMAT_VERSION, keep reading this archive, add a
golden archive for the new version with its own ``make_golden.py``, and say
so in the CHANGELOG).
"""

import json
from pathlib import Path

import pyarrow.parquet as pq

import golden_checks
from tsarchive.predict import PREDICTORS
from tsarchive.store import schema as S
from tsarchive.store.binding import manifest_digest

HERE = Path(__file__).resolve().parent / "golden" / "v4"
ARC = HERE / "golden4"


def test_golden_decodes_bit_for_bit():
    golden_checks.decodes_bit_for_bit(HERE, ARC)


def test_golden_is_within_budget_of_its_source():
    golden_checks.within_budget_of_source(HERE, ARC)


def test_golden_schema_and_manifest_are_version_4():
    manifest = json.loads((ARC / S.MANIFEST).read_text())
    assert manifest["format"] == "tsarchive" and manifest["format_version"] == 4
    assert S.OLDEST_READABLE <= 4 < S.FORMAT_VERSION
    assert S.BOUND_FROM_VERSION <= 4
    # the binding: the manifest's digest (without its members) in windows.parquet's footer
    footer = pq.read_schema(ARC / S.WINDOWS).metadata
    assert footer[S.BINDING_KEY].decode() == manifest_digest(manifest)
    assert set(manifest["members"]) == {"windows.parquet", "exceptions.parquet", "model.parquet", "time.parquet",
                                        "extra.parquet"}
    assert pq.read_schema(ARC / S.WINDOWS).remove_metadata().equals(S.windows_schema(True))
    assert pq.read_schema(ARC / S.EXCEPTIONS).remove_metadata().equals(S.EXCEPTIONS_SCHEMA)
    golden_checks.format_4_fields(manifest)
    t = pq.read_table(ARC / S.WINDOWS, columns=["mode", "lpc_set"])
    assert set(t["mode"].to_pylist()) == set(PREDICTORS)  # every predictor is frozen here
    assert len(set(t["lpc_set"].to_pylist())) >= 2         # and more than one LPC coefficient set


def test_golden_text_column_and_gap_come_back():
    golden_checks.text_column_and_gap_come_back(ARC)
