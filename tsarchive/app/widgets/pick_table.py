"""A row-cursor DataTable whose Enter key shows in the Footer as "Open"."""

from __future__ import annotations

from textual.binding import Binding
from textual.widgets import DataTable


class PickTable(DataTable):
    """DataTable with ``cursor_type="row"``; Enter (or a click) picks the row."""

    BINDINGS = [Binding("enter", "select_cursor", "Open")]

    def __init__(self, *, id: str | None = None) -> None:  # noqa: A002
        super().__init__(id=id, cursor_type="row", zebra_stripes=True)
