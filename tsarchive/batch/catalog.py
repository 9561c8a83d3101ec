"""The catalog of a batch's output folder: one Parquet row per archive, kept without lost updates.

Layout of an output folder ``OUT``::

    OUT/catalog.parquet                 the table (any Parquet reader: pyarrow, pandas, polars, DuckDB)
    OUT/.tsarchive-catalog/entries/     one small JSON file per archive, named by its path's SHA-256
    OUT/.tsarchive-catalog/lock         the lock compaction holds

Whoever packs an archive (a local worker process or a Dask worker) writes that
archive's entry alone, atomically (a uniquely named temporary file renamed over
it), so workers finishing at once never touch the same file.  :func:`compact`
turns all entries into ``catalog.parquet`` under an exclusive ``flock`` on
``lock``, writing a temporary file and renaming it into place: a reader sees
the old table or the new one, and each compaction reads every entry afresh, so
the last one after a batch holds every archive (no read-modify-write of the
table, hence no lost update).  On shared storage this relies on rename being
atomic and on ``flock`` reaching the server (NFSv4 and the common cluster file
systems do both); the entries alone are always enough to rebuild the table.

Reading the catalog needs pyarrow only.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
import uuid
from contextlib import contextmanager
from pathlib import Path

import pyarrow as pa

from ..errors import ArchiveCorrupt, BadInput
from ..store.inside import identity

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX: compaction then relies on the rename alone
    fcntl = None

CATALOG = "catalog.parquet"
FOLDER = ".tsarchive-catalog"
MAX_ENTRY_BYTES = 1 << 20
MAX_CATALOG_BYTES = 1 << 32          # 4 GiB: millions of rows; a size read from disk is capped before reading

#: The table's columns.  Times are ISO 8601 text as logged (naive stays naive) or UTC timestamps.
SCHEMA = pa.schema([
    ("archive", pa.string()),               # folder of the archive, relative to the catalog's folder
    ("source_path", pa.string()),           # the source as the packing machine saw it
    ("source_name", pa.string()),
    ("source_bytes", pa.int64()),
    ("source_sha256", pa.string()),
    ("channels", pa.list_(pa.string())),
    ("units", pa.list_(pa.string())),
    ("start", pa.string()),                 # first sample's time as logged (ISO 8601), null when elapsed only
    ("duration_s", pa.float64()),
    ("rate_hz", pa.float64()),
    ("n_samples", pa.int64()),
    ("budgets", pa.list_(pa.string())),     # per channel, as given (0.1%, 0.02, lossless)
    ("eps", pa.list_(pa.float64())),        # per channel, in channel units
    ("worst_errors", pa.list_(pa.float64())),
    ("worst_used_pct", pa.float64()),       # largest share of a budget used by any channel
    ("ratio", pa.float64()),
    ("raw_bytes", pa.int64()),
    ("archive_bytes", pa.int64()),
    ("check", pa.string()),                 # how the archive was last checked (see CHECK_*)
    ("checked_utc", pa.timestamp("s", tz="UTC")),
    ("packed_utc", pa.timestamp("s", tz="UTC")),
    ("tool_version", pa.string()),
    ("format_version", pa.int32()),
    ("manifest_sha256", pa.string()),       # which exact archive the row describes
    ("settings", pa.string()),              # the batch settings (JSON) that made it
    ("settings_sha256", pa.string()),
])

#: ``check`` values: pack decoded the archive and compared every sample with the source; a later
#: run found the archive's member SHA-256s and every window's CRC-32 intact.
CHECK_PACKED = "within budget, checked by pack against the source"
CHECK_SUMS = "checksums match"
CHECKS = (CHECK_PACKED, CHECK_SUMS)


def is_catalog(path: Path) -> bool:
    """``path`` is a catalog table (a ``catalog.parquet`` beside a catalog folder), never a recording."""
    return path.name == CATALOG and (path.parent / FOLDER).is_dir()


def entry_path(out: Path, rel: str) -> Path:
    return Path(out) / FOLDER / "entries" / (hashlib.sha256(rel.encode()).hexdigest()[:32] + ".json")


def write_entry(out: Path, rel: str, entry: dict) -> None:
    """Replace the entry of archive ``rel`` as a whole (temporary file, fsync, rename)."""
    path = entry_path(out, rel)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / f".{path.name}.{uuid.uuid4().hex[:8]}"
    with open(tmp, "w", encoding="utf-8") as f:
        json.dump(entry, f, sort_keys=True)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)


def read_entry(out: Path, rel: str) -> dict | None:
    """The entry of archive ``rel``, or None when there is none (or it cannot be read: it is then redone)."""
    return _load(entry_path(out, rel))


def _load(path: Path) -> dict | None:
    try:
        if path.stat().st_size > MAX_ENTRY_BYTES:
            return None
        d = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return d if isinstance(d, dict) else None


@contextmanager
def _locked(out: Path):
    folder = Path(out) / FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    fd = os.open(folder / "lock", os.O_CREAT | os.O_RDWR, 0o644)
    try:
        if fcntl is not None:
            fcntl.flock(fd, fcntl.LOCK_EX)      # blocks while another process compacts
        yield
    finally:
        os.close(fd)                            # closing releases the lock


def _row(d: dict) -> dict | None:
    if d.get("state") != "packed":
        return None
    row = {name: d.get(name) for name in SCHEMA.names}
    for name in ("checked_utc", "packed_utc"):
        row[name] = _utc(row[name])
    return row


def _utc(text):
    from datetime import datetime
    try:
        return datetime.fromisoformat(text) if text else None
    except (TypeError, ValueError):
        return None


def compact(out: str | os.PathLike) -> Path:
    """Write ``catalog.parquet`` from every entry whose archive folder exists (see module doc)."""
    import pyarrow.parquet as pq
    out = Path(out)
    entries = out / FOLDER / "entries"
    with _locked(out):
        rows = []
        for p in sorted(entries.glob("*.json")) if entries.is_dir() else ():
            row = _row(_load(p) or {})
            if row is not None and isinstance(row["archive"], str) and (out / row["archive"]).is_dir():
                rows.append(row)
        rows.sort(key=lambda r: r["archive"])
        try:
            table = pa.Table.from_pylist(rows, schema=SCHEMA)
        except (pa.ArrowInvalid, pa.ArrowTypeError, TypeError, ValueError) as exc:
            raise ArchiveCorrupt(f"a catalog entry in {entries} is damaged ({exc}); remove that folder and "
                                 "run the same pack again to rebuild it") from None
        tmp = out / f".{CATALOG}.{uuid.uuid4().hex[:8]}"
        try:
            pq.write_table(table, tmp, compression="zstd")
            with open(tmp, "rb") as f:
                os.fsync(f.fileno())
            os.replace(tmp, out / CATALOG)
        finally:
            tmp.unlink(missing_ok=True)
    return out / CATALOG


class Compactor:
    """Compacts at most every ``every_s`` seconds while a batch runs, and always on :meth:`final`."""

    def __init__(self, out: Path, every_s: float = 5.0) -> None:
        self.out, self.every_s, self.last = Path(out), every_s, time.monotonic()

    def maybe(self) -> None:
        if time.monotonic() - self.last >= self.every_s:
            self.final()

    def final(self) -> Path:
        self.last = time.monotonic()
        return compact(self.out)


def read_catalog(folder: str | os.PathLike) -> pa.Table:
    """The catalog table of a batch's output folder; :class:`BadInput` without one, :class:`ArchiveCorrupt`
    when it cannot be read."""
    import pyarrow.parquet as pq
    path = Path(folder) / CATALOG
    if not path.is_file():
        raise BadInput(f"{folder} has no {CATALOG} (pack --into FOLDER writes one); give an archive folder or a "
                       "batch's output folder")
    try:
        # One open, read whole: a compaction renames a new table over the path at any moment, and a reader that
        # opens the path twice (footer first, pages later, as a dataset scan does) can mix the two files.
        with open(path, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            if size > MAX_CATALOG_BYTES:
                raise ArchiveCorrupt(f"{path} is {size} bytes, over the {MAX_CATALOG_BYTES}-byte cap for a "
                                     "catalog; run the batch's pack command again to rebuild it")
            data = f.read(size)
        table = pq.ParquetFile(pa.BufferReader(data)).read()
    except (OSError, pa.ArrowException) as exc:
        raise ArchiveCorrupt(f"{path} cannot be read ({exc}); run the batch's pack command again to rebuild it") \
            from None
    missing = [n for n in SCHEMA.names if n not in table.column_names]
    if missing:
        raise ArchiveCorrupt(f"{path} lacks column(s) {', '.join(missing)}; run the batch's pack command again "
                             "to rebuild it")
    return table.select(SCHEMA.names)


def has_catalog(folder: str | os.PathLike) -> bool:
    return (Path(folder) / CATALOG).is_file()


def current_rows(folder: str | os.PathLike) -> dict[Path, dict]:
    """The catalog's rows by archive path, only those still describing the archive on disk (its manifest's
    SHA-256 unchanged); empty without a readable catalog.  What a listing shows without opening archives."""
    try:
        rows = read_catalog(folder).to_pylist()
    except (BadInput, ArchiveCorrupt):
        return {}
    found = {}
    for r in rows:
        path = Path(folder) / r["archive"]
        digest = identity(path)            # manifest.json's SHA-256, or format 6's footer digest
        if digest is None:
            continue
        if digest == r["manifest_sha256"]:
            found[path] = r
    return found
