"""Where an archive's bytes go: the fixed bytes that decide short recordings.

:func:`breakdown` splits an archive folder's bytes into parts that add up to
its size on disk (``os.stat`` of every member file):

``manifest``          ``manifest.json``
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
        footers += footer
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
