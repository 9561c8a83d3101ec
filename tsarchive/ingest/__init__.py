"""Input readers: turn a source file into a :class:`~tsarchive.recording.Recording`.

Use :func:`read_recording`; it dispatches on the file extension:

================== ===========================================================
``.npy``           1-D or 2-D (samples x channels) numeric array, memory-mapped;
                   needs ``rate``; names and units from ``options``.
``.csv`` ``.txt``  a logger's delimited text (:mod:`.dialect`: encoding,
``.tsv`` ``.dat``  delimiter, decimal comma, preamble, TOA5), a time column
                   (:mod:`.timeparse`), ``name [unit]`` / ``name (unit)``
                   headers, text columns kept aside (:mod:`.tabular`).
``.parquet``       numeric columns; a timestamp/date or time-named column;
                   units in the field metadata ``b"unit"`` or in the name.
``.wav``           PCM 8-32 bit or float, any number of channels.
``.edf`` ``.bdf``  EDF/EDF+/BDF through pyedflib; one rate per recording.
================== ===========================================================

Each channel's logging resolution is detected by
:func:`tsarchive.ingest.grid.detect_decimals` and kept in
``ChannelInfo.decimals``.  :func:`read_detailed` also says what was found
(used by ``pack --dry-run``, see :mod:`.survey`).
"""

from __future__ import annotations

from pathlib import Path

from ..errors import BadInput, SourceNotFound
from ..recording import Recording
from .options import ReadOptions

#: Extensions read_recording understands (lower case, with the dot).
SUPPORTED = (".npy", ".csv", ".txt", ".tsv", ".dat", ".parquet", ".wav", ".edf", ".bdf")
_TEXT = (".csv", ".txt", ".tsv", ".dat")

__all__ = ["SUPPORTED", "ReadOptions", "read_recording", "read_detailed"]


def _options(rate, options: ReadOptions | None) -> ReadOptions:
    from dataclasses import replace
    from .options import check_rate
    opts = options or ReadOptions()
    if rate is not None:
        opts = replace(opts, rate=check_rate(rate))
    return opts


def read_detailed(path: str | Path, rate: float | None = None, options: ReadOptions | None = None):
    """Read ``path`` and return a :class:`~tsarchive.ingest.tabular.Detected` (the Recording and what was found)."""
    from .tabular import Detected
    p = Path(path)
    opts = _options(rate, options)
    ext = p.suffix.lower()
    if ext not in SUPPORTED:
        raise BadInput(f"{p.name}: unsupported format '{ext or '(none)'}'; use one of {', '.join(SUPPORTED)}")
    if not p.exists():
        raise SourceNotFound(f"{p}: no such file; check the path")
    if p.is_dir():
        raise BadInput(f"{p}: is a folder; give a recording file ({', '.join(SUPPORTED)})")
    if (opts.names or opts.units) and ext not in (".npy", ".wav"):
        raise BadInput(f"{p.name}: names and units are given only to .npy and .wav sources; "
                       "a table's header names its columns")
    if ext in _TEXT:
        from .csvfile import read_csv_detailed
        return read_csv_detailed(p, opts)
    if ext == ".parquet":
        from .parquetfile import read_parquet_detailed
        return read_parquet_detailed(p, opts)
    if ext == ".npy":
        from .npyfile import read_npy
        rec, how = read_npy(p, opts.rate, opts), "the rate given (a .npy file holds no times)"
    elif ext == ".wav":
        from .wavfile import read_wav
        rec, how = read_wav(p, opts), "the WAV header's rate"
    else:
        from .edffile import read_edf
        rec, how = read_edf(p, opts), "the EDF header's rate for these signals"
    return Detected(recording=rec, columns=_plain_reports(rec), timing_text=f"regular at {rec.rate:g} Hz, {how}")


def _plain_reports(rec: Recording):
    from .columns import ColumnReport
    return tuple(ColumnReport(c.name, "channel", name=c.name, unit=c.unit, dtype=c.dtype, decimals=c.decimals,
                              scaled=c.scaled) for c in rec.channels)


def read_recording(path: str | Path, rate: float | None = None, *, options: ReadOptions | None = None) -> Recording:
    """Read ``path`` into a Recording (see the module docstring for the formats).

    ``rate`` (samples per second) is required for ``.npy`` and for tables
    without a time column; beside a time column it must agree with the
    column's nominal rate (``options.without_time`` drops the column).
    ``options`` carries the other choices (:class:`ReadOptions`).  Raises
    :class:`SourceNotFound` for a missing file and :class:`BadInput` for an
    unsupported extension or unusable content.
    """
    return read_detailed(path, rate, options).recording
