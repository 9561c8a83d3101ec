"""The rough edges of a first day (issue 14): names, keys, states in words, an 80x24 terminal.

Pilot tests drive the app by key presses against the real library; CLI tests call
``tsarchive.cli.main(argv)`` in process. Expected values come from outside the code under
test: numpy on the original samples, the definitions named beside each check, the
package's installed metadata.
"""

from __future__ import annotations

import importlib.metadata
import shutil
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

import tsarchive
from app_helpers import RATE, WINDOW, Lab, NotedApp, cells, open_contents, open_strip, settle, write_stream
from tsarchive.app.locate import read_time
from tsarchive.app.screens.contents import ContentsScreen
from tsarchive.app.screens.export import ExportScreen
from tsarchive.app.screens.keys import KeysScreen
from tsarchive.app.screens.packing import PackingScreen
from tsarchive.app.screens.folder import FolderScreen
from tsarchive.app.screens.shortlist import ShortlistScreen
from tsarchive.app.screens.strip import StripScreen
from tsarchive.cli import main
from tsarchive.timespec import parse_offset

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def lab(tmp_path_factory) -> Lab:
    folder = tmp_path_factory.mktemp("first_day")
    cols = write_stream(folder / "bench_log.csv")
    tsarchive.pack(folder / "bench_log.csv", folder / "bench_log.tsarchive", "temp=0.05,accel=0.5%",
                   window=WINDOW, code_size=4, train_seconds=1.0)
    return Lab(folder, cols)


class QuitApp(NotedApp):
    """The app, noting whether it was asked to quit."""

    quit_asked = False

    def exit(self, *args, **kwargs):  # noqa: D102
        self.quit_asked = True
        return super().exit(*args, **kwargs)


def _cli(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


# -- names -------------------------------------------------------------------------------------------
async def test_old_tsa_archives_are_listed_and_opened_beside_new_ones(lab, tmp_path):
    shutil.copytree(lab.archive, tmp_path / "new_run.tsarchive")
    shutil.copytree(lab.archive, tmp_path / "old_run.tsa")  # written before the new name: a folder all the same
    app = NotedApp(tmp_path)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        rows = cells(app.screen.query_one("#folder-table"))
        assert [(r[0], r[1]) for r in rows] == [("new_run.tsarchive", "archive"), ("old_run.tsa", "archive")]
        await pilot.press("down", "enter")
        await settle(app, pilot)
        assert isinstance(app.screen, ContentsScreen) and app.screen.path.name == "old_run.tsa"
        names = [r[0] for r in cells(app.screen.query_one("#contents-table"))]
        assert names == [c.name for c in tsarchive.open(tmp_path / "old_run.tsa").channels]  # the reader's view
        assert not app.errors()


def test_demo_writes_archives_with_the_new_name(tmp_path, capsys):
    samples = tmp_path / "samples"
    samples.mkdir()
    write_stream(samples / "tiny.csv", n=400)
    code, out, err = _cli(capsys, "demo", "--samples", samples, "--out", tmp_path / "out", "--no-app")
    assert code == 0, err
    # the archive, and its verification kept beside it (.tsarchive-checks/)
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [".tsarchive-checks", "tiny.tsarchive"]


def test_version_is_the_installed_one(capsys):
    code, out, _ = _cli(capsys, "--version")
    assert code == 0 and out == f"tsarchive {importlib.metadata.version('tsarchive')}\n"  # package metadata


def test_sample_streams_readme_runs_paths_of_a_clone():
    text = (ROOT / "sample_streams" / "README.md").read_text(encoding="utf-8")
    commands = [ln.split() for ln in text.splitlines() if ln.startswith("    ") and "python" in ln]
    assert commands
    for words in commands:
        assert not Path(words[0]).is_absolute()  # an interpreter inside the clone, not one of this machine's paths
        assert words[0] == ".venv/bin/python"  # what the README's first command creates
        assert (ROOT / words[1]).is_file()


# -- time specs: one parser, the same forms in the CLI and the app -------------------------------------
@pytest.mark.parametrize("spec,seconds", [
    ("3d", 3 * 86400),  # 1 d = 86 400 s (SI-accepted unit)
    ("2h1min", 2 * 3600 + 60),
    ("1d 6h", 86400 + 6 * 3600),
    ("1min 30.5s", Fraction(181, 2)),
    ("1:02:03", 3600 + 2 * 60 + 3),  # hours:minutes:seconds
    ("1:15.5", Fraction(151, 2)),  # minutes:seconds, as the app shows positions
    ("90s", 90), ("12.5", Fraction(25, 2)), ("250ms", Fraction(1, 4)),
])
def test_time_forms_read_the_same_everywhere(spec, seconds):
    assert parse_offset(spec, None) == seconds  # CLI --start/--end
    assert read_time(spec) == float(seconds)  # the app's fields


@pytest.mark.parametrize("spec", ["1:75", "1min2h", "2h2h", "2h1x", "soon"])
def test_bad_time_forms_are_refused(spec):
    with pytest.raises(tsarchive.BadInput):
        parse_offset(spec, None)
    with pytest.raises(tsarchive.BadInput):
        read_time(spec)


def test_unpack_takes_clock_and_compound_times(lab, tmp_path, capsys):
    out = tmp_path / "part.npy"
    code, _, err = _cli(capsys, "unpack", lab.archive, "-o", out, "--channels", "temp", "--start", "0:01",
                        "--end", "2s500ms")
    assert code == 0, err
    part = np.load(out)
    # rows 1.00 s .. 2.49 s at 100 Hz = samples 100..249 (the range is [start, end)); temp's budget is 0.05,
    # with 1e-12 for np.round's double, which may differ by an ulp from the CSV text's (IEEE 754 rounding)
    assert part.shape[0] == 150 and np.max(np.abs(part[:, -1] - lab.cols["temp"][100:250])) <= 0.05 + 1e-12


async def test_jump_to_time_takes_the_same_forms(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        for spec in ("12s300ms", "0:12.3"):
            await pilot.press("t", *spec, "enter")
            await settle(app, pilot)
            assert strip.current == int(12.3 * RATE) // WINDOW  # window of sample 1230: floor(k / W) = 19
            strip.current = 0
            await settle(app, pilot)
        assert not app.errors()


# -- keys ---------------------------------------------------------------------------------------------
async def test_q_quits_from_the_main_screens(lab):
    for depth in ("folder_screen", "contents", "strip"):
        app = QuitApp(lab.folder)
        async with app.run_test(size=(100, 40)) as pilot:
            if depth == "contents":
                await open_contents(app, pilot)
            elif depth == "strip":
                await open_strip(app, pilot, row=0)
            else:
                await settle(app, pilot)
            await pilot.press("q")
            assert app.quit_asked, depth


async def test_q_typed_into_a_field_is_a_letter(lab):
    app = QuitApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        await pilot.press("t", "q")
        assert not app.quit_asked and strip.query_one("#strip-jump").value == "q"


async def test_arrows_and_page_keys_step_windows(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=1)
        seen = []
        for key in ("right", "pagedown", "down", "left", "pageup", "up", "n", "b"):
            await pilot.press(key)
            await settle(app, pilot)
            seen.append(strip.current)
        assert seen == [1, 2, 3, 2, 1, 0, 1, 0]  # one window per key press
        await pilot.press("t", "1", "left")  # in the jump field, the arrow moves the text cursor
        await settle(app, pilot)
        assert strip.current == 0


async def test_rescan_keeps_the_selected_file(lab, tmp_path):
    write_stream(tmp_path / "a_log.csv", n=300)
    write_stream(tmp_path / "b_log.csv", n=300)
    app = NotedApp(tmp_path)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        folder_screen = app.screen
        await pilot.press("down")
        assert folder_screen.selected.path.name == "b_log.csv"
        shutil.copytree(lab.archive, tmp_path / "a_new.tsarchive")  # archives list first: rows shift by one
        await pilot.press("r")
        await settle(app, pilot)
        assert [r[0] for r in cells(folder_screen.query_one("#folder-table"))][0] == "a_new.tsarchive"
        assert folder_screen.selected.path.name == "b_log.csv"


# -- states in words (NO_COLOR shows no colour) -----------------------------------------------------------
async def test_export_format_and_replace_say_their_state(lab, tmp_path):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        await open_contents(app, pilot)
        await pilot.press("e")
        await settle(app, pilot)
        export = app.screen
        assert isinstance(export, ExportScreen)
        labels = lambda: [str(export.query_one(f"#format-{f}").label) for f in ("csv", "parquet", "npy")]
        assert labels() == ["CSV (chosen)", "PARQUET", "NPY"]
        export.query_one("#format-parquet").value = True
        await settle(app, pilot)
        assert labels() == ["CSV", "PARQUET (chosen)", "NPY"]
    shutil.copy(lab.csv, tmp_path / lab.csv.name)
    app = NotedApp(tmp_path / lab.csv.name)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        await pilot.press("p")
        await settle(app, pilot)
        box = app.screen.query_one("#packing-replace")
        assert str(box.label) == "replace: no"
        box.value = True
        await settle(app, pilot)
        assert str(box.label) == "replace: yes"


async def test_used_is_explained_where_it_is_shown(lab, capsys):
    app = NotedApp(lab.archive)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        assert "Near 100 % is the aim" in str(app.screen.query_one("#contents-state").render())
    code, out, _ = _cli(capsys, "report", lab.archive)
    assert code == 0 and "near 100 is the aim" in out


async def test_keys_screen_explains_every_screen_name(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        await pilot.press("f1")
        await settle(app, pilot)
        assert isinstance(app.screen, KeysScreen)
        rows = cells(app.screen.query_one("#keys-table"))
        explained = {r[1]: r[2] for r in rows if r[0] == "Screen"}
        # every screen class's title word (the title bars' first word)
        assert set(explained) == {"Folder", "Packing", "Contents", "Strip", "Shortlist", "Export", "Keys"}
        assert all(len(about.split()) >= 5 for about in explained.values())
        assert any(r[1] == "q" and "quit" in r[2] for r in rows if r[0] == "Strip")
        assert any("PgDn" in r[1] and "next window" in r[2] for r in rows if r[0] == "Strip")


# -- 80 x 24 ------------------------------------------------------------------------------------------------
def _on_screen(widget, size=(80, 24)) -> bool:
    r = widget.region
    return r.width > 0 and r.height > 0 and r.x >= 0 and r.y >= 0 and r.right <= size[0] and r.bottom <= size[1]


def _all_on_screen(screen, selectors) -> list[str]:
    """The selectors whose widget is not wholly inside the 80 x 24 terminal."""
    return [s for s in selectors if not _on_screen(screen.query_one(s))]


async def test_every_screen_fits_80_by_24(lab, tmp_path):
    shutil.copy(lab.csv, tmp_path / lab.csv.name)
    shutil.copytree(lab.archive, tmp_path / lab.archive.name)
    app = NotedApp(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert isinstance(app.screen, FolderScreen)
        assert _all_on_screen(app.screen, ["#folder-title", "#folder-table", "#folder-note", "Footer"]) == []
        await pilot.press("down", "p")
        await settle(app, pilot)
        assert isinstance(app.screen, PackingScreen)
        assert _all_on_screen(app.screen, ["#packing-title", "#packing-info", ".budget-input", "#packing-target",
                                           "#packing-replace", "#packing-start", "Footer"]) == []
        await pilot.press("escape", "up", "enter")
        await settle(app, pilot)
        assert isinstance(app.screen, ContentsScreen)
        assert _all_on_screen(app.screen, ["#contents-title", "#contents-caution", "#contents-state",
                                           "#contents-table", "Footer"]) == []
        await pilot.press("s")
        await settle(app, pilot)
        assert isinstance(app.screen, StripScreen)
        assert _all_on_screen(app.screen, ["#strip-title", "#strip-windows", "#strip-jump", "#strip-plot",
                                           "#strip-info", "Footer"]) == []
        await pilot.press("w", "u")
        await settle(app, pilot)
        assert isinstance(app.screen, ShortlistScreen)
        assert _all_on_screen(app.screen, ["#shortlist-title", "#shortlist-about", "#shortlist-table",
                                           "Footer"]) == []
        await pilot.press("escape", "e")
        await settle(app, pilot)
        assert isinstance(app.screen, ExportScreen)
        assert _all_on_screen(app.screen, ["#export-from", "#export-to", "#export-channels", "#export-format",
                                           "#export-name", "#export-go", "#export-status", "Footer"]) == []
        await pilot.press("escape", "f1")
        await settle(app, pilot)
        assert isinstance(app.screen, KeysScreen)
        assert _all_on_screen(app.screen, ["#keys-table", "Footer"]) == []
        assert not app.errors()
