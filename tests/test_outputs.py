"""What tsarchive writes and prints: exports never replace what they must not, are marked as
reconstructions and formatted truthfully; verify checks the source's identity first; every
command ends in one line and exit 2, or its documented behaviour."""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from decimal import Decimal
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

import tsarchive
from tsarchive.cli import CAUTION, main
from tsarchive.errors import BadInput

RATE = 10.0
N = 1500


def _sha(path: Path) -> str:
    # Reference: hashlib's SHA-256 (FIPS 180-4), independent of tsarchive.checksum
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _write_source(path: Path, time_column: bool = True) -> dict[str, np.ndarray]:
    """A logger CSV: temp with 2 decimals (one empty cell), volt with 3 decimals."""
    rng = np.random.default_rng(3)
    t = np.arange(N) / RATE
    temp = np.round(24.0 + 0.8 * np.sin(t / 9.0) + 0.02 * rng.standard_normal(N), 2)
    volt = np.round(3.3 + 0.05 * np.sin(t / 3.0) + 0.004 * rng.standard_normal(N), 3)
    temp[17] = np.nan
    head = ("time [s]," if time_column else "") + "temp [degC],volt [V]"
    rows = [(f"{ti:.1f}," if time_column else "") + ("" if np.isnan(a) else f"{a:.2f}") + f",{b:.3f}"
            for ti, a, b in zip(t, temp, volt)]
    path.write_text(head + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return {"temp": temp, "volt": volt}


@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    """run.csv and run.tsa (temp lossy at 0.05 degC, volt lossless), packed once."""
    d = tmp_path_factory.mktemp("outputs")
    cols = _write_source(d / "run.csv")
    tsarchive.pack(d / "run.csv", d / "run.tsa", "temp=0.05,volt=lossless", code_size=0)
    return d, cols


@pytest.fixture()
def lab(packed, tmp_path):
    """A private copy of the packed folder, for tests that write next to it."""
    import shutil
    d, cols = packed
    shutil.copy(d / "run.csv", tmp_path / "run.csv")
    shutil.copytree(d / "run.tsa", tmp_path / "run.tsa")
    return tmp_path, cols


# -- 1. never overwrite, never the source, never into an archive -------------------------------------
def test_unpack_never_replaces_the_source(lab, capsys):
    d, _ = lab
    before = _sha(d / "run.csv")
    for extra in ([], ["--force"], ["--replace-original", before[:11]], ["--replace-original", "0" * 12]):
        code, out, err = _run(capsys, "unpack", d / "run.tsa", "-o", d / "run.csv", *extra)
        assert code == 2 and err.count("\n") == 1 and out == "", extra
        assert _sha(d / "run.csv") == before
    assert "packed from" in _run(capsys, "unpack", d / "run.tsa", "-o", d / "run.csv", "--force")[2]
    # a copy of the source elsewhere is the same recording (same size and SHA-256): refused too
    (d / "elsewhere").mkdir()
    (d / "elsewhere" / "copy.csv").write_bytes((d / "run.csv").read_bytes())
    assert _run(capsys, "unpack", d / "run.tsa", "-o", d / "elsewhere" / "copy.csv", "--force")[0] == 2
    assert _sha(d / "elsewhere" / "copy.csv") == before
    # only the first 12 hex digits of its SHA-256 allow it
    code, _, err = _run(capsys, "unpack", d / "run.tsa", "-o", d / "run.csv", "--replace-original", before[:12])
    assert code == 0, err
    assert _sha(d / "run.csv") != before


def test_unpack_replaces_an_existing_file_only_with_force(lab, capsys):
    d, _ = lab
    (d / "old.csv").write_text("keep me\n")
    code, _, err = _run(capsys, "unpack", d / "run.tsa", "-o", d / "old.csv")
    assert code == 2 and "--force" in err and (d / "old.csv").read_text() == "keep me\n"
    assert _run(capsys, "unpack", d / "run.tsa", "-o", d / "old.csv", "--force")[0] == 0
    assert (d / "old.csv").read_text().startswith("# reconstruction")


def test_unpack_never_writes_into_an_archive_folder(lab, capsys):
    d, _ = lab
    members = {p.name: _sha(p) for p in (d / "run.tsa").iterdir()}
    for target in ("windows.parquet", "manifest.json.csv", "new.csv"):
        for extra in ([], ["--force"]):
            code, _, err = _run(capsys, "unpack", d / "run.tsa", "-o", d / "run.tsa" / target, *extra)
            assert code == 2 and "archive folder" in err
    code, _, err = _run(capsys, "unpack", d / "run.tsa", "-o", d / "run.tsa", "--force")
    assert code == 2 and err.count("\n") == 1
    assert {p.name: _sha(p) for p in (d / "run.tsa").iterdir()} == members
    assert _run(capsys, "verify", d / "run.tsa")[0] == 0


def test_api_export_follows_the_same_rules(lab):
    d, _ = lab
    arc = tsarchive.open(d / "run.tsa")
    (d / "x.npy").write_bytes(b"not ours")
    with pytest.raises(BadInput, match="already exists"):
        arc.export(d / "x.npy")
    assert (d / "x.npy").read_bytes() == b"not ours" and not (d / "x.npy.origin.json").exists()
    arc.export(d / "x.npy", force=True)
    assert np.load(d / "x.npy").shape == (N, 2)
    side = json.loads((d / "x.npy.origin.json").read_text())
    assert side["reconstruction"] is True and side["source_sha256"] == _sha(d / "run.csv")
    with pytest.raises(BadInput, match="packed from"):
        arc.export(d / "run.csv", force=True)
    # a sidecar in the way counts as an existing file
    (d / "y.npy.origin.json").write_text("{}")
    with pytest.raises(BadInput, match="y.npy.origin.json already exists"):
        arc.export(d / "y.npy")
    assert not (d / "y.npy").exists()


# -- 2. verify checks that the file is the one that was packed ---------------------------------------
def test_verify_names_a_changed_source_before_comparing_samples(lab, capsys):
    d, _ = lab
    text = (d / "run.csv").read_text().splitlines()
    text[100] = text[100].rsplit(",", 1)[0] + ",9.999"  # volt far outside its (lossless) budget
    (d / "edited.csv").write_text("\n".join(text) + "\n")
    code, out, _ = _run(capsys, "verify", d / "run.tsa", "--against", d / "edited.csv")
    assert code == 1
    assert out.splitlines()[0].startswith("source: edited.csv is not the file that was packed (SHA-256 differs")
    assert "worst error" not in out and "--even-if-changed" in out
    code, out, _ = _run(capsys, "verify", d / "run.tsa", "--against", d / "edited.csv", "--json")
    rep = json.loads(out)
    assert code == 1 and rep["source_same"] is False and rep["compared"] is False
    # asked for explicitly, the samples are compared, and the changed one is found
    code, out, _ = _run(capsys, "verify", d / "run.tsa", "--against", d / "edited.csv", "--even-if-changed")
    assert code == 1 and "volt: out of budget: 1 sample(s) differ from the original (lossless)" in out and "not the file that was packed" in out


def test_verify_against_the_archives_own_export_fails(lab, capsys):
    # The reported case: verify --against a reconstruction passed.
    d, _ = lab
    assert _run(capsys, "unpack", d / "run.tsa", "-o", d / "back.csv")[0] == 0
    code, out, _ = _run(capsys, "verify", d / "run.tsa", "--against", d / "back.csv")
    assert code == 1 and "not the file that was packed" in out
    code, out, _ = _run(capsys, "verify", d / "run.tsa", "--against", d / "run.csv")
    assert code == 0 and "source: run.csv is the file that was packed" in out and "All within budget:" in out


def test_verify_a_table_without_time_column_uses_the_archive_rate(tmp_path, capsys):
    _write_source(tmp_path / "plain.csv", time_column=False)
    assert _run(capsys, "pack", tmp_path / "plain.csv", "-o", tmp_path / "plain.tsa", "--rate", RATE,
                "--code-size", 0)[0] == 0
    code, out, err = _run(capsys, "verify", tmp_path / "plain.tsa", "--against", tmp_path / "plain.csv")
    assert code == 0 and "All within budget: every sample" in out, err
    code, out, err = _run(capsys, "verify", tmp_path / "plain.tsa", "--against", tmp_path / "plain.csv",
                          "--rate", RATE)
    assert code == 0 and "All within budget: every sample" in out, err


# -- 3. CSV formatting and marking ---------------------------------------------------------------------
def test_csv_export_is_marked_and_written_at_the_channels_resolution(lab, capsys):
    d, cols = lab
    assert _run(capsys, "unpack", d / "run.tsa", "-o", d / "back.csv")[0] == 0
    lines = (d / "back.csv").read_text().splitlines()
    notes = [ln for ln in lines if ln.startswith("#")]
    assert notes == lines[:len(notes)] and any("reconstruction" in ln and "run.tsa" in ln for ln in notes)
    assert any(_sha(d / "run.csv") in ln for ln in notes)
    assert any("temp ±0.05 degC" in ln and "volt exact" in ln for ln in notes)
    src_rows = [ln.split(",") for ln in (d / "run.csv").read_text().splitlines()[1:]]
    rows = [ln.split(",") for ln in lines[len(notes) + 1:]]
    # the lossless 3-decimal channel comes back as the very text the logger wrote
    assert [r[2] for r in rows] == [r[2] for r in src_rows]
    # the empty cell stays empty (no "nan")
    assert rows[17][1] == "" and all(r[1] for i, r in enumerate(rows) if i != 17)
    # tsarchive reads its own export back
    rec = tsarchive.read_recording(d / "back.csv")
    assert [c.name for c in rec.channels] == ["temp", "volt"]
    assert np.array_equal(rec.column(1), cols["volt"])


def test_lossy_csv_values_are_short_and_stay_within_the_budget(lab, capsys):
    d, cols = lab
    assert _run(capsys, "unpack", d / "run.tsa", "-o", d / "back.csv")[0] == 0
    lines = [ln for ln in (d / "back.csv").read_text().splitlines() if not ln.startswith("#")][1:]
    cells = [ln.split(",")[1] for ln in lines]
    arc = tsarchive.open(d / "run.tsa")
    decoded, grid = arc.read("temp"), arc.channel("temp").grid
    ok = ~np.isnan(cols["temp"])
    written = np.array([float(c) if c else np.nan for c in cells])
    # within ±ε of the original as the two files show it: exact decimal arithmetic on the texts
    # (reference: Python's decimal module; the source cells were written with "%.2f")
    src = [ln.split(",")[1] for ln in (d / "run.csv").read_text().splitlines()[1:]]
    assert all(abs(Decimal(c) - Decimal(t)) <= Decimal("0.05") for c, t, k in zip(cells, src, ok) if k)
    # on the same point of the 2ε grid as the decoded value: offset + q * step (quantize.Grid's formula)
    q = lambda v: np.rint((v - grid.offset) / grid.step)  # noqa: E731
    assert np.array_equal(q(written[ok]), q(decoded[ok]))
    # never longer than the exact text (Python's repr of the decoded double), and shorter where repr shows
    # float noise: more than the 2 logged decimals
    exact = [repr(float(v)) for v in decoded[ok]]
    mine = [c for c, k in zip(cells, ok) if k]
    assert all(len(m) <= len(e) for m, e in zip(mine, exact))
    noisy = sum(len(e.split(".")[1]) > 2 for e in exact)
    assert noisy > 0  # the case this test is about: a step grid's values are not short decimals
    assert sum(len(m.split(".")[1]) > 2 for m in mine) < noisy


def test_parquet_export_carries_the_origin(lab):
    d, _ = lab
    tsarchive.open(d / "run.tsa").export(d / "back.parquet", channels=["temp"])
    meta = pq.read_schema(d / "back.parquet").metadata
    origin = json.loads(meta[b"tsarchive.origin"])
    assert origin["reconstruction"] is True and origin["archive"] == "run.tsa" and origin["source"] == "run.csv"
    assert origin["channels"] == [{"name": "temp", "eps": 0.05, "unit": "degC"}]


# -- 4. every command: one line, exit 2, or its documented behaviour -----------------------------------
@pytest.fixture()
def no_app(monkeypatch):
    """Make starting the app fail loudly (instead of waiting forever for keys that never come)."""
    from tsarchive.app import app as app_module

    def started(*a, **k):
        raise AssertionError("the app was started without a terminal")
    monkeypatch.setattr(app_module.TsArchiveApp, "run", started)


@pytest.mark.parametrize("argv", [[], ["browse"], ["browse", "."]])
def test_app_without_a_terminal_refuses(argv, capsys, no_app, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, out, err = _run(capsys, *argv)  # capsys: stdout is not a terminal
    assert code == 2 and err.count("\n") == 1 and "terminal" in err and out == ""


@pytest.mark.parametrize("argv,needle", [
    (["unpack", "{d}/run.tsa", "-o", "{d}/x.txt"], "cannot write format"),
    (["unpack", "{d}/run.tsa", "-o", "{d}/nofolder/x.csv"], "does not exist"),
    (["unpack", "{d}/run.tsa", "-o", "{d}/x.csv", "--channels", "nope"], "nope"),
    (["verify", "{d}/run.tsa", "--against", "{d}/missing.csv"], "no such file"),
    (["verify", "{d}/run.tsa", "--rate", "abc"], "invalid float"),
    (["report", "{d}/missing.tsa"], "does not exist"),
    (["demo", "--samples", "{d}/empty", "--no-app"], "sample_streams"),
])
def test_more_bad_input_is_one_line_exit_2(lab, capsys, argv, needle):
    d, _ = lab
    (d / "empty").mkdir()
    code, out, err = _run(capsys, *[a.replace("{d}", str(d)) for a in argv])
    assert code == 2 and err.count("\n") == 1 and needle in err, err
    assert not (d / "x.csv").exists() and not (d / "x.txt").exists()


def test_broken_pipe_is_a_quiet_exit(packed):
    d, _ = packed
    env = dict(os.environ, PYTHONPATH=str(Path(tsarchive.__file__).parents[1]))
    proc = subprocess.Popen([sys.executable, "-m", "tsarchive", "report", str(d / "run.tsa")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    proc.stdout.close()  # the reader goes away before the report is written (like `| head` that is done)
    err = proc.stderr.read().decode()
    code = proc.wait()
    # Convention: a writer whose reader went away ends quietly with 128 + SIGPIPE (13) (POSIX shells)
    assert err == "" and code == 141


# -- 5. the caution where records are made lossy -------------------------------------------------------
def test_pack_and_unpack_show_the_caution_when_lossy(tmp_path, capsys):
    _write_source(tmp_path / "s.csv")
    code, out, _ = _run(capsys, "pack", tmp_path / "s.csv", "-o", tmp_path / "lossy.tsa", "--budget", "1%",
                        "--code-size", 0)
    assert code == 0 and CAUTION in out
    code, out, _ = _run(capsys, "unpack", tmp_path / "lossy.tsa", "-o", tmp_path / "l.csv")
    assert code == 0 and CAUTION in out and "not the original" in out
    code, out, err = _run(capsys, "pack", tmp_path / "s.csv", "-o", tmp_path / "j.tsa", "--budget", "1%",
                          "--code-size", 0, "--json")
    assert code == 0 and json.loads(out)["channels"] and CAUTION in err  # stdout stays one JSON document
    code, out, _ = _run(capsys, "pack", tmp_path / "s.csv", "-o", tmp_path / "exact.tsa", "--budget", "lossless",
                        "--code-size", 0)
    assert code == 0 and CAUTION not in out
    code, out, _ = _run(capsys, "unpack", tmp_path / "exact.tsa", "-o", tmp_path / "e.csv")
    assert code == 0 and CAUTION not in out and "exactly" in out
