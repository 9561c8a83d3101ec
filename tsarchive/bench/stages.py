"""Where a pack's time goes, stage by stage, from its own progress events (measured, never asserted).

:class:`StageClock` is passed to ``tsarchive.pack(progress=...)`` in the bench's
child process.  Each event of the packing thread that starts or ends a step
(``done == 0`` or ``done == total``) opens a stage named after its message
(:data:`LABELS`), which lasts until the next such event; the training
thread's events are timed apart (it runs beside the others).  A pack that
encodes twice (the model pays) adds the second pass to the same stages.
"""

from __future__ import annotations

import threading
import time

# the packing thread's messages (tsarchive/pipeline.py) -> the stage they start
LABELS = (
    ("reading source", "ingest"),
    ("placing each channel's grid", "grid + phase"),
    ("channel(s)", "window choice"),
    ("window ", "sample"),
    ("choosing predictors", "plan"),
    ("choosing each channel's residual coder", "coder choice"),
    ("coding the windows", "encode"),
    ("every window encoded", "model verdict wait"),
    ("writing the model", "model + index member"),
    ("building the index", "index"),
    ("writing the manifest", "manifest + footer"),
    ("staged", "staged"),
    ("decoding the archive", "self-check"),
    ("every sample within budget", "open + summary"),
)


def label(message: str) -> str:
    """The stage a message starts; the encoder's own ``window k/n`` counts continue the stage they are in."""
    if message.startswith("window ") and "/" in message.split()[1]:
        return ""
    for prefix, name in LABELS:
        if message.startswith(prefix) or (prefix == "channel(s)" and prefix in message):
            return name
    return message[:24]


class StageClock:
    """A progress callback that times the stages of one pack (module doc)."""

    def __init__(self, now=time.perf_counter) -> None:
        self.now = now
        self.t0 = now()
        self.main = threading.get_ident()
        self.marks: list[tuple[float, str]] = []
        self.train: list[float] = []

    def __call__(self, p) -> None:
        now = self.now() - self.t0
        if threading.get_ident() != self.main:
            self.train.append(now)
        elif p.done == 0 or p.done >= p.total:
            name = label(p.message)
            if name and (not self.marks or self.marks[-1][1] != name):
                self.marks.append((now, name))

    def stages(self, end_s: float) -> list[tuple[str, float]]:
        """(stage, seconds) in order of first appearance, repeated stages summed; then the training thread's
        span as ``training thread`` (first to last of its events), when it sent any."""
        out: dict[str, float] = {}
        for (t, name), (t_next, _) in zip(self.marks, self.marks[1:] + [(end_s, "")]):
            out[name] = out.get(name, 0.0) + max(0.0, t_next - t)
        if self.train:
            out["training thread"] = self.train[-1] - self.train[0]
        return list(out.items())


def stage_line(tool: str, stages) -> str:
    """``tool: ingest 0.29 s, grid + phase 1.7 s, ...``"""
    return f"{tool} stages: " + ", ".join(f"{name} {sec:.2f} s" for name, sec in stages)
