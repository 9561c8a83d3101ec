"""Read a logger's CSV (or other delimited text) file.

:mod:`.dialect` finds the encoding, delimiter, decimal mark, preamble and
header; the rows below the header are then split by
:func:`pyarrow.csv.read_csv` with every cell kept as text, and
:mod:`.columns` turns number columns into channels with Arrow's correctly
rounded decimal-to-binary conversion (a value printed with ``repr`` or
``"%.2f"`` comes back as the nearest double).  The preamble lines are kept
as ``Recording.notes``.
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.csv as pacsv

from ..errors import BadInput
from .dialect import decode, detect, head_lines
from .options import ReadOptions
from .columns import split_header
from .tabular import Detected, build_recording

#: Largest text file read (the whole text is held in memory while it is split).
MAX_BYTES = 4 << 30


def read_csv_detailed(path: Path, options: ReadOptions) -> Detected:
    """Parse ``path`` into a :class:`Detected` (the Recording and what was found)."""
    path = Path(path)
    try:
        if path.stat().st_size > MAX_BYTES:
            raise BadInput(f"{path.name}: is larger than {MAX_BYTES >> 30} GiB; split it or convert it to Parquet")
        raw = path.read_bytes()
    except OSError as exc:
        raise BadInput(f"{path.name}: cannot read ({exc.strerror or exc}); check the file's permissions") from None
    text, encoding = decode(raw, path.name)
    del raw
    d = detect(text, path.name, encoding)
    headers = list(d.header)
    body = _body(text, d.header_line + d.header_rows - 1)
    del text
    cols = _split(body, headers, d.delimiter, path.name) if body.strip() else [pa.chunked_array([[]], pa.string())
                                                                               for _ in headers]
    units = {h: u for h, u in zip(headers, d.units) if u and not split_header(h)[1]}   # a units row
    headers, cols = _drop_unnamed(headers, cols, path.name)
    notes = tuple(ln for ln in _unmarked(d.preamble) if ln.strip())   # blank lines carry nothing
    det = build_recording(path, headers, cols, options, units=units, text_source=True, decimal=d.decimal,
                          notes=notes)
    return Detected(recording=det.recording, columns=det.columns, timing=det.timing, time_form=det.time_form,
                    time_notes=det.time_notes, encoding=encoding, delimiter=d.delimiter_name,
                    decimal=d.decimal, preamble=d.preamble)


def _unmarked(preamble) -> list[str]:
    """The preamble without tsarchive's reconstruction mark (the ``#`` lines an export starts with,
    :class:`tsarchive.export.Origin`): the mark says where a file came from, it is not the logger's."""
    from ..export import CSV_MARK

    lines = list(preamble)
    if lines and lines[0].startswith(CSV_MARK):
        while lines and lines[0].startswith("#"):
            lines.pop(0)
    return lines


def _body(text: str, header_line: int) -> str:
    """The text after the header line (line ends as in ``str.splitlines``)."""
    return text[sum(len(ln) for ln in head_lines(text, keepends=True)[:header_line + 1]):]


def _split(body: str, headers: list[str], delimiter: str, name: str) -> list[pa.ChunkedArray]:
    names = [f"c{j}" for j in range(len(headers))]
    read = pacsv.ReadOptions(column_names=names, block_size=1 << 20)   # 1 MiB blocks are split on threads
    # One column: a blank line is an empty cell.  Several: blank lines are skipped.
    parse = pacsv.ParseOptions(delimiter=delimiter or "\x1f", ignore_empty_lines=len(headers) > 1,
                               newlines_in_values=False)
    convert = pacsv.ConvertOptions(column_types={c: pa.string() for c in names}, strings_can_be_null=False,
                                   quoted_strings_can_be_null=False)
    try:
        table = pacsv.read_csv(pa.BufferReader(body.encode("utf-8")), read_options=read, parse_options=parse,
                               convert_options=convert)
    except pa.ArrowInvalid as exc:
        msg = str(exc).splitlines()[0]
        raise BadInput(f"{name}: a data row does not fit the header's {len(headers)} columns ({_short(msg)}); "
                       "fix or remove that row") from None
    return [table.column(c) for c in names]


def _short(msg: str) -> str:
    return msg if len(msg) <= 160 else msg[:157] + "..."


def _drop_unnamed(headers, cols, name):
    """Leave out columns with no header and no content (a trailing delimiter); refuse unnamed data."""
    keep_h, keep_c = [], []
    for j, (h, c) in enumerate(zip(headers, cols)):
        if not h:
            if all(not (v or "").strip() for v in c.unique().to_pylist()):
                continue
            raise BadInput(f"{name}: column {j + 1} has data but no name in the header; add a name")
        keep_h.append(h)
        keep_c.append(c)
    return keep_h, keep_c
