"""Pilot tests of the Textual app, driven by key presses against the real library.

One small invented recording (2 channels x 20 s at 100 Hz, tests/app_helpers.py) is packed once
per session with window 64; tests that write copy it into their own folder first. Expected
values come from outside the app: the library's own reader (``tsarchive.open``), numpy on the
original samples, and the definitions named beside each check.
"""

from __future__ import annotations

import math
import shutil

import numpy as np
import pyarrow.parquet as pq
import pytest

import tsarchive
from app_helpers import (N, RATE, SPIKE_AT, WINDOW, Lab, NotedApp, cells, copy_lab, open_contents, open_strip, settle,
                         write_stream)
from tsarchive.app import fmt
from tsarchive.app.locate import free_archive_name, read_time
from tsarchive.budget import spec_from_fields
from tsarchive.app.screens.packing import PackingScreen
from tsarchive.app.screens.export import ExportScreen, default_name
from tsarchive.app.screens.shortlist import ShortlistScreen
from tsarchive.index import look
from tsarchive.app.screens.keys import KeysScreen
from tsarchive.app.screens.contents import ContentsScreen
from tsarchive.app.screens.folder import FolderScreen
from tsarchive.app.screens.strip import StripScreen
from tsarchive.app.summary import FAILED, check_lines, window_at
from tsarchive.app.widgets.caution import Caution
from tsarchive.app.widgets.stage_progress import StageProgress
from tsarchive.app.widgets.strip_plot import StripPlot

BUDGET = "temp=0.05,accel=0.5%"
N_WINDOWS = math.ceil(N / WINDOW)  # fixed windows: ceil(n / W) per channel (definition) = 32


@pytest.fixture(scope="session")
def lab(tmp_path_factory) -> Lab:
    """A folder with the CSV, its archive (packed once) and a .npy without a rate."""
    folder = tmp_path_factory.mktemp("app_lab")
    cols = write_stream(folder / "bench_log.csv")
    # segment given: a recording this short gets no index within its byte budget (tsarchive/index/budget.py)
    tsarchive.pack(folder / "bench_log.csv", folder / "bench_log.tsarchive", BUDGET, window=WINDOW, code_size=4,
                   train_seconds=1.0, segment=16)
    np.save(folder / "probe.npy", cols["accel"][:500])
    return Lab(folder, cols)


# -- 1. Folder ---------------------------------------------------------------------------------
async def test_shelf_lists_recordings_and_archives_with_details(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        folder_screen = app.screen
        assert isinstance(folder_screen, FolderScreen)
        rows = {r[0]: r for r in cells(folder_screen.query_one("#folder-table"))}
        assert list(rows) == ["bench_log.tsarchive", "bench_log.csv", "probe.npy"]  # archives first, then by name
        arc = tsarchive.open(lab.archive)
        name, kind, size, length, nch, ratio, check = rows["bench_log.tsarchive"]
        assert (kind, nch, check) == ("archive", "2", "unverified")
        assert length == fmt.duration(N / RATE) == "20 s"  # duration = samples / rate
        assert ratio == fmt.ratio(arc.ratio)
        assert size == fmt.size(sum(p.stat().st_size for p in lab.archive.rglob("*") if p.is_file()))
        csv_row = rows["bench_log.csv"]
        assert csv_row[1:5] == ["recording", fmt.size(lab.csv.stat().st_size), "20 s", "2"]
        assert rows["probe.npy"][3] == "needs rate"  # a .npy carries no rate: not "unreadable"
        await pilot.press("down", "down")
        note = str(folder_screen.query_one("#folder-note").render())
        assert "probe.npy" in note and "type its rate" in note and "--rate" not in note   # asked in the app


async def test_start_on_missing_path_is_a_notification_not_a_crash(tmp_path):
    app = NotedApp(tmp_path / "nowhere")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert isinstance(app.screen, FolderScreen)
        assert any("does not exist" in e for e in app.errors())


# -- 2. Packing ------------------------------------------------------------------------------
async def test_pack_cancel_leaves_no_archive(lab, tmp_path):
    here = copy_lab(lab, tmp_path, archive=False)
    app = NotedApp(here.csv)
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        await pilot.press("p")
        await settle(app, pilot)
        await pilot.press("tab", "tab", "tab", *"64", "tab", "tab", *"30")  # long training: time to cancel
        # Start without a key press: Pilot waits for an idle CPU after each key, and training is not idle.
        app.screen.action_start()
        assert app.screen.running
        await pilot.press("escape")  # while packing, Escape cancels
        await settle(app, pilot)
        packing = app.screen
        assert isinstance(packing, PackingScreen) and not packing.running and packing.result is None
        assert "Cancelled" in str(packing.query_one("#packing-result").render())
        assert sorted(p.name for p in here.folder.iterdir()) == ["bench_log.csv"]  # no archive, no staging


async def test_bench_refuses_bad_fields_with_notifications(lab, tmp_path):
    here = copy_lab(lab, tmp_path)
    app = NotedApp(here.csv)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("p")
        await settle(app, pilot)
        packing = app.screen
        await pilot.press(*"abc", "ctrl+s")
        await settle(app, pilot)
        assert packing.result is None and any("abc" in e for e in app.errors())
        await pilot.press("ctrl+u", *"0.1%")
        packing.query_one("#packing-target").focus()
        await pilot.press(*"bench_log", "ctrl+s")  # bench_log.tsarchive exists, 'replace' not ticked
        await settle(app, pilot)
        assert any("already exists" in e for e in app.errors())
        assert packing.result is None


async def test_npy_needs_a_rate_typed_on_the_packing(lab, tmp_path):
    shutil.copy(lab.folder / "probe.npy", tmp_path / "probe.npy")
    app = NotedApp(tmp_path / "probe.npy")
    async with app.run_test(size=(100, 40)) as pilot:
        await settle(app, pilot)
        await pilot.press("p")
        await settle(app, pilot)
        assert any("rate" in e for e in app.errors())
        packing = app.screen
        assert not list(packing.query(".budget-name"))
        assert "needs a sample rate" in str(packing.query_one("#packing-info").render())
        assert app.focused.id == "packing-rate"  # the field to fill has the focus
        await pilot.press(*"250", "enter")
        await settle(app, pilot)
        assert "250 Hz" in str(packing.query_one("#packing-info").render())
        assert fmt.duration(500 / 250) in str(packing.query_one("#packing-info").render())  # samples / rate
        assert [str(w.render()) for w in packing.query(".budget-name")] == ["ch0"]


# -- 3. Contents ------------------------------------------------------------------------------------
@pytest.mark.parametrize("size", [(100, 40), (80, 24)])
async def test_contents_channels_state_and_caution(lab, size):
    app = NotedApp(lab.archive)  # an archive path opens the Contents screen over the Folder screen
    async with app.run_test(size=size) as pilot:
        await settle(app, pilot)
        contents = app.screen
        assert isinstance(contents, ContentsScreen)
        arc = tsarchive.open(lab.archive)
        rows = cells(contents.query_one("#contents-table"))
        assert [r[0] for r in rows] == ["temp", "accel"]
        for row, ch in zip(rows, arc.channels):
            assert row[1:4] == [ch.unit, "100 Hz", "20 s"]
            assert row[4].startswith(ch.budget) and fmt.num(ch.eps) in row[4]
            assert row[5:] == [fmt.num(ch.worst_error), fmt.pct(ch.used_pct), fmt.ratio(ch.ratio),
                               f"{ch.bits_per_sample:.2f}"]
            assert ch.worst_error <= ch.eps
        state = str(contents.query_one("#contents-state").render())
        assert state.startswith("Within budget") and "unverified" in state and "bench_log.csv found" in state
        caution = contents.query_one(Caution)
        text = str(caution.render())
        for words in ("lossy", "quality or retention rules", "Keep the original", "verifies",
                      "quality system", "regulations"):
            assert words in text
        region = caution.region
        assert caution.display and region.height >= 2 and region.bottom <= size[1] and region.right <= size[0]
        # the mouse: a click puts the cursor on a row, a second click opens that channel in the Strip
        await pilot.click("#contents-table", offset=(3, 2))
        await pilot.click("#contents-table", offset=(3, 2))
        await settle(app, pilot)
        assert isinstance(app.screen, StripScreen) and app.screen.meta.name == "accel"


# -- 6. Verify ------------------------------------------------------------------------------------
async def test_verify_ok_is_remembered_for_the_session(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        contents = await open_contents(app, pilot)
        await pilot.press("v")
        await settle(app, pilot)
        panel = str(contents.query_one("#contents-check").render())
        assert panel.startswith("Verified ok") and "compared with bench_log.csv" in panel
        assert "verified ok" in str(contents.query_one("#contents-state").render())
        await pilot.press("escape")
        await settle(app, pilot)
        assert cells(app.screen.query_one("#folder-table"))[0][-1] == "verified ok"


async def test_verify_failure_names_the_window(lab, tmp_path):
    here = copy_lab(lab, tmp_path)
    k = 500  # change one original sample by far more than temp's budget (0.05 degC)
    text = here.csv.read_text().splitlines()
    t, temp, accel = text[1 + k].split(",")
    text[1 + k] = f"{t},{float(temp) + 1.0:.2f},{accel}"
    here.csv.write_text("\n".join(text) + "\n")
    app = NotedApp(here.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        contents = await open_contents(app, pilot)
        await pilot.press("v")
        await settle(app, pilot)
        panel = str(contents.query_one("#contents-check").render())
        w = k // WINDOW  # fixed windows of W samples: sample k lies in window floor(k / W) = 7
        assert panel.startswith("Verification FAILED")
        assert f"#{w} (at {w * WINDOW / RATE:.2f} s)" in panel  # start of window 7 = 448 / 100 Hz
        assert "temp: 1 samples" in panel
        assert "bench_log.csv is not the file that was packed (SHA-256 differs" in panel  # named, then compared
        await pilot.press("escape")
        await settle(app, pilot)
        assert cells(app.screen.query_one("#folder-table"))[0][-1] == "failed"


async def test_broken_archive_is_reported_in_app(tmp_path):
    (tmp_path / "broken.tsa").mkdir()
    (tmp_path / "broken.tsa" / "note.txt").write_text("not an archive")
    app = NotedApp(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert cells(app.screen.query_one("#folder-table"))[0][3] == "unreadable"
        await pilot.press("enter")
        await settle(app, pilot)
        assert any("not a tsarchive archive" in e for e in app.errors())
        assert app.is_running


# -- 4. Strip ---------------------------------------------------------------------------------------
async def test_strip_windows_plot_and_keys(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=1)
        arc = tsarchive.open(lab.archive)
        meta, table = arc.channel("accel"), arc.windows("accel")
        rows = cells(strip.query_one("#strip-windows"))
        assert len(rows) == N_WINDOWS
        assert [r[1] for r in rows[:3]] == ["+0:00.00", "+0:00.64", "+0:01.28"]  # elapsed starts k * 64 / 100 Hz
        assert [r[4] for r in rows] == list(table.mode)
        plot = strip.query_one(StripPlot)
        assert set(plot.drawn) == {"original", "archive", "preview", "error"}
        assert plot.band == pytest.approx(meta.eps)
        assert strip.view == (0, 3 * WINDOW)
        s = strip.stretch
        assert np.array_equal(s.original, lab.cols["accel"][:3 * WINDOW])  # the source, read back
        assert np.max(np.abs(s.error)) <= meta.eps  # error inside the ±budget band
        await pilot.press("n", "n")
        await settle(app, pilot)
        assert strip.current == 2 and strip.view == (2 * WINDOW + WINDOW // 2 - 96, 2 * WINDOW + WINDOW // 2 + 96)
        await pilot.press("b")
        await pilot.press("plus")
        await settle(app, pilot)
        a, b = strip.view
        assert strip.current == 1 and b - a == 96  # zoom in halves the span
        await pilot.press("right_square_bracket")
        await settle(app, pilot)
        assert strip.view == (a + 48, b + 48)  # pan by half the span
        await pilot.press("minus")
        await settle(app, pilot)
        assert strip.view[1] - strip.view[0] == 192  # zoom out doubles it
        await pilot.press("t", *"12.5", "enter")
        await settle(app, pilot)
        assert strip.current == int(12.5 * RATE) // WINDOW  # window holding sample 1250 = 19
        await pilot.press("t", *"0:03.2", "enter")
        await settle(app, pilot)
        assert strip.current == 320 // WINDOW
        await pilot.press("w")
        await settle(app, pilot)
        assert strip.current == int(np.argmax(table.worst_error))
        info = str(strip.query_one("#strip-info").render())
        assert f"window #{strip.current} of {N_WINDOWS}" in info


async def test_strip_without_the_original_shows_the_archive_only(lab, tmp_path):
    shutil.copytree(lab.archive, tmp_path / lab.archive.name)  # no bench_log.csv beside it
    app = NotedApp(tmp_path / lab.archive.name)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert "bench_log.csv not found" in str(app.screen.query_one("#contents-state").render())
        await pilot.press("s")
        await settle(app, pilot)
        strip = app.screen
        assert set(strip.query_one(StripPlot).drawn) == {"archive", "preview"}
        assert not strip.query_one("#plot-error").display
        assert "original not at hand: put bench_log.csv next to the archive" in str(
            strip.query_one("#strip-info").render())
        arc = tsarchive.open(lab.archive)
        assert np.array_equal(strip.stretch.rebuilt, arc.read("temp", 0, 3 * WINDOW / RATE))


# -- 5. Shortlist ------------------------------------------------------------------------------------
async def test_shortlist_unusual_and_alike_jump_the_strip(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=1)
        arc = tsarchive.open(lab.archive)
        await pilot.press("u")
        await settle(app, pilot)
        shortlist = app.screen
        assert isinstance(shortlist, ShortlistScreen)
        found = look.unusual(arc, "accel", k=20)           # the same library call as `tsarchive unusual`
        ranked = [r.start // WINDOW for r in found.rows]
        assert found.unit == "segment" and [w for w, _ in shortlist.rows] == ranked
        assert ranked[0] == SPIKE_AT // WINDOW  # the injected spike stands out most (window 19)
        await pilot.press("down", "enter")
        await settle(app, pilot)
        assert app.screen is strip and strip.current == ranked[1]
        await pilot.press("l")
        await settle(app, pilot)
        seg = ranked[1] * WINDOW // found.size
        alike = look.alike(arc, seg, "accel", k=20).rows
        assert app.screen.rows == [(r.start // WINDOW, pytest.approx(r.figure)) for r in alike]
        assert f"segment #{seg}" in str(app.screen.query_one("#shortlist-title").render())
        await pilot.press("enter")
        await settle(app, pilot)
        assert strip.current == alike[0].start // WINDOW


# -- 6. Export --------------------------------------------------------------------------------------
async def test_export_typed_range_to_parquet_and_view_to_npy(lab, tmp_path):
    here = copy_lab(lab, tmp_path)
    app = NotedApp(here.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        contents = await open_contents(app, pilot)
        await pilot.press("e")
        await settle(app, pilot)
        assert isinstance(app.screen, ExportScreen)
        await pilot.press(*"2", "tab", *"4", "tab", "tab", "right", "enter")  # range, all channels, Parquet
        assert app.screen.query_one("#export-name").value == "bench_log_2-4s.parquet"
        await pilot.press("ctrl+s")
        await settle(app, pilot)
        assert app.screen is contents
        table = pq.read_table(here.folder / "bench_log_2-4s.parquet")
        arc = tsarchive.open(here.archive)
        assert table.num_rows == int((4 - 2) * RATE)  # samples in [2 s, 4 s) at 100 Hz
        for name in ("temp", "accel"):
            col = [c for c in table.column_names if c.split(" ")[0] == name][0]
            assert np.array_equal(table.column(col).to_numpy(), arc.read(name, 2, 4))
        await pilot.press("down", "s")
        await settle(app, pilot)
        await pilot.press("e")
        await settle(app, pilot)
        export = app.screen
        assert export.query_one("#export-from").value == "0:00:00"            # elapsed h:mm:ss, read back exactly
        assert export.query_one("#export-to").value == "0:00:01.92"
        assert export.query_one("#export-channels").value == "accel"
        export.query_one("#export-format").focus()
        await pilot.press("right", "right", "enter", "ctrl+s")
        await settle(app, pilot)
        saved = np.load(here.folder / "bench_log_0-1.92s.npy")
        assert saved.shape[0] == 3 * WINDOW and np.array_equal(saved.reshape(-1), arc.read("accel", 0, 1.92))


async def test_export_asks_before_replacing_and_never_replaces_the_recording(lab, tmp_path):
    here = copy_lab(lab, tmp_path)
    source = here.csv.read_bytes()
    (here.folder / "old.csv").write_text("keep me\n")
    app = NotedApp(here.folder)
    async with app.run_test(size=(100, 40)) as pilot:
        await open_contents(app, pilot)
        await pilot.press("e")
        await settle(app, pilot)
        export = app.screen
        assert export.query_one("#export-name").value == "bench_log.csv"  # the recording's own name
        await pilot.press("ctrl+s")
        await settle(app, pilot)
        assert "press Export again" in str(export.query_one("#export-status").render())
        await pilot.press("ctrl+s")  # the explicit second press still cannot replace the recording
        await settle(app, pilot)
        assert here.csv.read_bytes() == source and any("packed from" in e for e in app.errors())
        export.query_one("#export-name").value = "old.csv"
        await pilot.press("ctrl+s")
        await settle(app, pilot)
        assert (here.folder / "old.csv").read_text() == "keep me\n" and app.screen is export
        await pilot.press("ctrl+s")
        await settle(app, pilot)
        assert (here.folder / "old.csv").read_text().startswith("# reconstruction") and app.screen is not export


# -- 7. Comfort ---------------------------------------------------------------------------------------
async def test_keys_screen_lists_every_screen(lab):
    app = NotedApp(lab.folder)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("f1")
        await settle(app, pilot)
        assert isinstance(app.screen, KeysScreen)
        rows = cells(app.screen.query_one("#keys-table"))
        where = {r[0] for r in rows}
        assert {"Folder", "Packing", "Contents", "Strip", "Shortlist", "Export"} <= where
        assert ["Strip", "w", "go to the window with the largest error"] in rows
        await pilot.press("escape")
        assert isinstance(app.screen, FolderScreen)


async def test_runs_with_no_color(lab, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    app = NotedApp(lab.archive)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.no_color  # Textual reads NO_COLOR and filters all colour out
        assert isinstance(app.screen, ContentsScreen)
        assert app.screen.query_one(Caution).has_pseudo_class("nocolor")
        await pilot.press("s")
        await settle(app, pilot)
        assert isinstance(app.screen, StripScreen) and app.screen.query_one(StripPlot).drawn
        assert not app.errors()


async def test_new_user_journey_by_keys_only(tmp_path):
    """Pack a sample-like stream, open it, find the worst window plotted against its budget band,
    verify, and export a 10-second range -- only key presses, on a 80 x 24 terminal.
    Along the way: what the Packing screen shows before and after packing."""
    cols = write_stream(tmp_path / "soak_log.csv")
    app = NotedApp(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("enter")  # the only recording -> Packing
        await settle(app, pilot)
        packing = app.screen
        assert isinstance(packing, PackingScreen)
        info = str(packing.query_one("#packing-info").render())
        assert "100 Hz" in info and "2000 samples" in info
        assert [str(w.render()) for w in packing.query(".budget-name")] == ["temp [degC]", "accel [m/s2]"]
        assert [str(w.render()) for w in packing.query(".budget-step")] == ["step 0.01", "step 0.001"]  # as written
        assert [i.value for i in packing.query(".budget-input")] == ["0.1%", "0.1%"]  # the default shown
        # temp budget 0.05 degC (its field has focus, text selected), window 64, codes of 4 numbers (asked
        # for, so the autoencoder trains whatever it saves), 1 s of training, start
        await pilot.press(*"0.05", "tab", "tab", "tab", *"64", "tab", "4", "tab", *"1", "ctrl+s")
        await settle(app, pilot)
        assert packing.result is not None, app.errors()
        progress = packing.query_one(StageProgress)
        assert progress.lines["train"].startswith("epoch") and "loss" in progress.lines["train"]
        assert progress.lines["encode"].startswith(f"windows {2 * N_WINDOWS}/{2 * N_WINDOWS}")
        arc = tsarchive.open(tmp_path / "soak_log.tsarchive")
        assert arc.channel("temp").eps == pytest.approx(0.05)
        summary = {r[0]: r for r in cells(packing.query_one("#packing-summary"))}
        for ch in arc.channels:
            _name, _budget, worst, used, ratio, bits = summary[ch.name]
            assert worst == f"{fmt.num(ch.worst_error)} {ch.unit}"
            assert used == fmt.pct(100 * ch.worst_error / ch.eps)  # % of budget used = worst / eps
            assert ratio == fmt.ratio(ch.ratio) and bits == f"{ch.bits_per_sample:.2f}"
            assert np.max(np.abs(arc.read(ch.name) - cols[ch.name])) <= ch.eps  # |x^ - x| <= eps, by numpy
        await pilot.press("ctrl+o")  # -> Contents
        await settle(app, pilot)
        assert isinstance(app.screen, ContentsScreen)
        await pilot.press("down", "enter")  # accel -> Strip
        await settle(app, pilot)
        await pilot.press("w")  # worst window
        await settle(app, pilot)
        strip = app.screen
        worst = arc.windows("accel").worst_error
        assert strip.current == int(np.argmax(worst))
        plot = strip.query_one(StripPlot)
        assert "error" in plot.drawn and plot.band == pytest.approx(arc.channel("accel").eps)
        # the plotted peak is the window's worst error, which the archive stores rounded up to 1/250 of eps
        peak, eps = np.max(np.abs(strip.stretch.error)), arc.channel("accel").eps
        assert worst.max() - eps / 250 <= peak <= worst.max()
        await pilot.press("escape", "v")  # back to the Contents screen, verify
        await settle(app, pilot)
        assert "verified ok" in str(app.screen.query_one("#contents-state").render())
        await pilot.press("e", *"5", "tab", *"15", "ctrl+s")  # 10 s, all channels, CSV
        await settle(app, pilot)
        out = tmp_path / "soak_log_5-15s.csv"
        rows = [r for r in out.read_text().splitlines() if not r.startswith("#")]  # "#": the reconstruction note
        assert len(rows) == 1 + int(10 * RATE)  # header + 10 s x 100 Hz
        back = np.loadtxt(rows[1:], delimiter=",")
        for j, name in enumerate(("temp", "accel")):
            original = cols[name][500:1500]
            assert np.max(np.abs(back[:, j + 1] - original)) <= arc.channel(name).eps + 1e-9  # within budget
        assert not app.errors()


# -- the app's small text helpers ---------------------------------------------------------------------
def test_times_typed_and_shown_agree():
    assert fmt.clock(75.25) == "1:15.25"  # 75.25 s = 1 min 15.25 s
    assert read_time("1:15.25") == 75.25 and read_time("1:01:15") == 3675  # 1 h = 3600 s
    assert read_time("90s") == 90 and read_time("5min") == 300 and read_time("") is None
    with pytest.raises(tsarchive.BadInput):
        read_time("soon")
    starts = np.arange(4) * WINDOW / RATE  # windows are half-open [k W, (k + 1) W): a start belongs to its window
    assert [window_at(starts, x) for x in (0.0, 0.639, 0.64, 99.0)] == [0, 0, 1, 3]


def test_budget_fields_become_one_spec_the_library_reads():
    # the library's parser of typed specs is the reference: the fields mean what "name=spec,..." means
    assert spec_from_fields(["temp", "accel"], ["0.1%", ""]) == tsarchive.parse_budget_spec("0.1%")  # empty = default
    spec = spec_from_fields(["temp", "accel"], ["0.02", "lossless"])
    assert spec == tsarchive.parse_budget_spec("0.1%,temp=0.02,accel=lossless")
    assert spec.for_channel("temp").spec == "0.02" and spec.for_channel("accel").spec == "lossless"
    with pytest.raises(tsarchive.BadInput):
        spec_from_fields(["temp"], ["a=1"])


def test_names_proposed_for_new_files(tmp_path):
    assert default_name("run", 5.0, 15.0) == "run_5-15s.csv" and default_name("run", None, None, ".npy") == "run.npy"
    (tmp_path / "run.tsarchive").mkdir()
    assert free_archive_name(tmp_path, "run") == "run-2.tsarchive" and free_archive_name(tmp_path, "new") == "new.tsarchive"


def test_check_panel_names_failing_windows_with_their_start():
    report = tsarchive.VerifyReport(ok=False, checksums_ok=True, compared=True, channels=(
        tsarchive.ChannelCheck("temp", 0.05, 1.0, 1, (3,)), tsarchive.ChannelCheck("accel", 0.01, 0.0, 0, ())),
        problems=("channel temp: 1 sample(s) outside",))
    lines = check_lines(report, "run.csv", {"temp": np.arange(32) * WINDOW / RATE})
    assert lines.state == FAILED and lines.headline.startswith("Verification FAILED")
    assert lines.details[0] == "temp: 1 samples over its budget 0.05; failing windows #3 (at 1.92 s)"  # 3*64/100
