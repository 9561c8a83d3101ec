"""The Shortlist in the app (Pilot): the index's rankings, and the honest fallbacks without an index."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

import tsarchive
from tsarchive.app.screens.shortlist import ShortlistScreen
from tsarchive.index import derived, look

from app_helpers import SPIKE_AT, WINDOW, NotedApp, open_strip, settle, write_stream

GOLDEN_V4 = Path(__file__).parent / "golden" / "v4" / "golden4"


def _shelf(tmp_path, **kw) -> Path:
    folder = tmp_path / "shelf"
    folder.mkdir()
    write_stream(folder / "bench_log.csv")
    tsarchive.pack(folder / "bench_log.csv", folder / "bench_log.tsarchive", "0.5%", window=WINDOW, **kw)
    (folder / "bench_log.csv").unlink()
    return folder


async def _about(app, pilot, key: str) -> str:
    await pilot.press(key)
    await settle(app, pilot)
    assert isinstance(app.screen, ShortlistScreen)
    return str(app.screen.query_one("#shortlist-about").render())


async def test_without_index_or_codes_the_rankings_say_so(tmp_path, monkeypatch):
    monkeypatch.setattr(derived, "MAX_SAMPLES", 0)        # every channel counts as too long to derive an index
    folder = _shelf(tmp_path, code_size=0, segment=0)
    app = NotedApp(folder)
    async with app.run_test(size=(100, 40)) as pilot:
        await open_strip(app, pilot, row=1)
        about = await _about(app, pilot, "u")
        assert "no learned codes" in about and "index" not in about.replace("no learned index", "")
        arc = tsarchive.open(folder / "bench_log.tsarchive")
        assert [w for w, _ in app.screen.rows] == arc.outliers("accel", k=20)
        assert "Window" in [str(c.label) for c in app.screen.query_one("#shortlist-table").columns.values()]
        about = await _about(app, pilot, "l")
        assert "shape" in about and "no learned codes" in about


async def test_with_window_codes_but_no_index_the_rankings_name_the_window_codes(tmp_path, monkeypatch):
    monkeypatch.setattr(derived, "MAX_SAMPLES", 0)        # every channel counts as too long to derive an index
    if not GOLDEN_V4.is_dir():
        pytest.skip("golden v4 archive missing")
    folder = tmp_path / "old"
    folder.mkdir()
    shutil.copytree(GOLDEN_V4, folder / "golden4.tsarchive")
    app = NotedApp(folder)
    async with app.run_test(size=(100, 40)) as pilot:
        await open_strip(app, pilot, row=0)
        about = await _about(app, pilot, "u")
        assert "code-only preview" in about and "no learned index" in about
        about = await _about(app, pilot, "l")
        assert "window codes" in about and "no learned index" in about


async def test_with_the_index_segments_are_ranked_and_enter_goes_to_their_window(tmp_path):
    folder = _shelf(tmp_path, code_size=0, segment=32)
    app = NotedApp(folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=1)
        about = await _about(app, pilot, "u")
        assert "learned index" in about
        heads = [str(c.label) for c in app.screen.query_one("#shortlist-table").columns.values()]
        assert "Segment" in heads and "Why" in heads
        want = look.unusual(tsarchive.open(folder / "bench_log.tsarchive"), "accel", k=20).rows
        assert want[0].number == SPIKE_AT // 32                      # the spike's segment (outside check: its place)
        await pilot.press("enter")
        await settle(app, pilot)
        assert app.screen is strip and strip.current == SPIKE_AT // WINDOW
