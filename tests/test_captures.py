"""Every screen at 80x24, captured as a user would see it (python -m tsarchive.app.captures): inside the
terminal, its footer whole (every key the footer is meant to show is named on its line)."""

from __future__ import annotations

import pytest

import tsarchive
from app_helpers import WINDOW, write_stream
from tsarchive.app.captures import SIZE, capture_all, main, write_captures

TITLES = ["Folder ·", "Packing ·", "Contents ·", "Strip ·", "Shortlist", "Shortlist", "Shortlist", "Export ·", "Keys"]


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("captures")
    write_stream(d / "bench_log.csv")
    tsarchive.pack(d / "bench_log.csv", d / "bench_log.tsarchive", "temp=0.05,accel=0.5%", window=WINDOW,
                   code_size=0)
    return d


async def test_every_screen_fits_80_by_24_with_its_footer_whole(folder, tmp_path):
    shots = await capture_all(folder)
    assert [s.name.split()[0] for s in shots] == ["Folder", "Packing", "Contents", "Strip", "Shortlist",
                                                  "Shortlist", "Shortlist", "Export", "Keys"]
    for shot, title in zip(shots, TITLES):
        lines = shot.text.rstrip("\n").split("\n")
        assert len(lines) <= SIZE[1] and max(len(line) for line in lines) <= SIZE[0], shot.name
        assert title in shot.text, shot.name                       # the screen it claims to be (modals over another)
        assert shot.footer_whole, (shot.name, shot.missing_keys)
        if shot.name in ("Folder", "Packing", "Contents", "Strip"):   # the full screens' footers end with F1 Keys
            assert lines[-1].rstrip().endswith("f1 Keys"), shot.name
        assert shot.svg.lstrip().startswith("<svg")
    written = write_captures(shots, tmp_path / "out")
    assert len(written) == 2 * len(shots) and all(p.stat().st_size > 0 for p in written)
    assert (tmp_path / "out" / "index.txt").read_text().count("footer whole") == len(shots)


def test_module_entry_point_writes_the_captures(folder, tmp_path, capsys):
    assert main([str(tmp_path / "caps"), "--folder", str(folder)]) == 0
    assert sorted(p.name for p in (tmp_path / "caps").glob("*.txt"))[:2] == ["01-folder.txt", "02-packing.txt"]
    assert "04-strip: Strip: footer whole" in capsys.readouterr().out
