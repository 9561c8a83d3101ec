"""WAV and EDF sources, checked against reference files that ship in registry packages and their own readers."""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np
import pytest

from tsarchive.cli import main
from tsarchive.errors import BadInput
from tsarchive.ingest import ReadOptions, read_recording

scipy_io = pytest.importorskip("scipy.io")
wavfile = pytest.importorskip("scipy.io.wavfile")
SCIPY_WAVS = Path(scipy_io.__file__).parent / "tests" / "data"


# --- WAV -----------------------------------------------------------------------------------------

# scipy's own test WAV files (scipy/io/tests/data), read by scipy.io.wavfile as the reference.
@pytest.mark.parametrize("name", ["test-44100Hz-le-1ch-4bytes.wav", "test-44100Hz-be-1ch-4bytes.wav",
                                  "test-8000Hz-le-2ch-1byteu.wav", "test-44100Hz-2ch-32bit-float-le.wav",
                                  "test-44100Hz-2ch-32bit-float-be.wav", "test-48000Hz-2ch-64bit-float-le-wavex.wav",
                                  "test-8000Hz-le-4ch-9S-12bit.wav", "test-8000Hz-le-5ch-9S-5bit.wav"])
def test_scipy_reference_wavs(name):
    path = SCIPY_WAVS / name
    rate, ref = wavfile.read(path)
    ref = ref.reshape(len(ref), -1)
    rec = read_recording(path)
    assert rec.rate == rate and rec.data.shape == ref.shape
    for j in range(ref.shape[1]):
        assert rec.column(j).dtype == ref.dtype.newbyteorder("=")
        assert np.array_equal(rec.column(j), ref[:, j])


@pytest.mark.parametrize("name", ["test-8000Hz-le-3ch-5S-24bit.wav", "test-8000Hz-be-3ch-5S-24bit.wav"])
def test_scipy_reference_24bit(name):
    # scipy returns 24-bit samples left-justified in int32 (its docs); we keep the 24-bit value itself.
    path = SCIPY_WAVS / name
    rate, ref = wavfile.read(path)
    rec = read_recording(path)
    assert rec.rate == rate and rec.data.dtype == np.int32
    assert np.array_equal(rec.data, ref >> 8)


def _riff(fmt_tag: int, nch: int, rate: int, bits: int, payload: bytes) -> bytes:
    """A canonical RIFF WAVE file (Microsoft RIFF spec 1991: 'fmt ' chunk of 16 bytes, then 'data')."""
    align = nch * bits // 8
    fmt = struct.pack("<HHIIHH", fmt_tag, nch, rate, rate * align, align, bits)
    body = b"WAVE" + b"fmt " + struct.pack("<I", 16) + fmt + b"data" + struct.pack("<I", len(payload)) + payload
    return b"RIFF" + struct.pack("<I", len(body)) + body


def test_hand_written_24bit_wav(tmp_path):
    values = [0, 1, -1, 2**23 - 1, -2**23, 12345, -54321, 7]   # 4 frames x 2 channels
    payload = b"".join(v.to_bytes(3, "little", signed=True) for v in values)
    p = tmp_path / "h.wav"
    p.write_bytes(_riff(1, 2, 48000, 24, payload))
    rec = read_recording(p, options=ReadOptions.build(names="left,right", units="Pa,Pa"))
    assert rec.rate == 48000.0 and rec.data.tolist() == [values[i:i + 2] for i in range(0, 8, 2)]
    assert [(c.name, c.unit) for c in rec.channels] == [("left", "Pa"), ("right", "Pa")]
    assert np.array_equal(rec.data, wavfile.read(p)[1] >> 8)   # scipy as the second reference


def test_wav_rate_must_agree(tmp_path):
    p = tmp_path / "r.wav"
    p.write_bytes(_riff(1, 1, 8000, 16, struct.pack("<4h", 1, 2, 3, 4)))
    with pytest.raises(BadInput, match="disagrees"):
        read_recording(p, rate=44100)
    assert read_recording(p, rate=8000).column(0).tolist() == [1, 2, 3, 4]


def test_wav_packs_from_the_command_line(tmp_path):
    p = tmp_path / "s.wav"
    x = (1000 * np.sin(np.arange(4000) / 20)).astype("<i2")
    p.write_bytes(_riff(1, 1, 8000, 16, x.tobytes()))
    assert main(["pack", str(p), "-o", str(tmp_path / "s.tsa"), "--budget", "lossless", "--code-size", "0"]) == 0
    from tsarchive import open as open_archive
    assert np.array_equal(open_archive(tmp_path / "s.tsa").read("ch0"), x)


# --- EDF -----------------------------------------------------------------------------------------

pyedflib = pytest.importorskip("pyedflib")
EDF_DATA = Path(pyedflib.__file__).parent / "tests" / "data"


def _edf_signal_by_hand(path: Path, index: int) -> tuple[np.ndarray, str]:
    """Physical values of one EDF signal from the raw bytes (EDF spec, Kemp et al. 1992: 256-byte header, then
    256 bytes per signal in field blocks; physical = pmin + (d - dmin) * (pmax - pmin) / (dmax - dmin))."""
    raw = path.read_bytes()
    hdr_bytes, nrec, ns = int(raw[184:192]), int(raw[236:244]), int(raw[252:256])
    field_sizes = [16, 80, 8, 8, 8, 8, 8, 80, 8, 32]
    fields, pos = [], 256
    for size in field_sizes:
        fields.append([raw[pos + k * size: pos + (k + 1) * size].decode("latin-1").strip() for k in range(ns)])
        pos += size * ns
    _, _, unit, pmin, pmax, dmin, dmax, _, nsamp, _ = fields
    nsamp = [int(v) for v in nsamp]
    rec = np.frombuffer(raw[hdr_bytes:], dtype="<i2").reshape(nrec, sum(nsamp))
    a = sum(nsamp[:index])
    d = rec[:, a:a + nsamp[index]].reshape(-1).astype(np.float64)
    pmin_, pmax_, dmin_, dmax_ = (float(v[index]) for v in (pmin, pmax, dmin, dmax))
    return pmin_ + (d - dmin_) * (pmax_ - pmin_) / (dmax_ - dmin_), unit[index]


def test_edf_reference_file_values_units_and_annotations():
    path = EDF_DATA / "test_generator.edf"      # ships with pyedflib (pyedflib/tests/data)
    rec = read_recording(path)
    f = pyedflib.EdfReader(str(path))
    try:
        assert rec.rate == 200.0 and [c.name for c in rec.channels] == [s.strip() for s in f.getSignalLabels()]
        for j in range(f.signals_in_file):
            assert np.array_equal(rec.column(j), f.readSignal(j))   # pyedflib's own reader
        onsets, _, texts = f.readAnnotations()
        assert rec.start == f.getStartdatetime()
    finally:
        f.close()
    for j in (0, 4):
        ref, unit = _edf_signal_by_hand(path, j)
        assert rec.channels[j].unit == unit == "uV"
        assert np.allclose(rec.column(j), ref, rtol=0, atol=1e-9 * np.abs(ref).max())  # float rounding only
    assert [n for n in rec.notes if n.startswith("annotation")] == [
        f"annotation {float(o):g} s: {t}" for o, t in zip(onsets, texts)]


def test_edf_with_several_rates_needs_a_choice(tmp_path):
    path = EDF_DATA / "test_generator.bdf"      # ships with pyedflib: signals at 1000, 800, 500, 975, 999 Hz
    with pytest.raises(BadInput, match=r"1000 Hz: sine 5Hz; 999 Hz: white noise") as err:
        read_recording(path)
    assert "--rate" in str(err.value)
    rec = read_recording(path, rate=800)
    assert [c.name for c in rec.channels] == ["square 13Hz"] and rec.rate == 800.0
    f = pyedflib.EdfReader(str(path))
    try:
        assert np.array_equal(rec.column(0), f.readSignal(1))
    finally:
        f.close()
    with pytest.raises(BadInput, match="no signal is recorded at 250 Hz"):
        read_recording(path, rate=250)
    assert main(["pack", str(path), "-o", str(tmp_path / "x.tsa"), "--rate", "12"]) == 2
    assert not (tmp_path / "x.tsa").exists()


def test_edf_dry_run_shows_header_lines_and_annotations(capsys):
    path = EDF_DATA / "test_generator.edf"
    assert main(["pack", str(path), "--dry-run"]) == 0
    out = capsys.readouterr().out
    f = pyedflib.EdfReader(str(path))
    try:
        texts = list(f.readAnnotations()[2])
        equipment = f.getEquipment().strip()
    finally:
        f.close()
    assert "EDF header's rate" in out and f"equipment: {equipment}" in out
    assert all(t in out for t in texts)


@pytest.mark.parametrize("width", [1, 2, 3, 4])
def test_files_written_by_the_standard_library_wave_module(tmp_path, width):
    # Reference writer: Python's wave module (PCM; 8-bit unsigned, wider widths signed little-endian).
    import wave
    rng = np.random.default_rng(width)
    bits = 8 * width
    if width == 1:
        x = rng.integers(0, 256, (500, 3), dtype=np.int64)
        raw = x.astype(np.uint8).tobytes()
    else:
        x = rng.integers(-2 ** (bits - 1), 2 ** (bits - 1), (500, 3), dtype=np.int64)
        raw = b"".join(int(v).to_bytes(width, "little", signed=True) for v in x.reshape(-1))
    p = tmp_path / f"w{bits}.wav"
    with wave.open(str(p), "wb") as w:
        w.setnchannels(3)
        w.setsampwidth(width)
        w.setframerate(22050)
        w.writeframes(raw)
    rec = read_recording(p)
    assert rec.rate == 22050.0 and rec.data.tolist() == x.tolist()


# --- EDF kept lossless: the scaled grid (format 8) ---------------------------------------------------


@pytest.mark.parametrize("name, rate", [("test_generator.edf", None), ("test_generator.bdf", 800)])
def test_lossless_edf_and_bdf_come_back_bit_for_bit_as_pyedflib_reads_them(tmp_path, name, rate):
    # failed before format 8: physical values are no decimal grid, so 'lossless' was refused ("channel
    # squarewave is not on an integer or decimal grid"). Reference: pyedflib's reader, compared bitwise.
    path = EDF_DATA / name                      # ships with pyedflib (pyedflib/tests/data)
    out = tmp_path / "e.tsa"
    assert main(["pack", str(path), "-o", str(out), "--budget", "lossless"] + (["--rate", str(rate)] if rate else [])) == 0
    from tsarchive import open as open_archive
    arc = open_archive(out)
    f = pyedflib.EdfReader(str(path))
    try:
        rates = [f.getSampleFrequency(j) for j in range(f.signals_in_file)]
        signals = [j for j in range(f.signals_in_file) if rate is None or rates[j] == rate]
        assert [c.name for c in arc.channels] == [f.getSignalLabels()[j].strip() for j in signals]
        for c, j in zip(arc.channels, signals):
            assert c.grid.kind == "scaled" and c.eps == 0
            assert np.array_equal(arc.read(c.name).view(np.uint64), f.readSignal(j).view(np.uint64)), c.name
    finally:
        f.close()
    assert arc.format_version == 8


def test_the_scaled_grid_is_the_header_s_step_and_keeps_the_file_s_integers(tmp_path):
    # Reference: the EDF specification (Kemp et al. 1992), read by hand from the file's bytes: the grid's step
    # is (pmax - pmin) / (dmax - dmin) and the integers behind the samples are the stored 16-bit values.
    path = EDF_DATA / "test_generator.edf"
    raw = path.read_bytes()
    ns = int(raw[252:256])
    at = 256 + ns * (16 + 80 + 8)
    pmin, pmax, dmin, dmax = ([float(raw[at + (k * ns + j) * 8: at + (k * ns + j + 1) * 8]) for j in range(ns)]
                              for k in range(4))
    rec = read_recording(path)
    for j, c in enumerate(rec.channels):
        step, offset = c.scaled
        assert step == (pmax[j] - pmin[j]) / (dmax[j] - dmin[j])
        digital = np.rint(rec.column(j) / step - offset)
        assert digital.min() >= dmin[j] and digital.max() <= dmax[j]
        assert np.array_equal(((digital + offset) * step).view(np.uint64), rec.column(j).view(np.uint64))


def test_an_edf_written_by_pyedflib_with_uneven_ranges_packs_lossless(tmp_path):
    # A file not written by tsarchive: pyedflib's writer, a climate-chamber log's kinds of ranges (a skin
    # temperature of 30..42 degC on 12 bits, a pressure of 950..1050 hPa on 16 bits); offsets not 0.5.
    path = tmp_path / "chamber.edf"
    rng = np.random.default_rng(8)
    n = 2560
    temp = np.round(36.5 + 0.3 * np.sin(np.arange(n) / 90.0) + rng.normal(0, 0.02, n), 3)
    press = 1013 + np.cumsum(rng.normal(0, 0.01, n))
    heads = [dict(label="skin_temp", dimension="degC", sample_frequency=256, physical_min=30.0, physical_max=42.0,
                  digital_min=-2048, digital_max=2047),
             dict(label="press", dimension="hPa", sample_frequency=256, physical_min=950.0, physical_max=1050.0,
                  digital_min=-32768, digital_max=32767)]
    w = pyedflib.EdfWriter(str(path), 2, file_type=pyedflib.FILETYPE_EDFPLUS)
    try:
        w.setSignalHeaders(heads)
        w.writeSamples([temp, press])
    finally:
        w.close()
    out = tmp_path / "c.tsa"
    assert main(["pack", str(path), "-o", str(out), "--budget", "skin_temp=lossless,press=lossless"]) == 0
    from tsarchive import open as open_archive
    arc = open_archive(out)
    f = pyedflib.EdfReader(str(path))
    try:
        for j, c in enumerate(arc.channels):
            assert c.grid.kind == "scaled" and c.grid.offset != 0.5
            assert np.array_equal(arc.read(c.name).view(np.uint64), f.readSignal(j).view(np.uint64))
    finally:
        f.close()


def test_a_scaled_grid_in_an_archive_that_says_format_7_is_refused(tmp_path):
    # format 7 has no scaled grid: an archive claiming 7 with one was crafted or mixed (a format-7 reader
    # would say "unknown grid kind"); the version check names it in one line
    from crafting import manifest, write_manifest

    from tsarchive import open as open_archive
    from tsarchive.errors import ArchiveCorrupt
    out = tmp_path / "e.tsa"
    assert main(["pack", str(EDF_DATA / "test_generator.edf"), "-o", str(out), "--budget", "lossless"]) == 0
    m = manifest(out)
    m["format_version"] = 7
    write_manifest(out, m)
    with pytest.raises(ArchiveCorrupt, match="scaled grid in a format 7 archive"):
        open_archive(out)
