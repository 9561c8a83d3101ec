"""Regenerate the golden archive (a deliberate act: only when the format changes).

    python tests/golden/make_golden.py

Writes ``source.csv`` (invented demo data: a fictional bench log), packs it
into ``golden.tsa`` with a small autoencoder, and stores the decoded samples
in ``expected.npz``.  ``tests/test_golden.py`` decodes the committed archive
on every run and must reproduce ``expected.npz`` bit for bit.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def write_source(path: Path) -> None:
    rng = np.random.default_rng(20261202)
    n, rate = 3000, 50.0
    t = np.arange(n) / rate
    # a steady vibration, then a sweep from 0.5 to 12 Hz (so that the channel needs several LPC sets)
    sweep = np.sin(2 * np.pi * (0.5 * (t - 30) + (12 - 0.5) * (t - 30) ** 2 / 60))
    strain = np.where(t < 30, 120.0 * np.sin(2 * np.pi * 0.7 * t) + 15.0 * np.sin(2 * np.pi * 4.1 * t),
                      150.0 * sweep) + rng.normal(0, 0.3, n)
    strain[1234] = np.nan
    temp = np.round(23.0 + 0.002 * t + 0.05 * rng.standard_normal(n), 2)
    counts = np.cumsum(rng.integers(-3, 4, n)) + 500
    lines = ["time [s],strain [ue],temp [degC],counts"]
    for i in range(n):
        s = "nan" if np.isnan(strain[i]) else repr(float(strain[i]))
        lines.append(f"{float(t[i])!r},{s},{temp[i]:.2f},{counts[i]}")
    path.write_text("\n".join(lines) + "\n")


def main() -> None:
    import tsarchive

    src = HERE / "source.csv"
    write_source(src)
    out = HERE / "golden.tsa"
    if out.exists():
        shutil.rmtree(out)
    tsarchive.pack(src, out, "strain=0.5,temp=lossless,counts=lossless", window=64, code_size=4,
                   train_seconds=5, seed=2)
    arc = tsarchive.open(out)
    assert len(arc.channel("strain").lpc) > 1, "the golden archive must freeze several LPC sets"
    used = {m for c in arc.channels for m, k in c.modes if k}
    assert used == {"prev", "prev2", "ae", "ae+prev", "lpc"}, f"every predictor must be frozen, got {used}; try a seed"
    np.savez(HERE / "expected.npz", **{c.name: arc.read(c.name) for c in arc.channels})
    print(f"wrote {out} ({arc.archive_bytes} bytes) and expected.npz")


if __name__ == "__main__":
    main()
