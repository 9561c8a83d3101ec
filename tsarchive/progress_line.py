"""A one-line progress display for the command line: stages, share done and ETA on a terminal, nothing on a pipe.

The line is rewritten in place (carriage return) on standard error, at most
every :data:`EVERY_S` seconds, and cleared when the work ends, so the
command's own output on standard output is never interleaved with it.
"""

from __future__ import annotations

import sys
import time

from .results import Progress

EVERY_S = 0.2          # redraw at most this often
WIDTH = 79             # characters of the line (an 80-column terminal)
STAGES = {"read": "reading", "train": "training", "encode": "encoding", "write": "writing", "check": "checking",
          "verify": "verifying"}


class ProgressLine:
    """Call with :class:`Progress` events; :meth:`close` clears the line.  Silent unless ``stream`` is a terminal."""

    def __init__(self, stream=None, enabled: bool | None = None) -> None:
        self.stream = sys.stderr if stream is None else stream
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.last, self.shown = 0.0, False

    def __call__(self, p: Progress) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self.last < EVERY_S and p.done < p.total:
            return
        self.last = now
        self._draw(text(p))

    def _draw(self, line: str) -> None:
        self.stream.write("\r" + line[:WIDTH].ljust(WIDTH))
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            self.stream.write("\r" + " " * WIDTH + "\r")
            self.stream.flush()
            self.shown = False


def text(p: Progress) -> str:
    """``encoding  42 %  ETA 0:12  window 300/715`` (no share when the total is unknown)."""
    parts = [STAGES.get(p.stage, p.stage).ljust(9)]
    if p.total > 1 or (p.total == 1 and p.stage in ("encode", "verify")):
        parts.append(f"{min(100, 100 * p.done // max(p.total, 1)):3d} %")
    if p.eta_s is not None and p.done < p.total:
        m, s = divmod(int(round(p.eta_s)), 60)
        parts.append(f"ETA {m}:{s:02d}")
    if p.message:
        parts.append(p.message)
    return "  ".join(parts)
