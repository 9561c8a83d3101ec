"""The app's Folder screen on a batch's output folder: it lists the catalog instead of opening every archive."""

from __future__ import annotations

import tsarchive
from app_helpers import NotedApp, cells, settle
from batch_kit import make_lab
from tsarchive.app import fmt
from tsarchive.cli import main


async def test_folder_lists_catalog_archives_without_opening_them(tmp_path, monkeypatch, capsys):
    srcs = make_lab(tmp_path / "lab", 3)
    out = tmp_path / "out"
    assert main(["pack", str(tmp_path / "lab"), "--into", str(out), "--jobs", "1"]) == 0
    capsys.readouterr()
    want = {}
    for src in srcs:                                  # the figures, read from the archives by the library
        rel = src.relative_to(tmp_path / "lab").as_posix() + ".tsarchive"
        arc = tsarchive.open(out / rel)
        size = sum(p.stat().st_size for p in (out / rel).iterdir())
        want[rel] = [rel, "archive", fmt.size(size), fmt.duration(arc.channels[0].n_samples / arc.channels[0].rate),
                     str(len(arc.channels)), fmt.ratio(arc.ratio), "verified ok"]

    def refuse(path):
        raise AssertionError(f"the Folder screen opened {path} instead of reading the catalog")

    monkeypatch.setattr(tsarchive, "open", refuse)
    app = NotedApp(out)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(app, pilot)
        rows = {r[0]: r for r in cells(app.screen.query_one("#folder-table"))}
        assert rows == want                       # sub/log01.csv.tsarchive too, named by its relative path
        note = str(app.screen.query_one("#folder-note").render())
        assert "catalog: within budget, checked by pack against the source" in note


async def test_an_archive_changed_since_the_catalog_is_read_from_the_archive(tmp_path, capsys):
    srcs = make_lab(tmp_path / "lab", 1)
    out = tmp_path / "out"
    assert main(["pack", str(tmp_path / "lab"), "--into", str(out), "--jobs", "1"]) == 0
    # repacked by hand with another budget: the catalog row no longer describes it
    assert main(["pack", str(srcs[0]), "-o", str(out / "log00.csv.tsarchive"), "--budget", "5%", "--force"]) == 0
    capsys.readouterr()
    arc = tsarchive.open(out / "log00.csv.tsarchive")
    app = NotedApp(out)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(app, pilot)
        [row] = cells(app.screen.query_one("#folder-table"))
        assert row[0] == "log00.csv.tsarchive" and row[5] == fmt.ratio(arc.ratio) and row[6] == "unverified"
