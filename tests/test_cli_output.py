"""What the command line shows and files: the progress line (terminal only) and the JSON a lab system keeps."""

import io

import numpy as np

from tsarchive.cli import main
from tsarchive.progress_line import ProgressLine, text
from tsarchive.results import Progress


class Tty(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_text_says_stage_share_and_eta():
    assert text(Progress("encode", 300, 1000, "window 300/1000", eta_s=72.4)).split() == \
        ["encoding", "30", "%", "ETA", "1:12", "window", "300/1000"]
    assert "ETA" not in text(Progress("encode", 1000, 1000, "done", eta_s=0.0))


def test_line_is_drawn_on_a_terminal_and_cleared():
    tty = Tty()
    line = ProgressLine(tty)
    line(Progress("read", 0, 1, "reading source"))
    line(Progress("encode", 10, 10, "window 10/10"))       # the last event is always drawn
    assert "reading" in tty.getvalue() and "encoding" in tty.getvalue()
    line.close()
    assert tty.getvalue().endswith("\r" + " " * 79 + "\r")   # the terminal line is left blank


def test_nothing_on_a_pipe():
    pipe = io.StringIO()                                   # isatty() is False, as for a pipe or a file
    line = ProgressLine(pipe)
    line(Progress("encode", 1, 2, "x"))
    line.close()
    assert pipe.getvalue() == ""


def test_pack_draws_progress_on_a_terminal_stderr_and_quiet_silences_it(tmp_path, monkeypatch, capsys):
    src = tmp_path / "r.npy"
    np.save(src, np.sin(np.arange(20000) / 50.0))
    tty = Tty()
    monkeypatch.setattr("sys.stderr", tty)
    assert main(["pack", str(src), "-o", str(tmp_path / "a.tsarchive"), "--rate", "100"]) == 0
    assert "encoding" in tty.getvalue() and "encoding" not in capsys.readouterr().out
    tty2 = Tty()
    monkeypatch.setattr("sys.stderr", tty2)
    assert main(["pack", str(src), "-o", str(tmp_path / "b.tsarchive"), "--rate", "100", "--quiet"]) == 0
    assert "encoding" not in tty2.getvalue()
    tty3 = Tty()
    monkeypatch.setattr("sys.stderr", tty3)
    assert main(["verify", str(tmp_path / "a.tsarchive"), "--against", str(src)]) == 0
    assert "verifying" in tty3.getvalue()


def test_json_of_pack_verify_and_report_carries_what_a_lab_files(tmp_path, capsys):
    import hashlib
    import json
    src = tmp_path / "chamber.csv"
    src.write_text("time,temp [degC]\n" + "".join(f"2024-03-05T14:00:{i:02d},{20 + i / 100:.2f}\n"
                                                  for i in range(60)))
    sha = hashlib.sha256(src.read_bytes()).hexdigest()        # reference: hashlib, not tsarchive's own hashing
    arc = tmp_path / "chamber.tsarchive"
    outs = []
    for argv in (["pack", str(src), "-o", str(arc), "--json", "--quiet"],
                 ["verify", str(arc), "--against", str(src), "--json"], ["report", str(arc), "--json"]):
        assert main(argv) == 0
        outs.append(json.loads(capsys.readouterr().out))
    for d in outs:
        ident = d["identity"]
        assert ident["archive"] == str(arc.resolve()) and ident["source"]["sha256"] == sha
        assert ident["source"]["name"] == "chamber.csv" and ident["format_version"] == 8
        assert ident["written_by"] == ident["read_by"] and ident["start"] == "2024-03-05T14:00:00"
        assert ident["channels"] == [{"name": "temp", "unit": "degC", "rate": 1.0, "n_samples": 60}]


def test_per_channel_ratios_are_labelled_as_estimates(tmp_path, capsys):
    src = tmp_path / "r.npy"
    np.save(src, np.stack([np.sin(np.arange(5000) / 30.0), np.cos(np.arange(5000) / 7.0)], axis=1))
    arc = tmp_path / "r.tsarchive"
    assert main(["pack", str(src), "-o", str(arc), "--rate", "10", "--quiet"]) == 0
    assert main(["report", str(arc)]) == 0
    out = capsys.readouterr().out
    assert out.count("ratio~") == 2 and out.count("~ estimates:") == 2    # the pack table and the report
