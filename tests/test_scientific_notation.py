"""A logger that writes scientific notation (an X-ray flux over four decades, a vacuum gauge) is on a decimal
grid too, so 'lossless' keeps it bit for bit.

Reference: Python's float() of the text (correctly rounded decimal-to-binary conversion, as any conforming
parser gives: IEEE 754 section 5.12) is what the archive must give back, compared bitwise with numpy."""

from __future__ import annotations

import numpy as np
import pytest

import tsarchive


def _flux(n: int = 6000) -> list[str]:
    rng = np.random.default_rng(7)
    t = np.arange(n)
    log10 = -6.5 + 0.3 * np.sin(2 * np.pi * t / n) + np.cumsum(rng.normal(0, 0.002, n))
    for start in rng.integers(0, n, 4):                       # flares, up to two decades above background
        log10 = np.maximum(log10, -6.5 + 2.0 * np.exp(-np.maximum(t - start, 0) / 300.0) * (t >= start))
    return [f"{v:.3e}" for v in 10.0 ** log10 * (1 + rng.normal(0, 0.01, n))]


@pytest.mark.parametrize("upper", [False, True])
def test_lossless_keeps_scientific_notation_bit_for_bit(tmp_path, upper):
    # failed before: no decimal grid beyond 6 decimals was looked for, so 'lossless' was refused
    # ("channel flux is not on an integer or decimal grid")
    text = [s.upper() if upper else s for s in _flux()]
    src = tmp_path / "flux.csv"
    src.write_text("seconds,flux_w_m2\n" + "".join(f"{2 * i},{v}\n" for i, v in enumerate(text)))
    out = tmp_path / "flux.tsarchive"
    tsarchive.pack(src, out, "lossless")
    back = tsarchive.open(out).read("flux_w_m2")
    want = np.array([float(v) for v in text])
    assert back.dtype == np.float64
    assert np.array_equal(back.view(np.uint64), want.view(np.uint64))
    assert tsarchive.open(out).channels[0].eps == 0


def test_a_percentage_budget_on_scientific_notation_stays_within_it(tmp_path):
    text = _flux()
    src = tmp_path / "flux.csv"
    src.write_text("seconds,flux_w_m2\n" + "".join(f"{2 * i},{v}\n" for i, v in enumerate(text)))
    tsarchive.pack(src, tmp_path / "a", "0.01%")
    x = np.array([float(v) for v in text])
    back = tsarchive.open(tmp_path / "a").read("flux_w_m2")
    assert np.max(np.abs(back - x)) <= 1e-4 * (x.max() - x.min())
