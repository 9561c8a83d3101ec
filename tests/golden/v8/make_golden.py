"""Make the golden archive of format 8: ``python tests/golden/v8/make_golden.py`` (once; never again after
format 8 has shipped).

Format 8 is format 7 plus two grid kinds: ``scaled`` (``x̂ = (q + offset) * step``: an EDF or BDF reader's
physical values kept bit for bit) and ``ordered`` (lossless float32 and float16 on no other grid: the float's
bits as an order-preserving integer).  The source is an EDF+ file written here with pyedflib (an invented bench
test of a three-channel amplifier on a phantom, 20 s at 256 Hz) and committed as ``source.edf``: an EEG-like
signal (a symmetric range) and an ECG-like one (an uneven range) on 16 bits kept ``lossless`` on their scaled grids, and a skin
temperature on 12 bits (30..42 degC) within 0.05 degC on a step grid.  ``golden8`` holds the
archive and ``expected.npz`` its decoded samples, which ``tests/test_golden_v8.py`` reproduces bit for bit
(and, for the lossless signals, against pyedflib's own reading of ``source.edf``).  ``ordered8`` holds
``floats.npy`` (numpy's writer: an invented shaker accelerometer in float32 after a calibration factor, with a
dropout of NaN, both infinities, -0.0 and a subnormal) packed lossless, with ``expected_ordered.npz``.  What formats 3 to 7 froze
stays frozen by their golden archives; the reading code behind them is the same for format 8.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[2]
SOURCE = HERE / "source.edf"
BUDGET = "EEG_Fz=lossless,ECG=lossless,skin_temp=0.05"
RATE, SECONDS = 256, 20


def write_source() -> None:
    """The invented phantom test: alpha-like 10 Hz waves in noise, a pulse train of beats, a slow warm-up."""
    import pyedflib
    rng = np.random.default_rng(8)
    t = np.arange(RATE * SECONDS) / RATE
    eeg = 30 * np.sin(2 * np.pi * 10 * t) * (1 + 0.3 * np.sin(2 * np.pi * 0.2 * t)) + rng.normal(0, 8, t.size)
    beat = np.exp(-((t % 0.9) - 0.3) ** 2 / 0.0004)
    ecg = 1.2 * beat - 0.1 + rng.normal(0, 0.01, t.size)
    temp = 33.0 + 2.5 * (1 - np.exp(-t / 8.0)) + rng.normal(0, 0.01, t.size)
    heads = [dict(label="EEG_Fz", dimension="uV", sample_frequency=RATE, physical_min=-200.0, physical_max=200.0,
                  digital_min=-32768, digital_max=32767),
             dict(label="ECG", dimension="mV", sample_frequency=RATE, physical_min=-1.0, physical_max=3.0,
                  digital_min=-32768, digital_max=32767),
             dict(label="skin_temp", dimension="degC", sample_frequency=RATE, physical_min=30.0, physical_max=42.0,
                  digital_min=-2048, digital_max=2047)]
    w = pyedflib.EdfWriter(str(SOURCE), len(heads), file_type=pyedflib.FILETYPE_EDFPLUS)
    try:
        w.setSignalHeaders(heads)
        w.setStartdatetime(__import__("datetime").datetime(2026, 3, 2, 9, 30, 0))
        w.setEquipment("phantom_bench_amplifier_B_invented_demo_data")
        w.writeSamples([eeg, ecg, temp])
        w.writeAnnotation(5.0, 1.0, "phantom switched to alpha")
    finally:
        w.close()


def main() -> None:
    sys.path.insert(0, str(ROOT))          # this worktree's tsarchive, whatever the install points at
    import tsarchive
    from tsarchive.store.binding import read_manifest
    assert Path(tsarchive.__file__).parent == ROOT / "tsarchive", tsarchive.__file__

    if not SOURCE.exists():
        write_source()
    out = HERE / "golden8"
    shutil.rmtree(out, ignore_errors=True)
    tsarchive.pack(SOURCE, out, BUDGET, code_size=0, segment=0)
    arc = tsarchive.open(out)
    stored = read_manifest(out)
    kinds = {c["name"]: c["grid"]["kind"] for c in stored["channels"]}
    frozen = {   # what this archive must freeze -> whether it does
        "format 8": stored["format_version"] == 8,
        "two scaled grids and a step grid": kinds == {"EEG_Fz": "scaled", "ECG": "scaled", "skin_temp": "step"},
        "a scaled grid with offset 0.5 and one without": sorted(
            c["grid"]["offset"] == 0.5 for c in stored["channels"] if c["grid"]["kind"] == "scaled") == [False, True],
    }
    missing = [what for what, ok in frozen.items() if not ok]
    assert not missing, f"the golden archive does not freeze: {missing}"
    x = {c.name: arc.read(c.name) for c in arc.channels}
    np.savez_compressed(HERE / "expected.npz", **x)
    print(f"wrote {out} ({arc.archive_bytes} bytes) and expected.npz")
    ordered()


def ordered() -> None:
    """``ordered8``: a float32 channel kept lossless on the ordered grid, and a float16 one."""
    import tsarchive
    src = HERE / "floats.npy"
    if not src.exists():
        rng = np.random.default_rng(21)
        t = np.arange(6000) / 5000.0
        a = (2.0 * np.sin(2 * np.pi * 120 * t) + rng.normal(0, 0.05, t.size)) * 1.0137
        x = a.astype(np.float32)
        x[1000:1040] = np.nan
        x[2000], x[2001], x[3000], x[3001] = np.inf, -np.inf, -0.0, np.float32(1e-45)
        np.save(src, x[:, None])
    out = HERE / "ordered8"
    shutil.rmtree(out, ignore_errors=True)
    tsarchive.pack(src, out, "lossless", rate=5000.0, code_size=0, segment=0)
    arc = tsarchive.open(out)
    assert [c.grid.kind for c in arc.channels] == ["ordered"], "the archive does not freeze the ordered grid"
    np.savez_compressed(HERE / "expected_ordered.npz", **{c.name: arc.read(c.name) for c in arc.channels})
    print(f"wrote {out} ({arc.archive_bytes} bytes) and expected_ordered.npz")


if __name__ == "__main__":
    main()
