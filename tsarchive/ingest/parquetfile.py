"""Read a Parquet recording with pyarrow.

Numeric columns are channels and keep their stored dtype (float32 stays
float32 when every channel is float32).  A unit may be stored in a field's
metadata under the key ``b"unit"`` (this is how :mod:`tsarchive.export`
writes it) or in the name as ``name [unit]``.  The first column is the time
axis when it is timestamp/date typed or time-named (see :mod:`.tabular`).
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import BadInput
from ..recording import Recording
from .tabular import table_to_recording

#: Field-metadata key holding a column's unit.
UNIT_KEY = b"unit"


def read_parquet(path: Path, rate: float | None) -> Recording:
    """Load every column of ``path`` into a Recording."""
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
    return table_to_recording(table, path, rate, units=units)
