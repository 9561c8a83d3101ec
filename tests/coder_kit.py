"""Recordings whose channels the packer codes with each residual coder, for tests and for the lead's
golden archive (``pack_with_coders(out)`` packs one with a range-coded, an adaptive and a fitted
adaptive channel; the choice is the packer's own, made on exact byte counts)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

import tsarchive

RATE = 100.0
BUDGET = "1%"


def slow_walk(n: int, seed: int = 3) -> np.ndarray:
    """A slow drifting signal with bursts: its residuals come in runs, which the adaptive coder's
    contexts see and an order-0 table does not (synthetic test data, not a reference)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    noise = rng.standard_normal(n) * np.where((t // 2000) % 3 == 0, 3.0, 0.2)
    return 20.0 + np.cumsum(noise) * 0.05 + 5.0 * np.sin(2 * np.pi * t / 5000.0)


def coder_ids(archive: Path) -> list[str | None]:
    """Each channel's residual coder id in the manifest (None: range coded under its tables)."""
    from tsarchive.store.binding import read_manifest
    m = read_manifest(Path(archive))
    return [c.get("coder", {}).get("id") if "coder" in c else None for c in m["channels"]]


def fitted(archive: Path) -> list[bool]:
    """Whether each channel's adaptive coder starts from a fitted initial state."""
    from tsarchive.store.binding import read_manifest
    m = read_manifest(Path(archive))
    return [bool(c.get("coder", {}).get("init")) for c in m["channels"]]


def recording(n: int = 40_000) -> np.ndarray:
    """Two channels: white noise of a few steps (the range coder's tables are as good as it gets, and the
    adaptive coder pays its learning) and the slow walk (adaptive wins)."""
    rng = np.random.default_rng(5)
    return np.stack([rng.standard_normal(n) * 40.0, slow_walk(n)], axis=1).astype(np.float32)


def pack_with_coders(out: Path, n: int = 40_000, **kw) -> Path:
    """Pack :func:`recording` of ``n`` samples per channel (``n`` >= 2**17: the fitted state is tried too)
    into ``out``; returns the archive.  ``kw`` goes to :func:`tsarchive.pack`."""
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    src = out.with_suffix(".npy")
    np.save(src, recording(n))
    tsarchive.pack(src, out, BUDGET, rate=RATE, window=kw.pop("window", 1024), **{"code_size": 0, **kw})
    return out
