"""In-process CLI round trips through ``tsarchive.cli.main(argv)``."""

import json

import numpy as np
import pytest

from tsarchive.cli import main

from conftest import make_signal


@pytest.fixture()
def src(tmp_path):
    p = tmp_path / "bench.npy"
    np.save(p, make_signal(3000).astype(np.float32))
    return p


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_pack_report_verify_unpack(tmp_path, src, capsys):
    arc = tmp_path / "bench.tsa"
    code, out, err = _run(capsys, "pack", src, "-o", arc, "--rate", 200, "--window", 64, "--code-size", 4,
                          "--budget", "ch0=0.01,ch1=0.5%")
    assert code == 0, err
    head = out.splitlines()[0].split()
    assert head[:3] == ["channel", "unit", "budget"] and "bits/sample" in out and "ratio" in out
    assert "ch0" in out and "0.01" in out

    code, out, _ = _run(capsys, "report", arc, "--json")
    rep = json.loads(out)
    assert code == 0 and [c["name"] for c in rep["channels"]] == ["ch0", "ch1"]
    assert rep["channels"][0]["eps"] == 0.01 and rep["within_budget"]

    code, out, _ = _run(capsys, "verify", arc)
    assert code == 0 and out.splitlines()[-2] == "Checksums match: every window decodes to its stored checksum"
    assert out.splitlines()[:2] == ["ch0: checksums match (samples not compared)",
                                    "ch1: checksums match (samples not compared)"]
    code, out, _ = _run(capsys, "verify", arc, "--against", src, "--json")
    assert code == 0 and json.loads(out)["ok"] and json.loads(out)["compared"]

    out_npy = tmp_path / "part.npy"
    code, _, err = _run(capsys, "unpack", arc, "-o", out_npy, "--channels", "ch1", "--start", "1", "--end", "2.5")
    assert code == 0, err
    part = np.load(out_npy)
    x = np.load(src)
    assert part.shape == (300, 1)  # a channel picked from a 2-D source stays 2-D
    assert np.abs(part[:, 0].astype(float) - x[200:500, 1]).max() <= 0.005 * np.ptp(x[:, 1]) * 1.0000001

    for ext in ("csv", "parquet"):
        code, _, err = _run(capsys, "unpack", arc, "-o", tmp_path / f"all.{ext}")
        assert code == 0, err


def test_one_channel_npy_comes_back_in_its_shape(tmp_path, capsys):
    p = tmp_path / "one.npy"
    np.save(p, make_signal(700)[:, 0].astype(np.float32))
    assert _run(capsys, "pack", p, "-o", tmp_path / "one.tsa", "--rate", 50, "--code-size", 0)[0] == 0
    assert _run(capsys, "unpack", tmp_path / "one.tsa", "-o", tmp_path / "back.npy")[0] == 0
    back = np.load(tmp_path / "back.npy")
    assert back.shape == (700,) and back.dtype == np.float32


def test_verify_exit_1_names_channel_and_window(tmp_path, src, capsys):
    arc = tmp_path / "b.tsa"
    assert _run(capsys, "pack", src, "-o", arc, "--rate", 200, "--window", 64, "--code-size", 0)[0] == 0
    x = np.load(src)
    x[700, 1] += 1.0  # the "source" now differs beyond the budget in window 10 (700 // 64)
    np.save(tmp_path / "edited.npy", x)
    code, out, _ = _run(capsys, "verify", arc, "--against", tmp_path / "edited.npy", "--even-if-changed")
    assert code == 1 and "ch1" in out and "10" in out and "FAILED" in out
    lines = out.splitlines()
    # one sample moved by 1.0 (>> eps) in window 700 // 64 = 10: named in words, with the count and window
    assert any(ln.startswith("ch1: out of budget: 1 sample(s) beyond ±") and "in window(s) 10;" in ln for ln in lines)
    assert any(ln.startswith("ch0: within budget: worst error ") for ln in lines)
    assert lines[-1] == "FAILED: see the problems above"


def test_verify_says_within_budget_with_the_figures(tmp_path, src, capsys):
    """verify --against names each channel's state in words and its worst error, checked with numpy."""
    arc = tmp_path / "w.tsarchive"
    assert _run(capsys, "pack", src, "-o", arc, "--rate", 200, "--budget", "0.01", "--code-size", 0)[0] == 0
    assert _run(capsys, "unpack", arc, "-o", tmp_path / "back.npy")[0] == 0
    back, x = np.load(tmp_path / "back.npy").astype(np.float64), np.load(src).astype(np.float64)
    code, out, _ = _run(capsys, "verify", arc, "--against", src)
    assert code == 0
    lines = out.splitlines()
    for j, name in enumerate(("ch0", "ch1")):
        worst = np.max(np.abs(back[:, j] - x[:, j]))  # float32 differences are exact in float64 (IEEE 754)
        share = 100 * worst / 0.01  # share of the budget used: worst error / eps (definition)
        assert f"{name}: within budget: worst error {worst:.4g} of ±0.01, {share:.1f} % of the budget" in lines
    assert lines[-1] == "All within budget: every sample within its budget and every checksum matches"
    assert not any(ln.endswith(": ok") or ln.startswith("VERIFIED") for ln in lines)  # not a checksum tool's layout


@pytest.mark.parametrize("argv,needle", [
    (["pack", "nope.npy", "-o", "x.tsa", "--rate", "1"], "no such file"),
    (["pack", "{src}", "-o", "x.tsa"], "--rate"),
    (["pack", "{src}", "-o", "x.tsa", "--rate", "1", "--budget", "abc"], "budget"),
    (["pack", "{src}", "-o", "x.tsa", "--rate", "1", "--budget", "zz=1%"], "zz"),
    (["pack", "{src}"], "required"),
    (["unpack", "missing.tsa", "-o", "x.csv"], "does not exist"),
    (["verify", "{src}"], "not a tsarchive archive"),
    (["frobnicate"], "invalid choice"),
])
def test_bad_input_is_one_line_exit_2(tmp_path, src, capsys, monkeypatch, argv, needle):
    monkeypatch.chdir(tmp_path)
    argv = [a.replace("{src}", str(src)) for a in argv]
    code, out, err = _run(capsys, *argv)
    assert code == 2
    assert err.count("\n") == 1 and needle in err
    assert not (tmp_path / "x.tsa").exists() and not (tmp_path / "x.csv").exists()


def test_refuses_overwrite_without_force(tmp_path, src, capsys):
    arc = tmp_path / "b.tsa"
    args = ["pack", src, "-o", arc, "--rate", 200, "--code-size", 0]
    assert _run(capsys, *args)[0] == 0
    code, _, err = _run(capsys, *args)
    assert code == 2 and "--force" in err
    assert _run(capsys, *args, "--force")[0] == 0


def test_help_states_default_budget(capsys):
    with pytest.raises(SystemExit):
        main(["pack", "--help"])
    assert "default: 0.1%" in capsys.readouterr().out


def test_verify_alone_catches_a_damaged_window(tmp_path, src, capsys):
    # Flip one byte of one window's residual payload and rewrite the table: the member's
    # SHA-256 and that window's CRC-32 must both fail, and verify must name the window.

    arc = tmp_path / "d.tsa"
    assert _run(capsys, "pack", src, "-o", arc, "--rate", 200, "--window", 64, "--code-size", 0)[0] == 0
    import tsarchive
    rows = tsarchive.open(arc).rows("ch1", 0, 1 << 20).to_pylist()
    window = next(r["window"] for r in rows if len(r["residual"]) > 4)
    payload = rows[window]["residual"]
    p = arc / "windows.parquet"          # format 6: residuals stored as they are; flipped in place, same size
    data = bytearray(p.read_bytes())
    at = bytes(data).index(payload)
    data[at + 1] ^= 0x5A
    p.write_bytes(bytes(data))
    code, out, _ = _run(capsys, "verify", arc)
    assert code == 1 and "FAILED" in out
    assert "windows.parquet" in out and "ch1" in out and f"window(s) {window}" in out


def test_missing_app_extra_is_named(monkeypatch, capsys):
    # textual made unimportable (None in sys.modules makes import raise ImportError, as the import system documents)
    import sys
    monkeypatch.setitem(sys.modules, "textual", None)
    assert main(["browse", "."]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "pip install 'tsarchive[app]'" in err
