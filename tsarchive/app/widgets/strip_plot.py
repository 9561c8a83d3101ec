"""The Strip's two plots: the signal stretch, and its error against the ±budget band.

Lines differ by marker as well as colour so they stay apart under NO_COLOR:
original ``·``, rebuilt (archive) half-blocks (``hd``), code-only preview ``+``.
(Braille markers look finer but cost several times more to draw on every view change.)
"""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.app import ComposeResult, RenderResult
from textual.containers import Vertical
from textual_plotext import PlotextPlot

from tsarchive.app.messages import StretchLoaded

PLOT_POINTS = 1200
"""At most this many points per line reach plotext (a terminal has far fewer cells)."""


def thin(n: int, limit: int = PLOT_POINTS) -> slice:
    """A stride that keeps at most ``limit`` of ``n`` points."""
    return slice(None, None, max(1, -(-n // limit)))


def peak_thin(t: np.ndarray, y: np.ndarray, limit: int = PLOT_POINTS) -> tuple[np.ndarray, np.ndarray]:
    """Keep the largest-magnitude value of each bucket so error peaks survive thinning."""
    step = max(1, -(-len(y) // limit))
    if step == 1:
        return t, y
    cut = len(y) - len(y) % step
    blocks = np.abs(y[:cut]).reshape(-1, step)
    pick = np.arange(blocks.shape[0]) * step + blocks.argmax(axis=1)
    return t[pick], y[pick]


class CachedPlot(PlotextPlot):
    """A PlotextPlot that builds its picture once per (size, theme, drawing).

    The stock widget rebuilds the whole plot on every repaint (a cursor move elsewhere
    is enough), which makes key presses lag; call :meth:`redrawn` after changing the data.
    """

    def __init__(self, *, id: str | None = None) -> None:  # noqa: A002
        super().__init__(id=id)
        self._version = 0
        self._cache: tuple[tuple, Text] | None = None

    def redrawn(self) -> None:
        self._version += 1
        self.refresh()

    def render(self) -> RenderResult:
        key = (self.size.width, self.size.height, self.app.theme, self._version)
        if self._cache is None or self._cache[0] != key:
            self._cache = (key, super().render())
        return self._cache[1]


class StripPlot(Vertical):
    """Draws a :class:`StretchLoaded`; ``drawn`` names the lines on screen (for tests too)."""

    def __init__(self, *, id: str | None = None) -> None:  # noqa: A002
        super().__init__(id=id)
        self.drawn: dict[str, int] = {}
        self.band: float | None = None

    def compose(self) -> ComposeResult:
        yield CachedPlot(id="plot-signal")
        yield CachedPlot(id="plot-error")

    def show(self, stretch: StretchLoaded, unit: str, marks: tuple[float, float] | None = None) -> None:
        """Plot ``stretch``; ``marks`` are the selected window's start and end (s)."""
        self.drawn = {}
        sig = self.query_one("#plot-signal", CachedPlot)
        plt = sig.plt
        plt.clear_data()
        plt.clear_figure()
        t = stretch.t
        cut = thin(len(t))
        tt = t[cut].tolist()
        if stretch.original is not None:
            plt.plot(tt, stretch.original[cut].tolist(), marker="·", label="original")
            self.drawn["original"] = len(tt)
        plt.plot(tt, stretch.rebuilt[cut].tolist(), marker="hd", label="archive")
        self.drawn["archive"] = len(tt)
        plt.plot(tt, stretch.preview[cut].tolist(), marker="+", label="code-only preview")
        self.drawn["preview"] = len(tt)
        if marks is not None:
            for x in marks:
                if stretch.start <= x <= stretch.end:
                    plt.vline(x)
        plt.xlabel("time (s)")
        plt.ylabel(unit or "value")
        plt.xlim(stretch.start, stretch.end)
        sig.redrawn()

        err = self.query_one("#plot-error", CachedPlot)
        err.display = stretch.error is not None
        eplt = err.plt
        eplt.clear_data()
        eplt.clear_figure()
        self.band = None
        if stretch.error is not None:
            te, ye = peak_thin(t, stretch.error)
            eplt.plot(te.tolist(), ye.tolist(), marker="hd", label="archive − original")
            self.drawn["error"] = len(te)
            if stretch.eps > 0:
                eplt.hline(stretch.eps)
                eplt.hline(-stretch.eps)
                peak = float(np.max(np.abs(ye))) if len(ye) else 0.0
                top = max(1.25 * stretch.eps, 1.05 * peak)
                eplt.ylim(-top, top)
                self.band = stretch.eps
            eplt.title(f"error vs ±budget {stretch.eps:g} {unit}".rstrip())
            eplt.xlim(stretch.start, stretch.end)
        err.redrawn()
