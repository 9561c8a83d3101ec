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
from tsarchive.app.timing import TimeLabels, elapsed, elapsed_at
from tsarchive.app.widgets.strip_plot import StripPlot
from tsarchive.errors import TsArchiveError

COLUMNS = ("#", "Worst err", "Score", "Mode")
MIN_SPAN = 8
"""Narrowest view in samples."""


def as_plotted(x) -> np.ndarray:
    """Samples as float64 for drawing; missing samples of integer channels (masked) become NaN gaps."""
    return np.ma.filled(np.ma.asarray(x).astype(np.float64), np.nan)


def source_column(source: Path, meta, position: int) -> np.ndarray:
    """The channel's samples from the original recording (by name, else by position)."""
    rate = meta.rate if source.suffix.lower() == ".npy" else None
    rec = tsarchive.inspect_source(source, rate=rate)
    j = rec.channel_index(meta.name, position)
    if j is None or rec.n_samples != meta.n_samples:
        raise tsarchive.BadInput(f"{source.name} does not match the archive (channels or length differ); "
                                 "the plot shows the archive without the original")
    return rec.column(j)


class StripScreen(Notices, Screen):
    """Browse ``channel`` of ``archive``; ``source`` is the original recording if at hand."""

    BINDINGS = [
        Binding("n", "step(1)", "Window", key_display="n/b", tooltip="next window (b: the previous one)"),
        Binding("b", "step(-1)", "Prev", show=False, tooltip="previous window"),
        Binding("down,right,pagedown", "step(1)", "Next", show=False, priority=True, key_display="↓ / → / PgDn",
                tooltip="next window"),
        Binding("up,left,pageup", "step(-1)", "Prev", show=False, priority=True, key_display="↑ / ← / PgUp",
                tooltip="previous window"),
        Binding("plus,equals_sign", "zoom(0.5)", "Zoom", key_display="+/-",
                tooltip="zoom in (half the span; - zooms out)"),
        Binding("minus", "zoom(2)", "Wider", key_display="-", show=False, tooltip="zoom out (twice the span)"),
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
        self.labels = TimeLabels(archive.timeline, self.meta.duration)
        self._keep_view = False

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
        self.query_one(DataTable).add_columns(COLUMNS[0], self.labels.column, *COLUMNS[1:])
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
        starts = elapsed_at(self.archive.timeline, table.start_sample)
        original = None
        if self.source is not None:
            try:
                original = source_column(self.source, self.meta, self.position)
            except TsArchiveError as exc:
                self.post_message(WorkFailed(str(exc), title="Original not used"))
        self.post_message(WindowsLoaded(table, original, starts))

    def on_windows_loaded(self, message: WindowsLoaded) -> None:
        self.table, self.original = message.table, message.original
        self.starts = message.starts
        dt = self.query_one(DataTable)
        dt.clear()
        for pos in range(len(self.table.index)):
            dt.add_row(str(int(self.table.index[pos])), self.labels.at(self.starts[pos]),
                       fmt.num(self.table.worst_error[pos], 3), fmt.num(self.table.score[pos], 3),
                       str(self.table.mode[pos]), key=str(pos))
        dt.focus()
        if len(self.table.index):
            self.current = 0

    @work(thread=True, exclusive=True, group="strip-stretch", exit_on_error=False)
    def load_stretch(self, a: int, b: int) -> None:
        name, n = self.meta.name, self.meta.n_samples
        try:
            with archive_lock(self.archive):
                t = elapsed(self.archive.timeline, a, b)  # the logged times: gaps and jitter count
                lo, hi = float(t[0]), (float(elapsed(self.archive.timeline, b, b + 1)[0]) if b < n else None)
                rebuilt = as_plotted(self.archive.read(name, lo, hi))
                preview = as_plotted(self.archive.preview(name, lo, hi))
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Cannot read this stretch"))
            return
        original = error = None
        t = t[:len(rebuilt)]
        if self.original is not None:
            original = as_plotted(self.original[a:a + len(rebuilt)])
            error = rebuilt - original
        self.post_message(StretchLoaded(float(t[0]), float(t[-1]), t, rebuilt, preview, original, error,
                                        self.meta.eps, first=a))

    def on_stretch_loaded(self, message: StretchLoaded) -> None:
        self.stretch = message
        marks = None
        if self.table is not None and 0 <= self.current < len(self.starts):
            s0 = int(self.table.start_sample[self.current])
            edges = (s0, s0 + int(self.table.n[self.current]) - 1)
            marks = tuple(float(message.t[k - message.first]) for k in edges
                          if 0 <= k - message.first < len(message.t)) or None
        self.query_one(StripPlot).show(message, self.meta.unit, marks, self.labels, preview_name=self.preview_name)
        self._show_info()

    @property
    def preview_name(self) -> str:
        """What ``Archive.preview`` draws here: the codes' picture, or only each window's mean level."""
        has_codes = self.table is not None and self.table.codes.shape[1] > 0 and self.archive.decoder is not None
        return "code-only preview" if has_codes else "window means"

    # -- state -----------------------------------------------------------------------
    def watch_current(self, pos: int) -> None:
        if self.table is None or not 0 <= pos < len(self.table.index):
            return
        dt = self.query_one(DataTable)
        if dt.cursor_row != pos:
            dt.move_cursor(row=pos, scroll=True)
        if self._keep_view:
            self._keep_view = False
            if self.stretch is not None:
                self.on_stretch_loaded(self.stretch)  # same stretch, new window marks
            return
        first = int(self.table.start_sample[pos])
        self._set_view(first + int(self.table.n[pos]) // 2, self.span)

    def seconds(self, sample: int) -> float:
        """Elapsed seconds of ``sample`` on the logged time axis (the end of the recording past the last)."""
        if sample >= self.meta.n_samples:
            return float(self.meta.duration)
        return float(elapsed(self.archive.timeline, sample, sample + 1)[0])

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
            self.query_one("#strip-info", Static).update(f"reading from {self.labels.at(self.seconds(a))}…")
            self.load_stretch(a, b)

    def _show_info(self) -> None:
        a, b = self.view
        unit = f" {self.meta.unit}" if self.meta.unit else ""
        lo, hi = self.seconds(a), self.seconds(b)
        parts = [f"view {self.labels.at(lo)}–{self.labels.at(hi)} ({fmt.duration(hi - lo)}); "
                 f"{self.labels.start_line()}"]
        if self.query_one(StripPlot).enveloped:
            parts[0] += "; lines show each column's lowest and highest value"
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
            parts.append(f"original not at hand: put {missing} next to the archive, or press o on Contents "
                         "to say where it is, to compare")
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
        last = self.seconds(self.meta.n_samples - 1)
        if second > last:
            self.notify(f"{text} is past the end ({self.labels.at(last)})", severity="warning")
        self.centre_on(second)
        self.query_one(DataTable).focus()

    def centre_on(self, second: float) -> None:
        """Centre the view on the sample at ``second`` (elapsed) and select the window holding it."""
        sample = min(self.archive.span(max(second, 0.0), None)[0], self.meta.n_samples - 1)
        row = window_at(np.asarray(self.table.start_sample, dtype=np.float64), float(sample))
        self._set_view(sample, self.span)
        if row != self.current:
            self._keep_view = True
            self.current = row

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
                                          start=self.seconds(a),
                                          end=self.seconds(b) if b < self.meta.n_samples else None))

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
