"""An archive's samples as time-indexed frames: pandas, polars and xarray (optional extra ``frames``).

    >>> from tsarchive.frames import to_pandas                     # doctest: +SKIP
    >>> df = to_pandas("run.tsarchive", channels=["temp"], start=60, end=120)   # doctest: +SKIP
    >>> df.attrs["units"]                                          # doctest: +SKIP
    {'temp': 'degC'}

Each function takes an archive path (or an open :class:`tsarchive.Archive`), optional channel names
and ``start``/``end`` in seconds from the first sample, with :meth:`Archive.read`'s interval: samples
with ``start <= t - t[0] < end`` on the logged times (start included, end excluded).  The values are
:meth:`Archive.read`'s, in the channel's own dtype; the times are :meth:`Archive.times`':

* logged clock times without a zone stay naive (the wall clock as logged);
* times logged with an offset are the same instants, shown in that offset (pandas, and polars where
  the offset is whole hours; otherwise polars holds them in UTC); xarray holds datetimes without a
  zone, so its time coordinate is UTC with the offset in the coordinate's ``zone`` attribute;
* a seconds column as logged (or ``i / rate`` for a source without times) stays float seconds.

Units (and each channel's budget) go where each library keeps such facts: pandas ``DataFrame.attrs``,
xarray variable ``attrs["units"]`` (the CF convention's name); polars keeps no metadata beside a frame,
so :func:`to_polars` returns its units with it.  Integer channels with missing samples become
nullable (pandas ``Int64``-style, polars null), or float with NaN in xarray.  These libraries are
imported only when a function is called: ``pip install 'tsarchive[frames]'``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import BadInput
from .store.timeaxis import DATETIME, Times, parse_zone


@dataclass(frozen=True)
class FrameParts:
    """What every frame is built from: the times, the samples per channel, and their units and budgets."""

    times: Times
    columns: dict            # name -> np.ndarray (masked for integer channels with missing samples)
    units: dict              # name -> unit ("" when none)
    budgets: dict            # name -> budget spec as packed ("0.1%", "lossless", ...)
    source: str


def parts(archive, channels=None, start: float | None = None, end: float | None = None) -> FrameParts:
    """Read ``channels`` (all by default) over ``start <= t - t[0] < end`` once, for any frame library."""
    import tsarchive
    from .archive import Archive
    arc = archive if isinstance(archive, Archive) else tsarchive.open(archive)
    names = [c.name for c in arc.channels] if channels is None else list(channels)
    metas = [arc.channel(n) for n in names]
    return FrameParts(times=arc.times(start, end), columns=arc.read_many(names, start, end),
                      units={m.name: m.unit for m in metas}, budgets={m.name: m.budget for m in metas},
                      source=arc.source_name or "")


def _need(module: str):
    import importlib
    try:
        return importlib.import_module(module)
    except ImportError:
        raise BadInput(f"{module} is not installed; install the frame libraries with "
                       "pip install 'tsarchive[frames]'") from None


def _zone_name(zone: str | None) -> str | None:
    return None if zone is None else ("UTC" if zone == "Z" else zone)


def to_pandas(archive, channels=None, start=None, end=None):
    """A ``pandas.DataFrame`` indexed by the samples' times; ``attrs``: units, budgets, source, zone."""
    pd = _need("pandas")
    p = parts(archive, channels, start, end)
    t = p.times
    if t.kind == DATETIME:
        index = pd.DatetimeIndex(np.asarray(t.values, dtype=np.int64).view("datetime64[ns]"), name=t.name)
        if t.zone is not None:
            index = index.tz_localize("UTC").tz_convert(parse_zone(t.zone))
    else:
        index = pd.Index(np.asarray(t.values, dtype=np.float64), name=t.name)
    data = {}
    for name, x in p.columns.items():
        if np.ma.isMaskedArray(x):          # an integer channel with missing samples: nullable, values kept
            x = pd.arrays.IntegerArray(np.ma.getdata(x), np.ma.getmaskarray(x)) if x.dtype.kind in "iu" \
                else np.ma.filled(x, np.nan)
        data[name] = x
    df = pd.DataFrame(data, index=index, copy=False)
    df.attrs.update(units=dict(p.units), budgets=dict(p.budgets), source=p.source, zone=t.zone)
    return df


def to_polars(archive, channels=None, start=None, end=None):
    """``(polars.DataFrame, units)``: a time column (named as logged) then one column per channel."""
    pl = _need("polars")
    import pyarrow as pa
    p = parts(archive, channels, start, end)
    t = p.times
    if t.kind == DATETIME:
        zone = _zone_name(t.zone)
        if zone not in (None, "UTC") and not zone.endswith(":00"):
            zone = "UTC"                            # polars names offsets by whole hours only
        time = pa.array(np.asarray(t.values, dtype=np.int64), type=pa.timestamp("ns", tz=zone))
    else:
        time = pa.array(np.asarray(t.values, dtype=np.float64))
    cols = {t.name: time}
    for name, x in p.columns.items():
        cols[name] = pa.array(np.ma.getdata(x), mask=np.ma.getmaskarray(x) if np.ma.isMaskedArray(x) else None)
    return pl.from_arrow(pa.table(cols)), dict(p.units)


def to_xarray(archive, channels=None, start=None, end=None):
    """An ``xarray.Dataset`` on one time coordinate; each variable's ``attrs``: ``units``, ``budget``."""
    xr = _need("xarray")
    p = parts(archive, channels, start, end)
    t = p.times
    coord_attrs = {}
    if t.kind == DATETIME:
        values = np.asarray(t.values, dtype=np.int64).view("datetime64[ns]")
        if t.zone is not None:
            coord_attrs = {"zone": t.zone, "note": f"UTC instants; logged with offset {t.zone}"}
    else:
        values = np.asarray(t.values, dtype=np.float64)
        coord_attrs = {"units": "s"}
    data = {name: ((t.name,), np.ma.filled(x.astype(np.float64), np.nan) if np.ma.isMaskedArray(x) else x,
                   {"units": p.units[name], "budget": p.budgets[name]}) for name, x in p.columns.items()}
    return xr.Dataset(data, coords={t.name: (t.name, values, coord_attrs)}, attrs={"source": p.source})
