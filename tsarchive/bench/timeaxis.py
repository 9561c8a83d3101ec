"""Bytes the archive spends on a 1-hour time axis: ``python -m tsarchive.bench.timeaxis``.

For each rate and clock, the manifest's ``time`` entry (compact JSON) and
``time.parquet`` as packing writes them, beside the raw int64 ns (8 bytes a
sample) a lossless Parquet of the time column would start from.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import numpy as np

from ..recording import ChannelInfo, Recording, TimeAxis
from ..store.sidecar import stage_sidecar

T0 = int(np.datetime64("2026-12-02T08:00:00", "ns").astype(np.int64))


def clocks(rate: float, seed: int = 0) -> dict[str, np.ndarray]:
    """One hour of timestamps (int64 ns) from a few kinds of logger clock."""
    rng = np.random.default_rng(seed)
    n, step = int(3600 * rate), int(round(1e9 / rate))
    k = np.arange(n, dtype=np.int64)
    gapped = k.copy()
    gapped[n // 3:] += int(60 * rate)
    return {
        "regular": T0 + k * step,
        "one 60 s gap": T0 + gapped * step,
        "jitter ±50 µs (ns clock)": T0 + k * step + rng.integers(-50_000, 50_001, n),
        "jitter σ 5 µs (µs clock)": T0 + k * step + np.round(rng.normal(0, 5000, n), -3).astype(np.int64),
        "drift 20 ppm (µs clock)": T0 + np.round(k * (step / 1000) * (1 + 20e-6)).astype(np.int64) * 1000,
        "1 % slips of ±1 ms (ms clock)": T0 + k * step + (rng.random(n) < 0.01) * rng.choice([-1, 1], n) * 1_000_000,
    }


def measure(rate: float, name: str, values: np.ndarray) -> tuple[int, int]:
    """(manifest entry bytes, time.parquet bytes) for one axis."""
    rec = Recording.from_columns([np.zeros(len(values), np.float32)], rate=rate, channels=[ChannelInfo("x")],
                                 time=TimeAxis("datetime", values))
    with tempfile.TemporaryDirectory() as d:
        fields = stage_sidecar(Path(d), rec)
        member = sum(p.stat().st_size for p in Path(d).iterdir())
    return len(json.dumps(fields["time"], separators=(",", ":"))), member


def main() -> None:
    print(f"{'rate':>7} | {'clock':30} | {'manifest B':>10} | {'time.parquet B':>14} | {'raw int64 B':>11} | bits/sample")
    for rate in (1.0, 1000.0):
        for name, values in clocks(rate).items():
            entry, member = measure(rate, name, values)
            print(f"{rate:>5g} Hz | {name:30} | {entry:>10} | {member:>14} | {8 * len(values):>11} | "
                  f"{8 * (entry + member) / len(values):.3f}")


if __name__ == "__main__":
    main()
