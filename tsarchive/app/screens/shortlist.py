"""The Shortlist: stretches worth a look, ranked; choosing one moves the Strip there.

Three rankings, each straight from the library (:mod:`tsarchive.index.look`, the same
functions as the ``unusual`` and ``alike`` commands):

* ``unusual`` -- with the archive's learned index (stored, or computed on opening for a
  channel short enough: :mod:`tsarchive.index.derived`), segments whose facts stand out
  most; without one, windows by the stored outlier score (the peak error of the code-only
  preview, or the peak distance of a sample from its window's mean);
* ``alike`` -- with the index, segments nearest to the selected one by code, re-ranked on
  the decoded segments; without it, windows whose codes (or coarse shapes) are nearest;
* ``worst`` -- the windows with the largest stored worst error, with the share of the budget used.

Each ranking's text says which of these it is based on for the archive at hand.

The Shortlist is a modal screen that returns the chosen window number (or None): a
segment's row returns the window that holds the segment's first sample.
"""

from __future__ import annotations

import numpy as np
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DataTable, Footer, Static

from tsarchive.app import fmt
from tsarchive.app.guard import archive_lock
from tsarchive.app.messages import ShortlistFilled, WorkFailed
from tsarchive.app.screens.base import Notices
from tsarchive.app.timing import TimeLabels, elapsed_at
from tsarchive.app.widgets.pick_table import PickTable
from tsarchive.errors import TsArchiveError
from tsarchive.index import look

TOP_K = 20
WITH_INDEX = {
    "unusual": ("Shortlist · unusual segments", "Ranked by {based_on}.", "Score"),
    "alike": ("Shortlist · look-alikes of segment #{s}", "Ranked by {based_on}.", "Distance"),
}
WITHOUT_CODES = {
    "unusual": ("Shortlist · unusual windows", "Ranked by outlier score: the largest distance of a sample from "
                "its window's mean (this archive has no learned codes).", "Score"),
    "alike": ("Shortlist · look-alikes of window #{w}", "Windows whose shape is nearest to window #{w}'s: the "
              "means of 8 equal parts, centred and scaled (this archive has no learned codes).", "Distance"),
}
WITH_CODES = {
    "unusual": ("Shortlist · unusual windows", "Ranked by outlier score: the largest gap between the code-only "
                "preview and the stored samples (this archive has no learned index).", "Score"),
    "alike": ("Shortlist · look-alikes of window #{w}", "Windows whose codes lie nearest to window #{w}'s "
              "(Euclidean distance between the window codes; this archive has no learned index).", "Distance"),
}
WORST = ("Shortlist · largest errors", "Windows whose worst error uses most of the budget "
         "(Used: worst error as a share of the budget).", "Used")


def titles(mode: str, has_codes: bool, has_index: bool = False) -> tuple[str, str, str]:
    """Title, explanation and figure name of ranking ``mode``, saying what it is based on."""
    if mode == "worst":
        return WORST
    if has_index:
        return WITH_INDEX[mode]
    return (WITH_CODES if has_codes else WITHOUT_CODES)[mode]


class ShortlistScreen(Notices, ModalScreen[int | None]):
    """Ranked segments or windows of one channel; Enter returns the chosen window number."""

    BINDINGS = [
        Binding("escape", "close", "Close"),
        Binding("u", "rank('unusual')", "Unusual"),
        Binding("l", "rank('alike')", "Alike"),
        Binding("w", "rank('worst')", "Worst"),
    ]

    def __init__(self, archive, meta, table, mode: str, current: int) -> None:
        super().__init__(id="shortlist")
        self.archive, self.meta, self.table = archive, meta, table
        self.mode = mode
        self.window = int(table.index[current]) if 0 <= current < len(table.index) else 0
        self.rows: list[tuple[int, float]] = []      # (window, figure), best first
        self.starts_of: list[int] = []               # first sample of each row's segment or window
        self.has_codes = table.codes.shape[1] > 0 and archive.decoder is not None
        self.has_index = look.has_segments(archive, meta.name)      # a stored or a derived index
        self.segment = None
        self.labels = TimeLabels(archive.timeline, meta.duration)

    def compose(self) -> ComposeResult:
        with Vertical(id="shortlist-box"):
            yield Static("", id="shortlist-title", classes="title", markup=False)
            yield Static("", id="shortlist-about", markup=False)
            yield PickTable(id="shortlist-table")
            yield Static("Enter shows the place in the Strip · u / l / w switch ranking · Esc closes",
                         classes="note", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.action_rank(self.mode)

    def _unit(self, mode: str) -> str:
        return "Segment" if self.has_index and mode != "worst" else "Window"

    def action_rank(self, mode: str) -> None:
        self.mode = mode
        title, about, figure = titles(mode, self.has_codes, self.has_index)
        self.query_one("#shortlist-title", Static).update(title.format(w=self.window, s=self._segment()))
        self.query_one("#shortlist-about", Static).update(about.format(w=self.window, based_on="…"))
        dt = self.query_one(DataTable)
        dt.clear(columns=True)
        dt.add_columns("Rank", self._unit(mode), self.labels.column, figure, "Worst err", "Mode", "Why")
        self.rank(mode)

    def _segment(self) -> int:
        """The segment holding the selected window's first sample (index archives)."""
        if self.segment is None:
            return 0
        return self.window * self.meta.window // self.segment

    @work(thread=True, exclusive=True, group="shortlist", exit_on_error=False)
    def rank(self, mode: str) -> None:
        try:
            with archive_lock(self.archive):
                ranking = self._ranking(mode, self.meta.name)
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Shortlist"))
            return
        self.post_message(ShortlistFilled(ranking))

    def _ranking(self, mode: str, name: str):
        """A :class:`tsarchive.index.look.Ranking` for ``mode`` (library calls only)."""
        if mode == "unusual":
            return look.unusual(self.archive, name, k=TOP_K)
        if mode == "alike":
            if self.has_index and self.segment is None:
                self.segment = look.index_of(self.archive, name)[0].segment
            start = self._segment() if self.has_index else self.window
            return look.alike(self.archive, start, name, k=TOP_K)
        order = np.lexsort((np.asarray(self.table.index), -np.asarray(self.table.worst_error)))[:TOP_K]
        W = self.meta.window
        rows = tuple(look.Row(int(self.table.index[p]), int(self.table.index[p]) * W,
                              float(self.table.worst_error[p])) for p in order)
        return look.Ranking(name, "worst", "window", W, WORST[1], rows)

    def _positions(self, windows) -> list[int]:
        where = {int(w): p for p, w in enumerate(np.asarray(self.table.index))}
        return [where[int(w)] for w in windows]

    def on_shortlist_filled(self, message: ShortlistFilled) -> None:
        r = message.rows
        if r.unit == "segment":
            self.segment = r.size
            self.query_one("#shortlist-about", Static).update(f"Ranked by {r.based_on}.")
            if r.kind == "alike":
                self.query_one("#shortlist-title", Static).update(WITH_INDEX["alike"][0].format(s=self._segment()))
        W = self.meta.window
        self.rows = [(row.start // W, row.figure) for row in r.rows]
        self.starts_of = [row.start for row in r.rows]
        order = np.argsort(self.starts_of, kind="stable")            # elapsed_at reads ascending samples
        starts = np.empty(len(order))
        starts[order] = elapsed_at(self.archive.timeline, np.asarray(self.starts_of, dtype=np.int64)[order])
        dt = self.query_one(DataTable)
        dt.clear()
        for rank, (row, (w, figure), p, at) in enumerate(zip(r.rows, self.rows, self._positions(
                [w for w, _ in self.rows]), starts), start=1):
            shown = fmt.num(figure, 3) if self.mode != "worst" else self.used(figure)
            dt.add_row(str(rank), f"#{row.number}", self.labels.at(at), shown,
                       fmt.num(self.table.worst_error[p], 3), str(self.table.mode[p]), row.why, key=str(rank))
        dt.focus()

    def used(self, worst: float) -> str:
        """Worst error as a share of the channel's budget (lossless channels: none allowed)."""
        eps = float(self.meta.eps)
        return fmt.pct(100 * worst / eps) if eps > 0 else "lossless"

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        if 0 <= event.cursor_row < len(self.rows):
            self.dismiss(self.rows[event.cursor_row][0])

    def action_close(self) -> None:
        self.dismiss(None)
