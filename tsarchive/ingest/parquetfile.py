"""Read a Parquet recording with pyarrow.

Numeric columns are channels and keep their stored dtype (float32 stays
float32 when every channel is float32).  A unit may be stored in a field's
metadata under the key ``b"unit"`` (this is how :mod:`tsarchive.export`
writes it) or in the name as ``name [unit]`` / ``name (unit)``.  The time
column and text columns are handled as in :mod:`.tabular`.
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import BadInput
from .options import ReadOptions
from .tabular import Detected, build_recording

#: Field-metadata key holding a column's unit.
UNIT_KEY = b"unit"


def read_parquet_detailed(path: Path, options: ReadOptions) -> Detected:
    """Load every column of ``path`` into a :class:`Detected`."""
    path = Path(path)
    try:
        table = pq.read_table(path)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError) as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise BadInput(f"{path.name}: cannot read as Parquet ({msg}); check it is a complete .parquet file") from exc
    units: dict[str, str] = {}
    for field in table.schema:
        meta = field.metadata or {}
        if UNIT_KEY in meta:
            units[field.name] = meta[UNIT_KEY].decode("utf-8", errors="replace")
    if table.num_columns == 0:
        raise BadInput(f"{path.name}: has no columns; give a table with at least one numeric column")
    return build_recording(path, list(table.column_names), [table.column(j) for j in range(table.num_columns)],
                           options, units=units)
