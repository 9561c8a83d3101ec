"""Format 8 (format 7 plus the ``scaled`` grid) frozen: ``tests/golden/v8/golden8`` is decoded bit for bit on
every run.

A failure here means the archive format changed.  Changing it is deliberate:
a new FORMAT_VERSION, this archive still read, a new golden archive beside
it (DEVELOPERS.md, "Changing the format") and a CHANGELOG entry.
"""

from pathlib import Path

import golden_checks
import numpy as np
import pytest

import tsarchive
from tsarchive.store.binding import read_manifest

HERE = Path(__file__).resolve().parent / "golden" / "v8"
ARC = HERE / "golden8"
SOURCE = HERE / "source.edf"          # written by pyedflib (make_golden.py), not by tsarchive


def test_golden_decodes_bit_for_bit_and_verifies():
    arc = golden_checks.decodes_as_expected(ARC, HERE / "expected.npz")
    assert [c.name for c in arc.channels] == ["EEG_Fz", "ECG", "skin_temp"]
    assert arc.format_version == 8


def test_golden_manifest_holds_two_scaled_grids_and_a_step_grid():
    stored = read_manifest(ARC)
    assert stored["format_version"] == 8
    grids = {c["name"]: c["grid"] for c in stored["channels"]}
    assert grids["EEG_Fz"]["kind"] == grids["ECG"]["kind"] == "scaled" and grids["skin_temp"]["kind"] == "step"
    # the EDF header's arithmetic (EDFlib, as pyedflib reads it): bitvalue = (pmax - pmin) / (dmax - dmin),
    # offset = pmax / bitvalue - dmax; -200..200 uV and -1..3 mV on -32768..32767
    for name, (pmin, pmax) in {"EEG_Fz": (-200.0, 200.0), "ECG": (-1.0, 3.0)}.items():
        bitvalue = (pmax - pmin) / 65535.0
        assert grids[name]["step"] == bitvalue and grids[name]["offset"] == pmax / bitvalue - 32767.0


def test_golden_lossless_signals_are_what_pyedflib_reads_from_the_source():
    pyedflib = pytest.importorskip("pyedflib")
    arc = tsarchive.open(ARC)
    f = pyedflib.EdfReader(str(SOURCE))
    try:
        for j, name in enumerate(["EEG_Fz", "ECG"]):
            assert np.array_equal(arc.read(name).view(np.uint64), f.readSignal(j).view(np.uint64))
        temp = f.readSignal(2)
    finally:
        f.close()
    assert np.max(np.abs(arc.read("skin_temp") - temp)) <= 0.05


def test_ordered_golden_decodes_bit_for_bit_and_is_the_float32_source():
    # ordered8: floats.npy (numpy's writer) kept lossless on the ordered grid; compared on the raw bits with
    # the source as numpy reads it (NaN payloads, infinities, -0.0 and a subnormal included)
    arc = golden_checks.decodes_as_expected(HERE / "ordered8", HERE / "expected_ordered.npz")
    assert [c.grid.kind for c in arc.channels] == ["ordered"] and arc.format_version == 8
    x = np.load(HERE / "floats.npy")[:, 0]
    assert x.dtype == np.float32 and np.isnan(x).sum() == 40 and np.isinf(x).sum() == 2
    assert np.array_equal(arc.read("ch0").view(np.uint32), x.view(np.uint32))
