"""The Shortlist: windows worth a look, ranked; choosing one moves the Strip there.

Three rankings, each straight from the library's figures:

* ``unusual`` -- ``Archive.outliers``: highest outlier score first (the peak error of
  the code-only preview: windows the learned codes describe worst; in an archive without
  codes, the peak distance of a sample from its window's mean);
* ``alike`` -- ``Archive.similar``: windows whose codes (without codes: coarse shapes) are
  nearest to the selected one;
* ``worst`` -- the windows with the largest stored worst error, with the share of the budget used.

Each ranking's text says which of these it is based on for the archive at hand.

The Shortlist is a modal screen that returns the chosen window number (or None).
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

TOP_K = 20
WITH_CODES = {
    "unusual": ("Shortlist · unusual windows", "Ranked by outlier score: the largest gap between the code-only "
                "preview and the stored samples. High scores mark shapes the model rarely saw.", "Score"),
    "alike": ("Shortlist · look-alikes of window #{w}", "Windows whose codes lie nearest to window #{w}'s "
              "(Euclidean distance between the learned codes).", "Distance"),
}
WITHOUT_CODES = {
    "unusual": ("Shortlist · unusual windows", "Ranked by outlier score: the largest distance of a sample from "
                "its window's mean (this archive has no learned codes).", "Score"),
    "alike": ("Shortlist · look-alikes of window #{w}", "Windows whose shape is nearest to window #{w}'s: the "
              "means of 8 equal parts, centred and scaled (this archive has no learned codes).", "Distance"),
}
WORST = ("Shortlist · largest errors", "Windows whose worst error uses most of the budget "
         "(Used: worst error as a share of the budget).", "Used")


def titles(mode: str, has_codes: bool) -> tuple[str, str, str]:
    """Title, explanation and figure name of ranking ``mode``, saying what it is based on."""
    if mode == "worst":
        return WORST
    return (WITH_CODES if has_codes else WITHOUT_CODES)[mode]


class ShortlistScreen(Notices, ModalScreen[int | None]):
    """Ranked windows of one channel; Enter returns the chosen window number."""

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
        self.rows: list[tuple[int, float]] = []
        self.has_codes = table.codes.shape[1] > 0 and archive.decoder is not None
        self.labels = TimeLabels(archive.timeline, meta.duration)
        self.starts = elapsed_at(archive.timeline, table.start_sample)

    def compose(self) -> ComposeResult:
        with Vertical(id="shortlist-box"):
            yield Static("", id="shortlist-title", classes="title", markup=False)
            yield Static("", id="shortlist-about", markup=False)
            yield PickTable(id="shortlist-table")
            yield Static("Enter shows the window in the Strip · u / l / w switch ranking · Esc closes",
                         classes="note", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.action_rank(self.mode)

    def action_rank(self, mode: str) -> None:
        self.mode = mode
        title, about, figure = titles(mode, self.has_codes)
        self.query_one("#shortlist-title", Static).update(title.format(w=self.window))
        self.query_one("#shortlist-about", Static).update(about.format(w=self.window))
        dt = self.query_one(DataTable)
        dt.clear(columns=True)
        dt.add_columns("Rank", "Window", self.labels.column, figure, "Worst err", "Mode")
        self.rank(mode)

    @work(thread=True, exclusive=True, group="shortlist", exit_on_error=False)
    def rank(self, mode: str) -> None:
        name = self.meta.name
        try:
            with archive_lock(self.archive):
                rows = self._ranking(mode, name)
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Shortlist"))
            return
        self.post_message(ShortlistFilled(rows))

    def _ranking(self, mode: str, name: str) -> list[tuple[int, float]]:
        """``(window, figure)`` pairs for ``mode``, best first (library calls only)."""
        if mode == "unusual":
            ids = self.archive.outliers(name, k=TOP_K)
            return [(int(w), float(self.table.score[p])) for w, p in zip(ids, self._positions(ids))]
        if mode == "alike":
            return [(int(w), float(d)) for w, d in self.archive.similar(name, self.window, k=TOP_K)]
        order = np.lexsort((np.asarray(self.table.index), -np.asarray(self.table.worst_error)))[:TOP_K]
        return [(int(self.table.index[p]), float(self.table.worst_error[p])) for p in order]

    def _positions(self, ids) -> list[int]:
        where = {int(w): p for p, w in enumerate(np.asarray(self.table.index))}
        return [where[int(w)] for w in ids]

    def on_shortlist_filled(self, message: ShortlistFilled) -> None:
        self.rows = message.rows
        dt = self.query_one(DataTable)
        dt.clear()
        positions = self._positions([w for w, _ in self.rows])
        for rank, ((w, figure), p) in enumerate(zip(self.rows, positions), start=1):
            shown = fmt.num(figure, 3) if self.mode != "worst" else self.used(figure)
            dt.add_row(str(rank), f"#{w}", self.labels.at(self.starts[p]), shown,
                       fmt.num(self.table.worst_error[p], 3), str(self.table.mode[p]), key=str(w))
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
