"""Columns of window rows as numpy arrays (the reader's helpers; zero-copy where Arrow allows)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import ArchiveCorrupt
from .parse import ChannelMeta


def binary_parts(col) -> tuple[np.ndarray, np.ndarray]:
    """(data bytes uint8, offsets int64 with one entry more than rows) of a binary column, zero-copy."""
    arr = col.combine_chunks() if isinstance(col, pa.ChunkedArray) else col
    if not len(arr):
        return np.zeros(0, np.uint8), np.zeros(1, np.int64)
    if arr.null_count:
        raise ArchiveCorrupt("windows.parquet has a window without a residual payload; the archive is damaged")
    _, obuf, dbuf = arr.buffers()
    offs = np.frombuffer(obuf, np.int32)[arr.offset:arr.offset + len(arr) + 1].astype(np.int64)
    data = np.frombuffer(dbuf, np.uint8) if dbuf is not None else np.zeros(0, np.uint8)
    return data, offs


def lengths(meta: ChannelMeta, windows: np.ndarray) -> np.ndarray:
    """Samples in each of the given windows (every window is full but the channel's last)."""
    w = np.asarray(windows, dtype=np.int64)
    return np.clip(meta.n_samples - w * meta.window, 0, meta.window)


def codes(t: pa.Table, nrow: int) -> np.ndarray:
    """(rows, code size) int8 codes; zero columns for an archive without a model."""
    if "code" not in t.column_names:
        return np.zeros((nrow, 0), np.int8)
    col = t["code"]
    flat = pc.list_flatten(col).to_numpy(zero_copy_only=False).astype(np.int8) if nrow else np.zeros(0, np.int8)
    k = len(flat) // nrow if nrow else 0
    if k * nrow != len(flat):
        raise ArchiveCorrupt("code column has rows of different lengths; the archive is damaged")
    return flat.reshape(nrow, k)
