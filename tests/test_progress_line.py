"""The command line's progress line: on a terminal only, cleared at the end, never on stdout."""

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
