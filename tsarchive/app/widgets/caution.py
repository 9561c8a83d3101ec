"""The caution shown on every archive's Contents screen (it cannot be dismissed)."""

from __future__ import annotations

from textual.widgets import Static

CAUTION_TEXT = (
    "Caution: lossy archiving of measurement records can break a lab's quality or retention rules. "
    "Keep the original recordings until this archive verifies, and defer to your lab's quality "
    "system and the regulations that apply to you."
)


class Caution(Static):
    """A fixed, always-visible note about lossy archiving of measurement records."""

    def __init__(self, *, id: str | None = None) -> None:  # noqa: A002 - Textual's argument name
        super().__init__(CAUTION_TEXT, id=id, classes="caution", markup=False)
