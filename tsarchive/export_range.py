"""Export channels of an archive over a time range to .npy, .csv or .parquet."""

from __future__ import annotations

from pathlib import Path

from .errors import BadInput
from .export import TextParts, write_table
from .store.sidecar import extra_layout


def export_range(arc, out_path, channels=None, start=None, end=None) -> Path:
    """Decode ``channels`` (all by default) whose times lie in ``start <= t - t[0] < end`` (seconds) and
    write them atomically with their logged times and, for a whole-table export, the text columns."""
    names = [c.name for c in arc.channels] if not channels else list(channels)
    metas = [arc.channel(n) for n in names]
    if len({m.rate for m in metas}) > 1:
        raise BadInput("the chosen channels have different rates; export them separately")
    meta = metas[0]
    columns = arc.read_many(names, start, end)
    times = arc.times(start, end)
    extra = arc.extra(start, end) if not channels else None     # text columns with a whole-table export
    positions = extra_layout(arc.manifest)[1]
    shape = arc.manifest.get("source", {}).get("shape", [])
    one_d = len(shape) == 1 and len(names) == 1
    text = TextParts(notes=arc.notes, extra=extra, positions=positions)
    return write_table(Path(out_path), columns, rate=meta.rate, start=meta.start, times=times, text=text,
                       units={m.name: m.unit for m in metas}, shape_1d=one_d)
