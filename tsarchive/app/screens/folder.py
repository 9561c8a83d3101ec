"""The Folder screen: the recordings and archives of one folder (the app's start screen).

Names and sizes are listed at once; durations, channel counts and ratios are read
by a worker one file at a time (``tsarchive.inspect_source`` / ``tsarchive.open``)
so a big folder stays responsive. The check column shows this session's
verification state of each archive (kept in the App, not on disk), else a kept record.

A batch's output folder (``pack --into``) has a catalog (``catalog.parquet``): its
archives, also those in subfolders (named by their relative path), are listed with
the catalog's figures and check instead of being opened one by one; a row whose
archive changed since it was catalogued is read from the archive as usual.
"""

from __future__ import annotations

from pathlib import Path

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static

import tsarchive
from tsarchive.app import fmt
from tsarchive.app.locate import FolderEntry, scan_folder, tree_size
from tsarchive.app.messages import FolderDetailsLoaded, WorkFailed
from tsarchive.app.screens.base import Notices
from tsarchive.app.widgets.pick_table import PickTable
from tsarchive.record.kept import read_record
from tsarchive.app.summary import UNVERIFIED, VERIFIED_OK, archive_duration
from tsarchive.batch.catalog import current_rows, is_catalog
from tsarchive.errors import NeedsRate, TsArchiveError

COLUMNS = ("Name", "Kind", "Size", "Length", "Ch", "Ratio", "Check")
WAITING = "…"


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}" + ("" if n == 1 else "s")


class FolderScreen(Notices, Screen):
    """Lists ``folder``; Enter packs a recording or opens an archive in the Contents screen."""

    BINDINGS = [
        Binding("p", "pack", "Pack"),
        Binding("r", "rescan", "Rescan"),
        Binding("q", "app.quit", "Quit", tooltip="quit tsarchive (also Ctrl+Q)"),
    ]

    def __init__(self, folder: Path) -> None:
        super().__init__(id="folder")
        self.folder = Path(folder)
        self.entries: list[FolderEntry] = []
        self.details: dict[Path, FolderDetailsLoaded] = {}
        self.pending: Path | None = None
        self.catalog: dict[Path, dict] = {}      # the folder's catalog rows by archive path (see module doc)

    def compose(self) -> ComposeResult:
        yield Static("", id="folder-title", classes="title", markup=False)
        yield PickTable(id="folder-table")
        yield Static("", id="folder-note", classes="note", markup=False)
        yield Footer()

    def on_mount(self) -> None:
        self.query_one(DataTable).add_columns(*COLUMNS)

    def on_screen_resume(self) -> None:
        """Rescan whenever the Folder screen comes back (a pack may have added an archive)."""
        self.rescan()

    # -- listing ---------------------------------------------------------
    def rescan(self) -> None:
        """List the folder again; details already read are reused unless the size changed."""
        try:
            found = scan_folder(self.folder)
        except TsArchiveError as exc:
            self.notify(str(exc), severity="error")
            found = []
        self.catalog = current_rows(self.folder)
        found = [e for e in found if not is_catalog(e.path)]      # the catalog table is no recording
        listed = {e.path for e in found}
        below = [FolderEntry(p, "archive", 0) for p in sorted(self.catalog) if p not in listed]
        found = [self._sized(e) if e.is_archive else e for e in below + found]
        found.sort(key=lambda e: not e.is_archive)       # archives first, as scan_folder lists them
        old_sizes = {e.path: e.size for e in self.entries}
        for e in found:
            if old_sizes.get(e.path) != e.size:
                self.details.pop(e.path, None)
            if e.path in self.catalog and e.path not in self.details:
                self.details[e.path] = self._catalogued(e.path)
        table = self.query_one(DataTable)
        keep = table.cursor_row
        chosen = self.selected.path if self.selected is not None else None
        self.entries = found
        table.clear()
        for e in found:
            table.add_row(*self._cells(e), key=str(e.path))
        paths = [e.path for e in found]
        if chosen in paths:  # the same file stays selected, wherever the rescan put it
            table.move_cursor(row=paths.index(chosen))
        elif found:
            table.move_cursor(row=min(keep, len(found) - 1))
        if self.pending is not None:
            self.select_path(self.pending)
        n_arc = sum(e.is_archive for e in found)
        self.query_one("#folder-title", Static).update(
            f"Folder · {self.folder} — {_count(len(found) - n_arc, 'recording')}, {_count(n_arc, 'archive')}")
        self._update_note()
        missing = [e for e in found if e.path not in self.details]
        if missing:
            self.load_details(missing)

    def _sized(self, e: FolderEntry) -> FolderEntry:
        row = self.catalog.get(e.path)
        return FolderEntry(e.path, e.kind, row["archive_bytes"] if row else tree_size(e.path))

    def _catalogued(self, path: Path) -> FolderDetailsLoaded:
        row = self.catalog[path]
        return FolderDetailsLoaded(path, row["duration_s"], len(row["channels"]), row["rate_hz"], row["ratio"])

    def _shown_name(self, e: FolderEntry) -> str:
        return e.path.name if e.path.parent == self.folder else e.path.relative_to(self.folder).as_posix()

    def _check(self, e: FolderEntry) -> str:
        if not e.is_archive:
            return "—"
        if e.path in self.app.checks:  # type: ignore[attr-defined]
            return self.app.checks[e.path]  # type: ignore[attr-defined]
        kept = read_record(e.path)
        if kept is not None:
            return kept.state
        return VERIFIED_OK if e.path in self.catalog else UNVERIFIED

    def _cells(self, e: FolderEntry) -> tuple[str, ...]:
        d = self.details.get(e.path)
        check = self._check(e)
        name = self._shown_name(e)
        if d is None:
            return (name, e.kind, fmt.size(e.size), WAITING, WAITING, WAITING if e.is_archive else "—", check)
        if d.problem:
            return (name, e.kind, fmt.size(e.size), "needs rate" if d.needs_rate else "unreadable", "—", "—", check)
        n = "—" if d.n_channels is None else str(d.n_channels)
        return (name, e.kind, fmt.size(e.size), fmt.duration(d.duration), n,
                fmt.ratio(d.ratio) if e.is_archive else "—", check)

    @work(thread=True, exclusive=True, group="folder-details", exit_on_error=False)
    def load_details(self, entries: list[FolderEntry]) -> None:
        """Read each entry's header in a thread; post one message per entry."""
        from textual.worker import get_current_worker

        worker = get_current_worker()
        for e in entries:
            if worker.is_cancelled:
                return
            try:
                if e.is_archive:
                    arc = tsarchive.open(e.path)
                    chans = arc.channels
                    msg = FolderDetailsLoaded(e.path, archive_duration(chans), len(chans),
                                             chans[0].rate if chans else None, arc.ratio)
                else:
                    rec = tsarchive.inspect_source(e.path)
                    msg = FolderDetailsLoaded(e.path, rec.duration, len(rec.channels), rec.rate)
            except NeedsRate:
                msg = FolderDetailsLoaded(e.path, problem=f"{e.path.name} has no time axis: press p and type "
                                                          "its rate (samples per second) on the Packing screen",
                                          needs_rate=True)
            except TsArchiveError as exc:
                msg = FolderDetailsLoaded(e.path, problem=str(exc))
            except OSError as exc:
                msg = FolderDetailsLoaded(e.path, problem=f"cannot read {e.path.name}: {exc.strerror or exc}")
            except ValueError as exc:  # e.g. a malformed table the reader did not anticipate
                msg = FolderDetailsLoaded(e.path, problem=f"{e.path.name} cannot be read as a recording ({exc})")
            self.post_message(msg)

    def on_folder_details_loaded(self, message: FolderDetailsLoaded) -> None:
        self.details[message.path] = message
        entry = next((e for e in self.entries if e.path == message.path), None)
        if entry is None:
            return
        table = self.query_one(DataTable)
        for col, value in zip(table.columns, self._cells(entry)):
            table.update_cell(str(entry.path), col, value, update_width=True)
        self._update_note()

    # -- selection ---------------------------------------------------------
    @property
    def selected(self) -> FolderEntry | None:
        table = self.query_one(DataTable)
        if not self.entries or table.cursor_row < 0:
            return None
        return self.entries[min(table.cursor_row, len(self.entries) - 1)]

    def select_path(self, path: Path) -> None:
        """Put the cursor on ``path`` (now, or after the next scan lists it)."""
        rows = [e.path for e in self.entries]
        if path in rows:
            self.query_one(DataTable).move_cursor(row=rows.index(path))
            self.pending = None
        else:
            self.pending = path

    def on_data_table_row_highlighted(self, _event: DataTable.RowHighlighted) -> None:
        self._update_note()

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.action_open_row()

    def _update_note(self) -> None:
        note = self.query_one("#folder-note", Static)
        e = self.selected
        if e is None:
            note.update("Nothing to show here: put recordings (.npy, .csv, .parquet) or archives (.tsarchive, .tsa) "
                        "in this folder, or start tsarchive in another one. Press r to look again.")
            return
        d = self.details.get(e.path)
        what = "Enter opens it in the Contents screen." if e.is_archive else "Enter or p takes it to the Packing screen."
        line = f"{self._shown_name(e)}: {what}"
        row = self.catalog.get(e.path)
        if row is not None and e.path not in self.app.checks:  # type: ignore[attr-defined]
            line += f"\ncatalog: {row['check']} ({row['checked_utc']:%Y-%m-%d %H:%M} UTC)"
        if d is not None and d.problem:
            line += f"\n{d.problem}"
        elif d is not None and d.rate:
            line += f"  {fmt.rate(d.rate)}, {d.n_channels} channels, {fmt.duration(d.duration)}."
        note.update(line)

    def action_open_row(self) -> None:
        e = self.selected
        if e is None:
            return
        if e.is_archive:
            self.app.open_archive(e.path)  # type: ignore[attr-defined]
        else:
            self.app.open_packing(e.path)  # type: ignore[attr-defined]

    def action_pack(self) -> None:
        e = self.selected
        if e is None or e.is_archive:
            self.post_message(WorkFailed("pick a recording (.npy, .csv, .parquet) to pack", title="Pack"))
            return
        self.app.open_packing(e.path)  # type: ignore[attr-defined]

    def action_rescan(self) -> None:
        self.details.clear()
        self.rescan()
