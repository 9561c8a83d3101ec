"""What ingest hands to the pipeline: a recording and its channels.

A :class:`Recording` is a 2-D array (samples x channels, possibly a
read-only memory map so that large files stream) or, when the channels'
dtypes differ or a channel has missing samples, :class:`Columns` (one array
per channel in its own dtype), a sample rate and one :class:`ChannelInfo`
per column.  Readers live in :mod:`tsarchive.ingest`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pyarrow as pa


@dataclass(frozen=True)
class ChannelInfo:
    """One logged channel as found in the source.

    ``decimals`` is the detected logging resolution: ``0`` for an
    integer-valued column, ``2`` for a logger writing two decimals, and
    ``None`` when the column is on no decimal grid (then ``lossless`` is
    not available for it, unless the channel is ``scaled``).
    """

    name: str
    unit: str = ""
    dtype: str = "float64"
    decimals: int | None = None
    #: numeric values that mean "no measurement" in this channel (a logger's -9999): kept exactly,
    #: left out of %-of-range budgets
    sentinels: tuple[float, ...] = ()
    #: ``(step, offset)`` when every value is ``(integer + offset) * step`` in float64, as an EDF/BDF
    #: reader computes physical values from the stored integers: ``lossless`` is then available on
    #: that grid (:class:`tsarchive.quantize.Grid` kind ``scaled``; the manifest keeps it in the grid)
    scaled: tuple[float, float] | None = None

    @property
    def resolution(self) -> float | None:
        return None if self.decimals is None else 10.0 ** (-self.decimals)

    def to_dict(self) -> dict:
        d = {"name": self.name, "unit": self.unit, "dtype": self.dtype, "decimals": self.decimals}
        if self.sentinels:
            d["sentinels"] = [float(v) for v in self.sentinels]
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "ChannelInfo":
        return cls(name=str(d["name"]), unit=str(d.get("unit", "")), dtype=str(d.get("dtype", "float64")),
                   decimals=None if d.get("decimals") is None else int(d["decimals"]),
                   sentinels=tuple(float(v) for v in d.get("sentinels", ())))


@dataclass(frozen=True, eq=False)
class TimeAxis:
    """A source's time column, kept exactly as logged (gaps, jitter and all).

    ``kind`` is ``"datetime"`` (``values`` int64 nanoseconds since
    1970-01-01T00:00; for naive times that is the wall clock as logged, not
    UTC) or ``"seconds"`` (``values`` float64 seconds, e.g. elapsed time or
    epoch seconds, bit for bit as parsed).  ``zone`` is ``None`` for naive
    times (no zone was logged or stated), ``"Z"`` for UTC, or an offset
    ``"+01:00"`` as logged or stated by the user.  ``columns`` are the
    source headers the axis came from (two for a date column beside a time
    column).
    """

    kind: str
    values: np.ndarray
    zone: str | None = None
    columns: tuple[str, ...] = ()


class Columns:
    """Channels of different dtypes side by side, each in its own dtype (a 2-D array would round an
    integer above 2**53 that sits beside a float column).

    Indexed like the 2-D arrays it stands in for: ``c[a:b]`` is the rows
    ``a..b-1`` (a :class:`Columns`), ``c[rows, j]`` and ``c[:, j]`` are channel
    ``j``'s 1-D array.  A channel with missing samples (nulls) is a
    ``numpy.ma.MaskedArray``.
    """

    def __init__(self, arrays) -> None:
        self.arrays = tuple(arrays)
        n = {len(a) for a in self.arrays}
        if len(n) > 1:
            raise ValueError("columns of different lengths")
        self.shape = (n.pop() if n else 0, len(self.arrays))

    @property
    def ndim(self) -> int:
        return 2

    @property
    def nbytes(self) -> int:
        return int(sum(np.asarray(a).nbytes for a in self.arrays))

    @property
    def dtypes(self) -> tuple[np.dtype, ...]:
        return tuple(a.dtype for a in self.arrays)

    def __len__(self) -> int:
        return self.shape[0]

    def __getitem__(self, key):
        if isinstance(key, tuple):
            rows, j = key
            return self.arrays[j][rows]
        return Columns(a[key] for a in self.arrays)

    def __array__(self, dtype=None, copy=None) -> np.ndarray:
        """One 2-D array in the channels' common dtype (float64 for ints beside floats: rounds integers
        above 2**53, so the pack and verify paths never take this; missing samples as their fill)."""
        common = np.result_type(*self.dtypes) if dtype is None else np.dtype(dtype)
        out = np.empty(self.shape, dtype=common)
        for j, a in enumerate(self.arrays):
            out[:, j] = np.ma.getdata(a)
        return out

    def reshape(self, n: int, c: int) -> "Columns":
        if (n, c) != self.shape and not (c == -1 and n == self.shape[0]):
            raise ValueError(f"cannot view columns of shape {self.shape} as ({n}, {c})")
        return self


@dataclass(frozen=True)
class Recording:
    """A multi-channel recording sampled at one regular rate.

    ``data`` has shape ``(n_samples, n_channels)``; column ``j`` holds
    channel ``channels[j]`` in that channel's source dtype: a 2-D array when
    every channel has the same dtype and none has missing samples, else
    :class:`Columns` (one array per channel, each in its own dtype).  ``shape`` is the array shape of the
    source (``(n,)`` for a 1-D ``.npy``) so that unpack can give it back.
    """

    data: "np.ndarray | Columns"
    rate: float
    channels: tuple[ChannelInfo, ...]
    start: datetime | None = None
    source: Path | None = None
    shape: tuple[int, ...] = field(default=())
    #: the time column as logged, when the source has one (``rate`` is then its nominal rate)
    time: TimeAxis | None = None
    #: free-text lines found before the header (a logger's preamble), kept as the recording's notes
    notes: tuple[str, ...] = ()
    #: non-numeric columns (status, operator notes), row-aligned with ``data``, kept losslessly
    extra: "pa.Table | None" = None

    @classmethod
    def from_columns(cls, columns, *, rate: float, channels, **fields) -> "Recording":
        """A Recording from one 1-D array per channel, each in its source dtype.

        Readers call this instead of assembling ``data`` themselves, so that
        how columns of different dtypes are held is decided in one place.
        """
        columns = [c if isinstance(c, np.ma.MaskedArray) else np.asarray(c) for c in columns]
        dtypes = {np.dtype(c.dtype) for c in columns}
        masked = any(isinstance(c, np.ma.MaskedArray) for c in columns)
        if len(dtypes) == 1 and not masked:
            data = np.empty((len(columns[0]), len(columns)), dtype=dtypes.pop())
            for j, col in enumerate(columns):
                data[:, j] = col
        else:
            data = Columns(columns)
        fields.setdefault("shape", tuple(int(s) for s in data.shape))
        return cls(data=data, rate=rate, channels=tuple(channels), **fields)

    @property
    def n_samples(self) -> int:
        return int(self.data.shape[0])

    @property
    def duration(self) -> float:
        return self.n_samples / self.rate if self.rate > 0 else 0.0

    def channel_index(self, name: str, position: int) -> int | None:
        """Where an archived channel is in this recording: by name, else at its position; None if neither."""
        names = [c.name for c in self.channels]
        if name in names:
            return names.index(name)
        return position if 0 <= position < len(names) else None

    def column(self, j: int) -> np.ndarray:
        """Channel ``j`` as a 1-D array (a view where possible)."""
        return self.data[:, j]

    def rows(self, a: int, b: int) -> "np.ndarray | Columns":
        """Samples ``a..b-1`` of every channel as an in-memory 2-D array (or :class:`Columns`:
        ``rows(a, b)[:, j]`` is channel ``j`` in its own dtype either way).

        For a memory-mapped ``.npy`` the file is mapped afresh for each call
        and unmapped afterwards, so streaming through a file larger than
        memory does not pile its pages up in this process.
        """
        a, b = max(0, a), min(self.n_samples, b)
        if isinstance(self.data, np.memmap) and self.source is not None and self.source.suffix.lower() == ".npy":
            m = np.load(self.source, mmap_mode="r")
            try:
                block = np.array(m[a:b])
            finally:
                del m
            return block.reshape(b - a, -1)
        if isinstance(self.data, Columns):
            return self.data[a:b]
        return np.asarray(self.data[a:b])
