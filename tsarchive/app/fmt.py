"""Plain-text formatting for the app's tables and panels (no Textual, no codec logic).

Every function takes numbers or ``None`` and returns a short string; ``None``
and non-finite values become an em dash so that a half-loaded row still reads.
"""

from __future__ import annotations

import math

DASH = "—"


def _bad(x: float | None) -> bool:
    return x is None or (isinstance(x, float) and not math.isfinite(x))


def size(n_bytes: int | None) -> str:
    """``1536`` -> ``"1.5 KB"`` (powers of 1024, one decimal above bytes)."""
    if n_bytes is None:
        return DASH
    value = float(n_bytes)
    for unit in ("B", "KB", "MB", "GB"):
        if value < 1024 or unit == "GB":
            return f"{int(value)} {unit}" if unit == "B" else f"{value:.1f} {unit}"
        value /= 1024
    return f"{value:.1f} GB"  # pragma: no cover - loop always returns


def duration(seconds: float | None) -> str:
    """Seconds as ``"12.5 s"``, ``"3 min 20 s"`` or ``"2 h 05 min"``."""
    if _bad(seconds):
        return DASH
    s = float(seconds)
    if s < 120:
        return f"{s:.1f} s" if s < 10 else f"{s:.0f} s"
    if s < 7200:
        return f"{int(s // 60)} min {int(s % 60):02d} s"
    return f"{int(s // 3600)} h {int((s % 3600) // 60):02d} min"


def clock(seconds: float | None) -> str:
    """A position in the recording: ``"75.25"`` -> ``"1:15.25"``."""
    if _bad(seconds):
        return DASH
    s = float(seconds)
    minutes, rest = divmod(s, 60.0)
    if minutes >= 60:
        hours, minutes = divmod(minutes, 60.0)
        return f"{int(hours)}:{int(minutes):02d}:{rest:05.2f}"
    return f"{int(minutes)}:{rest:05.2f}"


def num(x: float | None, digits: int = 4) -> str:
    """A measured value with ``digits`` significant digits (``g`` format)."""
    if _bad(x):
        return DASH
    return f"{float(x):.{digits}g}"


def pct(x: float | None) -> str:
    """A percentage already scaled to 0..100: ``42.123`` -> ``"42.1 %"``."""
    if _bad(x):
        return DASH
    return f"{float(x):.1f} %"


def ratio(x: float | None) -> str:
    """A compression ratio: ``7.345`` -> ``"7.3 : 1"``."""
    if _bad(x):
        return DASH
    return f"{float(x):.1f} : 1"


def rate(hz: float | None) -> str:
    """A sample rate: ``100.0`` -> ``"100 Hz"``, ``2500`` -> ``"2.5 kHz"``."""
    if _bad(hz):
        return DASH
    f = float(hz)
    if f >= 1000:
        return f"{f / 1000:g} kHz"
    return f"{f:g} Hz"


def eta(seconds: float | None) -> str:
    """Time left, or ``"estimating…"`` when the library has no estimate yet."""
    if _bad(seconds):
        return "estimating…"
    return f"about {duration(max(0.0, float(seconds)))} left"
