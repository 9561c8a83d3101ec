"""The README's DuckDB and polars snippets, run exactly as written on a freshly packed ``run.tsarchive``,
and what they find checked against pyarrow's own reading of the same Parquet file."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

import tsarchive

README = Path(__file__).resolve().parents[1] / "README.md"


def _snippets() -> list[str]:
    text = README.read_text(encoding="utf-8")
    part = text.split("<!-- readme-snippets: begin", 1)[1].split("<!-- readme-snippets: end", 1)[0]
    return re.findall(r"```python\n(.*?)```", part, flags=re.S)


def test_the_snippets_run_and_agree_with_the_archive(tmp_path, monkeypatch):
    rng = np.random.default_rng(11)
    n = 9000
    temp = 21.0 + np.cumsum(rng.standard_normal(n)) * 0.02
    temp[6000] += 3.0                                     # one window stands out
    rh = 40.0 + np.sin(np.arange(n) / 300.0)
    rows = "\n".join(f"{k},{float(a)!r},{float(b)!r}" for k, (a, b) in enumerate(zip(temp, rh)))
    (tmp_path / "run.csv").write_text("t [s],temp [degC],rh [%]\n" + rows + "\n", encoding="utf-8")
    tsarchive.pack(tmp_path / "run.csv", tmp_path / "run.tsarchive", "0.05", window=1024)
    monkeypatch.chdir(tmp_path)
    blocks = _snippets()
    assert len(blocks) == 1
    ns: dict = {}
    for code in blocks:
        exec(compile(code, str(README), "exec"), ns)      # the README's text, as a reader would paste it
    arc = tsarchive.open(tmp_path / "run.tsarchive")
    assert ns["names"] == ["temp", "rh"]
    for c in arc.channels:                                # the reader's own window table, another code path
        t = arc.windows(c.name)
        assert ns["worst_share"][c.name] == pytest.approx(max(t.worst_error) / c.eps, abs=1 / 250)
    t = arc.windows("temp")
    assert ns["outliers"].tolist() == np.argsort(-t.score, kind="stable")[:5].tolist()
    assert ns["outliers"][0] == 6000 // 1024              # the spiked window ranks first
