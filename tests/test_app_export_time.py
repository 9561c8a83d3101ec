"""Pilot tests: the Export screen's time fields show the range in forms the time parser reads back, unrounded:
logged clock times as ISO 8601 (naive stays naive, an offset is kept), else elapsed h:mm:ss.

Expected texts come from Python's datetime and integer arithmetic on the times this file wrote."""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pytest
from textual.widgets import Input

import tsarchive
from app_helpers import NotedApp, open_strip, settle
from tsarchive.app.screens.export import ExportScreen

T0 = datetime(2026, 3, 4, 9, 15, 0)
LONG_N, LONG_STEP = 140_000, 10          # 0.1 Hz for 16 days: positions above 10^6 s


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    root = tmp_path_factory.mktemp("export_time")
    out = {}
    d = root / "long"; d.mkdir()  # noqa: E702 - no logged times: elapsed only
    np.save(d / "long.npy", (np.arange(LONG_N) % 977).astype(np.int32))
    tsarchive.pack(d / "long.npy", d / "long.tsarchive", "lossless", rate=1 / LONG_STEP, window=64, code_size=0)
    out["long"] = d
    for name, zone in (("naive", ""), ("offset", "+05:30")):
        d = root / name; d.mkdir()  # noqa: E702 - logged clock times every 100 ms
        rows = [f"{(T0 + timedelta(milliseconds=100 * k)).isoformat(timespec='milliseconds')}{zone},{k % 13}"
                for k in range(2000)]
        (d / f"{name}.csv").write_text("time,level\n" + "\n".join(rows) + "\n")
        tsarchive.pack(d / f"{name}.csv", d / f"{name}.tsarchive", "lossless", window=64, code_size=0)
        out[name] = d
    return out


async def _export_from_strip(app, pilot, jump: str) -> ExportScreen:
    strip = await open_strip(app, pilot, row=0)
    await pilot.press("t")
    for ch in jump:
        await pilot.press(ch)
    await pilot.press("enter")
    await settle(app, pilot)
    a, b = strip.view
    await pilot.press("e")
    await settle(app, pilot)
    assert isinstance(app.screen, ExportScreen)
    return app.screen, a, b


def _field(screen, which: str) -> str:
    return screen.query_one(f"#export-{which}", Input).value


def _hms(seconds: int) -> str:
    """Integer seconds as h:mm:ss (plain integer arithmetic, the reference)."""
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}"


async def test_elapsed_positions_are_shown_whole_and_export_that_range(folders, tmp_path):
    app = NotedApp(folders["long"])
    async with app.run_test(size=(80, 24)) as pilot:
        screen, a, b = await _export_from_strip(app, pilot, "1234567")
        assert a * LONG_STEP > 10**6                      # a position where :g would round (1.23457e+06)
        assert _field(screen, "from") == _hms(a * LONG_STEP)
        assert _field(screen, "to") == _hms(b * LONG_STEP)
        assert "elapsed" in str(screen.query_one(".note").render())
        screen.query_one("#export-name", Input).value = str(tmp_path / "part.npy")
        await pilot.press("ctrl+s")
        await settle(app, pilot)
    got = np.load(tmp_path / "part.npy")
    assert np.array_equal(got.ravel(), (np.arange(a, b) % 977).astype(np.int32))   # exactly samples a..b-1


@pytest.mark.parametrize("name,zone", [("naive", ""), ("offset", "+05:30")])
async def test_logged_clock_times_are_shown_as_logged(folders, name, zone):
    app = NotedApp(folders[name])
    async with app.run_test(size=(80, 24)) as pilot:
        screen, a, b = await _export_from_strip(app, pilot, "1:23.4")
        logged = (T0 + timedelta(milliseconds=100 * a)).isoformat(timespec="microseconds").rstrip("0").rstrip(".")
        assert _field(screen, "from") == logged + zone        # as the logger wrote it, zone and all
        for which in ("from", "to"):                          # shown whole at 80 columns, not scrolled
            assert screen.query_one(f"#export-{which}", Input).region.width > len(_field(screen, which))
        start, end = screen._typed_range()
        assert start == pytest.approx(a / 10, abs=1e-9) and end == pytest.approx(b / 10, abs=1e-9)
        assert "ISO 8601" in str(screen.query_one(".note").render())
