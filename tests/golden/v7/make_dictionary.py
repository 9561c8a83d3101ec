"""Make format 7's manifest dictionary, ``tsarchive/store/manifest7.zdict``: ``python tests/golden/v7/make_dictionary.py``
(once; never again after format 7 has shipped: every format-7 manifest is compressed with it, and
``tests/test_store_inside.py`` pins its SHA-256).

A zstd raw-content dictionary is plain text the compressor may copy from (RFC 8878, section 5: "Raw
content" dictionaries); the nearer its end, the cheaper a copy.  This one is the manifests, as compact
JSON, of archives packed from invented recordings of the kinds a lab logs (none of them is measured by
the bench or the tests: the sample streams and the bench's real sets are measured with it): a rig log with
times, notes and a text column, a lossless table at logged decimals, integer counts, a six-axis motion
log, a slow series with a gap, long repeating cycles (the classic coder in blocks), one with a learned
model, and, last, short one- and two-channel runs, the shape most archives of short test runs have.
Their digests are random to a compressor, so they are left out.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[2]
OUT = ROOT / "tsarchive" / "store" / "manifest7.zdict"
V6 = ROOT / "tsarchive" / "store" / "manifest6.zdict"


def _text(arc: Path) -> str:
    from tsarchive.store.binding import read_manifest

    m = read_manifest(arc)
    m["source"]["sha256"] = ""
    m["data"]["sha256"] = ""
    return json.dumps(m, separators=(",", ":"))


def _recordings(t: Path) -> list[tuple[Path, str, float | None, dict]]:
    """(source, budget, rate, extra pack arguments), least like a short test run first."""
    rng = np.random.default_rng(7)
    out = []
    i = np.arange(400_000)
    cyc = np.round(50 * np.sin(2 * np.pi * i / 1200) + 20 * np.sin(2 * np.pi * i / 173))
    np.save(t / "model.npy", (cyc + rng.normal(0, 1.0, i.size)).astype(np.float32)[:, None])
    out.append((t / "model.npy", "1%", 500.0, {"train_seconds": 20.0}))
    power = np.tile(np.r_[np.zeros(700), np.full(300, 1500.0), np.full(200, 40.0)], 120)[:140_000]
    np.save(t / "cycles.npy", (power + np.round(rng.normal(0, 2, power.size))).astype(np.float32))
    out.append((t / "cycles.npy", "0.01%", 0.1, {}))
    counts = np.cumsum(rng.integers(-40, 41, 60_000)).astype(np.int32)
    np.save(t / "counts.npy", counts)
    out.append((t / "counts.npy", "0.1%", 100.0, {}))
    k = np.arange(4000)
    motion = np.stack([np.sin(k / (7 + j)) * (1 + j) + rng.normal(0, 0.05, k.size) for j in range(6)], axis=1)
    np.save(t / "motion.npy", motion.astype(np.float32))
    out.append((t / "motion.npy", "0.1%", 10.0, {}))
    day = np.arange(0, 3 * 86400, 900)
    day = day[(day < 100_000) | (day > 130_000)]                       # a logger gap
    lines = ["time,temperature_C,humidity_pct"] + [
        f"2031-05-{1 + s // 86400:02d}T{s % 86400 // 3600:02d}:{s % 3600 // 60:02d}:00,"
        f"{21 + 3 * np.sin(s / 13751):.2f},{55 + 8 * np.cos(s / 13751):.1f}" for s in day]
    (t / "chamber.csv").write_text("\n".join(lines) + "\n")
    out.append((t / "chamber.csv", "lossless", None, {}))
    out.append((ROOT / "tests" / "golden" / "v5" / "source.csv", "0.5", None, {}))
    j = np.arange(20_000)
    two = np.stack([20 + 3 * np.sin(j / 900) + rng.normal(0, 0.05, j.size),
                    np.round(1000 * np.sin(j / 37) + rng.normal(0, 20, j.size))], axis=1).astype(np.float32)
    np.save(t / "two.npy", two)
    out.append((t / "two.npy", "1%", 10.0, {}))
    np.save(t / "run.npy", (np.sin(j[:3000] / 11) + rng.normal(0, 0.02, 3000)).astype(np.float32))
    out.append((t / "run.npy", "1%", 100.0, {}))
    return out


def main() -> None:
    import sys
    sys.path.insert(0, str(ROOT))          # this worktree's tsarchive, whatever the install points at
    import tsarchive
    assert Path(tsarchive.__file__).parent == ROOT / "tsarchive", tsarchive.__file__

    if not OUT.exists():                   # the archives below are written with it: start from format 6's
        OUT.write_bytes(V6.read_bytes())
    texts = []
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        for src, budget, rate, extra in _recordings(t):
            tsarchive.pack(src, t / "a.tsarchive", budget, rate=rate, force=True, **extra)
            texts.append(_text(t / "a.tsarchive"))
            print(f"{src.name}: {len(texts[-1])} characters")
    OUT.write_bytes("\n".join(texts).encode("utf-8"))
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
