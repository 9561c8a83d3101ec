"""One channel on the Packing screen: its name, unit and resolution, and a budget field."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Horizontal
from textual.widgets import Input, Label

from tsarchive.budget import DEFAULT_SPEC as DEFAULT_BUDGET


def resolution_text(channel) -> str:
    """The detected logging step in words, and whether ``lossless`` is offered (pipeline._grids' rule)."""
    if channel.decimals is not None:
        return f"step {10.0 ** (-channel.decimals):g}"
    if getattr(channel, "scaled", None) is not None:
        return f"step {channel.scaled[0]:g} (the file's integers)"
    if channel.dtype in ("float32", "float16"):
        return f"no fixed step (lossless keeps the {channel.dtype} bits)"
    return "no fixed step (lossless not offered)"


class BudgetRow(Horizontal):
    """Budget field for one channel; ``spec`` is what the user typed (default 0.1%)."""

    def __init__(self, index: int, channel, *, spec: str = DEFAULT_BUDGET) -> None:
        super().__init__(classes="budget-row", id=f"budget-row-{index}")
        self.index = index
        self.channel = channel
        self._spec = spec

    def compose(self) -> ComposeResult:
        unit = f" [{self.channel.unit}]" if self.channel.unit else ""
        yield Label(f"{self.channel.name}{unit}", classes="budget-name", markup=False)
        yield Input(value=self._spec, placeholder=DEFAULT_BUDGET, id=f"budget-{self.index}",
                    classes="budget-input", compact=True,
                    tooltip="error budget: 0.02 (channel units), 0.1% (of range) or lossless")
        yield Label(resolution_text(self.channel), classes="budget-step", markup=False)

    @property
    def spec(self) -> str:
        return self.query_one(Input).value
