"""Where an archive's bytes go: the fixed bytes that decide short recordings.

:func:`breakdown` splits an archive folder's bytes into parts that add up to
its size on disk (``os.stat`` of every member file):

``manifest``          ``manifest.json`` (formats 3 to 5), or the compressed manifest
                      held in ``windows.parquet``'s footer metadata (format 6: its
                      bytes, key and Thrift framing, taken out of ``footers``)
``footers``           each Parquet member's footer: the Thrift FileMetaData
                      (pyarrow ``FileMetaData.serialized_size``) plus its
                      4-byte length and the two 4-byte ``PAR1`` magics
                      (Apache Parquet file format: ``PAR1 <chunks> <metadata>
                      <length> PAR1``)
``payload``           the entropy-coded residuals alone: the byte lengths of
                      the ``residual`` values of ``windows.parquet``
``residual_framing``  the rest of the residual column chunks: page headers,
                      4-byte length prefixes, compression
``other_columns``     every other column chunk of the Parquet members
                      (levels, scales, modes, checksums, ...), page headers
                      included, and whatever else lies between the chunks
                      and the footer (page indexes, when written)
``other_members``     any member that is neither the manifest nor Parquet

``fixed`` is everything but the payload.  Reads Parquet metadata and one
column only (numpy and pyarrow, like the rest of the read path).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

PARTS = ("manifest", "footers", "payload", "residual_framing", "other_columns", "other_members")
_PARQUET_MAGIC = b"PAR1"


@dataclass(frozen=True)
class ArchiveBytes:
    """Bytes of one archive by part; ``members`` is (relative path, bytes) of every file."""

    manifest: int
    footers: int
    payload: int
    residual_framing: int
    other_columns: int
    other_members: int
    members: tuple[tuple[str, int], ...]

    @property
    def total(self) -> int:
        return sum(getattr(self, p) for p in PARTS)

    @property
    def fixed(self) -> int:
        return self.total - self.payload

    def to_dict(self) -> dict:
        d = asdict(self)
        d["members"] = [list(m) for m in self.members]
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "ArchiveBytes":
        keep = {p: int(d[p]) for p in PARTS}
        return cls(**keep, members=tuple((str(n), int(b)) for n, b in d.get("members", ())))


def _is_parquet(path: Path) -> bool:
    if path.stat().st_size < 12:
        return False
    with open(path, "rb") as fh:
        head = fh.read(4)
        fh.seek(-4, 2)
        return head == _PARQUET_MAGIC and fh.read(4) == _PARQUET_MAGIC


def _payload(path: Path) -> int:
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    col = pq.read_table(path, columns=["residual"])["residual"]
    return int(pc.sum(pc.binary_length(col)).as_py() or 0)


def _key_value_bytes(key: bytes, value: bytes) -> int:
    """Bytes of one KeyValue in a Thrift compact-protocol footer: two field headers, each string's varint
    length and bytes, and the struct's stop byte (Apache Thrift, "Thrift Compact protocol encoding")."""
    def varint(n: int) -> int:
        return max(1, -(-n.bit_length() // 7))
    return 3 + varint(len(key)) + len(key) + varint(len(value)) + len(value)


def breakdown(archive: Path) -> ArchiveBytes:
    """The bytes of the archive folder ``archive`` by part (see the module docstring)."""
    import pyarrow.parquet as pq

    archive = Path(archive)
    files = sorted(p for p in archive.rglob("*") if p.is_file())
    members = tuple((str(p.relative_to(archive)), p.stat().st_size) for p in files)
    manifest = footers = payload = framing = other_cols = other = 0
    for p, (name, size) in zip(files, members):
        if name == "manifest.json":
            manifest += size
            continue
        if not _is_parquet(p):
            other += size
            continue
        meta = pq.ParquetFile(p).metadata
        footer = meta.serialized_size + 4 + 2 * len(_PARQUET_MAGIC)
        kv = meta.metadata or {}                           # formats 6 and 7: the manifest in the footer's metadata
        key = next((k for k in (b"tsarchive.manifest", b"tsarchive") if k in kv), None)
        held = 0 if key is None else _key_value_bytes(key, kv[key])
        manifest += held
        footers += footer - held
        other_cols += size - footer          # less the column chunks below: page indexes, if any
        names = meta.schema.names
        for g in range(meta.num_row_groups):
            rg = meta.row_group(g)
            for c in range(rg.num_columns):
                chunk = rg.column(c).total_compressed_size
                other_cols -= chunk
                if name == "windows.parquet" and names[c] == "residual":
                    framing += chunk
                else:
                    other_cols += chunk
        if name == "windows.parquet" and "residual" in names:
            got = _payload(p)
            payload += got
            framing -= got
    return ArchiveBytes(manifest, footers, payload, framing, other_cols, other, members)


def _streams() -> list[tuple[str, object, float | None]]:
    """(name, source, rate) of the three sample streams and every real bench set found installed."""
    import numpy as np

    from . import realdata

    root = Path(__file__).resolve().parents[2] / "sample_streams"
    out = [(p.stem, p, 2000.0 if p.suffix == ".npy" else None)
           for p in (root / "climate_soak.csv", root / "psu_ripple.parquet", root / "shaker_run.npy") if p.is_file()]
    for name in realdata.names():
        got = realdata.load(name)
        if not isinstance(got, str):
            out.append((name, np.ascontiguousarray(got.data), got.spec.rate))
    return out


def main(argv: list[str] | None = None) -> int:
    """``python -m tsarchive.bench.archive_bytes [--budget 1%] [--json out.json]``: pack every sample stream and
    real bench set without a model and print where each archive's bytes go (one row per archive)."""
    import argparse
    import json
    import tempfile

    import numpy as np

    from .. import pack

    ap = argparse.ArgumentParser(prog="python -m tsarchive.bench.archive_bytes")
    ap.add_argument("--budget", default="1%")
    ap.add_argument("--json")
    args = ap.parse_args(argv)
    rows = []
    head = f"{'stream':22s} {'samples':>8s} " + " ".join(f"{p[:9]:>9s}" for p in PARTS) + \
        f" {'index':>6s} {'fixed':>6s} {'total':>6s}"
    print(head)
    with tempfile.TemporaryDirectory() as tmp:
        for name, src, rate in _streams():
            if isinstance(src, np.ndarray):
                path = Path(tmp) / f"{name}.npy"
                np.save(path, src)
                src, n = path, len(src)
            else:
                n = None
            arc = Path(tmp) / f"{name}.tsarchive"
            pack(src, arc, args.budget, rate=rate, code_size=0, force=True)
            b = breakdown(arc)
            index = sum(size for m, size in b.members if m.startswith("index"))
            from .. import open as open_archive
            n = open_archive(arc).channels[0].n_samples if n is None else n
            rows.append({"stream": name, "samples": n, **b.to_dict(), "index": index, "fixed": b.fixed,
                         "total": b.total})
            print(f"{name:22s} {n:8d} " + " ".join(f"{getattr(b, p):9d}" for p in PARTS) +
                  f" {index:6d} {b.fixed:6d} {b.total:6d}", flush=True)
    if args.json:
        Path(args.json).write_text(json.dumps(rows, indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
