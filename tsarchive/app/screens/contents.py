"""The Contents screen: one archive's channels, its overall state, the caution, and verification.

The archive is opened by ``tsarchive.open`` in a worker. ``v`` runs
``Archive.verify`` (against the original when it is found next to the archive or
in the Folder screen's folder) in a thread worker with progress; the check panel names any
failing window. Enter on a channel opens it in the Strip; ``e`` exports a range; ``o`` lets the
user type where the original is when it is not beside the archive (kept for the session, in
``TsArchiveApp.sources``), so verification and the Strip's error plot can use it.
"""

from __future__ import annotations

from pathlib import Path

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.reactive import reactive
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Input, Static

import tsarchive
from tsarchive.app import fmt
from tsarchive.record.kept import read_record, write_record
from tsarchive.app.guard import archive_lock
from tsarchive.app.locate import find_source
from tsarchive.app.messages import ArchiveReady, CheckDone, CheckStep, WorkFailed
from tsarchive.app.screens.base import Notices
from tsarchive.app.timing import TimeLabels
from tsarchive.app.widgets.pick_table import PickTable
from tsarchive.app.summary import FAILED, UNVERIFIED, USED_HELP, archive_duration, check_lines, over_budget
from tsarchive.app.widgets.caution import Caution
from tsarchive.app.widgets.stage_progress import StageProgress
from tsarchive.errors import ArchiveCorrupt, TsArchiveError

COLUMNS = ("Channel", "Unit", "Rate", "Length", "Budget", "Worst error", "Used", "Ratio", "Bits/sample")


class ContentsScreen(Notices, Screen):
    """Channels table, state line, caution and check panel of the archive at ``path``."""

    BINDINGS = [
        Binding("s", "strip", "Strip"),
        Binding("v", "verify", "Verify"),
        Binding("e", "export", "Export"),
        Binding("o", "original", "Original", tooltip="type where the original recording is (kept for this session)"),
        Binding("escape", "back", "Back"),
        Binding("q", "app.quit", "Quit", tooltip="quit tsarchive (also Ctrl+Q)"),
    ]

    check_state: reactive[str] = reactive(UNVERIFIED, init=False)
    checking: reactive[bool] = reactive(False, init=False)

    def __init__(self, path: Path) -> None:
        super().__init__(id="contents")
        self.path = Path(path)
        self.archive = None
        self.source: Path | None = None

    def compose(self) -> ComposeResult:
        yield Static(f"Contents · {self.path.name}", id="contents-title", classes="title", markup=False)
        yield Caution(id="contents-caution")
        yield Static("opening…", id="contents-state", markup=False)
        yield Input(placeholder="original recording: type its path, Enter to use, Esc to leave",
                    id="contents-original", compact=True)
        yield PickTable(id="contents-table")
        yield StageProgress(("verify",), id="contents-progress")
        yield Static("", id="contents-check", markup=False)
        yield Footer()

    def on_mount(self) -> None:
        self.query_one(DataTable).add_columns(*COLUMNS)
        self.query_one("#contents-progress").display = False
        self.query_one("#contents-original").display = False
        kept = None if self.path in self.app.checks else read_record(self.path)  # type: ignore[attr-defined]
        self.check_state = self.app.checks.get(  # type: ignore[attr-defined]
            self.path, kept.state if kept is not None else UNVERIFIED)
        if kept is not None:
            self.query_one("#contents-check", Static).update(f"Check {kept.line()}; v checks again now.")
        self.load(self.path, getattr(self.app, "folder", self.path.parent))

    @work(thread=True, exclusive=True, group="contents-open", exit_on_error=False)
    def load(self, path: Path, folder: Path) -> None:
        try:
            arc = tsarchive.open(path)
            arc.timeline  # the logged time axis, read here rather than on the screen's thread
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Cannot open the archive"))
            return
        self.post_message(ArchiveReady(arc, find_source(path, arc.source_name, [folder])))

    def on_archive_ready(self, message: ArchiveReady) -> None:
        arc = self.archive = message.archive
        self.source = self.app.sources.get(self.path, message.source)  # type: ignore[attr-defined]
        table = self.query_one(DataTable)
        table.clear()
        for ch in arc.channels:
            unit = ch.unit or "—"
            bound = "lossless" if ch.eps == 0 else f"±{fmt.num(ch.eps)}"
            table.add_row(ch.name, unit, fmt.rate(ch.rate), fmt.duration(ch.duration), f"{ch.budget} ({bound})",
                          fmt.num(ch.worst_error), fmt.pct(ch.used_pct), fmt.ratio(ch.ratio),
                          f"{ch.bits_per_sample:.2f}", key=ch.name)
        self._show_state()
        table.focus()

    def _show_state(self) -> None:
        arc = self.archive
        if arc is None:
            return
        over = over_budget(arc.channels)
        budget = ("Within budget: every channel's worst error is inside its budget" if not over
                  else f"OVER BUDGET: {', '.join(over)}")
        if self.source is not None:
            original = f"original {self.source.name} found"
        else:
            original = (f"original {arc.source_name or '(unnamed)'} not found (verify checks checksums only; "
                        "o: say where it is)")
        self.query_one("#contents-state", Static).update(
            f"{budget}.\nCheck: {self.check_state} · {len(arc.channels)} channels · "
            f"{fmt.duration(archive_duration(arc.channels))} · {fmt.size(arc.archive_bytes)} · "
            f"ratio {fmt.ratio(arc.ratio)} · {original}\n"
            f"{TimeLabels(arc.timeline, archive_duration(arc.channels)).start_line(capital=True)}. {USED_HELP}.")

    def watch_check_state(self, state: str) -> None:
        self.app.checks[self.path] = state  # type: ignore[attr-defined]
        self._show_state()

    def watch_checking(self, checking: bool) -> None:
        if checking:
            progress = self.query_one("#contents-progress", StageProgress)
            progress.display = True
            progress.reset()
            self.query_one("#contents-check", Static).update("verifying… every window is decoded and checked")
        self.refresh_bindings()

    # -- verification ----------------------------------------------------------
    def action_verify(self) -> None:
        if self.archive is None or self.checking:
            return
        self.checking = True
        self.run_verify(self.archive, self.source)

    @work(thread=True, exclusive=True, group="contents-verify", exit_on_error=False)
    def run_verify(self, arc, source: Path | None) -> None:
        try:
            with archive_lock(arc):
                # a changed original is named first, and its samples are still compared to show where
                report = arc.verify(against=source, progress=lambda p: self.post_message(CheckStep(p)),
                                    even_if_changed=True)
                write_record(self.path, report, source)  # kept beside the archive, by its manifest's SHA-256
                starts = {ch.name: arc.windows(ch.name).start_sample / arc.channel(ch.name).rate
                          for ch in report.channels if ch.bad_windows or ch.bad_checksums}
        except ArchiveCorrupt as exc:
            self.post_message(CheckDone(None, source, {}, problem=str(exc), damaged=True))
            return
        except TsArchiveError as exc:
            self.post_message(CheckDone(None, source, {}, problem=str(exc)))
            return
        self.post_message(CheckDone(report, source, starts))

    def on_check_step(self, message: CheckStep) -> None:
        self.query_one("#contents-progress", StageProgress).advance(message.progress)

    def on_check_done(self, message: CheckDone) -> None:
        self.checking = False
        progress = self.query_one("#contents-progress", StageProgress)
        panel = self.query_one("#contents-check", Static)
        if message.report is None:
            if message.damaged:
                progress.halt("verification FAILED: the archive is damaged")
                panel.update(f"Verification FAILED: {message.problem}\nKeep the original recording.")
                self.check_state = FAILED
            else:
                progress.halt("verification did not finish")
                panel.update(f"Verification did not finish: {message.problem}\nThe archive stays {self.check_state}.")
            self.notify(message.problem or "verification stopped", title="Verification", severity="error", timeout=8)
            return
        lines = check_lines(message.report, message.against.name if message.against else None, message.starts)
        progress.finish("done" if message.report.ok else "done: problems found, see below")
        panel.update("\n".join((lines.headline, *lines.details)))
        self.check_state = lines.state
        if not message.report.ok:
            self.notify(lines.headline, title="Verification failed", severity="error", timeout=8)

    def work_stopped(self, worker) -> None:
        if worker.group == "contents-verify":
            self.checking = False

    # -- the original recording, picked by hand --------------------------------------
    def action_original(self) -> None:
        field = self.query_one("#contents-original", Input)
        field.value = str(self.source) if self.source is not None else ""
        field.display = True
        field.focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if event.input.id != "contents-original":
            return
        event.stop()
        text = event.value.strip()
        if not text:
            self._close_original()
            return
        path = Path(text).expanduser()
        if not path.is_file():
            self.notify(f"{path} is not a file; type the path of the original recording", title="Original",
                        severity="error")
            return
        self.source = path.resolve()
        self.app.sources[self.path] = self.source  # type: ignore[attr-defined]
        self._close_original()
        self._show_state()

    def _close_original(self) -> None:
        self.query_one("#contents-original", Input).display = False
        self.query_one(DataTable).focus()

    # -- navigation --------------------------------------------------------------
    def action_strip(self) -> None:
        if self.archive is None or not self.archive.channels:
            return
        from tsarchive.app.screens.strip import StripScreen

        row = self.query_one(DataTable).cursor_row
        channel = self.archive.channels[min(max(row, 0), len(self.archive.channels) - 1)].name
        self.app.push_screen(StripScreen(self.archive, channel, self.source))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.action_strip()

    def action_export(self) -> None:
        if self.archive is None:
            return
        from tsarchive.app.screens.export import ExportScreen

        self.app.push_screen(ExportScreen(self.archive))

    def action_back(self) -> None:
        if self.query_one("#contents-original", Input).display:
            self._close_original()
            return
        self.app.pop_screen()

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if isinstance(self.focused, Input) and action in ("strip", "export", "verify", "original"):
            return False  # letters typed into the path field are text
        if action in ("strip", "export", "verify", "original") and self.archive is None:
            return None
        if action == "verify" and self.checking:
            return None
        return True
