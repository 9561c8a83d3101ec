"""The committed version-3 golden archive: this tool still reads format 3, bit for bit.

Format 3 is frozen: the archive was written by the tool of that time and
cannot be regenerated (its generator is in the project's history).  If a
change makes this fail, the reader lost format 3: that must be deliberate
(raise ``OLDEST_READABLE`` in store/schema.py and say so in the CHANGELOG).
"""

import json
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq

from tsarchive.predict import PREDICTORS

import tsarchive
from tsarchive.quantize import values_to_bits
from tsarchive.store import schema as S

HERE = Path(__file__).resolve().parent / "golden" / "v3"
ARC = HERE / "golden.tsa"


def test_golden_decodes_bit_for_bit():
    arc = tsarchive.open(ARC)
    expected = np.load(HERE / "expected.npz")
    assert [c.name for c in arc.channels] == ["strain", "temp", "counts"]
    for c in arc.channels:
        got = arc.read(c.name)
        assert got.dtype == expected[c.name].dtype
        np.testing.assert_array_equal(values_to_bits(got), values_to_bits(expected[c.name]))


def test_golden_is_within_budget_of_its_source():
    rep = tsarchive.verify(ARC, against=HERE / "source.csv")
    assert rep.ok and rep.checksums_ok and rep.compared, rep.problems
    arc = tsarchive.open(ARC)
    assert arc.channel("strain").eps == 0.5 and arc.channel("temp").eps == 0.0
    assert arc.manifest["model"] is not None  # the golden archive exercises the integer decoder


# The version-3 columns, spelled out: format 4 keeps them (its changes are in the manifest and new members).
V3_WINDOWS = [("channel", "string"), ("window", "int32"), ("mode", "int8"), ("lpc_set", "int8"), ("table", "int8"),
              ("level", "int64"), ("residual", "binary"), ("crc32", "uint32"), ("worst", "uint8"), ("score", "float")]
V3_CODE = ("code", "list<item: int8>")    # after "level", only in archives that keep a model
V3_EXCEPTIONS = [("channel", "string"), ("window", "int32"), ("pos", "list<item: int32>"),
                 ("bits", "list<item: int64>")]


def test_golden_schema_and_manifest_are_version_3():
    manifest = json.loads((ARC / "manifest.json").read_text())
    assert manifest["format"] == "tsarchive" and manifest["format_version"] == 3
    assert S.OLDEST_READABLE <= 3 < S.FORMAT_VERSION
    assert [(f.name, str(f.type)) for f in S.WINDOWS_SCHEMA] == V3_WINDOWS
    with_code = [(f.name, str(f.type)) for f in S.windows_schema(True)]
    assert with_code == V3_WINDOWS[:6] + [V3_CODE] + V3_WINDOWS[6:]
    assert [(f.name, str(f.type)) for f in S.EXCEPTIONS_SCHEMA] == V3_EXCEPTIONS
    # the golden archive keeps a model (code column) and a NaN (exceptions member)
    assert pq.read_schema(ARC / "windows.parquet").remove_metadata().equals(S.windows_schema(True))
    assert pq.read_schema(ARC / "exceptions.parquet").remove_metadata().equals(S.EXCEPTIONS_SCHEMA)
    held = pq.read_table(ARC / "exceptions.parquet").to_pylist()
    assert [(r["channel"], r["pos"]) for r in held] == [("strain", [1234 % 64])]
    assert set(manifest["members"]) == {"windows.parquet", "exceptions.parquet", "model.parquet"}
    assert not (ARC / "tables.parquet").exists()
    tables = [t for c in manifest["channels"] for t in c["tables"]]
    assert tables and all(set(t) == {"mode", "table", "coder", "freqs"} for t in tables)
    assert pq.read_schema(ARC / "model.parquet").remove_metadata().equals(S.MODEL_SCHEMA)
    t = pq.read_table(ARC / "windows.parquet", columns=["mode", "lpc_set"])
    assert set(t["mode"].to_pylist()) == set(PREDICTORS)  # every predictor is frozen here
    assert len(set(t["lpc_set"].to_pylist())) >= 2         # and more than one LPC coefficient set
