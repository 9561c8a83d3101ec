"""Read a CSV recording (one header row, comma separated) with pyarrow.

Cells are parsed by :func:`pyarrow.csv.read_csv`, whose decimal-to-binary
conversion is correctly rounded, so a value printed with ``repr`` or
``"%.2f"`` comes back as the nearest double.  A column is int64 when every
cell is an integer literal, float64 otherwise; empty cells and the usual
NaN spellings (``nan``, ``NaN``, ``NA``, ...) become NaN, ``inf`` and
``-inf`` are accepted.  See :mod:`.tabular` for the time column and units.
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.csv as pacsv

from ..errors import BadInput
from ..recording import Recording
from .tabular import table_to_recording


def read_csv(path: Path, rate: float | None) -> Recording:
    """Parse ``path`` into a Recording (float64, or int64 when every channel is integer)."""
    path = Path(path)
    # Blank lines are kept so that a single-column file can have empty (NaN) cells.
    parse = pacsv.ParseOptions(ignore_empty_lines=False)
    convert = pacsv.ConvertOptions(strings_can_be_null=False, quoted_strings_can_be_null=True)
    read = pacsv.ReadOptions(block_size=1 << 24, skip_rows=_comment_lines(path))
    try:
        table = pacsv.read_csv(path, read_options=read, parse_options=parse, convert_options=convert)
    except pa.ArrowInvalid as exc:
        msg = str(exc).splitlines()[0]
        if "Empty CSV file" in msg:
            raise BadInput(f"{path.name}: file is empty; it needs a header row and data rows") from exc
        raise BadInput(f"{path.name}: cannot parse as CSV ({msg}); check the header and the column count") from exc
    except OSError as exc:
        raise BadInput(f"{path.name}: cannot read ({exc}); check the file's permissions") from exc
    return table_to_recording(table, path, rate)


def _comment_lines(path: Path, limit: int = 64) -> int:
    """The leading ``#`` lines of a tsarchive export (its reconstruction note), else 0.

    Only a file whose first line is tsarchive's mark: a logger's own header
    may start with ``#`` too.
    """
    from ..export import CSV_MARK

    n = 0
    try:
        with open(path, "rb") as f:
            first = f.readline(4096)
            if not first.startswith(CSV_MARK.encode("ascii")):
                return 0
            n = 1
            while n < limit and f.readline(1 << 16).startswith(b"#"):
                n += 1
    except OSError:
        return 0
    return n
