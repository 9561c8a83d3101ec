"""Formats 6 and 7: the manifest inside windows.parquet's footer (store/inside.py) and the row-group map of
the window rows (store/lean6.py).  References: SHA-256 is FIPS 180-4 (hashlib); the Parquet file's tail is
``<footer> <4-byte little-endian length> PAR1`` (Apache Parquet file format); the manifest is read back with
pyarrow and zstandard alone, as DEVELOPERS.md documents."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

import tsarchive
from tsarchive.errors import ArchiveCorrupt
from tsarchive.store import inside, lean6
from tsarchive.store import schema as S
from tsarchive.store.binding import read_manifest

from crafting import copy


def test_the_dictionaries_are_the_ones_their_formats_shipped_with():
    # every format-6 (format-7) manifest is compressed with this file: it may never change (hashlib: FIPS 180-4)
    got = hashlib.sha256((inside.HERE / "manifest6.zdict").read_bytes()).hexdigest()
    assert got == "f3d5c435459f2e7235559b4a8da5571d0d63d02fbd292a1a09a98fba9ed61c37"
    got = hashlib.sha256((inside.HERE / "manifest7.zdict").read_bytes()).hexdigest()
    assert got == "6b9f5b652db5d3109ff79a2bbdddd752284039930c190ccefb77dbabe5cfb1c1"


def _seven_bit(text: bytes) -> bytes:
    # DEVELOPERS.md's 7-bit text, decoded bit by bit in plain Python (not the module's numpy code)
    bits = "".join(format(c, "08b")[1:] for c in text)
    return bytes(int(bits[i:i + 8], 2) for i in range(0, len(bits) // 8 * 8, 8))


@given(st.binary(max_size=300))
def test_seven_bit_text_is_ascii_and_round_trips(b):
    t = inside.to_text(b)
    assert all(c < 0x80 for c in t) and len(t) == -(-8 * len(b) // 7)
    assert _seven_bit(t) == b and inside.from_text(t) == b


@pytest.fixture(scope="module")
def arc(tmp_path_factory):
    d = tmp_path_factory.mktemp("inside")
    x = np.cumsum(np.random.default_rng(3).standard_normal((5000, 2)), axis=0).astype(np.float32)
    np.save(d / "s.npy", x)
    out = d / "s.tsarchive"
    tsarchive.pack(d / "s.npy", out, "1%", rate=50.0, code_size=0)
    return out


def _tail(path: Path) -> tuple[int, bytes]:
    data = path.read_bytes()
    n = int.from_bytes(data[-8:-4], "little")          # Parquet: footer length, then the magic PAR1
    assert data[-4:] == b"PAR1"
    return len(data) - 8 - n, data[len(data) - 8 - n:-8]


def test_the_documented_one_liner_reads_the_manifest_with_pyarrow_and_zstandard_only(arc):
    code = inside.one_liner(str(arc))
    r = subprocess.run([sys.executable, "-c", code], cwd=inside.DICT_FILE.parent, capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr[-300:]
    assert json.loads(r.stdout) == read_manifest(arc)
    assert "import tsarchive" not in code


def test_the_footer_digest_and_the_rows_digest_are_sha256_of_what_they_cover(arc):
    start, footer = _tail(arc / S.WINDOWS)
    key = S.DIGEST_KEY + b"\x18\x25"          # Thrift compact: KeyValue field 2 (binary), length 37
    at = footer.rindex(key) + len(key)
    zeroed = footer[:at] + bytes(37) + footer[at + 37:]      # 32 zero bytes as 7-bit text: 37 zero bytes
    assert _seven_bit(footer[at:at + 37]) == hashlib.sha256(zeroed).digest()
    m = read_manifest(arc)
    rows = (arc / S.WINDOWS).read_bytes()[:start]
    assert m["data"] == {"bytes": start, "sha256": hashlib.sha256(rows).hexdigest()}
    assert m["members"] == {}                 # nothing else in this folder
    assert inside.identity(arc) == _seven_bit(footer[at:at + 37]).hex()


@pytest.mark.parametrize("where", ["manifest", "slot", "schema"])
def test_a_changed_footer_byte_is_refused_at_opening(arc, tmp_path, where):
    a = copy(arc, tmp_path, "f.tsarchive")
    p = a / S.WINDOWS
    data = bytearray(p.read_bytes())
    start, footer = _tail(p)
    blob = read_manifest(arc) and footer.index(S.MANIFEST_KEY + b"\x18")      # the manifest's key, then its value
    at = {"manifest": start + blob + 40, "slot": start + footer.rindex(S.DIGEST_KEY) + len(S.DIGEST_KEY) + 5,
          "schema": start + footer.index(b"residual") + 2}[where]
    data[at] ^= 0x01
    p.write_bytes(bytes(data))
    with pytest.raises(ArchiveCorrupt):
        tsarchive.open(a).read_many()


def test_row_group_runs_tile_every_channel_once():
    # by hand: 3 channels of 300, 0 and 40 windows; groups of 256 (ROW_GROUP_WINDOWS)
    n = [300, 0, 40]
    assert lean6.runs([[0, 0], [0, 256]], [256, 84], n) == [[(0, 0, 256)], [(0, 256, 300), (2, 0, 40)]]
    for groups, rows, why in (([[0, 0], [0, 0]], [256, 84], "other than once"),
                              ([[0, 0]], [256, 84], "lists 1 row groups, windows.parquet holds 2"),
                              ([[0, 0]], [256], "other than once"),
                              ([[0, 0], [0, 256]], [256, 85], "runs past"),
                              ([[0, 0], [3, 0]], [256, 84], "does not name a window"),
                              ([[0, 0], [0, 256.0]], [256, 84], "does not name a window"),
                              (None, [256], "lists no row groups")):
        with pytest.raises(ValueError, match=why):
            lean6.runs(groups, rows, n)


def test_report_prints_the_manifest_as_stored(arc, capsys):
    from tsarchive.cli import main
    assert main(["report", str(arc), "--manifest"]) == 0
    shown = json.loads(capsys.readouterr().out)
    code = inside.one_liner(str(arc))                 # the same manifest as pyarrow + zstandard read it
    r = subprocess.run([sys.executable, "-c", code], cwd=inside.DICT_FILE.parent, capture_output=True, text=True,
                       timeout=120)
    assert shown == json.loads(r.stdout) and shown["format_version"] == S.FORMAT_VERSION and "groups" in shown


def test_an_index_member_that_declares_too_much_or_runs_short_is_refused(tmp_path, monkeypatch):
    # index.zst (format 6): one zstd frame of <4-byte LE length> <JSON> <blobs>; its declared size is capped
    # before decompressing, and a row whose blobs run past the end is refused (zstandard writes the frames)
    import zstandard
    from tsarchive.index import member

    class Arc:
        path = tmp_path
    meta = json.dumps({"version": 2, "channels": [], "rows": [["ch", "level", 0, 3, 5, 9]]}).encode()
    raw = len(meta).to_bytes(4, "little") + meta + b"x" * 10          # 14 bytes of blobs promised, 10 there
    (tmp_path / member.NAME).write_bytes(zstandard.ZstdCompressor(write_content_size=True).compress(raw))
    with pytest.raises(ArchiveCorrupt, match="index.zst cannot be read .a row runs past the member"):
        member.read(Arc, "ch")
    monkeypatch.setattr(member, "MAX_BYTES", len(raw) - 1)
    with pytest.raises(ArchiveCorrupt, match=f"index.zst cannot be read .declares {len(raw)} bytes"):
        member.read(Arc, "ch")
