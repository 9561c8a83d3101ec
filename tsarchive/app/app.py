"""The tsarchive terminal app: Folder -> Packing / Contents -> Strip -> Shortlist, Export.

The App gets its one input, a path, through its constructor:

* a folder: the Folder screen lists it;
* an archive (``NAME.tsarchive``, or an older ``NAME.tsa``): the Folder screen lists its folder
  and the Contents screen opens on it;
* a recording file: the Folder screen lists its folder with that file selected.

Session state kept here: the verification state of each archive checked in this
session (:attr:`TsArchiveApp.checks`), and the originals the user pointed archives at
(:attr:`TsArchiveApp.sources`). The app drives the library only through
``tsarchive.pack``, ``tsarchive.open``, ``tsarchive.inspect_source`` and the
``Archive`` methods; it holds no codec logic.
"""

from __future__ import annotations

from pathlib import Path

from textual.app import App
from textual.binding import Binding
from textual.screen import Screen
from textual.theme import Theme

from tsarchive.app.locate import is_archive_path
from tsarchive.app.screens.folder import FolderScreen

LAB_THEME = Theme(
    name="tsarchive-lab",
    primary="#4F8A8B",
    secondary="#9C7A54",
    accent="#D9B44A",
    warning="#E0913A",
    error="#D0534A",
    success="#5E9E6E",
    foreground="#E4E1D8",
    background="#15191C",
    surface="#1D2327",
    panel="#27323A",
    dark=True,
)


class TsArchiveApp(App):
    """Keyboard-first app for lab technicians: pack, inspect, browse, verify, export."""

    CSS_PATH = Path(__file__).with_name("app.tcss")  # absolute: subclasses elsewhere keep it
    TITLE = "tsarchive"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [
        Binding("f1", "keys", "Keys"),
        Binding("question_mark", "keys", "Keys", key_display="?", show=False),
        # works everywhere; not in the footers, which show q (and Esc) and must fit 80 columns
        Binding("ctrl+q", "quit", "Quit", priority=True, show=False),
    ]

    def __init__(self, path: str | Path | None = None) -> None:
        super().__init__()
        target = Path(path).expanduser() if path is not None else Path.cwd()
        self.start_path = target.resolve() if target.exists() else target
        if is_archive_path(self.start_path) or self.start_path.is_file():
            self.folder = self.start_path.parent
        elif self.start_path.is_dir():
            self.folder = self.start_path
        else:
            self.folder = Path.cwd()
        self.checks: dict[Path, str] = {}
        """Verification state of archives checked this session: ``verified ok`` or ``failed``."""
        self.sources: dict[Path, Path] = {}
        """Originals the user pointed archives at this session (archive path -> recording)."""

    def get_default_screen(self) -> Screen:
        return FolderScreen(self.folder)

    def on_mount(self) -> None:
        self.register_theme(LAB_THEME)
        self.theme = LAB_THEME.name
        if not self.start_path.exists():
            self.notify(f"{self.start_path} does not exist; showing {self.folder} instead",
                        severity="error", timeout=8)
        elif is_archive_path(self.start_path):
            self.open_archive(self.start_path)
        elif self.start_path.is_file():
            self.call_after_refresh(self._select_start_file)

    def _select_start_file(self) -> None:
        folder_screen = self.screen
        if isinstance(folder_screen, FolderScreen):
            folder_screen.select_path(self.start_path)

    def notify(self, message: str, *, title: str = "", severity="information", timeout: float | None = None,
               markup: bool = False) -> None:
        """Show a notification; text is never read as markup (names and units hold brackets)."""
        super().notify(message, title=title, severity=severity, timeout=timeout, markup=False)

    # -- navigation used by the screens -------------------------------------
    def open_archive(self, path: Path) -> None:
        """Show ``path`` in the Contents screen."""
        from tsarchive.app.screens.contents import ContentsScreen

        self.push_screen(ContentsScreen(Path(path)))

    def open_packing(self, source: Path) -> None:
        """Show ``source`` on the Packing screen."""
        from tsarchive.app.screens.packing import PackingScreen

        self.push_screen(PackingScreen(Path(source)))

    def action_keys(self) -> None:
        from tsarchive.app.screens.keys import KeysScreen

        if not isinstance(self.screen, KeysScreen):
            self.push_screen(KeysScreen())
