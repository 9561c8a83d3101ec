"""Pilot tests: the app shows time as time, plots that read, and honest labels (issue 14).

Each recording is invented here (no real lab or device) and packed once per module with
window 64 and no learned codes (``code_size=0``) unless said otherwise. Expected values come
from outside the app: the numbers written to the source files, Python's ``datetime``, numpy,
and the library's own reader (``tsarchive.open``).
"""

from __future__ import annotations

from datetime import datetime, timedelta

from crafting import archive_identity, manifest, write_manifest
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import tsarchive
from app_helpers import NotedApp, cells, open_strip, settle, write_stream
from tsarchive.app.screens.shortlist import ShortlistScreen
from tsarchive.app.widgets.strip_plot import StripPlot

W = 64
T0 = datetime(2026, 3, 4, 9, 15, 0)
GAP_AT, GAP_TO = 300, 1000.0  # the gapped recording: samples 300.. start at 1000 s


def _pack(folder, name, budget="0.05", **options):
    tsarchive.pack(folder / name, folder / (folder / name).with_suffix(".tsarchive").name, budget, window=W,
                   code_size=options.pop("code_size", 0), segment=options.pop("segment", 16), **options)


@pytest.fixture(scope="module")
def shelves(tmp_path_factory):
    """One folder per recording, each holding the source and its archive."""
    root = tmp_path_factory.mktemp("app_time")
    out = {}
    d = root / "clock"; d.mkdir()  # noqa: E702 - logged with real times, 10 Hz, on a 0.01 grid
    ts = np.datetime64(T0) + np.arange(600) * np.timedelta64(100, "ms")
    (d / "clock.csv").write_text("time,temp\n" + "".join(
        f"{str(t)},{20 + 0.01 * (i % 7):.2f}\n" for i, t in enumerate(ts.astype("datetime64[ms]"))))
    _pack(d, "clock.csv")
    out["clock"] = d
    d = root / "gap"; d.mkdir()  # noqa: E702 - elapsed seconds with a gap
    t = np.r_[np.arange(GAP_AT) * 0.1, GAP_TO + np.arange(300) * 0.1]
    temp = np.round(20 + np.sin(np.arange(600) / 30), 2)
    (d / "gap.csv").write_text("time,temp\n" + "".join(f"{x:.1f},{y:.2f}\n" for x, y in zip(t, temp)))
    _pack(d, "gap.csv")
    out["gap"], out["gap_t"], out["gap_temp"] = d, np.round(t, 1), temp
    d = root / "nulls"; d.mkdir()  # noqa: E702 - an integer channel with missing samples
    vals = [None if i % 10 == 3 else 1000 + i % 50 for i in range(600)]
    pq.write_table(pa.table({"time": pa.array(np.arange(600) * 0.1), "count": pa.array(vals, pa.int64())}),
                   d / "nulls.parquet")
    _pack(d, "nulls.parquet", "lossless")
    out["nulls"], out["nulls_vals"] = d, vals
    d = root / "dense"; d.mkdir()  # noqa: E702 - 10 kHz, a fast tone
    n = 4000
    y = np.round(np.sin(2 * np.pi * 1500 * np.arange(n) / 10_000), 3)
    (d / "dense.csv").write_text("time,v\n" + "".join(f"{k / 10_000:.4f},{v:.3f}\n" for k, v in enumerate(y)))
    _pack(d, "dense.csv", "0.01")
    out["dense"] = d
    d = root / "steps"; d.mkdir()  # noqa: E702 - lossless, two levels 0.06 apart
    (d / "steps.csv").write_text("time,temp\n" + "".join(
        f"{i / 10:.1f},{20.06 if (i // 40) % 2 else 20.0:.2f}\n" for i in range(400)))
    _pack(d, "steps.csv", "lossless")
    out["steps"] = d
    d = root / "lab"; d.mkdir()  # noqa: E702 - the app tests' stream, no codes
    write_stream(d / "bench_log.csv")
    _pack(d, "bench_log.csv", "temp=0.05,accel=0.5%")
    out["lab"] = d
    return out


def clock_of(seconds: float) -> str:
    """T0 + seconds as hh:mm:ss.ss (Python's datetime, the reference)."""
    return (T0 + timedelta(seconds=seconds)).strftime("%H:%M:%S.%f")[:11]


# -- time shown as time ----------------------------------------------------------------------------
async def test_windows_and_axis_show_the_logged_time_of_day(shelves):
    app = NotedApp(shelves["clock"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        table = strip.query_one("#strip-windows")
        assert [str(c.label) for c in table.columns.values()][1] == "Time"
        rows = cells(table)
        # window k starts at sample 64 k, logged 0.1 s apart from 09:15:00 (as written to clock.csv)
        assert [r[1] for r in rows[:3]] == [clock_of(0), clock_of(6.4), clock_of(12.8)]
        plot = strip.query_one(StripPlot)
        xs, labels = plot.x_ticks
        assert len(xs) >= 2 and labels == [clock_of(x) for x in xs]
        assert "started 2026-03-04 09:15:00.00" in str(strip.query_one("#strip-info").render())


async def test_gapped_recording_uses_the_logged_times_not_sample_over_rate(shelves):
    t, temp = shelves["gap_t"], shelves["gap_temp"]
    app = NotedApp(shelves["gap"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        rows = cells(strip.query_one("#strip-windows"))
        # window 5 starts at sample 320, logged at 1000 + 20 * 0.1 = 1002.0 s: elapsed 16 min 42 s
        assert str(list(strip.query_one("#strip-windows").columns.values())[1].label) == "Elapsed"
        assert rows[5][1] == "+16:42.00" and rows[4][1] == "+0:25.60"
        await pilot.press("t", *"1002", "enter")
        await settle(app, pilot)
        a, b = strip.view
        assert a <= 320 < b
        s = strip.stretch
        assert np.array_equal(s.t, t[a:b])                         # the logged times, exactly
        assert np.max(np.abs(s.rebuilt - temp[a:b])) <= 0.05       # the samples of those times


async def test_jump_centres_on_the_time_even_inside_the_current_window(shelves):
    app = NotedApp(shelves["lab"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        await pilot.press("t", *"12.5", "enter")
        await settle(app, pilot)
        span = 3 * W
        assert strip.view == (1250 - span // 2, 1250 + span // 2)   # 12.5 s at 100 Hz = sample 1250
        assert strip.current == 1250 // W
        await pilot.press("t", *"12.2", "enter")                    # sample 1220, the same window 19
        await settle(app, pilot)
        assert strip.view == (1220 - span // 2, 1220 + span // 2) and strip.current == 19
        await pilot.press("minus", "minus")
        await settle(app, pilot)
        await pilot.press("t", *"3", "enter")                       # sample 300 in a 768-sample view
        await settle(app, pilot)
        assert strip.view == (0, 4 * span) and strip.current == 300 // W  # clamped at the start


# -- plots people can read ---------------------------------------------------------------------------
async def test_missing_integer_samples_are_gaps_in_the_plot(shelves):
    vals = shelves["nulls_vals"]
    app = NotedApp(shelves["nulls"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        a, b = strip.view
        got = strip.stretch.rebuilt
        want = np.array([np.nan if v is None else float(v) for v in vals[a:b]])
        assert np.array_equal(np.isnan(got), np.isnan(want))     # missing exactly where the Parquet had nulls
        assert np.array_equal(got[~np.isnan(got)], want[~np.isnan(want)])   # lossless: the integers themselves


async def test_dense_recording_is_drawn_as_a_min_max_envelope(shelves):
    app = NotedApp(shelves["dense"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        plot = strip.query_one(StripPlot)
        a, b = strip.view
        assert b - a == 3 * W
        await pilot.press("minus", "minus", "minus")
        await settle(app, pilot)
        a, b = strip.view
        width = plot.query_one("#plot-signal").size.width
        assert b - a > 2 * width and plot.drawn["archive"] <= width  # one point per column, not a zigzag
        assert plot.enveloped and "each column's lowest and highest value" in str(
            strip.query_one("#strip-info").render())


def test_envelope_keeps_each_columns_extremes():
    from tsarchive.app.widgets.strip_plot import envelope

    rng = np.random.default_rng(3)
    y = rng.standard_normal(1000)
    y[[17, 500]] = np.nan
    t = np.arange(1000.0)
    tt, low, high = envelope(t, y, 7)
    edges = np.linspace(0, 1000, 8).astype(int)
    # numpy's nanmin / nanmax over each bucket (the reference)
    assert np.array_equal(low, [np.nanmin(y[p:q]) for p, q in zip(edges[:-1], edges[1:])])
    assert np.array_equal(high, [np.nanmax(y[p:q]) for p, q in zip(edges[:-1], edges[1:])])
    assert len(tt) == 7


async def test_small_steps_are_not_stretched_to_full_height_and_no_legend_box(shelves):
    app = NotedApp(shelves["clock"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        plot = strip.query_one(StripPlot)
        lo, hi = plot.y_limits
        x = strip.stretch.rebuilt
        assert lo <= x.min() and x.max() <= hi
        assert (x.max() - x.min()) / (hi - lo) <= 0.2    # 0.06 of data in at least 10 x the ±0.05 budget
        sig = plot.query_one("#plot-signal").plt
        assert not any(sig._active.monitor.label)    # no line has a label: plotext draws no legend box
        assert "archive" in plot.title


# -- honest labels ----------------------------------------------------------------------------------
async def test_rankings_say_what_they_are_based_on_without_codes(shelves):
    app = NotedApp(shelves["lab"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=1)
        assert "window means" in strip.query_one(StripPlot).title
        assert "code-only" not in strip.query_one(StripPlot).title
        await pilot.press("u")
        await settle(app, pilot)
        shortlist = app.screen
        assert isinstance(shortlist, ShortlistScreen)
        about = str(shortlist.query_one("#shortlist-about").render())
        # packed with the learned index (no window codes): the ranking names the index, not window codes
        assert "learned index" in about and "window codes" not in about
        await pilot.press("l")
        await settle(app, pilot)
        about = str(shortlist.query_one("#shortlist-about").render())
        assert "decoded segments" in about and "window codes" not in about


async def test_largest_errors_show_the_share_of_the_budget_not_the_error_twice(shelves):
    arc = tsarchive.open(shelves["lab"] / "bench_log.tsarchive")
    meta, table = arc.channel("accel"), arc.windows("accel")
    app = NotedApp(shelves["lab"])
    async with app.run_test(size=(80, 24)) as pilot:
        await open_strip(app, pilot, row=1)
        await pilot.press("u", "w")
        await settle(app, pilot)
        dt = app.screen.query_one("#shortlist-table")
        heads = [str(c.label) for c in dt.columns.values()]
        assert heads.count("Worst err") == 1 and "Used" in heads
        rows = cells(dt)
        top = int(np.argmax(table.worst_error))
        used = 100 * table.worst_error[top] / meta.eps                # share of the budget (definition)
        assert rows[0][heads.index("Used")] == f"{used:.1f} %"
        assert rows[0][heads.index("Worst err")] == f"{table.worst_error[top]:.3g}"


# -- true progress -----------------------------------------------------------------------------------
async def test_step_marks_do_not_fill_the_bar_while_work_goes_on():
    from textual.app import App
    from textual.widgets import ProgressBar

    from tsarchive.app.widgets.stage_progress import StageProgress

    class One(App):
        def compose(self):
            yield StageProgress()

    app = One()
    async with app.run_test(size=(80, 24)) as pilot:
        widget = app.query_one(StageProgress)
        bar = widget.query_one(ProgressBar)
        # pack says "read 1 of 1" when the file is parsed, then keeps planning before "encode" (pipeline.py)
        widget.advance(tsarchive.Progress("read", 1, 1, "2 channel(s), 2000 samples"))
        await pilot.pause()
        assert bar.percentage is None                  # pulsing, not a full bar
        widget.advance(tsarchive.Progress("encode", 30, 120))
        await pilot.pause()
        assert bar.percentage == pytest.approx(30 / 120)  # counted work: its true share


async def test_contents_names_the_real_start_or_says_times_are_elapsed(shelves):
    for folder, want in ((shelves["clock"], "Started 2026-03-04 09:15:00.00 (no zone logged)"),
                         (shelves["gap"], "Start time not logged (times are elapsed)")):
        app = NotedApp(folder)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.press("enter")
            await settle(app, pilot)
            state = str(app.screen.query_one("#contents-state").render())
            assert want in state.replace("\n", " ")


# -- the original, picked by hand --------------------------------------------------------------------
async def test_original_picked_by_path_gives_the_error_plot_and_is_remembered(shelves, tmp_path):
    import shutil

    from tsarchive.app.screens.contents import ContentsScreen

    lab = shelves["lab"]
    shutil.copytree(lab / "bench_log.tsarchive", tmp_path / "bench_log.tsarchive")  # alone, as demo leaves it
    app = NotedApp(tmp_path / "bench_log.tsarchive")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        contents = app.screen
        assert "bench_log.csv not found" in str(contents.query_one("#contents-state").render())
        await pilot.press("o")
        field = contents.query_one("#contents-original")
        assert field.has_focus
        field.value = str(tmp_path / "nowhere.csv")
        await pilot.press("enter")
        assert app.errors() and "is not a file" in app.errors()[-1]
        field.value = str(lab / "bench_log.csv")
        await pilot.press("enter")
        await settle(app, pilot)
        assert "original bench_log.csv found" in str(contents.query_one("#contents-state").render())
        await pilot.press("down", "s")                    # accel in the Strip
        await settle(app, pilot)
        plot = app.screen.query_one(StripPlot)
        assert "error" in plot.drawn and plot.band == pytest.approx(
            tsarchive.open(tmp_path / "bench_log.tsarchive").channel("accel").eps)
        await pilot.press("escape", "escape")            # Strip -> Contents -> Folder
        await settle(app, pilot)
        await pilot.press("enter")                       # the archive again: the choice is kept
        await settle(app, pilot)
        assert isinstance(app.screen, ContentsScreen) and app.screen is not contents
        assert "original bench_log.csv found" in str(app.screen.query_one("#contents-state").render())


async def test_lossless_small_step_is_not_stretched_to_full_height(shelves):
    app = NotedApp(shelves["steps"])
    async with app.run_test(size=(80, 24)) as pilot:
        strip = await open_strip(app, pilot, row=0)
        lo, hi = strip.query_one(StripPlot).y_limits
        x = strip.stretch.rebuilt
        assert set(np.unique(x).tolist()) == {20.0, 20.06}      # both levels in view (as written)
        assert (x.max() - x.min()) / (hi - lo) <= 0.1           # one 0.06 step in at least 10 steps of height


# -- a verification kept beside the archive ---------------------------------------------------------
async def test_demo_verification_is_kept_and_listed_as_verified(shelves, tmp_path):
    import shutil

    from tsarchive.demo import run_demo

    samples, out = tmp_path / "samples", tmp_path / "out"
    samples.mkdir()
    shutil.copy(shelves["steps"] / "steps.csv", samples / "steps.csv")
    run_demo(out, samples=samples, echo=lambda *_: None)   # packs and verifies against the source
    arc = out / "steps.tsarchive"
    sha = archive_identity(arc)                             # the record's name (crafting: read without tsarchive)
    assert (out / ".tsarchive-checks" / f"{sha}.json").is_file()
    app = NotedApp(out)                                     # a new session: nothing checked in it yet
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        rows = {r[0]: r for r in cells(app.screen.query_one("#folder-table"))}
        assert rows["steps.tsarchive"][-1] == "verified ok"
        await pilot.press("enter")
        await settle(app, pilot)
        assert "verified against steps.csv (SHA-256 " in str(app.screen.query_one("#contents-check").render())
    m = manifest(arc)
    m["model_note"] += " "
    write_manifest(arc, m)                                  # another archive now (another footer digest)
    app = NotedApp(out)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        rows = {r[0]: r for r in cells(app.screen.query_one("#folder-table"))}
        assert rows["steps.tsarchive"][-1] == "unverified"


async def test_a_verification_in_the_app_is_kept_for_the_next_session(shelves, tmp_path):
    import shutil

    for name in ("bench_log.csv", "bench_log.tsarchive"):
        (shutil.copytree if name.endswith("archive") else shutil.copy)(shelves["lab"] / name, tmp_path / name)
    app = NotedApp(tmp_path / "bench_log.tsarchive")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("v")
        await settle(app, pilot)
        assert app.screen.check_state == "verified ok"
    app = NotedApp(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        rows = {r[0]: r for r in cells(app.screen.query_one("#folder-table"))}
        assert rows["bench_log.tsarchive"][-1] == "verified ok"


def test_window_starts_read_in_chunks_match_the_whole_axis(shelves, monkeypatch):
    from tsarchive.app import timing

    tl = tsarchive.open(shelves["gap"] / "gap.tsarchive").timeline
    starts = np.arange(0, 600, W)
    whole = timing.elapsed(tl, 0, tl.n)[starts]
    monkeypatch.setattr(timing, "WHOLE", 7)                 # many small chunks, edges inside windows
    got = timing.elapsed_at(tl, starts)
    assert np.array_equal(got, whole)
    assert np.array_equal(got, shelves["gap_t"][starts])    # the times written to gap.csv (t0 = 0)
