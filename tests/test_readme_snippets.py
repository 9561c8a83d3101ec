"""The README's DuckDB and polars snippets, run exactly as written on a freshly packed ``run.tsarchive``,
and what they find checked against pyarrow's own reading of the same Parquet file."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

import tsarchive

pytest.importorskip("duckdb")
pytest.importorskip("polars")

README = Path(__file__).resolve().parents[1] / "README.md"


def _snippets() -> list[str]:
    text = README.read_text(encoding="utf-8")
    part = text.split("<!-- readme-snippets: begin", 1)[1].split("<!-- readme-snippets: end", 1)[0]
    return re.findall(r"```python\n(.*?)```", part, flags=re.S)


def test_the_snippets_run_and_agree_with_pyarrow(tmp_path, monkeypatch):
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
    assert len(blocks) == 2
    ns: dict = {}
    for code in blocks:
        exec(compile(code, str(README), "exec"), ns)      # the README's text, as a reader would paste it
    t = pq.read_table("run.tsarchive/windows.parquet", columns=["key", "facts", "score"])
    key, facts = t["key"].to_numpy(), t["facts"].to_numpy()    # the bit layout of DEVELOPERS.md, format 5
    ch, win, worst, mode = key >> 32, key & 0xFFFFFFFF, (facts >> 32) & 0xFF, facts >> 56
    score = t["score"].to_numpy()
    assert ns["names"] == ["temp", "rh"]
    assert [r[0] for r in ns["per_channel"]] == [0, 1]
    for name, count, share, top in ns["per_channel"]:
        m = ch == name
        assert count == m.sum() and share == worst[m].max() / 250.0 and top == pytest.approx(score[m].max())
    m = ch == 0                                           # temp
    order = np.lexsort((win[m], -score[m].astype(np.float64)))[:5]   # score descending, then window
    assert [r[0] for r in ns["outliers"]] == win[m][order].tolist()
    assert [r[1] for r in ns["outliers"]] == (win[m][order] * 1024).tolist()
    assert ns["outliers"][0][1] <= 6000 < ns["outliers"][0][1] + 1024  # the spiked window ranks first
    pairs = sorted(set(zip(ch.tolist(), mode.tolist())))
    got = ns["predictors"]
    assert list(zip(got["channel"].to_list(), got["mode"].to_list())) == pairs
    assert got["len"].to_list() == [int(((ch == c) & (mode == md)).sum()) for c, md in pairs]
    near = ns["near_budget"]
    assert near.height == int((worst >= 240).sum())
