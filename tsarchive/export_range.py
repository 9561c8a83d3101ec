"""Export channels of an archive over a time range to .npy, .csv or .parquet."""

from __future__ import annotations

import math
from pathlib import Path

from .errors import BadInput
from .export import write_table


def export_range(arc, out_path, channels=None, start=None, end=None) -> Path:
    """Decode ``channels`` (all by default) between ``start`` and ``end`` seconds and write them atomically."""
    names = [c.name for c in arc.channels] if not channels else list(channels)
    metas = [arc.channel(n) for n in names]
    if len({m.rate for m in metas}) > 1:
        raise BadInput("the chosen channels have different rates; export them separately")
    meta = metas[0]
    columns = arc.read_many(names, start, end)
    t0 = 0.0 if start is None else max(0.0, float(start))
    first = int(math.floor(t0 * meta.rate + 1e-9))
    shape = arc.manifest.get("source", {}).get("shape", [])
    one_d = len(shape) == 1 and len(names) == 1
    return write_table(Path(out_path), columns, rate=meta.rate, start=meta.start, t0=first / meta.rate,
                       units={m.name: m.unit for m in metas}, shape_1d=one_d)
