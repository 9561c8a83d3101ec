"""The tsarchive terminal app (Textual). Textual is imported only under this package.

``run_app(path)`` starts it on a folder, an archive (``NAME.tsa``) or a recording file.
"""

from __future__ import annotations

from pathlib import Path


def run_app(path: str | Path | None = None) -> None:
    """Run the app until the user quits (Ctrl+Q). ``path`` defaults to the current folder."""
    from tsarchive.app.app import TsArchiveApp

    TsArchiveApp(path).run()


__all__ = ["run_app"]
