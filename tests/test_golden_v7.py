"""Format 7 (7-bit text footer values, slimmed footers) frozen: ``tests/golden/v7/golden7``, ``coders7`` and
``classic7`` are decoded bit for bit on every run.

A failure here means the archive format changed.  Changing it is deliberate:
a new FORMAT_VERSION, this archive still read, a new golden archive beside
it (DEVELOPERS.md, "Changing the format") and a CHANGELOG entry.
"""

import hashlib
import json
from pathlib import Path

import golden_checks
import pyarrow.parquet as pq
import zstandard

import tsarchive
from tsarchive.predict import PREDICTORS
from tsarchive.store import schema as S

HERE = Path(__file__).resolve().parent / "golden" / "v7"
ARC = HERE / "golden7"
SOURCE = HERE.parent / "v5" / "source.csv"        # format 5's source, packed again
DICTIONARY = Path(tsarchive.__file__).parent / "store" / "manifest7.zdict"


def _seven_bit(text: bytes) -> bytes:
    # DEVELOPERS.md's 7-bit text, decoded bit by bit in plain Python
    bits = "".join(format(c, "08b")[1:] for c in text)
    return bytes(int(bits[i:i + 8], 2) for i in range(0, len(bits) // 8 * 8, 8))


def _stored(arc: Path) -> dict:
    """The manifest with pyarrow and zstandard only, as DEVELOPERS.md documents it."""
    blob = _seven_bit(pq.read_metadata(arc / S.WINDOWS).metadata[b"tsarchive.manifest"])
    d = zstandard.ZstdCompressionDict(DICTIONARY.read_bytes(), dict_type=zstandard.DICT_TYPE_RAWCONTENT)
    return json.loads(zstandard.ZstdDecompressor(dict_data=d).decompress(blob))


def test_golden_decodes_bit_for_bit_and_within_budget_of_its_source():
    golden_checks.decodes_bit_for_bit(HERE, ARC)
    rep = tsarchive.verify(ARC, against=SOURCE)
    assert rep.ok and rep.checksums_ok and rep.compared, rep.problems
    arc = tsarchive.open(ARC)
    assert arc.channel("strain").eps == 0.5 and arc.channel("temp").eps == 0.02 and arc.channel("serial").eps == 3
    assert arc.manifest["model"] is not None  # the golden archive exercises the integer decoder


def test_golden_layout_and_manifest_are_version_7():
    assert not (ARC / "manifest.json").exists()
    manifest = _stored(ARC)
    assert manifest["format"] == "tsarchive" and manifest["format_version"] == 7
    assert set(manifest["members"]) == {"index.zst", "exceptions.parquet", "model.parquet", "time.parquet",
                                        "extra.parquet"}
    # every byte bound: the rows before the footer and each member by SHA-256 (hashlib, FIPS 180-4), the
    # footer by the digest in its slot (Thrift compact: KeyValue field 2, binary, length 37: 7-bit text)
    raw = (ARC / S.WINDOWS).read_bytes()
    n = int.from_bytes(raw[-8:-4], "little")
    footer = raw[len(raw) - 8 - n:-8]
    assert manifest["data"] == {"bytes": len(raw) - 8 - n, "sha256": hashlib.sha256(raw[:len(raw) - 8 - n]).hexdigest()}
    at = footer.rindex(b"tsarchive.digest\x18\x25") + 18
    assert _seven_bit(footer[at:at + 37]) == hashlib.sha256(footer[:at] + bytes(37) + footer[at + 37:]).digest()
    # slimmed footers (parquet.thrift's optional created_by left out) and UTF-8 key-value values
    assert all(not pq.read_metadata(p).created_by for p in ARC.glob("*.parquet"))
    assert all(v.decode("utf-8") for v in pq.read_metadata(ARC / S.WINDOWS).metadata.values())
    for name, m in manifest["members"].items():
        assert m == {"bytes": (ARC / name).stat().st_size,
                     "sha256": hashlib.sha256((ARC / name).read_bytes()).hexdigest()}
    # the columns and facts as DEVELOPERS.md lists them (formats 6 and 7), every predictor but ae+prev frozen here
    # (golden6 freezes it; the classic fallback takes its channels here)
    golden_checks.lean6_windows(ARC, manifest, set(PREDICTORS) - {p.id for p in PREDICTORS.values() if p.name == "ae+prev"})


def test_golden_text_column_and_gap_come_back():
    golden_checks.text_column_and_gap_come_back(ARC)


def test_coders_golden_decodes_bit_for_bit_with_both_residual_coders_and_its_index():
    golden_checks.coders_bit_for_bit(HERE, HERE / "coders7", "index.zst")


def test_classic_golden_decodes_bit_for_bit_and_its_payloads_with_the_libraries():
    # classic7: channel 0 in the classic fallback coder (format 6 on); the expected samples were decoded when
    # it was made; each of its windows also inflates with the library its header names (zstd / xz / bzip2)
    from coder_kit import coder_ids
    from test_classic_channel import _library_decompress

    arc_path = HERE / "classic7"
    ids = coder_ids(arc_path)
    assert ids[0] == "classic" and ids[1] != "classic"
    arc = golden_checks.decodes_as_expected(arc_path, HERE / "expected_classic.npz")
    ch = arc.channels[0]
    payloads = arc.rows(ch.name, 0, ch.n_windows, ["residual"]).column("residual").to_pylist()
    assert len(payloads) == 5                                   # 20 000 samples in windows of 4096
    # block mode (DEVELOPERS.md): the 4 whole windows and the short last one are one block (format 7's "tail"):
    # its payload in the first window's cell, the other cells empty
    assert [len(p) > 0 for p in payloads] == [True, False, False, False, False]
    assert arc.manifest["channels"][0]["coder"]["tail"] == 1
    order, raw, shuffled, width = _library_decompress(payloads[0])
    assert order in (-1, 0, 1) and width in (1, 2, 4, 8)
    assert len(raw) // width == 20_000
