"""What reading a source found, without packing it (``tsarchive pack SOURCE --dry-run``).

:func:`survey_source` reads the source exactly as ``pack`` would and
returns a :class:`SourceSurvey`: per column its role (time, channel, text,
skipped), name, unit, dtype, resolution, missing cells and the tokens
seen; the timing (regular, jitter, gaps); the text dialect (encoding,
delimiter, decimal mark) and the preamble lines.  Nothing is written.

    >>> s = survey_source("run.csv")          # doctest: +SKIP
    >>> print(s.to_text())                    # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass

from .columns import ColumnReport
from .options import ReadOptions
from .tabular import Detected


SHOWN_NOTES = 12    # notes printed by to_text (to_dict has them all)


@dataclass(frozen=True)
class SourceSurvey:
    """The findings of :func:`survey_source` (see the module docstring)."""

    source: str
    samples: int
    rate: float
    start: str
    timing: str
    time_form: str
    time_notes: tuple[str, ...]
    encoding: str
    delimiter: str
    decimal: str
    preamble: tuple[str, ...]
    columns: tuple[ColumnReport, ...]
    sentinels: tuple[float, ...]
    notes: tuple[str, ...] = ()      # the recording's notes besides the preamble (EDF header lines, annotations)

    def to_dict(self) -> dict:
        return {
            "source": self.source, "samples": self.samples, "rate": self.rate, "start": self.start,
            "timing": self.timing, "time_form": self.time_form, "time_notes": list(self.time_notes),
            "encoding": self.encoding, "delimiter": self.delimiter, "decimal": self.decimal,
            "preamble": list(self.preamble), "notes": list(self.notes), "sentinels": list(self.sentinels),
            "columns": [{"header": c.header, "role": c.role, "name": c.name, "unit": c.unit, "dtype": c.dtype,
                         "resolution": c.resolution, "missing": c.missing, "tokens": list(c.tokens),
                         "sentinels": c.sentinels} for c in self.columns],
        }

    def to_text(self) -> str:
        lines = [f"source     {self.source}", f"samples    {self.samples}",
                 f"rate       {self.rate:g} Hz", f"timing     {self.timing}"]
        if self.start:
            lines.append(f"start      {self.start}")
        if self.time_form:
            lines.append(f"time form  {self.time_form}" + "".join(f"; {n}" for n in self.time_notes))
        if self.encoding:
            lines += [f"encoding   {self.encoding}", f"delimiter  {self.delimiter}",
                      f"decimal    {'comma' if self.decimal == ',' else 'point'}"]
        lines.append(f"preamble   {len(self.preamble)} line(s)")
        lines += [f"  | {p}" for p in self.preamble]
        if self.notes:
            lines.append(f"notes      {len(self.notes)} line(s)")
            lines += [f"  | {n}" for n in self.notes[:SHOWN_NOTES]]
            if len(self.notes) > SHOWN_NOTES:
                lines.append(f"  | ... and {len(self.notes) - SHOWN_NOTES} more")
        if self.sentinels:
            lines.append("sentinels  " + ", ".join(f"{v:g}" for v in self.sentinels))
        rows = [("column", "role", "name", "unit", "dtype", "resolution", "missing")]
        for c in self.columns:
            seen = f" ({', '.join(repr(t) for t in c.tokens)})" if c.tokens else ""
            miss = f"{c.missing}{seen}" if c.missing else ""
            if c.sentinels:
                miss = (miss + "; " if miss else "") + f"{c.sentinels} sentinel(s)"
            rows.append((c.header, c.role, c.name, c.unit, c.dtype, c.resolution, miss))
        widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
        lines.append("")
        lines += ["  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip() for r in rows]
        lines.append("(dry run: nothing was written)")
        return "\n".join(lines)


def survey_source(path, rate: float | None = None, options: ReadOptions | None = None) -> SourceSurvey:
    """Read ``path`` as ``pack`` would and report what was found (writes nothing)."""
    from . import read_detailed
    det: Detected = read_detailed(path, rate, options)
    rec = det.recording
    timing = (det.timing.describe() if det.timing is not None else det.timing_text
              or f"no time column used: taken as regular at the given {rec.rate:g} Hz")
    return SourceSurvey(source=str(path), samples=rec.n_samples, rate=rec.rate,
                        start="" if rec.start is None else rec.start.isoformat(), timing=timing,
                        time_form=det.time_form, time_notes=det.time_notes, encoding=det.encoding,
                        delimiter=det.delimiter, decimal=det.decimal, preamble=det.preamble, columns=det.columns,
                        sentinels=(options or ReadOptions()).sentinels,
                        notes=tuple(n for n in rec.notes if n not in set(det.preamble)))
