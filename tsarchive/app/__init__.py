"""The tsarchive terminal app (Textual). Textual is imported only under this package.

``run_app(path)`` starts it on a folder, an archive (``NAME.tsarchive``, or an older ``NAME.tsa``)
or a recording file.
"""

from __future__ import annotations

import sys
from pathlib import Path

from tsarchive.errors import BadInput


def has_terminal() -> bool:
    """Whether stdin and stdout are both a terminal (the app reads keys and draws the screen there)."""
    try:
        return bool(sys.stdin and sys.stdin.isatty() and sys.stdout and sys.stdout.isatty())
    except (AttributeError, ValueError):  # a replaced or closed stream
        return False


def run_app(path: str | Path | None = None) -> None:
    """Run the app until the user quits (q or Ctrl+Q). ``path`` defaults to the current folder.

    Raises :class:`BadInput` without a terminal on stdin and stdout (a pipe, a
    cron job, a CI log), where the app could neither read keys nor draw.
    """
    if not has_terminal():
        raise BadInput("the terminal app needs a terminal on stdin and stdout; run it in a terminal, or use "
                       "tsarchive pack, unpack, verify or report")
    from tsarchive.app.app import TsArchiveApp

    TsArchiveApp(path).run()


__all__ = ["run_app"]
