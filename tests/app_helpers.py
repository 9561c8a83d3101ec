"""Helpers for tests/test_app.py: an invented logger stream, a note-keeping app, settling.

The stream is made up for the tests (no real lab or device): a slow temperature with two
decimals and an accelerometer-like channel with three decimals and one short spike, in
a CSV with a ``time [s]`` column, as the sample streams are laid out.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from tsarchive.app.app import TsArchiveApp
from tsarchive.app.screens.contents import ContentsScreen
from tsarchive.app.screens.strip import StripScreen

RATE = 100.0
N = 2000  # 20 s at 100 Hz
WINDOW = 64
SPIKE_AT = 1230  # sample index of the injected spike (12.30 s)


def stream(n: int = N, rate: float = RATE, seed: int = 7) -> dict[str, np.ndarray]:
    """The channels as they are written: temp on a 0.01 grid, accel on a 0.001 grid."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    temp = np.round(21.0 + 1.5 * np.sin(2 * np.pi * t / 9.0) + 0.03 * rng.standard_normal(n), 2)
    accel = 0.8 * np.sin(2 * np.pi * 2.5 * t) + 0.05 * rng.standard_normal(n)
    if n > SPIKE_AT + 5:
        accel[SPIKE_AT:SPIKE_AT + 4] += np.array([2.5, -2.0, 1.5, -1.0])
    return {"time": t, "temp": temp, "accel": np.round(accel, 3)}


def write_stream(path, n: int = N, rate: float = RATE) -> dict[str, np.ndarray]:
    """Write :func:`stream` to ``path`` as CSV and return the columns."""
    cols = stream(n, rate)
    lines = ["time [s],temp [degC],accel [m/s2]"]
    lines += [f"{t:.2f},{a:.2f},{b:.3f}" for t, a, b in zip(cols["time"], cols["temp"], cols["accel"])]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return cols


@dataclass(frozen=True)
class Note:
    message: str
    severity: str


class NotedApp(TsArchiveApp):
    """The app, keeping every notification it shows (tests read ``notes``)."""

    def __init__(self, path=None) -> None:
        super().__init__(path)
        self.notes: list[Note] = []

    def notify(self, message, *, title="", severity="information", timeout=None, markup=True):  # noqa: D102
        self.notes.append(Note(str(message), str(severity)))
        return super().notify(message, title=title, severity=severity, timeout=timeout, markup=markup)

    def errors(self) -> list[str]:
        return [n.message for n in self.notes if n.severity == "error"]


async def settle(app, pilot, rounds: int = 8) -> None:
    """Wait until no worker runs and every posted message has been handled."""
    for _ in range(rounds):
        await app.workers.wait_for_complete()
        await pilot.pause()
        if not any(w.is_running for w in app.workers):
            await pilot.pause()
            if not any(w.is_running for w in app.workers):
                return


def cells(table) -> list[list[str]]:
    """Every row of a DataTable as plain strings."""
    return [[str(c) for c in table.get_row_at(r)] for r in range(table.row_count)]


@dataclass(frozen=True)
class Lab:
    """A test folder holding ``bench_log.csv`` (columns ``cols``) and its archive ``bench_log.tsarchive``."""

    folder: Path
    cols: dict

    @property
    def csv(self) -> Path:
        return self.folder / "bench_log.csv"

    @property
    def archive(self) -> Path:
        return self.folder / "bench_log.tsarchive"


def copy_lab(lab: Lab, dest: Path, archive: bool = True) -> Lab:
    """The same recording (and archive) in ``dest``, for tests that write next to them."""
    shutil.copy(lab.csv, dest / lab.csv.name)
    if archive:
        shutil.copytree(lab.archive, dest / lab.archive.name)
    return Lab(dest, lab.cols)


async def open_contents(app, pilot) -> ContentsScreen:
    """From the Folder screen (archives are listed first), open the first archive."""
    await settle(app, pilot)
    await pilot.press("enter")
    await settle(app, pilot)
    assert isinstance(app.screen, ContentsScreen)
    return app.screen


async def open_strip(app, pilot, row: int) -> StripScreen:
    """From the Folder screen, open the first archive's channel on ``row`` in the Strip."""
    await open_contents(app, pilot)
    for _ in range(row):
        await pilot.press("down")
    await pilot.press("s")
    await settle(app, pilot)
    assert isinstance(app.screen, StripScreen)
    return app.screen
