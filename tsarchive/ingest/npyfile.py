"""Read a NumPy ``.npy`` array as a :class:`~tsarchive.recording.Recording`.

The file is opened as a read-only memory map (``mmap_mode="r"``) and never
with ``allow_pickle``, so a multi-gigabyte array streams from disk and an
object array is refused.  A ``.npy`` file carries no sample rate, so the
caller must give one.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import BadInput, NeedsRate
from ..recording import ChannelInfo, Recording
from .grid import MAX_CHECKED, detect_decimals
from .options import ReadOptions, check_rate

SAMPLE_ROWS_PER_MAP = 4096   # sampled rows per memory map while sampling for grid detection


def read_npy(path: Path, rate: float | None, options: ReadOptions | None = None) -> Recording:
    """Memory-map a 1-D or 2-D (samples x channels) numeric array.

    Channels are named ``ch0``, ``ch1``, ... with no unit, unless
    ``options.names`` / ``options.units`` give one per column.  A 1-D array
    becomes an ``(n, 1)`` view; ``Recording.shape`` keeps the original shape.
    Raises :class:`BadInput` without ``rate``, for a non-numeric dtype
    (object, complex, bool, structured), a 0-d or 3-D+ array, or no samples.
    """
    path = Path(path)
    if rate is None:
        raise NeedsRate(f"{path.name}: a .npy file has no time axis; it needs --rate HZ")
    rate = check_rate(rate)
    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except ValueError as exc:  # object arrays need pickle; bad headers
        raise BadInput(f"{path.name}: not a plain numeric .npy array ({exc}); save a float or int array with numpy.save") from exc
    except (OSError, EOFError) as exc:
        raise BadInput(f"{path.name}: cannot read as .npy ({exc}); check the file is a complete NumPy array") from exc
    if not isinstance(arr, np.ndarray):
        raise BadInput(f"{path.name}: holds no single array; save one array with numpy.save")
    kind = arr.dtype.kind
    if kind not in "fiu" or arr.dtype.fields is not None:
        raise BadInput(f"{path.name}: dtype {arr.dtype} is not supported; use a float or integer array")
    if arr.ndim not in (1, 2):
        raise BadInput(f"{path.name}: array has {arr.ndim} dimensions; use 1-D or 2-D (samples x channels)")
    shape = tuple(int(s) for s in arr.shape)
    if arr.size == 0:
        raise BadInput(f"{path.name}: array of shape {shape} has no samples; give a non-empty recording")
    dtype_name = arr.dtype.name
    probe = _strided_sample(path, shape[0])
    names, units = _names_units(path, probe.shape[1], options or ReadOptions())
    channels = tuple(
        ChannelInfo(name=names[j], unit=units[j], dtype=dtype_name, decimals=detect_decimals(probe[:, j], arr.dtype),
                    sentinels=(options or ReadOptions()).sentinels)
        for j in range(probe.shape[1])
    )
    data = arr.reshape(shape[0], 1) if arr.ndim == 1 else arr
    return Recording(data=data, rate=float(rate), channels=channels, start=None, source=path, shape=shape)


def _names_units(path: Path, k: int, options: ReadOptions) -> tuple[list[str], list[str]]:
    """One name and one unit per column: given ones (checked against the column count) or ch0, ch1, ..."""
    names = list(options.names) or [f"ch{j}" for j in range(k)]
    units = list(options.units) or [""] * k
    for what, given in (("names", names), ("units", units)):
        if len(given) != k:
            raise BadInput(f"{path.name}: has {k} column(s) but {len(given)} {what} were given; "
                           f"give one per column, separated by commas")
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise BadInput(f"{path.name}: channel name '{dup[0]}' is given twice; give each column its own name")
    return names, units


def _strided_sample(path: Path, n: int) -> np.ndarray:
    """Every k-th row (at most MAX_CHECKED rows) for grid detection, read in short stretches.

    A strided read touches every page of the file; each stretch goes through a
    memory map of its own that is dropped before the next, so the resident
    size stays near one stretch (about 16 MB) however large the file is.
    """
    step = max(1, -(-n // MAX_CHECKED))
    span = step * SAMPLE_ROWS_PER_MAP
    parts = []
    for a in range(0, n, span):
        m = np.load(path, mmap_mode="r", allow_pickle=False)
        try:
            parts.append(np.array(m.reshape(n, -1)[a:min(n, a + span):step]))
        finally:
            del m
    return np.concatenate(parts)
