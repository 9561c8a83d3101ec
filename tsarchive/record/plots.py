"""The record's PNG plots (matplotlib's Agg renderer, no display, no pyplot state).

* ``errors``: the histogram of a channel's errors with the ±budget band shaded and its edges marked;
* ``worst``: the samples around the channel's worst error, original against reconstruction.

matplotlib comes with the optional extra ``record`` (``pip install 'tsarchive[record]'``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import BadInput

BINS = 61
SIZE = (7.0, 3.2)  # inches; 100 dpi


def require_matplotlib() -> None:
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        raise BadInput("a verification record draws its plots with matplotlib; install it with "
                       "pip install 'tsarchive[record]'") from None


def _figure():
    require_matplotlib()
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=SIZE, dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def error_histogram(path: Path, errors: np.ndarray, eps: float, name: str, unit: str) -> None:
    """Histogram of ``errors`` against the band ``±eps`` (a lossless channel: every error should be 0)."""
    fig = _figure()
    ax = fig.add_subplot()
    half = 1.15 * eps if eps > 0 else max(1.0, float(np.abs(errors).max()) if errors.size else 1.0)
    ax.hist(np.clip(errors, -half, half), bins=BINS, range=(-half, half), color="#3a6ea5")
    if eps > 0:
        ax.axvspan(-eps, eps, color="#9bd49b", alpha=0.3, label=f"budget ±{eps:g}")
        for edge in (-eps, eps):
            ax.axvline(edge, color="#2a7a2a", linestyle="--", linewidth=1)
        ax.legend(loc="upper right", fontsize=8, framealpha=0.6)
    ax.set_xlabel(f"error, reconstruction − original ({unit or 'channel units'})")
    ax.set_ylabel("samples")
    ax.set_title(f"{name}: errors against the budget" if eps > 0 else f"{name}: errors (lossless: all must be 0)",
                 fontsize=10)
    fig.savefig(path, format="png")


def worst_segment(path: Path, seconds: np.ndarray, x: np.ndarray, xh: np.ndarray, name: str, unit: str,
                  at_s: float) -> None:
    """Original ``x`` and reconstruction ``xh`` against ``seconds`` (from the first sample), worst error marked."""
    fig = _figure()
    ax = fig.add_subplot()
    ax.plot(seconds, np.ma.filled(np.ma.asarray(x, dtype=np.float64), np.nan), color="#222222", linewidth=1.2,
            marker="o", markersize=3, label="original")
    ax.plot(seconds, np.ma.filled(np.ma.asarray(xh, dtype=np.float64), np.nan), color="#d0602a", linewidth=1,
            linestyle="--", marker="x", markersize=3, label="reconstruction")
    ax.axvline(at_s, color="#999999", linewidth=0.8)
    ax.ticklabel_format(axis="y", useOffset=False)   # values as read on the instrument, not "+2e1" offsets
    ax.set_xlabel("seconds from the recording's first sample")
    ax.set_ylabel(unit or "value")
    ax.set_title(f"{name}: around the worst error (at {at_s:.6g} s)", fontsize=10)
    ax.legend(loc="best", fontsize=8, framealpha=0.6)
    fig.savefig(path, format="png")
