"""Progress of a long library call, fed with :class:`tsarchive.Progress` events.

Shows the stages as a row of words with a mark each (``✓`` done, ``▶`` running,
``·`` waiting) so the state reads without colour, a bar for the running stage,
and one detail line (epochs and loss while training, windows while encoding, ETA).
The bar shows a share only for events that count something (``total > 1``); the library's
"0 of 1" / "1 of 1" step marks (reading, planning) leave it pulsing, as the work goes on.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Vertical
from textual.reactive import reactive
from textual.widgets import ProgressBar, Static

from tsarchive.app import fmt

PACK_STAGES = ("read", "train", "encode", "write", "check")
STAGE_WORDS = {"read": "reading", "train": "training", "encode": "encoding", "write": "writing", "check": "checking"}


def describe(progress) -> str:
    """One human line for a :class:`tsarchive.Progress` event."""
    stage = progress.stage
    count = f"{progress.done}/{progress.total}" if progress.total else f"{progress.done}"
    if stage == "train" and progress.loss is not None:
        text = f"epoch {count} · loss {progress.loss:.4g}"
    elif stage in ("encode", "verify"):
        text = f"windows {count}" + (f" · {progress.message}" if progress.message else "")
    else:
        return progress.message or f"{STAGE_WORDS.get(stage, stage)} {count}"
    if progress.eta_s is None and stage != "encode":
        return text
    return f"{text} · {fmt.eta(progress.eta_s)}"


class StageProgress(Vertical):
    """Stages row + bar + detail line; call :meth:`advance` with each Progress event."""

    stage: reactive[str] = reactive("")

    def __init__(self, stages: tuple[str, ...] = PACK_STAGES, *, id: str | None = None) -> None:  # noqa: A002
        super().__init__(id=id, classes="stage-progress")
        self.stages = stages
        self.lines: dict[str, str] = {}
        """Last detail line seen for each stage (kept for the finished view and tests)."""

    def compose(self) -> ComposeResult:
        yield Static(self._stage_row(), classes="stage-row", markup=False)
        yield ProgressBar(total=None, show_eta=False, classes="stage-bar")
        yield Static("", classes="stage-detail", markup=False)

    def _stage_row(self) -> str:
        marks = []
        reached = self.stage in self.stages
        for name in self.stages:
            if reached and self.stages.index(name) < self.stages.index(self.stage):
                mark = "✓"
            elif name == self.stage:
                mark = "▶"
            else:
                mark = "·"
            marks.append(f"{mark} {name}")
        return "   ".join(marks)

    def watch_stage(self, _stage: str) -> None:
        if self.is_mounted:
            self.query_one(".stage-row", Static).update(self._stage_row())

    def reset(self) -> None:
        self.lines.clear()
        self.stage = ""
        self.query_one(".stage-bar", ProgressBar).update(total=None, progress=0)
        self.query_one(".stage-detail", Static).update("")

    def advance(self, progress) -> None:
        """Show one :class:`tsarchive.Progress` event.

        Pack's self-check reports as ``verify`` inside its ``check`` stage; it is shown as ``check``.
        """
        stage = "check" if progress.stage == "verify" and "check" in self.stages else progress.stage
        if stage not in self.stages:
            self.stages = (*self.stages, stage)
        self.stage = stage
        line = describe(progress)
        self.lines[stage] = line
        bar = self.query_one(".stage-bar", ProgressBar)
        if progress.total > 1:
            bar.update(total=progress.total, progress=progress.done)
        else:  # "1 of 1" only says a step began or ended while the work goes on: no share to show
            bar.update(total=None, progress=0)
        self.query_one(".stage-detail", Static).update(line)

    def finish(self, text: str) -> None:
        """Mark every stage done and show ``text`` as the detail line."""
        self.stage = ""
        self.query_one(".stage-row", Static).update("   ".join(f"✓ {name}" for name in self.stages))
        bar = self.query_one(".stage-bar", ProgressBar)
        bar.update(total=1, progress=1)
        self.query_one(".stage-detail", Static).update(text)

    def halt(self, text: str) -> None:
        """Show that the work stopped (``text``: a word or two, e.g. "cancelled")."""
        self.stage = ""
        self.query_one(".stage-row", Static).update(f"■ {text}")
        self.query_one(".stage-detail", Static).update("")
