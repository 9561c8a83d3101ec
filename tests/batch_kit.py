"""Small logger files and byte-for-byte folder comparisons for the batch tests (tests/test_batch_*.py)."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def write_logger(path: Path, n: int = 600, seed: int = 0, start_hour: int = 6) -> Path:
    """A 1 Hz logger CSV (ISO 8601 times, two channels with units, two decimals); returns the path."""
    rng = np.random.default_rng(seed)
    temp = 20 + np.cumsum(rng.integers(-2, 3, n)) / 100
    rh = 45 + np.cumsum(rng.integers(-3, 4, n)) / 100
    lines = ["time,temp [degC],rh [%RH]"]
    for i in range(n):
        h, m, s = start_hour + i // 3600, (i // 60) % 60, i % 60
        lines.append(f"2031-04-02T{h:02d}:{m:02d}:{s:02d}Z,{temp[i]:.2f},{rh[i]:.2f}")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(lines) + "\n")
    return path


def make_lab(root: Path, count: int = 3) -> list[Path]:
    """``count`` loggers, half of them in a subfolder."""
    return [write_logger(root / ("sub" if i % 2 else "") / f"log{i:02d}.csv", seed=i) for i in range(count)]


def archive_files(out: Path) -> dict[str, bytes]:
    """Every file of every archive below ``out`` (relative path -> bytes), catalog and hidden entries left out."""
    files = {}
    for root, dirs, names in os.walk(out):
        dirs[:] = [d for d in dirs if not d.startswith(".")]
        for name in names:
            p = Path(root) / name
            if ".tsarchive" in p.relative_to(out).as_posix() and not name.startswith("."):
                files[p.relative_to(out).as_posix()] = p.read_bytes()
    return files


def child_env() -> dict:
    """Environment for a child tsarchive that imports this worktree's code."""
    return {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}


PYTHON = sys.executable
