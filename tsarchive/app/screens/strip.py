"""The Strip: one channel's windows in time order, and a plot of the selected stretch.

Left, the windows (start, worst error, outlier score, predictor mode) from
``Archive.windows``; right, the stretch around the selected window as stored
(``Archive.read``), as the codes alone say (``Archive.preview``) and, when the
original recording is at hand, the original and the error against the ±budget band.
The view is kept in whole samples; reads run in a thread worker so the screen never
waits on decoding.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.reactive import reactive
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Input, Static

import tsarchive
from tsarchive.app import fmt
from tsarchive.app.guard import archive_lock
from tsarchive.app.locate import read_time
from tsarchive.app.messages import StretchLoaded, WindowsLoaded, WorkFailed
from tsarchive.app.screens.base import Notices
from tsarchive.app.summary import window_at
from tsarchive.app.widgets.strip_plot import StripPlot
from tsarchive.errors import TsArchiveError

COLUMNS = ("#", "Start", "Worst err", "Score", "Mode")
MIN_SPAN = 8
"""Narrowest view in samples."""


def source_column(source: Path, meta, position: int) -> np.ndarray:
    """The channel's samples from the original recording (by name, else by position)."""
    rate = meta.rate if source.suffix.lower() == ".npy" else None
    rec = tsarchive.inspect_source(source, rate=rate)
    names = [c.name for c in rec.channels]
    j = names.index(meta.name) if meta.name in names else position
    if j >= len(names) or rec.n_samples != meta.n_samples:
        raise tsarchive.BadInput(f"{source.name} does not match the archive (channels or length differ); "
                                 "the plot shows the archive without the original")
    return rec.column(j)


class StripScreen(Notices, Screen):
    """Browse ``channel`` of ``archive``; ``source`` is the original recording if at hand."""

    BINDINGS = [
        Binding("n", "step(1)", "Next", tooltip="next window"),
        Binding("b", "step(-1)", "Prev", tooltip="previous window"),
        Binding("down,right,pagedown", "step(1)", "Next", show=False, priority=True, key_display="↓ / → / PgDn",
                tooltip="next window"),
        Binding("up,left,pageup", "step(-1)", "Prev", show=False, priority=True, key_display="↑ / ← / PgUp",
                tooltip="previous window"),
        Binding("plus,equals_sign", "zoom(0.5)", "Zoom", key_display="+", tooltip="zoom in (half the span)"),
        Binding("minus", "zoom(2)", "Wider", key_display="-", tooltip="zoom out (twice the span)"),
        Binding("left_square_bracket", "pan(-1)", "Earlier", key_display="[", show=False,
                tooltip="pan back by half the view"),
        Binding("right_square_bracket", "pan(1)", "Later", key_display="]", show=False,
                tooltip="pan on by half the view"),
        Binding("t", "jump", "Time", show=False, tooltip="type a time to jump to"),
        Binding("w", "worst", "Worst", tooltip="go to the window with the largest error"),
        Binding("u", "shortlist('unusual')", "Unusual", tooltip="Shortlist: windows ranked by outlier score"),
        Binding("l", "shortlist('alike')", "Alike", tooltip="Shortlist: windows whose codes look like this one's"),
        Binding("e", "export", "Export", tooltip="export the range on screen"),
        Binding("escape", "back", "Back", tooltip="back to the Contents screen"),
        Binding("q", "app.quit", "Quit", tooltip="quit tsarchive (also Ctrl+Q)"),
    ]

    current: reactive[int] = reactive(-1, init=False)
    view: reactive[tuple[int, int]] = reactive((0, 0), init=False)

    def __init__(self, archive, channel: str, source: Path | None = None) -> None:
        super().__init__(id="strip")
        self.archive = archive
        self.meta = archive.channel(channel)
        self.position = [c.name for c in archive.channels].index(channel)
        self.source = source
        self.table = None
        self.original: np.ndarray | None = None
        self.starts = np.zeros(0)
        self.span = min(3 * self.meta.window, max(self.meta.n_samples, MIN_SPAN))
        self.stretch: StretchLoaded | None = None

    def compose(self) -> ComposeResult:
        unit = f" [{self.meta.unit}]" if self.meta.unit else ""
        yield Static(f"Strip · {self.meta.name}{unit} · {self.archive.path.name}", id="strip-title",
                     classes="title", markup=False)
        with Horizontal(id="strip-body"):
            with Vertical(id="strip-side"):
                yield DataTable(id="strip-windows", cursor_type="row", zebra_stripes=True)
                yield Input(placeholder="t: jump to (12.5, 1:02:03, 2h1min)", id="strip-jump", compact=True)
            with Vertical(id="strip-main"):
                yield StripPlot(id="strip-plot")
                yield Static("loading windows…", id="strip-info", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one(DataTable).add_columns(*COLUMNS)
        self.load_windows()

    # -- loading -------------------------------------------------------------------
    @work(thread=True, exclusive=True, group="strip-windows", exit_on_error=False)
    def load_windows(self) -> None:
        try:
            with archive_lock(self.archive):
                table = self.archive.windows(self.meta.name)
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Cannot list the windows"))
            return
        original = None
        if self.source is not None:
            try:
                original = source_column(self.source, self.meta, self.position)
            except TsArchiveError as exc:
                self.post_message(WorkFailed(str(exc), title="Original not used"))
        self.post_message(WindowsLoaded(table, original))

    def on_windows_loaded(self, message: WindowsLoaded) -> None:
        self.table, self.original = message.table, message.original
        self.starts = np.asarray(self.table.start_sample, dtype=np.float64) / self.meta.rate
        dt = self.query_one(DataTable)
        dt.clear()
        for pos in range(len(self.table.index)):
            dt.add_row(str(int(self.table.index[pos])), fmt.clock(self.starts[pos]),
                       fmt.num(self.table.worst_error[pos], 3), fmt.num(self.table.score[pos], 3),
                       str(self.table.mode[pos]), key=str(pos))
        dt.focus()
        if len(self.table.index):
            self.current = 0

    @work(thread=True, exclusive=True, group="strip-stretch", exit_on_error=False)
    def load_stretch(self, a: int, b: int) -> None:
        rate, name = self.meta.rate, self.meta.name
        try:
            with archive_lock(self.archive):
                rebuilt = np.asarray(self.archive.read(name, a / rate, b / rate), dtype=np.float64)
                preview = np.asarray(self.archive.preview(name, a / rate, b / rate), dtype=np.float64)
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Cannot read this stretch"))
            return
        original = error = None
        if self.original is not None:
            original = np.asarray(self.original[a:a + len(rebuilt)], dtype=np.float64)
            error = rebuilt - original
        t = (a + np.arange(len(rebuilt))) / rate
        self.post_message(StretchLoaded(a / rate, b / rate, t, rebuilt, preview, original, error, self.meta.eps))

    def on_stretch_loaded(self, message: StretchLoaded) -> None:
        self.stretch = message
        marks = None
        if self.table is not None and 0 <= self.current < len(self.starts):
            first = self.starts[self.current]
            marks = (first, first + int(self.table.n[self.current]) / self.meta.rate)
        self.query_one(StripPlot).show(message, self.meta.unit, marks)
        self._show_info()

    # -- state -----------------------------------------------------------------------
    def watch_current(self, pos: int) -> None:
        if self.table is None or not 0 <= pos < len(self.table.index):
            return
        dt = self.query_one(DataTable)
        if dt.cursor_row != pos:
            dt.move_cursor(row=pos, scroll=True)
        first = int(self.table.start_sample[pos])
        self._set_view(first + int(self.table.n[pos]) // 2, self.span)

    def _set_view(self, centre: int, span: int) -> None:
        n = self.meta.n_samples
        span = int(min(max(span, MIN_SPAN), n))
        a = int(min(max(centre - span // 2, 0), n - span))
        self.span = span
        if (a, a + span) == self.view and self.stretch is not None:
            self.on_stretch_loaded(self.stretch)  # same stretch, new window marks
        self.view = (a, a + span)

    def watch_view(self, view: tuple[int, int]) -> None:
        a, b = view
        if b > a:
            self.query_one("#strip-info", Static).update(f"reading {fmt.clock(a / self.meta.rate)}…")
            self.load_stretch(a, b)

    def _show_info(self) -> None:
        a, b = self.view
        rate, unit = self.meta.rate, (f" {self.meta.unit}" if self.meta.unit else "")
        parts = [f"view {fmt.clock(a / rate)}–{fmt.clock(b / rate)} ({fmt.duration((b - a) / rate)})"]
        if self.table is not None and 0 <= self.current < len(self.table.index):
            pos = self.current
            worst = float(self.table.worst_error[pos])
            eps = self.meta.eps
            share = f"{100 * worst / eps:.0f} % of ±{fmt.num(eps)}{unit}" if eps > 0 else "lossless"
            parts.append(f"window #{int(self.table.index[pos])} of {len(self.table.index)}: "
                         f"worst error {fmt.num(worst)}{unit} ({share}), score {fmt.num(self.table.score[pos], 3)}, "
                         f"mode {self.table.mode[pos]}")
        if self.original is None:
            missing = self.archive.source_name or "the original"
            parts.append(f"original not at hand: put {missing} next to the archive to compare")
        self.query_one("#strip-info", Static).update("\n".join(parts))

    def work_failed(self, message: WorkFailed) -> None:
        if self.table is not None:
            self._show_info()  # replace "reading…" with what is known
        else:
            self.query_one("#strip-info", Static).update(f"{message.title}: {message.text}")

    # -- events and actions ------------------------------------------------------------
    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        self.current = event.cursor_row

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.current = event.cursor_row

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if event.input.id != "strip-jump":
            return
        text = event.value.strip()
        try:
            second = read_time(text, self.meta.start)
        except TsArchiveError as exc:
            self.notify(str(exc), title="Jump", severity="error")
            return
        if second is None or not len(self.starts):
            return
        if second > self.meta.duration:
            self.notify(f"{text} is past the end ({fmt.clock(self.meta.duration)})", severity="warning")
        self.current = window_at(self.starts, second)
        self.query_one(DataTable).focus()

    def action_step(self, delta: int) -> None:
        if self.table is not None and len(self.table.index):
            self.current = min(max(self.current + delta, 0), len(self.table.index) - 1)

    def action_zoom(self, factor: float) -> None:
        a, b = self.view
        self._set_view((a + b) // 2, int(round((b - a) * factor)))

    def action_pan(self, direction: int) -> None:
        a, b = self.view
        self._set_view((a + b) // 2 + direction * max((b - a) // 2, 1), b - a)

    def action_jump(self) -> None:
        self.query_one("#strip-jump", Input).focus()

    def action_worst(self) -> None:
        if self.table is not None and len(self.table.index):
            self.current = int(np.argmax(self.table.worst_error))

    def action_shortlist(self, mode: str) -> None:
        if self.table is None or not len(self.table.index):
            return
        from tsarchive.app.screens.shortlist import ShortlistScreen

        self.app.push_screen(ShortlistScreen(self.archive, self.meta, self.table, mode, self.current),
                             callback=self.jump_to_window)

    def jump_to_window(self, window: int | None) -> None:
        """Select the window numbered ``window`` (a WindowTable ``index`` value)."""
        if window is None or self.table is None:
            return
        hits = np.flatnonzero(np.asarray(self.table.index) == window)
        if len(hits):
            self.current = int(hits[0])

    def action_export(self) -> None:
        from tsarchive.app.screens.export import ExportScreen

        a, b = self.view
        self.app.push_screen(ExportScreen(self.archive, channels=(self.meta.name,),
                                          start=a / self.meta.rate, end=b / self.meta.rate))

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        """Arrow and page keys step windows, except while the jump field is being typed in."""
        if action == "step" and isinstance(self.focused, Input):
            return False
        return True

    def action_back(self) -> None:
        if self.focused is self.query_one("#strip-jump", Input):
            self.query_one(DataTable).focus()
            return
        self.app.pop_screen()
