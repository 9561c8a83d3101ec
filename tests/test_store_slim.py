"""Format 7: Parquet footers without the optional fields no reader needs (store/slim.py), and windows.parquet
opened by Parquet readers other than pyarrow.

References: the Thrift compact protocol (Apache Thrift, "Thrift Compact protocol encoding") and parquet-format's
``parquet.thrift`` (which fields are optional); pyarrow, DuckDB and polars as independent Parquet readers; the
file's tail is ``<footer> <4-byte little-endian length> PAR1`` (Apache Parquet file format)."""

from __future__ import annotations

import io

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import tsarchive
from tsarchive.store import schema as S
from tsarchive.store import slim


def _footer(data: bytes) -> bytes:
    n = int.from_bytes(data[-8:-4], "little")
    assert data[-4:] == b"PAR1"
    return data[len(data) - 8 - n:-8]


def _written(**opts) -> bytes:
    t = pa.table({"a": np.arange(1000, dtype=np.int64), "b": [str(i % 7) for i in range(1000)],
                  "c": pa.array([[1.5, None]] * 1000)})
    buf = io.BytesIO()
    pq.write_table(t, buf, row_group_size=300, **opts)
    return buf.getvalue()


@pytest.mark.parametrize("opts", [{}, {"compression": "zstd", "write_statistics": False},
                                  {"use_dictionary": False, "write_page_index": True}])
def test_parse_and_encode_are_inverse_on_footers_pyarrow_wrote(opts):
    footer = _footer(_written(**opts))
    assert slim.encode(slim.parse(footer)) == footer


def test_a_slimmed_file_reads_the_same_and_drops_only_optional_fields(tmp_path):
    p = tmp_path / "f.parquet"
    p.write_bytes(_written())
    before = pq.read_table(p)
    saved = slim.slim(p)
    assert saved > 0 and len(_footer(p.read_bytes())) + saved == len(_footer(_written()))
    assert pq.read_table(p).equals(before)
    meta = pq.read_metadata(p)
    assert meta.created_by in ("", None) and meta.num_row_groups == 4
    top = dict((f, v) for f, _, v in slim.parse(_footer(p.read_bytes())))
    assert 6 not in top and 7 not in top                     # created_by, column_orders (parquet.thrift)
    for group in top[4][1]:                            # row_groups: no file_offset / total size / ordinal
        assert not {f for f, _, _ in group} & {5, 6, 7}
    again = p.read_bytes()
    slim.slim(p)                                             # nothing left to drop: the same bytes
    assert p.read_bytes() == again


@pytest.fixture(scope="module")
def arc(tmp_path_factory):
    d = tmp_path_factory.mktemp("slim")
    x = np.cumsum(np.random.default_rng(4).standard_normal((3000, 2)), axis=0).astype(np.float32)
    np.save(d / "s.npy", x)
    tsarchive.pack(d / "s.npy", d / "s.tsarchive", "1%", rate=20.0, code_size=0)
    return d / "s.tsarchive"


def test_duckdb_reads_every_column_of_windows_parquet(arc):
    # failed on format 6: DuckDB splits only FLOAT, DOUBLE, INT32 and INT64 byte streams (facts was FLBA + BSS)
    duckdb = pytest.importorskip("duckdb")
    rows = duckdb.sql(f"SELECT facts, residual FROM '{arc / S.WINDOWS}'").fetchall()
    ref = pq.read_table(arc / S.WINDOWS)
    assert [bytes(f) for f, _ in rows] == ref["facts"].to_pylist()
    assert [bytes(r) for _, r in rows] == ref["residual"].to_pylist()


def test_polars_reads_windows_parquet(arc):
    # failed on format 6: polars takes the footer's key-value values as UTF-8 text (parquet.thrift: string)
    # and refused the raw zstd manifest and digest
    polars = pytest.importorskip("polars")
    frame = polars.read_parquet(arc / S.WINDOWS)
    ref = pq.read_table(arc / S.WINDOWS)
    assert frame["residual"].to_list() == ref["residual"].to_pylist()
    assert frame["facts"].to_list() == ref["facts"].to_pylist()
    meta = pq.read_metadata(arc / S.WINDOWS).metadata
    assert all(v.decode("utf-8") for v in meta.values())


def test_every_member_of_the_format_7_golden_archive_opens_in_duckdb_and_polars():
    # golden7 holds every optional Parquet member (time, extra, exceptions, model): each reads with the same
    # row count in pyarrow, DuckDB and polars
    from pathlib import Path
    duckdb = pytest.importorskip("duckdb")
    polars = pytest.importorskip("polars")
    members = sorted((Path(__file__).parent / "golden" / "v7" / "golden7").glob("*.parquet"))
    assert {p.name for p in members} == {"windows.parquet", "time.parquet", "extra.parquet", "exceptions.parquet",
                                         "model.parquet"}
    for p in members:
        n = pq.read_metadata(p).num_rows
        assert duckdb.sql(f"SELECT count(*) FROM '{p}'").fetchall()[0][0] == n, p.name
        assert polars.read_parquet(p).height == n, p.name


def test_parse_and_encode_are_inverse_on_every_compact_type():
    # Apache Thrift compact protocol, by hand: field 1 bool true (type 1), field 2 i32 -3 (zigzag 5), field 3
    # double 1.5 (8 bytes LE), field 4 map<i32, bool> {1: false} (size 1, key/value types 0x51, 2, bool byte 2),
    # field 5 list<bool> [true, false] (0x21, bytes 1 2), field 21 (a delta over 15: the long form, type byte
    # then zigzag 42) binary b"ab", field 22 uuid (type 13, 16 bytes), stop
    import struct
    raw = (b"\x11" + b"\x15\x05" + b"\x17" + struct.pack("<d", 1.5) + b"\x1b\x01\x51\x02\x02" + b"\x19\x21\x01\x02"
           + b"\x08\x2a\x02ab" + b"\x1d" + bytes(range(16)) + b"\x00")
    fields = slim.parse(raw)
    assert [(f, k) for f, k, _ in fields] == [(1, 1), (2, 5), (3, 7), (4, 11), (5, 9), (21, 8), (22, 13)]
    assert fields[3][2] == (0x51, [(1, False)]) and fields[4][2] == (1, [True, False])
    assert slim.encode(fields) == raw


def test_a_footer_that_does_not_parse_is_left_as_written(tmp_path):
    p = tmp_path / "odd.parquet"
    footer = b"\x1e\x00"                       # a field of Thrift type 14, which the compact protocol lacks
    p.write_bytes(b"PAR1" + footer + len(footer).to_bytes(4, "little") + b"PAR1")
    before = p.read_bytes()
    assert slim.slim(p) == 0 and p.read_bytes() == before
