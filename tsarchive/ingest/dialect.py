"""Find how a logger wrote its text file: encoding, delimiter, decimal mark, preamble, header.

Loggers write CSV in many dialects.  :func:`detect` looks at the text and
returns a :class:`Dialect`:

* **encoding** -- a byte-order mark decides (UTF-8, UTF-16); otherwise
  strict UTF-8 when the bytes decode as UTF-8, else Windows-1252 (the
  encoding of most Western loggers' ``°C``), else Latin-1, which decodes
  any byte;
* **delimiter** -- tab, ``;`` or ``,``: the first of these that splits the
  header and the data rows into the same number (at least two) of fields;
  a single-column file has none;
* **decimal mark** -- a comma when most number cells are written like
  ``21,5`` (quoted, with a comma delimiter);
* **preamble** -- every line before the header: ``#`` comments and a
  station's or logger's metadata lines (their own shape);
* **units row** -- a row under the names whose cells are mostly unit
  symbols (``s``, ``°C``, ``%RH``) gives the columns' units;
* **TOA5** (Campbell Scientific loggers) -- recognised by its first cell;
  its field names, units and processing lines are read as such;
* **header** -- the first line, not a ``#`` comment, that has as many
  fields as the data rows, is followed by a data row, and whose next
  :data:`FOLLOW` rows of that width are all data rows; a data row is a
  row with a number, date or time cell in it.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass

from ..errors import BadInput

#: Candidate delimiters, in order of preference (a comma may be a decimal mark, so it comes last).
DELIMITERS = ("\t", ";", ",")

#: Lines looked at to find the header and the delimiter (the file is parsed fully later).
PROBE_LINES = 400

#: The header must be followed by this many data rows (fewer in a shorter file).
FOLLOW = 3

#: A cell that is a number, a date or a time: digits with signs, marks and separators only.
_DATALIKE = re.compile(r"^[\s+-]*(\d[\d\s.,:/+\-eETZ]*|\.\d+|inf|nan)\s*$", re.IGNORECASE)
_COMMA_NUMBER = re.compile(r"^\s*[+-]?\d*,\d+(?:[eE][+-]?\d+)?\s*$")
_DOT_NUMBER = re.compile(r"^\s*[+-]?\d*\.\d+(?:[eE][+-]?\d+)?\s*$")


@dataclass(frozen=True)
class Dialect:
    """What :func:`detect` found (``header_line`` counts from 0; ``preamble`` is the lines before it)."""

    encoding: str
    delimiter: str          # "" for a single-column file
    decimal: str            # "." or ","
    header_line: int
    header: tuple[str, ...]
    preamble: tuple[str, ...]
    #: lines the header takes (names, then units and the like); the data start after them
    header_rows: int = 1
    #: one unit per column from a units row ("" where none), or () without one
    units: tuple[str, ...] = ()

    @property
    def delimiter_name(self) -> str:
        return {"\t": "tab", ";": "semicolon", ",": "comma", "": "none (one column)"}[self.delimiter]


def decode(raw: bytes, name: str) -> tuple[str, str]:
    """(text, encoding name) of a file's bytes; see the module docstring for the order tried."""
    if raw.startswith(b"\xef\xbb\xbf"):
        enc, body = "utf-8-sig", raw[3:]
        try:
            return body.decode("utf-8"), enc
        except UnicodeDecodeError as exc:
            raise BadInput(f"{name}: starts with a UTF-8 mark but byte {exc.start + 3} is not UTF-8; "
                           "save the file again as UTF-8") from None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        enc = "utf-16"
        try:
            return raw.decode("utf-16"), enc
        except UnicodeDecodeError:
            raise BadInput(f"{name}: starts with a UTF-16 mark but is not valid UTF-16; "
                           "save the file again as UTF-8") from None
    if b"\x00" in raw[:65536]:
        raise BadInput(f"{name}: holds NUL bytes, so it is not a text table; "
                       "check that this is the logger's CSV export")
    try:
        return raw.decode("utf-8"), "utf-8"
    except UnicodeDecodeError:
        pass
    try:
        return raw.decode("cp1252"), "cp1252"
    except UnicodeDecodeError:
        return raw.decode("latin-1"), "latin-1"


def head_lines(text: str, keepends: bool = False) -> list[str]:
    """The first :data:`PROBE_LINES` whole lines of ``text`` (without splitting all of a large file)."""
    size = 1 << 16
    while True:
        head = text[:size]
        lines = head.splitlines(keepends=True)
        if size >= len(text) or len(lines) > PROBE_LINES:
            if size < len(text):
                lines = lines[:-1]      # the last one may be cut
            lines = lines[:PROBE_LINES]
            return lines if keepends else [ln.rstrip("\r\n\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029") for ln in lines]
        size *= 4


def split_row(line: str, delimiter: str) -> list[str]:
    """The fields of one line (quotes honoured as in RFC 4180)."""
    if not delimiter:
        return [line]
    return next(csv.reader([line], delimiter=delimiter, quotechar='"'), [""])


def _datalike(cells: list[str]) -> bool:
    return any(c.strip() and _DATALIKE.match(c) for c in cells)


def _find_header(lines: list[str], delimiter: str) -> tuple[int, int] | None:
    """(header index, width) for ``delimiter``, or None when the lines do not fit it."""
    rows = [split_row(ln, delimiter) if ln.strip() else None for ln in lines]
    widths = [len(r) for r in rows if r is not None]
    if not widths:
        return None
    tail = widths[len(widths) // 2:]
    width = max(set(tail), key=tail.count)
    if delimiter and width < 2:
        return None
    for i, row in enumerate(rows):
        if row is None or len(row) != width or lines[i].lstrip().startswith("#"):
            continue
        # the rows of this width below it (a ragged row is the parser's to report) must all be data rows
        below = [r for r in rows[i + 1:i + 1 + 2 * FOLLOW] if r is not None][:FOLLOW]
        fitting = [r for r in below if len(r) == width]
        if below and len(below[0]) == width and all(_datalike(r) for r in fitting) and not all(
                _DATALIKE.match(c) for c in row if c.strip()):
            return i, width
    return None


def detect(text: str, name: str, encoding: str) -> Dialect:
    """The :class:`Dialect` of ``text`` (see the module docstring); BadInput when no header is found."""
    lines = head_lines(text)
    if not any(ln.strip() for ln in lines):
        raise BadInput(f"{name}: file is empty; it needs a header row and data rows")
    if split_row(lines[0], ",")[:1] == ["TOA5"]:
        return _toa5(lines, name, encoding)
    for delimiter in DELIMITERS + ("",):
        found = _find_header(lines, delimiter)
        if found is None:
            continue
        h, width = found
        header = tuple(c.strip() for c in split_row(lines[h], delimiter))
        data = [split_row(ln, delimiter) for ln in lines[h + 1:] if ln.strip()]
        decimal = _decimal(data, delimiter)
        above = split_row(lines[h - 1], delimiter) if h > 0 and lines[h - 1].strip() else []
        if (len(above) == width and not lines[h - 1].lstrip().startswith("#") and not _datalike(above)
                and _units_row(header)):      # names, then a row of units
            return Dialect(encoding=encoding, delimiter=delimiter, decimal=decimal, header_line=h - 1,
                           header=tuple(c.strip() for c in above), preamble=tuple(lines[:h - 1]), header_rows=2,
                           units=header)
        return Dialect(encoding=encoding, delimiter=delimiter, decimal=decimal,
                       header_line=h, header=header, preamble=tuple(lines[:h]))
    if not any(_datalike(split_row(ln, d)) for ln in lines for d in DELIMITERS):
        raise BadInput(f"{name}: no data rows found (no cell holds a number or a time); "
                       "check that this is the logger's data export")
    raise BadInput(f"{name}: no header row found above the data (a line naming every column, "
                   "as many fields as the rows below it); add one")


#: Unit symbols that mark a row under the names as a units row (common practice (no source)).
UNIT_WORDS = frozenset("""s ms us µs min h d °c degc k °f degf % %rh rh v mv µv uv kv a ma µa ua pa hpa kpa mpa bar
mbar psi m mm cm km m/s km/h m/s2 m/s² g mg kg n kn nm hz khz w kw mw wh kwh j ppm ppb lux lx db dba l l/min ml/min
ohm kohm Ω kω volts amps deg w/m2 w/m² mm/h""".split()) | {"deg c"}


def _units_row(cells: tuple[str, ...]) -> bool:
    """True when most non-empty cells are unit symbols (``s``, ``°C``, ``%RH``, ``mV``, ...), one of them
    longer than a letter (a row of names such as ``t, a, b`` is not taken for units)."""
    named = [c.strip().strip("[]()").lower() for c in cells if c.strip()]
    units = [c for c in named if c in UNIT_WORDS]
    return bool(named) and len(units) * 2 > len(named) and any(len(u) > 1 for u in units)


def _toa5(lines: list[str], name: str, encoding: str) -> Dialect:
    """Campbell Scientific's TOA5 text layout: an environment line, field names, units, processing, then data."""
    if len(lines) < 5:
        raise BadInput(f"{name}: a TOA5 file needs its four header lines and data rows; the file is cut short")
    header = tuple(c.strip() for c in split_row(lines[1], ","))
    units = tuple(c.strip() for c in split_row(lines[2], ","))
    if len(units) != len(header) or len(split_row(lines[3], ",")) != len(header):
        raise BadInput(f"{name}: its TOA5 header lines have different numbers of fields; the file is damaged")
    data = [split_row(ln, ",") for ln in lines[4:] if ln.strip()]
    return Dialect(encoding=encoding, delimiter=",", decimal=_decimal(data, ","), header_line=1, header=header,
                   preamble=(lines[0], lines[3]), header_rows=3, units=units)


def _decimal(rows: list[list[str]], delimiter: str) -> str:
    """``","`` when most number cells are written with a decimal comma.

    With a comma delimiter such cells can only be quoted (``"21,5"``); an
    unquoted ``21,5`` is two cells there.
    """
    comma = dot = 0
    for row in rows:
        for c in row:
            comma += bool(_COMMA_NUMBER.match(c))
            dot += bool(_DOT_NUMBER.match(c))
    return "," if comma > dot else "."
