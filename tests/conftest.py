"""Shared fixtures: small recordings and archives packed once per session."""

from __future__ import annotations

import os

import numpy as np
import pytest

os.environ.setdefault("OMP_NUM_THREADS", "2")

from hypothesis import settings  # noqa: E402

settings.register_profile("ci", max_examples=40, deadline=None)
settings.register_profile("dev", max_examples=40, deadline=None)
settings.load_profile("ci" if os.environ.get("CI") else "dev")


def make_signal(n: int = 6000, rate: float = 200.0, seed: int = 0) -> np.ndarray:
    """Two synthetic channels (demo-style data for tests; not a reference)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    a = np.sin(2 * np.pi * 3.0 * t) + 0.3 * np.sin(2 * np.pi * 11.0 * t + 0.4) + 0.02 * rng.standard_normal(n)
    b = 20.0 + np.cumsum(rng.standard_normal(n)) * 0.01
    return np.stack([a, b], axis=1)


@pytest.fixture(scope="session")
def small_npy(tmp_path_factory):
    p = tmp_path_factory.mktemp("src") / "rig.npy"
    np.save(p, make_signal().astype(np.float32))
    return p


@pytest.fixture(scope="session")
def small_archive(tmp_path_factory, small_npy):
    import tsarchive
    out = tmp_path_factory.mktemp("arc") / "rig.tsa"
    tsarchive.pack(small_npy, out, "0.5%", rate=200.0, window=64, code_size=4, train_seconds=5)
    return out
