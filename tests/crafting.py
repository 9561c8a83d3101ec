"""Helpers that damage or craft archives for the trust tests (test_trust.py, test_crafted.py)."""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from tsarchive.cli import main
from tsarchive.store import schema as S

from conftest import make_signal


def pack_small(folder: Path, name: str = "rig.tsa", code_size: int = 0, n: int = 3000) -> Path:
    """A small two-channel archive packed through the CLI (window 64)."""
    src = folder / "rig.npy"
    if not src.exists():
        np.save(src, make_signal(n).astype(np.float32))
    out = folder / name
    assert main(["pack", str(src), "-o", str(out), "--rate", "200", "--window", "64", "--code-size", str(code_size),
                 "--budget", "0.5%"]) == 0
    return out


def copy(arc: Path, folder: Path, name: str) -> Path:
    out = folder / name
    shutil.copytree(arc, out, symlinks=True)
    return out


def manifest(arc: Path) -> dict:
    """The manifest as stored: manifest.json (formats 3 to 5) or inside windows.parquet (format 6)."""
    from tsarchive.store.binding import read_manifest
    return read_manifest(arc)


def write_manifest(arc: Path, m: dict, seal: bool = True) -> None:
    """Store ``m`` as the archive's manifest as it is (members included).  Format 6: windows.parquet is
    rewritten with it and sealed (its file digest recomputed: only the manifest's own checks stand), or,
    without ``seal``, keeps the digest of the file as it was (an edit the digest finds)."""
    if (arc / S.MANIFEST).exists():
        (arc / S.MANIFEST).write_text(json.dumps(m))
    else:
        _rewrite_windows(arc, m, seal=seal)


def _rewrite_windows(arc: Path, m: dict | None, rows=None, dictionary: bool = False, nullable: bool = False,
                     seal: bool = True, blob: bytes | None = None) -> None:
    f = pq.ParquetFile(arc / S.WINDOWS)
    groups = [f.read_row_group(g) for g in range(f.metadata.num_row_groups)]
    schema = f.schema_arrow.remove_metadata()
    inside = (f.metadata.metadata or {}).get(S.MANIFEST_KEY) is not None if hasattr(S, "MANIFEST_KEY") else False
    old_slot = None
    if inside:
        from tsarchive.store import inside as I
        tail = I._tail(arc / S.WINDOWS)
        at, place = I._slot_in(tail[1])
        old_slot = tail[1][at:at + place.slot]
    if nullable:
        schema = pa.schema([x.with_nullable(True) for x in schema])
    if "facts" in schema.names:           # format 6's columns (format 5's are no longer written)
        from tsarchive.store import lean6
        opts = lean6.writer_opts(schema)
        if dictionary:
            opts = dict(opts, use_dictionary=True, column_encoding=None)
    else:
        opts = dict(compression="zstd", write_statistics=["channel", "window"],
                    use_dictionary=True if dictionary else ["channel"], store_schema=False)
    sink = pa.OSFile(str(arc / S.WINDOWS), "wb")
    with pq.ParquetWriter(sink, schema, **opts) as w:
        for g in groups:
            w.write_table((rows(g) if rows else g).cast(schema))
        if inside:     # format 6: the manifest (with the rows' digest) and the footer digest's slot (store/inside.py)
            if blob is None and seal:
                m["data"] = {"bytes": sink.tell(), "sha256": I.prefix_sha256(arc / S.WINDOWS, sink.tell())}
            w.add_key_value_metadata({S.MANIFEST_KEY: I.compress(m) if blob is None else blob, S.DIGEST_KEY: I.ZERO})
        elif m is not None:
            try:       # the digest goes where the writer puts it: the footer's key-value metadata
                from tsarchive.store.binding import manifest_digest
                w.add_key_value_metadata({S.BINDING_KEY: manifest_digest(m).encode("ascii")})
            except ImportError:      # a tsarchive from before the binding: nothing to forge there
                pass
    sink.close()
    if inside and seal:
        I.seal(arc / S.WINDOWS)
    elif inside:
        start, footer = I._tail(arc / S.WINDOWS)
        with open(arc / S.WINDOWS, "r+b") as fh:
            fh.seek(start + I._slot_in(footer)[0])
            fh.write(old_slot)


def write_blob(arc: Path, blob: bytes) -> None:
    """Format 6: ``blob`` stored as the manifest's bytes in windows.parquet's footer, the file sealed."""
    _rewrite_windows(arc, None, blob=blob)


def rebind(arc: Path, m: dict | None = None, rows=None, dictionary: bool = False, nullable: bool = False) -> None:
    """Write ``m`` (default: the current manifest) as a thorough forger would: the digest recomputed into a
    rewritten windows.parquet (``rows``: a function changing each row group's table, as stored: the lean
    columns of format 5, store/lean.py) and every member's size and SHA-256 updated, so only the reader's
    own checks stand between the archive and the decoder.  ``nullable`` lets every column hold nulls."""
    m = manifest(arc) if m is None else m
    if not (arc / S.MANIFEST).exists():         # format 6: the members first, then windows.parquet sealed
        m["members"] = {p.name: {"bytes": p.stat().st_size, "sha256": hashlib.sha256(p.read_bytes()).hexdigest()}
                        for p in sorted(arc.iterdir()) if p.name != S.WINDOWS}
        _rewrite_windows(arc, m, rows, dictionary, nullable)
        return
    _rewrite_windows(arc, m, rows, dictionary, nullable)
    m["members"] = {p.name: {"bytes": p.stat().st_size, "sha256": hashlib.sha256(p.read_bytes()).hexdigest()}
                    for p in sorted(arc.iterdir()) if p.name != S.MANIFEST}
    write_manifest(arc, m)


def first_window(g: pa.Table) -> int:
    """The window number of a stored row group's first row (format 5: the low half of its key; format 6 keeps
    it in the manifest's ``groups``: 0 for every group here)."""
    if "key" in g.column_names:
        return g["key"][0].as_py() & 0xFFFFFFFF
    return 0 if "facts" in g.column_names else g["window"][0].as_py()   # format 6: the manifest's groups say


def snapshot(folder: Path) -> dict:
    """Every file under ``folder`` with its bytes' SHA-256 (links and special files by kind only)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_symlink() or not p.is_file():
            out[str(p)] = "link" if p.is_symlink() else "dir" if p.is_dir() else "special"
        else:
            out[str(p)] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def replace_column(table: pa.Table, name: str, values) -> pa.Table:
    i = table.schema.get_field_index(name)
    return table.set_column(i, table.schema.field(i), pa.array(values, type=table.schema.field(i).type))


def archive_identity(arc: Path) -> str:
    """The archive's identity as a lab system files it, read without tsarchive: the SHA-256 of manifest.json
    (formats 3 to 5; hashlib, FIPS 180-4) or the footer digest formats 6 and 7 store in windows.parquet's footer
    (read by pyarrow; format 7 as 7-bit text)."""
    if (arc / S.MANIFEST).exists():
        return hashlib.sha256((arc / S.MANIFEST).read_bytes()).hexdigest()
    kv = pq.read_metadata(arc / S.WINDOWS).metadata
    if b"tsarchive.digest" in kv:
        return from_seven_bit(kv[b"tsarchive.digest"]).hex()
    return kv[b"tsarchive.sha256"].hex()


def to_seven_bit(data: bytes) -> bytes:
    """Bytes as format 7's 7-bit text (DEVELOPERS.md), in plain Python: the bits in groups of seven."""
    bits = "".join(format(c, "08b") for c in data)
    bits += "0" * (-len(bits) % 7)
    return bytes(int(bits[i:i + 7], 2) for i in range(0, len(bits), 7))


def from_seven_bit(text: bytes) -> bytes:
    """Inverse of :func:`to_seven_bit`."""
    bits = "".join(format(c, "08b")[1:] for c in text)
    return bytes(int(bits[i:i + 8], 2) for i in range(0, len(bits) // 8 * 8, 8))
