"""``time.parquet``: an irregular time axis, one int64 per sample, read a row group at a time.

The column ``t`` holds ``(time - origin) / tick`` for datetimes (ns; the
manifest's ``time`` entry holds ``origin`` and ``tick``) or the float64 bits
of seconds, DELTA_BINARY_PACKED + zstd, in row groups of ``ROWS`` samples:
a range of a long recording decodes only the groups it lies in.
"""

from __future__ import annotations

import threading
from functools import cached_property
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import ArchiveCorrupt
from . import schema as S

ROWS = 1 << 20            # samples per row group
_KEEP = 2                 # decoded row groups kept (a range search touches one or two)
_INT64 = 2**63


def write_listed(path: Path, column: np.ndarray) -> None:
    """One int64 column, delta-packed (a steady clock costs next to nothing) and zstd."""
    pq.write_table(pa.table({"t": pa.array(column, pa.int64())}), path, compression="zstd", compression_level=9,
                   use_dictionary=False, write_statistics=False, store_schema=False,
                   column_encoding={"t": "DELTA_BINARY_PACKED"}, row_group_size=ROWS)


def _damaged(what: str) -> ArchiveCorrupt:
    return ArchiveCorrupt(f"{S.TIME} {what}; the archive is damaged")


class ListedTimes:
    """The times of a listed axis, decoded on demand (thread-safe)."""

    def __init__(self, manifest: dict, folder: Path, n: int, seconds: bool, origin: int, tick: int) -> None:
        if S.TIME not in manifest.get("members", {}):
            raise ArchiveCorrupt(f"the time axis is listed but {S.TIME} is not a member; the archive is damaged")
        self.path, self.n, self.seconds, self.origin, self.tick = folder / S.TIME, n, seconds, origin, tick
        md = self._file().metadata
        schema = md.schema.to_arrow_schema()
        if schema.names != ["t"] or schema.field("t").type != pa.int64() or md.num_rows != n:
            raise _damaged("does not hold one int64 time per sample")
        sizes = [md.row_group(g).num_rows for g in range(md.num_row_groups)]
        self.bounds = np.concatenate([[0], np.cumsum(sizes, dtype=np.int64)])
        self._cache: dict[int, np.ndarray] = {}
        self._lock = threading.Lock()

    def _file(self) -> pq.ParquetFile:
        try:
            return pq.ParquetFile(self.path)       # one per call: a ParquetFile is not shared between threads
        except (OSError, pa.ArrowException) as exc:
            raise _damaged(f"cannot be read ({exc})") from None

    def group(self, g: int) -> np.ndarray:
        """Row group ``g`` decoded: int64 ns or float64 seconds."""
        with self._lock:
            got = self._cache.get(g)
        if got is not None:
            return got
        try:
            col = self._file().read_row_group(g, columns=["t"])["t"]
        except (OSError, pa.ArrowException) as exc:
            raise _damaged(f"cannot be read ({exc})") from None
        if col.null_count or len(col) != self.bounds[g + 1] - self.bounds[g]:
            raise _damaged("has blank or missing times")
        raw = col.to_numpy()
        if self.seconds:
            out = raw.view(np.float64)
        else:
            if len(raw) and not (-_INT64 <= self.origin + int(raw.min()) * self.tick and
                                 self.origin + int(raw.max()) * self.tick < _INT64 and
                                 int(raw.min()) >= 0 and int(raw.max()) * self.tick < _INT64):
                raise _damaged("holds times beyond the year 2262")
            out = self.origin + raw * self.tick
        with self._lock:
            if len(self._cache) >= _KEEP:
                self._cache.pop(next(iter(self._cache)))
            self._cache[g] = out
        return out

    def values(self, a: int, b: int) -> np.ndarray:
        """Times of samples ``a .. b-1``."""
        a, b = max(0, a), min(self.n, b)
        if b <= a:
            return np.zeros(0, np.float64 if self.seconds else np.int64)
        g0 = int(np.searchsorted(self.bounds, a, side="right")) - 1
        g1 = int(np.searchsorted(self.bounds, b, side="left"))
        parts = [self.group(g) for g in range(g0, g1)]
        whole = parts[0] if len(parts) == 1 else np.concatenate(parts)
        lo = a - int(self.bounds[g0])
        return whole[lo:lo + b - a].copy()

    @cached_property
    def backwards(self) -> int | None:
        """First sample whose time is before its predecessor's or not a number (group by group), or None."""
        last = None
        for g in range(len(self.bounds) - 1):
            v = self.group(g)
            if self.seconds and not np.all(np.isfinite(v)):
                return int(self.bounds[g]) + int(np.flatnonzero(~np.isfinite(v))[0])
            if last is not None and len(v) and v[0] < last:
                return int(self.bounds[g])
            back = np.flatnonzero(np.diff(v) < 0)
            if back.size:
                return int(self.bounds[g]) + int(back[0]) + 1
            last = v[-1] if len(v) else last
        return None
