"""The Keys screen: what each screen's name means, then every key of every screen (read from their BINDINGS)."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DataTable, Footer, Static

from tsarchive.app.screens.base import Notices
from tsarchive.app.summary import USED_HELP


#: Each screen's name and what it is for, in the order a user meets them (shown first on the Keys screen).
SCREENS = (
    ("Folder", "the start screen: the recordings and archives of one folder, with length, channels and ratio"),
    ("Packing", "one recording: set a budget per channel, pack it into an archive, see what each channel got"),
    ("Contents", "one archive: its channels, budgets, worst errors and ratios, and verifying it"),
    ("Strip", "one channel: its windows in time order and a plot of the stretch, read like a strip chart"),
    ("Shortlist", "windows worth a look, ranked (unusual, look-alikes, largest errors); Enter goes there"),
    ("Export", "write a time range of an archive to CSV, Parquet or NPY"),
    ("Keys", "this list: what the screens are and which keys they take"),
)


def key_table(app_type: type) -> list[tuple[str, str, str]]:
    """``(where, key, what)`` rows for the app (``app_type``, whose bindings apply anywhere) and each
    screen, in the order a user meets them."""
    from tsarchive.app.screens.packing import PackingScreen
    from tsarchive.app.screens.export import ExportScreen
    from tsarchive.app.screens.shortlist import ShortlistScreen
    from tsarchive.app.screens.contents import ContentsScreen
    from tsarchive.app.screens.folder import FolderScreen
    from tsarchive.app.screens.strip import StripScreen

    places = [("Anywhere", app_type), ("Folder", FolderScreen), ("Packing", PackingScreen),
              ("Contents", ContentsScreen), ("Strip", StripScreen), ("Shortlist", ShortlistScreen), ("Export", ExportScreen)]
    enter = {"Folder": "pack the recording, or open the archive in the Contents screen",
             "Contents": "open the channel in the Strip", "Shortlist": "show the window in the Strip"}
    rows = [("Screen", name, about) for name, about in SCREENS]
    rows.append(("Figures", "Used", USED_HELP))
    for where, cls in places:
        if where in enter:
            rows.append((where, "Enter", enter[where]))
        for b in cls.BINDINGS:
            if not isinstance(b, Binding):
                continue
            keys = b.key_display or " / ".join(_pretty(k) for k in b.key.split(","))
            rows.append((where, keys, b.tooltip or b.description))
    rows.append(("Tables", "↑ / ↓ / PgUp / PgDn", "move the cursor (on the Strip: the next or previous window)"))
    rows.append(("Mouse", "click, click again", "a click puts the cursor on a row, a second click opens it"))
    rows.append(("Fields", "Tab / Shift+Tab", "next / previous field"))
    return rows


def _pretty(key: str) -> str:
    names = {"pagedown": "PgDn", "pageup": "PgUp", "down": "↓", "up": "↑", "left": "←", "right": "→",
             "equals_sign": "=", "plus": "+", "minus": "-", "left_square_bracket": "[",
             "right_square_bracket": "]", "question_mark": "?", "escape": "Esc", "enter": "Enter"}
    if key in names:
        return names[key]
    return "+".join(part.capitalize() if len(part) > 1 else part for part in key.split("+"))


class KeysScreen(Notices, ModalScreen[None]):
    """A table of all keys; Escape or ? closes it."""

    BINDINGS = [Binding("escape,question_mark,f1", "close", "Close")]

    def compose(self) -> ComposeResult:
        with Vertical(id="keys-box"):
            yield Static("Keys", classes="title", markup=False)
            yield DataTable(id="keys-table", cursor_type="row", zebra_stripes=True)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one(DataTable)
        table.add_columns("Where", "Name or key", "What it is or does")
        for row in key_table(type(self.app)):
            table.add_row(*row)
        table.focus()

    def action_close(self) -> None:
        self.dismiss(None)
