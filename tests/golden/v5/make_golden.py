"""Regenerate the format-5 golden archive (a deliberate act: only when the format changes).

    python tests/golden/v5/make_golden.py

Writes ``source.csv`` (invented demo data: a fictional bench log from rig 2
of an invented test lab), packs it into ``golden5`` with a small
autoencoder, and stores the decoded samples in ``expected.npz``.
``tests/test_golden_v5.py`` decodes the committed archive on every run and
must reproduce ``expected.npz`` bit for bit.

Besides every predictor, several LPC sets, a NaN held verbatim and the
integer decoder (as in format 3), the source freezes what format 4 added:
naive ISO times with a gap and a jittery stretch (``time.parquet``), a
preamble (notes), a text column (``extra.parquet``), a ``-9999`` sentinel
(grid ``verbatim``), an integer channel beyond 2**53 with an empty cell
(grid ``origin`` and ``missing``), and the manifest's binding.

Format 5 adds the lean container (``store/lean.py``, ``store/compact.py``):
the ``key``/``facts`` window rows in full per-channel row groups and a row
group shared by the channels' last windows (8500 rows in windows of 32: 264
windows a channel), the lean ``exceptions.parquet`` and the compact manifest
(``channel_defaults``, ε in the grid only).
"""

from __future__ import annotations

import json
import shutil
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
N, RATE = 8500, 50.0
GAP = range(1500, 1560)          # rows the logger lost
JITTER_FROM = 2200               # from here on every 7th time is late by 3 ms


def write_source(path: Path) -> None:
    rng = np.random.default_rng(20261202)
    t = np.arange(N) / RATE
    # a steady vibration, then a sweep from 0.5 to 12 Hz (so that the channel needs several LPC sets)
    sweep = np.sin(2 * np.pi * (0.5 * (t - 30) + (12 - 0.5) * (t - 30) ** 2 / 60))
    strain = np.where(t < 30, 120.0 * np.sin(2 * np.pi * 0.7 * t) + 15.0 * np.sin(2 * np.pi * 4.1 * t),
                      150.0 * sweep) + rng.normal(0, 0.3, N)
    temp = np.round(23.0 + 0.002 * t + 0.05 * rng.standard_normal(N), 2)
    counts = np.cumsum(rng.integers(-3, 4, N)) + 500
    big = (1 << 60) + np.cumsum(rng.integers(0, 40, N)).astype(np.int64)
    t0 = datetime(2031, 4, 2, 8, 0, 0)
    lines = ["# Rig 2 bench log (invented demo data)", "# operator shift B",
             "time,strain [ue],temp [degC],counts,serial,status"]
    for i in range(N):
        if i in GAP:
            continue
        late = timedelta(milliseconds=3) if i >= JITTER_FROM and i % 7 == 0 else timedelta(0)
        stamp = (t0 + timedelta(seconds=i / RATE) + late).isoformat(timespec="milliseconds")
        s = "nan" if i == 1234 else repr(float(strain[i]))
        tc = "-9999" if i in (400, 401) else f"{temp[i]:.2f}"
        serial = "" if i == 2500 else str(int(big[i]))
        status = "door open" if 900 <= i < 910 else ("" if i % 500 == 3 else "ok")
        lines.append(f"{stamp},{s},{tc},{counts[i]},{serial},{status}")
    path.write_text("\n".join(lines) + "\n")


def main() -> None:
    import tsarchive
    from tsarchive.ingest import ReadOptions

    src = HERE / "source.csv"
    write_source(src)
    out = HERE / "golden5"
    if out.exists():
        shutil.rmtree(out)
    tsarchive.pack(src, out, "strain=0.5,temp=lossless,counts=lossless,serial=3", window=32, code_size=4,
                   train_seconds=5, seed=2, read_options=ReadOptions.build(missing="-9999"))
    arc = tsarchive.open(out)
    assert len(arc.channel("strain").lpc) > 1, "the golden archive must freeze several LPC sets"
    used = {m for c in arc.channels for m, k in c.modes if k}
    assert used == {"prev", "prev2", "ae", "ae+prev", "lpc"}, f"every predictor must be frozen, got {used}; try a seed"
    members = set(arc.manifest["members"])
    assert {"time.parquet", "extra.parquet", "exceptions.parquet", "model.parquet"} <= members, members
    import pyarrow.parquet as pq
    meta = pq.ParquetFile(out / "windows.parquet").metadata
    spans = [(meta.row_group(g).column(0).statistics.min >> 32, meta.row_group(g).column(0).statistics.max >> 32)
             for g in range(meta.num_row_groups)]
    assert any(a == b for a, b in spans) and any(a < b for a, b in spans), f"row groups {spans}"
    assert "channel_defaults" in json.loads((out / "manifest.json").read_text())
    np.savez(HERE / "expected.npz", **{c.name: np.ma.getdata(arc.read(c.name)) for c in arc.channels},
             **{f"{c.name}.mask": np.ma.getmaskarray(arc.read(c.name)) for c in arc.channels},
             times=arc.times().values)
    print(f"wrote {out} ({arc.archive_bytes} bytes) and expected.npz")


if __name__ == "__main__":
    main()
