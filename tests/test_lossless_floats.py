"""'lossless' on float32 and float16 channels that are on no decimal grid (the ordered grid, format 8), and the
one-line refusal that float64 off a grid still gets.

References: numpy's .npy writer for the sources (files not written by tsarchive) and numpy's bit views for the
comparison (IEEE 754 interchange encoding: the same bits, NaN payloads and -0.0 included)."""

from __future__ import annotations

import numpy as np
import pytest

import tsarchive
from tsarchive.cli import main


def _vibration(n: int = 40_000) -> np.ndarray:
    """An invented accelerometer on a shaker, logged as float32 after a calibration factor (so on no decimal
    grid): a 120 Hz tone with harmonics, noise, a dropout (NaN) and a clipped burst (+-inf)."""
    rng = np.random.default_rng(21)
    t = np.arange(n) / 5000.0
    a = 2.0 * np.sin(2 * np.pi * 120 * t) + 0.3 * np.sin(2 * np.pi * 360 * t) + rng.normal(0, 0.05, n)
    x = (a * 1.0137).astype(np.float32)
    x[1000:1040] = np.nan
    x[2000] = np.inf
    x[2001] = -np.inf
    x[3000] = -0.0
    x[3001] = np.float32(1e-45)                       # the smallest subnormal
    return x


@pytest.mark.parametrize("dtype", ["float32", "float16"])
def test_lossless_keeps_floats_on_no_grid_bit_for_bit(tmp_path, dtype):
    # failed before format 8: "channel ch0 is not on an integer or decimal grid, so 'lossless' is unavailable"
    x = _vibration().astype(dtype)
    src = tmp_path / "shaker.npy"
    np.save(src, x[:, None])
    out = tmp_path / "shaker.tsarchive"
    assert main(["pack", str(src), "-o", str(out), "--rate", "5000", "--budget", "lossless"]) == 0
    arc = tsarchive.open(out)
    assert arc.channels[0].grid.kind == "ordered" and arc.channels[0].eps == 0
    back = arc.read("ch0")
    assert back.dtype == np.dtype(dtype)
    assert np.array_equal(back.view(f"u{back.itemsize}"), x.view(f"u{x.itemsize}"))
    assert tsarchive.verify(out, against=src).ok


def test_lossless_float32_is_smaller_than_zstd_on_the_raw_floats(tmp_path):
    # zstandard (level 19) on the samples' bytes: what a user would otherwise keep (the bench's "zstd" baseline)
    import zstandard
    x = _vibration()
    x = np.nan_to_num(x, nan=0.0, posinf=0.0, neginf=0.0).astype(np.float32)
    src = tmp_path / "s.npy"
    np.save(src, x[:, None])
    tsarchive.pack(src, tmp_path / "s.tsa", "lossless", rate=5000.0)
    ours = sum(p.stat().st_size for p in (tmp_path / "s.tsa").iterdir())
    assert ours < len(zstandard.ZstdCompressor(level=19).compress(x.tobytes()))


def test_float64_on_no_grid_is_refused_in_one_line(tmp_path, capsys):
    x = _vibration().astype(np.float64) * np.pi          # doubles on no decimal grid
    src = tmp_path / "d.npy"
    np.save(src, x[:, None])
    out = tmp_path / "d.tsarchive"
    assert main(["pack", str(src), "-o", str(out), "--rate", "5000", "--budget", "lossless"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "float64" in err[0] and "budget such as" in err[0]
    assert not out.exists()


def test_the_packing_screen_says_where_lossless_is_offered():
    pytest.importorskip("textual")
    from tsarchive.app.widgets.budget_row import resolution_text
    from tsarchive.recording import ChannelInfo
    assert resolution_text(ChannelInfo("t", decimals=2)) == "step 0.01"
    assert resolution_text(ChannelInfo("eeg", scaled=(0.5, 0.5))) == "step 0.5 (the file's integers)"
    assert "lossless keeps the float32 bits" in resolution_text(ChannelInfo("a", dtype="float32"))
    assert "lossless not offered" in resolution_text(ChannelInfo("d", dtype="float64"))


def test_the_dry_run_says_where_lossless_is_available(tmp_path, capsys):
    src = tmp_path / "shaker.npy"
    np.save(src, _vibration()[:, None])
    assert main(["pack", str(src), "--rate", "5000", "--dry-run"]) == 0
    assert "none found (lossless keeps the float32 bits)" in capsys.readouterr().out
    pyedflib = pytest.importorskip("pyedflib")
    from pathlib import Path
    edf = Path(pyedflib.__file__).parent / "tests" / "data" / "test_generator.edf"   # ships with pyedflib
    assert main(["pack", str(edf), "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert out.count("0.030518 (the file's integers)") == 11
