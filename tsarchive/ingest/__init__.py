"""Input readers: turn a source file into a :class:`~tsarchive.recording.Recording`.

Use :func:`read_recording`; it dispatches on the file extension:

========== ==============================================================
``.npy``   1-D or 2-D (samples x channels) numeric array, memory-mapped;
           needs ``rate``.
``.csv``   header row; optional first time column (ISO 8601 or seconds)
           from which the rate is inferred; ``name [unit]`` headers.
``.parquet`` numeric columns; optional first timestamp/time column; units
           in the field metadata ``b"unit"`` or in ``name [unit]``.
========== ==============================================================

Each channel's logging resolution is detected by
:func:`tsarchive.ingest.grid.detect_decimals` and kept in
``ChannelInfo.decimals``.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import BadInput, SourceNotFound
from ..recording import Recording

#: Extensions read_recording understands (lower case, with the dot).
SUPPORTED = (".npy", ".csv", ".parquet")

__all__ = ["SUPPORTED", "read_recording"]


def read_recording(path: str | Path, rate: float | None = None) -> Recording:
    """Read ``path`` (``.npy``, ``.csv`` or ``.parquet``) into a Recording.

    ``rate`` (samples per second) is required for ``.npy`` and for tables
    without a time column; when given it overrides a time column's rate.
    Raises :class:`SourceNotFound` for a missing file and :class:`BadInput`
    for an unsupported extension or unusable content.
    """
    p = Path(path)
    ext = p.suffix.lower()
    if ext not in SUPPORTED:
        raise BadInput(f"{p.name}: unsupported format '{ext or '(none)'}'; use one of {', '.join(SUPPORTED)}")
    if not p.exists():
        raise SourceNotFound(f"{p}: no such file; check the path")
    if p.is_dir():
        raise BadInput(f"{p}: is a folder; give a recording file ({', '.join(SUPPORTED)})")
    if ext == ".npy":
        from .npyfile import read_npy
        return read_npy(p, rate)
    if ext == ".csv":
        from .csvfile import read_csv
        return read_csv(p, rate)
    from .parquetfile import read_parquet
    return read_parquet(p, rate)

