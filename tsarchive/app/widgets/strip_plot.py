"""The Strip's two plots: the signal stretch, and its error against the ±budget band.

Lines differ by marker as well as colour so they stay apart under NO_COLOR:
original ``·``, rebuilt (archive) half-blocks (``hd``), preview ``+`` (what the codes alone
say, or the window means when the archive has no codes).  With more samples than columns
each line is drawn as its lowest and highest value per column (an envelope), not as a
thinned zigzag that fills the plot; missing samples (NaN) leave gaps.
(Braille markers look finer but cost several times more to draw on every view change.)
"""

from __future__ import annotations

import warnings

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


def envelope(t: np.ndarray, y: np.ndarray, columns: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-column lowest and highest value when there are more samples than columns.

    Returns ``(t, low, high)``: one point per bucket of equal sample count (NaN gaps skipped);
    with no more samples than ``2 * columns`` it is the samples themselves (low == high).
    """
    n = len(y)
    if n <= 2 * columns:
        return t, y, y
    edges = np.linspace(0, n, columns + 1).astype(np.int64)
    keep = np.diff(edges) > 0
    lo_i, hi_i = edges[:-1][keep], edges[1:][keep]
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN bucket is a gap
        low = np.fmin.reduceat(y, lo_i)
        high = np.fmax.reduceat(y, lo_i)
    return t[(lo_i + hi_i - 1) // 2], low, high


def runs(t: np.ndarray, y: np.ndarray, limit: int = 40) -> list[tuple[list, list]]:
    """Finite stretches of ``y`` to draw as separate lines, so missing samples show as gaps.

    More than ``limit`` stretches are drawn as one set of points instead (one per finite sample).
    """
    ok = np.isfinite(y)
    if ok.all():
        return [(t.tolist(), y.tolist())]
    cuts = np.flatnonzero(np.diff(ok.astype(np.int8)) != 0) + 1
    parts = [(a, b) for a, b in zip(np.r_[0, cuts], np.r_[cuts, len(y)]) if ok[a]]
    if len(parts) > limit:
        return [(t[ok].tolist(), y[ok].tolist())]
    return [(t[a:b].tolist(), y[a:b].tolist()) for a, b in parts]


def y_range(values: list[np.ndarray], floor: float) -> tuple[float, float] | None:
    """Limits around the finite ``values`` spanning at least ``floor`` (so one grid step is not full height)."""
    finite = [v[np.isfinite(v)] for v in values if v is not None and len(v)]
    finite = [v for v in finite if len(v)]
    if not finite:
        return None
    lo = min(float(v.min()) for v in finite)
    hi = max(float(v.max()) for v in finite)
    span = max(hi - lo, floor)
    mid = (lo + hi) / 2
    return mid - 0.55 * span, mid + 0.55 * span


def finest_step(y: np.ndarray) -> float:
    """The smallest gap between distinct finite values of ``y`` (0 when there are fewer than two)."""
    v = np.unique(y[np.isfinite(y)])
    return float(np.diff(v).min()) if len(v) > 1 else 0.0


class StripPlot(Vertical):
    """Draws a :class:`StretchLoaded`; ``drawn`` names the lines on screen (for tests too).

    The names of the lines go in the plot's title rather than a legend box, which would cover
    the top-left of the data.  ``y_limits`` and ``x_ticks`` keep what was drawn, for tests.
    """

    def __init__(self, *, id: str | None = None) -> None:  # noqa: A002
        super().__init__(id=id)
        self.drawn: dict[str, int] = {}
        self.band: float | None = None
        self.y_limits: tuple[float, float] | None = None
        self.x_ticks: tuple[list[float], list[str]] = ([], [])
        self.title = ""
        self.enveloped = False
        """Whether the lines were drawn as each column's lowest and highest value."""

    def compose(self) -> ComposeResult:
        yield CachedPlot(id="plot-signal")
        yield CachedPlot(id="plot-error")

    def _line(self, plt, name: str, t, y, marker: str, columns: int) -> None:
        tt, low, high = envelope(t, y, columns)
        for xs, ys in runs(tt, low):
            plt.plot(xs, ys, marker=marker)
        if high is not low:
            for xs, ys in runs(tt, high):
                plt.plot(xs, ys, marker=marker)
        self.drawn[name] = len(tt)

    def show(self, stretch: StretchLoaded, unit: str, marks: tuple[float, ...] | None = None,
             labels=None, preview_name: str = "code-only preview") -> None:
        """Plot ``stretch``; ``marks`` are the selected window's first and last times (s);
        ``labels`` (a :class:`tsarchive.app.timing.TimeLabels`) turns the axis into times."""
        self.drawn = {}
        sig = self.query_one("#plot-signal", CachedPlot)
        columns = max(10, sig.size.width - 12)
        plt = sig.plt
        plt.clear_data()
        plt.clear_figure()
        t = stretch.t
        names = []
        if stretch.original is not None:
            self._line(plt, "original", t, stretch.original, "·", columns)
            names.append("· original")
        self._line(plt, "archive", t, stretch.rebuilt, "hd", columns)
        names.append("▀ archive")
        self._line(plt, "preview", t, stretch.preview, "+", columns)
        names.append(f"+ {preview_name}")
        self.enveloped = len(t) > 2 * columns
        if marks is not None:
            for x in marks:
                if stretch.start <= x <= stretch.end:
                    plt.vline(x)
        self.title = "  ".join(names)
        plt.title(self.title)
        plt.ylabel(unit or "value")
        self.y_limits = y_range([stretch.rebuilt, stretch.original, stretch.preview],
                                floor=10 * (stretch.eps if stretch.eps > 0 else finest_step(stretch.rebuilt)))
        if self.y_limits is not None:
            plt.ylim(*self.y_limits)
        self._axis(plt, stretch, labels)
        sig.redrawn()
        self._show_error(stretch, unit, labels)

    def _axis(self, plt, stretch: StretchLoaded, labels) -> None:
        plt.xlim(stretch.start, stretch.end)
        if labels is None:
            plt.xlabel("seconds from the first sample")
            return
        from tsarchive.app.timing import ticks

        width = self.query_one("#plot-signal", CachedPlot).size.width
        self.x_ticks = ticks(stretch.start, stretch.end, labels, count=max(2, (width - 8) // 14))
        plt.xticks(*self.x_ticks)
        plt.xlabel(labels.axis_name)

    def _show_error(self, stretch: StretchLoaded, unit: str, labels) -> None:
        err = self.query_one("#plot-error", CachedPlot)
        err.display = stretch.error is not None
        eplt = err.plt
        eplt.clear_data()
        eplt.clear_figure()
        self.band = None
        if stretch.error is not None:
            t = stretch.t
            fin = np.isfinite(stretch.error)
            te, ye = peak_thin(t[fin], stretch.error[fin])
            eplt.plot(te.tolist(), ye.tolist(), marker="hd")
            self.drawn["error"] = len(te)
            if stretch.eps > 0:
                eplt.hline(stretch.eps)
                eplt.hline(-stretch.eps)
                peak = float(np.max(np.abs(ye))) if len(ye) else 0.0
                top = max(1.25 * stretch.eps, 1.05 * peak)
                eplt.ylim(-top, top)
                self.band = stretch.eps
            eplt.title(f"archive − original vs ±budget {stretch.eps:g} {unit}".rstrip())
            self._axis(eplt, stretch, labels)
        err.redrawn()
