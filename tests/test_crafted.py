"""A catalogue of crafted and damaged archives: each gets its one-line message, its exit code from
``report``, ``unpack`` and ``verify`` (2: refused; 1: verify found damage), and nothing is written.

Cases marked "re-bound" are forged thoroughly (crafting.rebind: digest and member hashes recomputed),
so the reader's own checks and caps are what stops them.  Exit codes 0/1/2 are the CLI's contract
(cli.py module doc); the rest is common practice (no source).
"""

from __future__ import annotations

import re
import os
import shutil

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from unittest import mock

import tsarchive
from tsarchive import pipeline
from tsarchive.cli import main
from tsarchive.store import schema as S

from conftest import make_signal
from crafting import (copy, first_window, manifest, rebind, replace_column, snapshot, to_seven_bit, write_blob,
                      write_manifest)


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """An archive with every member: a model (explicit code size) and verbatim samples (a NaN)."""
    d = tmp_path_factory.mktemp("base")
    x = make_signal(3000).astype(np.float32)
    x[100, 0] = np.nan
    np.save(d / "s.npy", x)
    out = d / "base.tsa"
    with mock.patch("tsarchive.pipeline.choose_coder", _range_then_chosen(pipeline.choose_coder)):
        tsarchive.pack(d / "s.npy", out, "0.5%", rate=200.0, window=64, code_size=2, train_seconds=1,
                      segment=16)      # segment given: a recording this short gets no index within its byte budget
    coders = [c.get("coder", {}).get("id") for c in manifest(out)["channels"]]
    assert coders == [None, "adaptive"]      # both ways of coding residuals are crafted below
    assert {p.name for p in out.iterdir()} == {S.WINDOWS, S.EXCEPTIONS, S.MODEL, "index.zst"}   # format 6
    return out


def _range_then_chosen(choose):
    """The packer's coder choice, except that the first of every two channels keeps the range coder
    with its tables (the packer codes this short recording's channels adaptively)."""
    calls = []

    def pick(*args):
        calls.append(1)
        return None if len(calls) % 2 else choose(*args)
    return pick


def _edit(fn):
    def run(a):
        m = manifest(a)
        fn(m)
        write_manifest(a, m)
    return run


def _ch(key, value):
    return _edit(lambda m: m["channels"][0].__setitem__(key, value))


def _top(key, value):
    return _edit(lambda m: m.__setitem__(key, value))


def _top_rebound(key, value):
    def run(a):
        m = manifest(a)
        m[key] = value
        rebind(a, m)
    return run


def _write(name, data: bytes):
    return lambda a: (a / name).write_bytes(data)


def _truncate(a):
    p = a / S.WINDOWS
    p.write_bytes(p.read_bytes()[: p.stat().st_size // 2])


def _garbage(a):
    p = a / S.WINDOWS
    p.write_bytes(np.random.default_rng(1).integers(0, 256, p.stat().st_size, dtype=np.uint8).tobytes())


def _symlinked_model(a):
    real = a.parent / f"{a.name}-model.parquet"
    shutil.move(a / S.MODEL, real)
    (a / S.MODEL).symlink_to(real)


def _model_table(a, change):
    t = pq.read_table(a / S.MODEL)
    pq.write_table(change(t), a / S.MODEL, use_dictionary=False)
    rebind(a)


def _wrong_model_shape(t):
    shapes = t["shape"].to_pylist()
    i = next(k for k, s in enumerate(shapes) if len(s) == 2)
    shapes[i] = [shapes[i][0] + 1, shapes[i][1]]
    return replace_column(t, "shape", shapes)


def _model_bomb(t):   # 4 M zeros in a few KB of zstd: 32 MB if read
    return pa.table({"name": ["w0"], "shape": [[2048, 2048]], "values": [np.zeros(1 << 22, np.int64)]},
                    schema=S.MODEL_SCHEMA)


def _null_facts(a):     # format 5's columns are required: a file whose facts may be null is not format 5
    rebind(a, rows=lambda g: replace_column(g, "facts", [None] + g["facts"].to_pylist()[1:]), nullable=True)


def _payload_bomb(a):
    rebind(a, rows=lambda g: replace_column(g, "residual", [bytes(64 << 20)] + g["residual"].to_pylist()[1:])
           if first_window(g) == 0 else g)


def _dictionary_bomb(a):   # one 1 MiB payload stored once, referenced by every window: 47 MiB if read
    rebind(a, rows=lambda g: replace_column(g, "residual", [bytes(1 << 20)] * g.num_rows), dictionary=True)


def _many_samples(a):
    m = manifest(a)
    m["channels"][0]["n_samples"] = 10**12
    m["channels"][0]["summary"]["modes"] = {"prev": 15625000000}   # agrees, so the rows are what is left
    rebind(a, m)


def _member_outside(a):
    m = manifest(a)
    m["members"]["../outside.parquet"] = m["members"][S.MODEL]
    write_manifest(a, m)


def _footer_cut(a):     # the footer's last 100 bytes gone (format 6: the manifest inside it goes with them)
    p = a / S.WINDOWS
    p.write_bytes(p.read_bytes()[:-108] + p.read_bytes()[-8:])


def _blob(data: bytes, dictionary: bool = True):
    """Format 7: ``data`` as the manifest's JSON text, zstd-compressed (with the format's dictionary), as 7-bit
    text."""
    import zstandard
    from tsarchive.store import inside
    z = zstandard.ZstdCompressor(level=1, dict_data=inside._dictionary() if dictionary else None)
    return lambda a: write_blob(a, to_seven_bit(z.compress(data)))


def _edited_unsealed(a):      # a valid edit of the manifest, the file digest left as it was
    m = manifest(a)
    m["channels"][0]["note"] = "checked by hand"
    write_manifest(a, m, seal=False)


def _rows_edited(a):          # one byte of the window rows changed, the footer left as it was
    p = a / S.WINDOWS
    b = bytearray(p.read_bytes())
    b[10] ^= 0x01
    p.write_bytes(bytes(b))


def _swapped(a):              # another member's file in the model's place (same name, other bytes)
    (a / S.MODEL).write_bytes((a / S.EXCEPTIONS).read_bytes())


def _groups_beyond_channels(a):   # format 6's groups name the channel by position: a third channel the manifest lacks
    m = manifest(a)
    m["groups"] = [[c + 2, w] for c, w in m["groups"]]
    rebind(a, m)


def _groups_shifted(a):           # the (one) row group said to start a window late: its rows run past the end
    m = manifest(a)
    assert m["groups"] == [[0, 0]]
    m["groups"] = [[0, 1]]
    rebind(a, m)


def _eps_twice_in_one_place(m):     # format 5 stores eps in the grid only: a second copy must agree
    m["channels"][0]["eps"] = m["channels"][0]["grid"]["eps"] * 2


def _budget_says_lossless(m):
    m["channels"][0]["budget"] = "lossless"      # while its eps (and its grid's) stay > 0


def _spec_disagrees(m):
    m["budget_spec"] = "0.2%"                    # the channels say 0.5%


def _used_pct(m):
    m["channels"][0]["summary"]["used_pct"] = 1.0


def _freqs_number(m):
    m["channels"][0]["tables"][0]["freqs"] = 5


def _coder(value):
    return _edit(lambda m: m["channels"][1].__setitem__("coder", value))


def _coder_field(key, value):
    return _edit(lambda m: m["channels"][1]["coder"].__setitem__(key, value))


# (id, damage, message, exit codes of report, unpack, verify)
CASES = [
    ("window-zero", _top("window", 0), r"window is int 0, not an integer in 8\.\.65536", (2, 2, 2)),
    ("window-2^27", _top("window", 1 << 27), r"window is int 134217728", (2, 2, 2)),
    ("start-number", _ch("start", 5), r"start is int 5, not a text", (2, 2, 2)),
    ("source-null", _top("source", None), r"source is missing or not an object", (2, 2, 2)),
    ("members-list", _top("members", []), r"members is missing or not an object", (2, 2, 2)),
    ("name-number", _ch("name", 7), r"name is int 7, not a text", (2, 2, 2)),
    ("n_samples-null", _ch("n_samples", None), r"n_samples is missing", (2, 2, 2)),
    ("deep-json", _blob(b"[" * 200_000 + b"]" * 200_000), r"nests too deeply", (2, 2, 2)),
    ("not-json", _blob(b"\x00\xff garbage"), r"manifest in windows\.parquet cannot be read", (2, 2, 2)),
    ("not-zstd", lambda a: write_blob(a, b"\x00\xff garbage"), r"manifest in windows\.parquet cannot be read",
     (2, 2, 2)),
    ("manifest-oversized", _blob(bytes((64 << 20) + 1), dictionary=False),
     r"manifest in windows\.parquet declares 67108865 bytes", (2, 2, 2)),
    ("manifest-edited", _edited_unsealed, r"the manifest or footer in windows\.parquet was edited or damaged",
     (2, 2, 1)),
    ("rows-edited (re-sealed footer)", lambda a: _rows_edited(a),
     r"windows\.parquet: SHA-256 differs from the manifest", (1, 2, 1)),
    ("members-swapped", _swapped, r"model\.parquet is \d+ bytes but the manifest says", (2, 2, 1)),
    ("newer-version", _top("format_version", 99), r"written by a newer tsarchive .*upgrade tsarchive", (2, 2, 2)),
    ("version-text", _top("format_version", "3"), r"format_version is str '3'", (2, 2, 2)),
    ("eps-disagrees", _edit(_eps_twice_in_one_place), r"eps .* differs from its grid's eps", (2, 2, 2)),
    ("budget-disagrees", _edit(_budget_says_lossless), r"eps .* disagrees with its budget lossless", (2, 2, 2)),
    ("spec-disagrees", _edit(_spec_disagrees), r"budget_spec gives channel .* 0\.2%, the channel says 0\.5%",
     (2, 2, 2)),
    ("used-disagrees", _edit(_used_pct), r"used_pct 1\.0 disagrees with worst_error / eps", (2, 2, 2)),
    ("table-number", _edit(_freqs_number), r"entropy table entry is malformed", (2, 2, 2)),
    ("coder-unknown", _coder_field("id", "lz77x"), r"residual coder 'lz77x' is unknown to this tsarchive "
     r"version; upgrade tsarchive", (2, 2, 2)),
    ("coder-text", _coder("adaptive"), r"residual coder is malformed", (2, 2, 2)),
    ("coder-no-id", _edit(lambda m: m["channels"][1]["coder"].pop("id")), r"residual coder is malformed",
     (2, 2, 2)),
    ("coder-init-garbled", _coder_field("init", "%%not base64%%"), r"initial state is not base64", (2, 2, 2)),
    ("coder-init-short", _coder_field("init", "AAAA"), r"initial state is malformed", (2, 2, 2)),
    ("coder-range", _coder({"id": "range"}), r"residual coder 'range' cannot code a whole channel", (2, 2, 2)),
    ("coder-classic-order", _coder({"id": "classic", "orders": [3]}), r"classic coder orders must be among",
     (2, 2, 2)),
    ("coder-huge", _coder_field("init", "A" * (1 << 17)), r"residual coder is malformed", (2, 2, 2)),
    ("lpc-empty", _ch("lpc", []), r"linear-prediction sets are missing or malformed", (2, 2, 2)),
    ("member-outside", _member_outside, r"not a plain member file name", (2, 2, 2)),
    ("windows-missing", lambda a: (a / S.WINDOWS).unlink(), r"no manifest\.json or windows\.parquet", (2, 2, 2)),
    ("windows-truncated", _truncate, r"windows\.parquet cannot be read", (2, 2, 2)),
    ("windows-empty", _write(S.WINDOWS, b""), r"windows\.parquet cannot be read", (2, 2, 2)),
    ("windows-garbage", _garbage, r"windows\.parquet cannot be read", (2, 2, 2)),
    ("model-symlink", _symlinked_model, r"model\.parquet is a symbolic link", (2, 2, 2)),
    ("fifo-inside", lambda a: os.mkfifo(a / "pipe"), r"pipe is not a regular file", (2, 2, 2)),
    ("extra-file", _write("notes.txt", b"hello"), r"notes\.txt: not listed in the manifest", (1, 2, 1)),
    ("model-wrong-shape (re-bound)", lambda a: _model_table(a, _wrong_model_shape),
     r"model\.parquet cannot be used \(model array 'w\d' does not have the shape it declares", (2, 2, 1)),
    ("model-bomb (re-bound)", lambda a: _model_table(a, _model_bomb),
     r"model\.parquet is not the model the manifest describes", (2, 2, 1)),
    ("payload-bomb (re-bound)", _payload_bomb, r"row group \d+ declares \d+ bytes for \d+ windows", (2, 2, 1)),
    ("dictionary-bomb (re-bound)", _dictionary_bomb, r"windows\.parquet uses encodings or value counts this "
     r"format never writes", (2, 2, 1)),
    ("10^12-samples (re-bound)", _many_samples,
     r"manifest declares 15625000047 windows but windows\.parquet holds 94", (2, 2, 1)),
    ("defaults-list", _top("channel_defaults", []), r"is incomplete|is missing", (2, 2, 2)),
    ("footer-cut", _footer_cut, r"windows\.parquet cannot be read", (2, 2, 2)),
    ("groups-beyond-channels (re-bound)", _groups_beyond_channels,
     r"manifest's entry for row group 0 does not name a window", (2, 2, 1)),
    ("groups-shifted (re-bound)", _groups_shifted, r"row group 0 runs past the last channel's windows", (2, 2, 1)),
    ("groups-missing (re-bound)", _top_rebound("groups", None), r"manifest lists no row groups", (2, 2, 1)),
    ("null-facts (re-bound)", _null_facts, r"windows\.parquet does not have the columns of this format version",
     (2, 2, 1)),
    ("code-length (re-bound)", lambda a: rebind(a, rows=lambda g: replace_column(g, "code", [[0]] * g.num_rows)),
     r"window codes have 1 values, the model takes 2", (0, 2, 1)),
]


@pytest.mark.parametrize("name,damage,message,codes", CASES, ids=[c[0] for c in CASES])
def test_crafted_archive(base, tmp_path, capsys, name, damage, message, codes):
    a = copy(base, tmp_path, "x.tsa")
    damage(a)
    before = snapshot(tmp_path)
    seen = []
    for cmd, code in zip(("report", "unpack", "verify"), codes):
        argv = [cmd, str(a)] + (["-o", str(tmp_path / "out.csv")] if cmd == "unpack" else [])
        got = main(argv)
        out, err = capsys.readouterr()
        assert got == code, (cmd, out, err)
        if code == 2:
            assert err.startswith("tsarchive: error: ") and err.count("\n") == 1, (cmd, err)
        seen.append(err if code == 2 else out)
    assert any(re.search(message, s) for s in seen), seen
    assert not (tmp_path / "out.csv").exists()
    assert snapshot(tmp_path) == before                   # nothing written, nothing changed


def test_a_damaged_model_is_read_once(base, tmp_path, monkeypatch):
    # Weights outside int16 (the decoder's weight type) with the right shapes, re-bound: the decoder is
    # refused; it used to be re-read (and refused again) for every window verify decoded.
    from tsarchive import verify as verify_archive
    a = copy(base, tmp_path, "m.tsa")

    def big_weights(t):
        values = t["values"].to_pylist()
        i = t["name"].to_pylist().index("w0")
        values[i] = [40_000] * len(values[i])
        return replace_column(t, "values", values)

    _model_table(a, big_weights)
    monkeypatch.setenv("TSARCHIVE_THREADS", "1")      # channels one after another: every window decoded in turn
    reads = []
    for name in ("read_table", "ParquetFile"):
        real = getattr(pq, name)

        def counted(source, *args, _real=real, **kw):
            if str(source).endswith(S.MODEL):
                reads.append(source)
            return _real(source, *args, **kw)
        monkeypatch.setattr(pq, name, counted)
    rep = verify_archive(a)
    assert len(reads) == 1
    assert not rep.ok and any("model.parquet" in p for p in rep.problems)


def test_a_footer_naming_another_column_type_does_not_abort_the_process(base, tmp_path):
    # pyarrow aborts the whole process (a C++ exception it does not translate) when a column chunk's type
    # differs from the schema's.  Thrift compact protocol (Apache Thrift spec): 0x1c = next field (ColumnChunk
    # 3, meta_data) is a struct, whose 0x15 = field 1 (type), i32, 0x0c = zigzag(6) = BYTE_ARRAY (parquet.thrift
    # Type): a "channel" or "residual" column chunk.  INT32 = 1 -> zigzag 0x02.
    import subprocess
    import sys
    a = copy(base, tmp_path, "t.tsa")
    p = a / S.WINDOWS
    data = bytearray(p.read_bytes())
    n = int.from_bytes(data[-8:-4], "little")
    at = data.index(b"\x1c\x15\x0c", len(data) - 8 - n)     # the first row group's "channel" chunk type
    data[at + 2] = 0x02
    p.write_bytes(bytes(data))
    for cmd in ("verify", "report"):
        r = subprocess.run([sys.executable, "-m", "tsarchive", cmd, str(a)], capture_output=True, text=True,
                           cwd=os.path.dirname(os.path.dirname(__file__)), timeout=120)
        assert r.returncode == 2, (cmd, r.returncode, r.stderr[-300:])   # format 6: the manifest is in that footer
        assert "windows.parquet cannot be read" in r.stdout + r.stderr


def test_every_bit_flip_of_a_footer_is_read_or_refused_in_one_line(base):
    # The footer reader sees every single-bit variant of a real footer: a Footer or a reason, never an exception
    # (a flipped byte once turned a statistic into a Thrift bool and verify stopped on an AttributeError).
    from tsarchive.store import footer as F
    data = (base / S.WINDOWS).read_bytes()
    n = int.from_bytes(data[-8:-4], "little")
    start = len(data) - 8 - n
    outcomes = set()
    for at in range(start, len(data) - 8):
        for bit in range(8):
            b = bytearray(data)
            b[at] ^= 1 << bit
            got = F._footer_bytes(bytes(b))
            assert isinstance(got, (F.Footer, str)), (at, bit, got)
            outcomes.add(type(got))
            if isinstance(got, F.Footer):     # every fact typed as the checks use it
                for g in got.groups:
                    assert type(g.num_rows) is int and type(g.total_byte_size) is int
                    for c in g.chunks:
                        assert all(type(v) is int for v in (c.type, c.num_values, c.uncompressed, *c.encodings))
                        assert all(v is None or type(v) is bytes for v in (c.min, c.max)), (at, bit, c)
                assert all(type(k) is bytes and type(v) is bytes for k, v in got.key_value.items())
    assert outcomes == {F.Footer, str}
