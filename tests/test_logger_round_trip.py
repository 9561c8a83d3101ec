"""A logger file as a lab has it, through pack -> unpack, compared column by column with the source.

The file is written byte for byte here, as a chamber logger writes it: cp1252 (a degree sign in the
header), semicolons, decimal commas, a preamble of two station lines and a blank line, day-first
times, a status column and a 60-row gap in the clock.  The reference for each comparison is outside
tsarchive: Python's ``datetime.strptime`` for the times, ``decimal.Decimal`` for the values, the
``csv`` module for the exported text.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from decimal import Decimal

import pyarrow.parquet as pq
import pytest

from tsarchive.cli import main

N, GAP_AT, GAP_ROWS = 200, 100, 60
T0 = dt.datetime(2024, 3, 5, 14, 0, 0)
PREAMBLE = ["Logger: chamber 3, serial 0815", "Site; Bay B", ""]


def _source_rows():
    for i in range(N):
        if GAP_AT <= i < GAP_AT + GAP_ROWS:
            continue
        temp = Decimal(21) + Decimal(i % 7) / 100
        hum = Decimal(45) + Decimal(i % 5) / 10
        yield T0 + dt.timedelta(seconds=i), temp, hum, ("OK" if i % 50 else "Tür offen")


def _write_source(path):
    lines = PREAMBLE + ["Datum/Zeit;Temperatur (°C);Feuchte (%);Status"]
    for t, temp, hum, status in _source_rows():
        comma = lambda d, k: f"{d:.{k}f}".replace(".", ",")   # noqa: E731 - decimal comma
        lines.append(f"{t:%d.%m.%Y %H:%M:%S};{comma(temp, 2)};{comma(hum, 1)};{status}")
    path.write_bytes(("\r\n".join(lines) + "\r\n").encode("cp1252"))


def _parse_source(path):
    """The source read back with the standard library only (cp1252, ';', decimal comma, dd.mm.yyyy)."""
    text = path.read_bytes().decode("cp1252").splitlines()
    rows = list(csv.reader(text[len(PREAMBLE) + 1:], delimiter=";"))
    return [(dt.datetime.strptime(r[0], "%d.%m.%Y %H:%M:%S"), Decimal(r[1].replace(",", ".")),
             Decimal(r[2].replace(",", ".")), r[3]) for r in rows]


@pytest.mark.parametrize("budget, eps", [("0.05", Decimal("0.05")), ("lossless", Decimal(0))])
def test_a_chamber_log_comes_back_column_by_column(tmp_path, budget, eps, capsys):
    src = tmp_path / "chamber.csv"
    _write_source(src)
    source = _parse_source(src)
    assert len(source) == N - GAP_ROWS and source == list(_source_rows())   # the fixture is what it says

    arc = tmp_path / "chamber.arc"
    assert main(["pack", str(src), "-o", str(arc), "--budget", budget]) == 0
    assert main(["verify", str(arc), "--against", str(src)]) == 0
    out = tmp_path / "back.csv"
    assert main(["unpack", str(arc), "-o", str(out)]) == 0
    capsys.readouterr()

    lines = out.read_text(encoding="utf-8").splitlines()
    body = [ln for ln in lines if not ln.startswith("#")]              # the reconstruction mark comes first
    assert body[:2] == PREAMBLE[:2]                                     # the station lines, as logged
    rows = list(csv.reader(io.StringIO("\n".join(body[2:]))))
    assert rows[0] == ["Datum/Zeit", "Temperatur [°C]", "Feuchte [%]", "Status"]
    back = rows[1:]
    assert len(back) == len(source)
    for (t, temp, hum, status), r in zip(source, back):
        assert dt.datetime.fromisoformat(r[0]) == t                    # the same wall-clock time, gap and all
        assert dt.datetime.fromisoformat(r[0]).tzinfo is None          # naive stays naive
        assert abs(Decimal(r[1]) - temp) <= eps and abs(Decimal(r[2]) - hum) <= eps
        assert r[3] == status

    # the same through Parquet: timestamps as nanoseconds without a zone, the text column intact
    pq_out = tmp_path / "back.parquet"
    assert main(["unpack", str(arc), "-o", str(pq_out)]) == 0
    table = pq.read_table(pq_out)
    assert table.schema.field("Datum/Zeit").type.tz is None
    assert table["Datum/Zeit"].to_pylist() == [t for t, *_ in source]
    assert table["Status"].to_pylist() == [s for *_, s in source]


def test_a_text_column_goes_back_where_it_stood(tmp_path, capsys):
    # A status column between two channels comes back between them (CSV and Parquet), not after them.
    src = tmp_path / "mid.csv"
    src.write_text("time,a,status,b\n" + "".join(f"{i},{i * 0.5},{'ok' if i % 3 else 'hold'},{i}\n"
                                                  for i in range(50)))
    arc = tmp_path / "mid.arc"
    assert main(["pack", str(src), "-o", str(arc), "--budget", "lossless"]) == 0
    for out in (tmp_path / "back.csv", tmp_path / "back.parquet"):
        assert main(["unpack", str(arc), "-o", str(out)]) == 0
    capsys.readouterr()
    header = next(ln for ln in (tmp_path / "back.csv").read_text().splitlines() if not ln.startswith("#"))
    assert header.split(",")[1:] == ["a", "status", "b"]
    assert pq.read_table(tmp_path / "back.parquet").column_names[1:] == ["a", "status", "b"]
