"""Checks every golden archive from format 4 on passes (test_golden_v4.py ... test_golden_v6.py): the same rig
log, decoded bit for bit against the ``expected.npz`` frozen beside it and verified against its source."""

from __future__ import annotations

from pathlib import Path

import numpy as np

import tsarchive
from tsarchive.quantize import values_to_bits

CHANNELS = ["strain", "temp", "counts", "serial"]


def decodes_bit_for_bit(here: Path, arc_dir: Path) -> None:
    arc = tsarchive.open(arc_dir)
    expected = np.load(here / "expected.npz")
    assert [c.name for c in arc.channels] == CHANNELS
    for c in arc.channels:
        got = arc.read(c.name)
        assert got.dtype == expected[c.name].dtype
        np.testing.assert_array_equal(values_to_bits(np.ma.getdata(got)), values_to_bits(expected[c.name]))
        np.testing.assert_array_equal(np.ma.getmaskarray(got), expected[f"{c.name}.mask"])
    np.testing.assert_array_equal(arc.times().values, expected["times"])


def within_budget_of_source(here: Path, arc_dir: Path) -> None:
    rep = tsarchive.verify(arc_dir, against=here / "source.csv")
    assert rep.ok and rep.checksums_ok and rep.compared, rep.problems
    arc = tsarchive.open(arc_dir)
    assert arc.channel("strain").eps == 0.5 and arc.channel("temp").eps == 0.0 and arc.channel("serial").eps == 3
    assert arc.manifest["model"] is not None  # the golden archive exercises the integer decoder


def text_column_and_gap_come_back(arc_dir: Path) -> None:
    arc = tsarchive.open(arc_dir)
    status = arc.extra().column("status").to_pylist()
    assert status.count("door open") == 10 and None in status          # an empty cell stays a null
    steps = np.diff(arc.times().values)
    assert steps.max() == 61 * 20_000_000                                  # the 60 lost rows: one 1.22 s step
    assert arc.read("serial").mask.sum() == 1


def format_4_fields(manifest: dict) -> None:
    """What format 4 added, as the stored manifest holds it (a sentinel, exact integers, times, notes, text)."""
    grids = {c["name"]: c["grid"] for c in manifest["channels"]}
    assert grids["temp"]["verbatim"] == [-9999.0]                               # a sentinel, kept verbatim
    assert isinstance(grids["serial"]["origin"], int) and "missing" in grids["serial"]   # beyond 2**53, a gap
    assert manifest["time"]["listed"] is True and manifest["time"]["zone"] is None      # jitter, naive times
    assert manifest["notes"] == ["# Rig 2 bench log (invented demo data)", "# operator shift B"]
    assert manifest["extra"]["columns"] == ["status"]


def decodes_as_expected(arc_path: Path, expected_npz: Path):
    """Every channel of the archive at ``arc_path`` read back bit for bit as saved in ``expected_npz`` when the
    golden archive was made (numpy array_equal on the raw bytes), and every member's checksum passing; returns
    the open archive."""
    expected = np.load(expected_npz)
    arc = tsarchive.open(arc_path)
    for c in arc.channels:
        got = np.asarray(arc.read(c.name))
        assert got.dtype == expected[c.name].dtype
        assert np.array_equal(got.view(np.uint8), expected[c.name].view(np.uint8))
    assert tsarchive.verify(arc_path).ok                                  # every member's checksum
    return arc


def coders_bit_for_bit(here: Path, arc_path: Path, index_member: str) -> None:
    """The coders golden archive (test_golden_v5.py, test_golden_v6.py): channel 0 range coded under its
    tables, channel 1 adaptive coded (the packer's own choice, tests/coder_kit.py); the expected samples were
    decoded when it was made and are compared bit for bit (numpy array_equal on the raw bits): a decoder
    change that moves one bit fails here."""
    from coder_kit import coder_ids
    from tsarchive.index import look

    assert coder_ids(arc_path) == [None, "adaptive"]
    arc = decodes_as_expected(arc_path, here / "expected_coders.npz")
    assert index_member in arc.manifest["members"]
    assert len(look.unusual(arc, arc.channels[1].name, k=3).rows) == 3


def lean6_windows(arc: Path, manifest: dict, modes: set[int]) -> None:
    """windows.parquet of the format-6 and format-7 golden archives (the rig log packed in windows of 32): the
    columns by name and type as DEVELOPERS.md lists them, no statistics, the row groups as the manifest's
    ``groups`` map them, the 20-byte facts decoded with numpy (``modes`` the predictors frozen, more than one
    LPC set), and the compact manifest (shared facts once, eps in the grid only, no step = 2 eps)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    assert [(f.name, str(f.type), f.nullable) for f in pq.read_schema(arc / "windows.parquet").remove_metadata()] == [
        ("facts", "fixed_size_binary[20]", False), ("code", "list<element: int8>", True),
        ("residual", "binary", False)]
    meta = pq.ParquetFile(arc / "windows.parquet").metadata
    rows = [meta.row_group(g).num_rows for g in range(meta.num_row_groups)]
    # 264 windows a channel: a full row group of 256 each, and one group of the 4 x 8 left over
    assert sorted(zip(map(tuple, manifest["groups"]), rows)) == [
        ((0, 0), 256), ((0, 256), 32), ((1, 0), 256), ((2, 0), 256), ((3, 0), 256)]
    assert not any(meta.row_group(g).column(c).is_stats_set for g in range(len(rows)) for c in range(3))
    layout = np.dtype([("crc32", "<u4"), ("level", "<i8"), ("score", "<f4"), ("worst", "u1"), ("table", "i1"),
                       ("lpc_set", "i1"), ("mode", "i1")])
    col = pq.read_table(arc / "windows.parquet", columns=["facts"])["facts"].combine_chunks()
    assert col.type == pa.binary(20)
    facts = np.frombuffer(col.buffers()[1], np.uint8)[:20 * len(col)].view(layout)
    assert set(facts["mode"].tolist()) == modes
    assert len(set(facts["lpc_set"].tolist())) >= 2
    assert manifest["channel_defaults"]["rate"] == 50.0 and manifest["channel_defaults"]["n_samples"] == 8440
    assert all("eps" not in c and "rate" not in c for c in manifest["channels"])
    assert any(c["grid"]["kind"] == "step" and "step" not in c["grid"] for c in manifest["channels"])
    format_4_fields(manifest)
