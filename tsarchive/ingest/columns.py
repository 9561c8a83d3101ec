"""One table column -> a channel (numbers), text kept aside, or nothing; with what was found.

Text cells from a CSV become numbers here: cells are trimmed, the
missing-value tokens (:data:`MISSING_TOKENS` plus the user's) become NaN,
a decimal comma becomes a point, and the rest is parsed by Arrow's
correctly rounded decimal-to-binary conversion.  A column is int64 when
every cell is an integer literal and none is missing, float64 otherwise.
A column with a cell that is neither a number nor a missing token is text:
it is kept (as strings, empty cells null) in ``Recording.extra``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import BadInput

#: Cell texts that mean "no measurement" in a numeric column (common practice of spreadsheets and loggers).
MISSING_TOKENS = ("", "NA", "N/A", "n/a", "na", "n.a.", "N.A.", "NaN", "nan", "NAN", "-NaN", "-nan", "null",
                  "NULL", "None", "#N/A", "-", "--", "---")

#: ``name [unit]`` or ``name (unit)``: the unit is whatever stands in the last brackets.
HEADER_RE = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<u1>[^\[\]]*)\]|\((?P<u2>[^()]*)\))\s*$")
_INT_RE = r"^[+-]?\d+$"
#: Parentheses hold a unit only when short and plain (square brackets always do).
UNIT_IN_PARENS_MAX = 16


@dataclass(frozen=True)
class ColumnReport:
    """What one source column became (for the dry run and the tests)."""

    header: str
    role: str                   # "time", "channel", "text", "skipped"
    name: str = ""
    unit: str = ""
    dtype: str = ""
    decimals: int | None = None
    missing: int = 0            # cells read as "no measurement" (tokens or nulls)
    tokens: tuple[str, ...] = ()  # the missing-value tokens seen in the column
    sentinels: int = 0          # cells equal to a user-named sentinel
    scaled: tuple[float, float] | None = None   # an EDF signal's (bitvalue, offset): ChannelInfo.scaled

    @property
    def resolution(self) -> str:
        """The logging step in words, and where none is found whether ``lossless`` still is (the
        pipeline's rule: EDF signals on their integers, float32/float16 on their bits)."""
        if self.role != "channel":
            return ""
        if self.decimals is not None:
            return f"{10.0 ** -self.decimals:g}"
        if self.scaled is not None:
            return f"{self.scaled[0]:g} (the file's integers)"
        if self.dtype in ("float32", "float16"):
            return f"none found (lossless keeps the {self.dtype} bits)"
        return "none found"


def split_header(header: str) -> tuple[str, str]:
    """``"chamber_temp [degC]"`` or ``"Elapsed (s)"`` -> (name, unit); no brackets -> ``(header, "")``."""
    m = HEADER_RE.match(header)
    if m is None or not m.group("name").strip():
        return header.strip(), ""
    if m.group("u1") is None and (len(m.group("u2")) > UNIT_IN_PARENS_MAX or any(c in m.group("u2") for c in ":,;")):
        return header.strip(), ""      # "(LGR S/N: 1055)" is a remark, not a unit
    unit = m.group("u1") if m.group("u1") is not None else m.group("u2")
    return m.group("name").strip(), unit.strip()


def text_to_numbers(col: pa.ChunkedArray, decimal: str, tokens: tuple[str, ...]):
    """(numpy array, dtype name, missing count, tokens seen) of a string column, or None if it is text."""
    if decimal == ".":
        plain = _plain_numbers(col)
        if plain is not None:
            return plain
    col = pc.utf8_trim_whitespace(col.combine_chunks() if isinstance(col, pa.ChunkedArray) else col)
    col = pc.if_else(pc.is_null(col), "", col)
    missing_set = pa.array(list(dict.fromkeys(MISSING_TOKENS + tuple(tokens))), type=pa.string())
    is_missing = pc.is_in(col, value_set=missing_set)
    n_missing = int(pc.sum(is_missing).as_py() or 0)
    seen = tuple(sorted(set(pc.filter(col, is_missing).unique().to_pylist()))) if n_missing else ()
    present = pc.filter(col, pc.invert(is_missing))
    if decimal == ",":
        if pc.any(pc.match_substring(present, ".")).as_py():
            return None     # "1.234" beside decimal commas is a thousands mark or a typo: never read as 1.234
        present = pc.replace_substring(present, ",", ".")
    if len(present) == 0:
        return np.full(len(col), np.nan), "float64", n_missing, seen
    if pc.all(pc.match_substring_regex(present, _INT_RE)).as_py():
        for t in (pa.int64(), pa.uint64()):
            try:
                arr = pc.cast(present, t).to_numpy(zero_copy_only=False)
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                continue
            if not n_missing:
                return arr, arr.dtype.name, 0, ()
            # integers with missing cells: masked in their own dtype (float64 would round above 2**53)
            gone = is_missing.to_numpy(zero_copy_only=False)
            full = np.zeros(len(col), dtype=arr.dtype)
            full[~gone] = arr
            return np.ma.MaskedArray(full, mask=gone), arr.dtype.name, n_missing, seen
    try:
        values = pc.cast(present, pa.float64()).to_numpy(zero_copy_only=False)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    out = np.full(len(col), np.nan)
    out[~is_missing.to_numpy(zero_copy_only=False)] = values
    return out, "float64", n_missing, seen


def _plain_numbers(col):
    """The common case in one cast: every cell an integer, or every cell a number and none NaN; else None."""
    # a failing cast costs as much as a whole one: try integers only when the first cells are integers
    head_ints = pc.all(pc.match_substring_regex(col[:64], _INT_RE)).as_py()
    for t in ((pa.int64(), pa.float64()) if head_ints else (pa.float64(),)):
        try:
            arr = pc.cast(col, t).to_numpy(zero_copy_only=False)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            continue
        if t == pa.float64() and np.isnan(arr).any():
            return None     # "nan" cells: the full path counts them as missing
        return arr, arr.dtype.name, 0, ()
    return None


def typed_to_numbers(header: str, col: pa.ChunkedArray):
    """(numpy array, dtype name, missing count) of an Arrow numeric column, or None if it is not numeric."""
    t = col.type
    if pa.types.is_null(t):
        return np.full(len(col), np.nan), "float64", len(col)
    if pa.types.is_integer(t):
        if col.null_count:
            # masked samples in the column's own dtype: a float64 copy would round integers above 2**53
            missing = col.is_null().to_numpy(zero_copy_only=False)
            values = col.fill_null(pa.scalar(0, type=t)).to_numpy(zero_copy_only=False)
            return np.ma.MaskedArray(values, mask=missing), values.dtype.name, col.null_count
        arr = col.to_numpy(zero_copy_only=False)
        return arr, arr.dtype.name, 0
    if pa.types.is_floating(t):
        nulls = col.null_count
        if nulls:
            col = col.fill_null(pa.scalar(np.nan, type=t))
        arr = col.to_numpy(zero_copy_only=False)
        return arr, arr.dtype.name, nulls
    return None


def as_text(header: str, col: pa.ChunkedArray, empty_is_null: bool) -> pa.ChunkedArray:
    """A column as strings, losslessly (nulls kept; an empty CSV cell is null); BadInput for nested types."""
    t = col.type
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        s = col.cast(pa.string())
    elif pa.types.is_nested(t) or pa.types.is_binary(t) or pa.types.is_large_binary(t):
        raise BadInput(f"column '{header}' holds {t} values, which cannot be kept as text; "
                       "pass --skip-text to leave such columns out")
    else:
        try:
            s = col.cast(pa.string())
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            raise BadInput(f"column '{header}' holds {t} values, which cannot be kept as text; "
                           "pass --skip-text to leave such columns out") from None
    if empty_is_null:
        s = pc.if_else(pc.equal(s, ""), pa.scalar(None, pa.string()), s)
    return s if isinstance(s, pa.ChunkedArray) else pa.chunked_array([s])


def count_sentinels(values: np.ndarray, sentinels: tuple[float, ...]) -> int:
    """How many values equal one of ``sentinels`` (exact comparison)."""
    if not sentinels:
        return 0
    wanted = np.asarray(sentinels, dtype=values.dtype if values.dtype.kind == "f" else np.float64)
    return int(np.isin(values, wanted).sum())
