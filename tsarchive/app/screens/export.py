"""Export: write a time range of an archive to CSV, Parquet or NPY (``Archive.export``).

Opened from the Contents screen (whole recording, all channels) or from the Strip (the range
on screen, that channel). Every field can be retyped; the file format follows the
chosen button and the name's ending. The modal returns the written path (or None).

An existing file is replaced only when Export is pressed a second time for the same
name (the status line asks); the recording the archive was packed from, and any
archive folder, are never written (the library refuses them whatever is pressed).
"""

from __future__ import annotations

from pathlib import Path

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Input, Label, RadioButton, RadioSet, Static

from tsarchive.app import fmt
from tsarchive.app.guard import archive_lock
from tsarchive.app.locate import export_target, read_offset
from tsarchive.app.timing import DATETIME, TimeLabels, typed_time
from tsarchive.app.messages import ExportDone, WorkFailed
from tsarchive.app.screens.base import Notices
from tsarchive.errors import BadInput, TsArchiveError

FORMATS = (".csv", ".parquet", ".npy")


def default_name(stem: str, start: float | None, end: float | None, suffix: str = ".csv") -> str:
    """``run.csv`` for everything, ``run_5-15s.csv`` for 5 s to 15 s, ``run_5-ends.csv`` from 5 s on."""
    if start is None and end is None:
        return f"{stem}{suffix}"
    last = "end" if end is None else f"{end:.15g}"
    return f"{stem}_{start or 0:.15g}-{last}s{suffix}"


def format_label(suffix: str, chosen: bool) -> str:
    """A format button's label; the chosen one says so in words (its dot is drawn in colour alone)."""
    return f"{suffix[1:].upper()} (chosen)" if chosen else suffix[1:].upper()


class ExportScreen(Notices, ModalScreen[Path | None]):
    """Range, channels, format and file name for one export of ``archive``."""

    BINDINGS = [
        Binding("ctrl+s", "export", "Export"),
        Binding("escape", "close", "Close"),
    ]

    def __init__(self, archive, channels: tuple[str, ...] = (), start: float | None = None,
                 end: float | None = None) -> None:
        super().__init__(id="export")
        self.archive = archive
        self.channels = channels
        self.start, self.end = start, end
        self.busy = False
        self._auto_name = ""
        """The name this screen proposed last; while the field still holds it, it follows the range."""
        self._replace: Path | None = None
        """An existing file the user was asked about; a second Export for it replaces it."""

    def compose(self) -> ComposeResult:
        stem = self.archive.path.stem
        with Vertical(id="export-box"):
            yield Static(f"Export · {self.archive.path.name}", classes="title", markup=False)
            yield Static(self._forms_note(), classes="note", markup=False)
            timeline = self.archive.timeline
            with Horizontal(classes="field-row"):
                yield Label("from", classes="field-label")
                yield Input(typed_time(timeline, self.start), id="export-from", compact=True, classes="time")
                yield Label("to", classes="field-label")
                yield Input(typed_time(timeline, self.end), id="export-to", compact=True, classes="time")
            with Horizontal(classes="field-row"):
                yield Label("channels", classes="field-label")
                yield Input(",".join(self.channels), placeholder="all channels", id="export-channels", compact=True)
            with RadioSet(id="export-format", compact=True):
                for i, suffix in enumerate(FORMATS):
                    yield RadioButton(format_label(suffix, i == 0), value=i == 0, id=f"format-{suffix[1:]}")
            with Horizontal(classes="field-row"):
                yield Label("file", classes="field-label")
                yield Input(default_name(stem, self.start, self.end), id="export-name", compact=True)
                yield Button("Export", id="export-go", compact=True)
            yield Static("", id="export-status", markup=False)
        yield Footer(compact=True)

    def _forms_note(self) -> str:
        """What the time fields hold and accept (the forms of ``--start``/``--end``)."""
        length = fmt.clock(max(c.duration for c in self.archive.channels))
        timeline = self.archive.timeline
        if timeline.kind == DATETIME and timeline.n:
            labels = TimeLabels(timeline, 0.0)
            return (f"Times as logged, ISO 8601 ({labels.start_line()}; length {length}), or from the start: "
                    "12.5, 1:02:03, 90s, 2h1min, 3d. Empty: the start or the end.")
        return (f"Times elapsed from the first sample, h:mm:ss (length {length}); also 12.5, 90s, 2h1min, 3d. "
                "Empty: the start or the end.")

    def _start_ns(self) -> int | None:
        timeline = self.archive.timeline
        return int(timeline.values(0, 1)[0]) if timeline.kind == DATETIME and timeline.n else None

    def on_mount(self) -> None:
        self._auto_name = self.query_one("#export-name", Input).value
        self.query_one("#export-from", Input).focus()

    def on_input_changed(self, event: Input.Changed) -> None:
        if event.input.id not in ("export-from", "export-to"):
            return
        name = self.query_one("#export-name", Input)
        if name.value != self._auto_name:
            return  # the user typed a name of their own: leave it
        start, end = self._typed_range()
        if start is None and end is None and (self.query_one("#export-from", Input).value.strip()
                                              or self.query_one("#export-to", Input).value.strip()):
            return  # a time that does not parse (yet): keep the name
        suffix = Path(name.value).suffix.lower()
        self._auto_name = default_name(self.archive.path.stem, start, end, suffix if suffix in FORMATS else ".csv")
        name.value = self._auto_name

    def _typed_range(self) -> tuple[float | None, float | None]:
        """The typed range in seconds, or (None, None) while either time does not parse."""
        try:
            start, end = self._offsets()
        except TsArchiveError:
            return None, None
        return (None if start is None else float(start)), (None if end is None else float(end))

    def _offsets(self):
        """The typed range (seconds from the first sample; None for an empty field): exact Fractions on a clock
        axis (its times are exact ns); on a seconds axis the nearest doubles, as its times were logged, so a
        typed ``1.92`` means the sample logged as ``1.92``."""
        begin, ns = self.archive.channels[0].start, self._start_ns()
        got = (read_offset(self.query_one("#export-from", Input).value, begin, "from", ns),
               read_offset(self.query_one("#export-to", Input).value, begin, "to", ns))
        return got if ns is not None else tuple(None if x is None else float(x) for x in got)

    def on_radio_set_changed(self, event: RadioSet.Changed) -> None:
        for i, suffix in enumerate(FORMATS):
            self.query_one(f"#format-{suffix[1:]}", RadioButton).label = format_label(suffix, i == event.index)
        name = self.query_one("#export-name", Input)
        path = Path(name.value or self.archive.path.stem)
        stem = path.name[: -len(path.suffix)] if path.suffix.lower() in FORMATS else path.name
        follow = name.value == self._auto_name
        name.value = str(path.with_name(stem + FORMATS[event.index]))
        if follow:
            self._auto_name = name.value

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        if event.input.id == "export-name":
            self.action_export()
        else:
            self.focus_next()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        if event.button.id == "export-go":
            self.action_export()

    def _request(self) -> tuple[Path, list[str] | None, float | None, float | None]:
        start, end = self._offsets()
        if start is not None and end is not None and end <= start:
            raise BadInput(f"'to' ({float(end):g} s) must come after 'from' ({float(start):g} s)")
        text = self.query_one("#export-channels", Input).value
        names = [n.strip() for n in text.split(",") if n.strip()] or None
        path = export_target(self.query_one("#export-name", Input).value, self.archive.path.parent)
        return path, names, start, end

    def action_export(self) -> None:
        if self.busy:
            return
        try:
            path, names, start, end = self._request()
        except TsArchiveError as exc:
            self.notify(str(exc), title="Export", severity="error")
            return
        force = self._replace == path
        if path.exists() and not force:
            self._replace = path
            self.query_one("#export-status", Static).update(
                f"{path.name} already exists: press Export again to replace it, or type another name")
            return
        self._replace = None
        self.busy = True
        self.query_one("#export-status", Static).update(f"writing {path.name}…")
        self.run_export(path, names, start, end, force)

    @work(thread=True, exclusive=True, group="export", exit_on_error=False)
    def run_export(self, path: Path, names: list[str] | None, start: float | None, end: float | None,
                   force: bool = False) -> None:
        try:
            with archive_lock(self.archive):
                written = self.archive.export(path, channels=names, start=start, end=end, force=force)
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Export failed"))
            self.post_message(ExportDone(None))
            return
        self.post_message(ExportDone(Path(written)))

    def on_export_done(self, message: ExportDone) -> None:
        self.busy = False
        if message.path is None:
            self.query_one("#export-status", Static).update("nothing was written")
            return
        self.app.notify(f"exported to {message.path}", title="Export")
        self.dismiss(message.path)

    def work_stopped(self, worker) -> None:
        self.busy = False

    def action_close(self) -> None:
        self.dismiss(None)
