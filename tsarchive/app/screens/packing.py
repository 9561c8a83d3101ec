"""The Packing screen: set budgets for one recording, pack it, see what each channel got.

The recording's header is read by ``tsarchive.inspect_source`` in a worker; packing runs
``tsarchive.pack`` in a thread worker that posts :class:`PackStep` for each
``tsarchive.Progress`` and ends with :class:`PackDone` or :class:`PackHalted`.
Escape while packing sets the ``cancel`` event (the library then writes nothing).
"""

from __future__ import annotations

import threading
import time
from pathlib import Path

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.reactive import reactive
from textual.screen import Screen
from textual.validation import Function
from textual.widgets import Button, Checkbox, DataTable, Footer, Input, Label, Static

import tsarchive
from tsarchive.app import fmt
from tsarchive.app.locate import (ARCHIVE_SUFFIX, ARCHIVE_SUFFIXES, free_archive_name, parse_optional_float,
                                  parse_optional_int)
from tsarchive.app.messages import PackDone, PackHalted, PackStep, RecordingInspected, WorkFailed
from tsarchive.app.screens.base import Notices
from tsarchive.app.widgets.budget_row import BudgetRow
from tsarchive.app.widgets.stage_progress import StageProgress
from tsarchive.app.summary import USED_HELP
from tsarchive.budget import DEFAULT_SPEC, parse_budget, spec_from_fields
from tsarchive.errors import BadInput, Cancelled, TsArchiveError

SUMMARY_COLUMNS = ("Channel", "Budget", "Worst error", "Used", "Ratio", "Bits/sample")
PROGRESS_EVERY_S = 0.1
"""Post at most one progress message per this many seconds within a stage (display only)."""


def replace_label(on: bool) -> str:
    """The 'replace' checkbox says its state in words (a tick drawn in colour alone vanishes under NO_COLOR)."""
    return "replace: yes" if on else "replace: no"


def _budget_ok(text: str) -> bool:
    try:
        parse_budget(text or DEFAULT_SPEC)
    except TsArchiveError:
        return False
    return True


class PackingScreen(Notices, Screen):
    """Budgets, settings, progress and the per-channel outcome of packing ``source``."""

    BINDINGS = [
        Binding("ctrl+s", "start", "Start packing"),
        Binding("escape", "cancel_or_back", "Cancel/back"),
        Binding("ctrl+o", "open_archive", "Open archive"),
    ]

    running: reactive[bool] = reactive(False, init=False)

    def __init__(self, source: Path) -> None:
        super().__init__(id="packing")
        self.source = Path(source)
        self.recording = None
        self.result = None
        self.cancel_event: threading.Event | None = None
        self._rate_shown = ""

    def compose(self) -> ComposeResult:
        yield Static(f"Packing · {self.source.name}", id="packing-title", classes="title", markup=False)
        with VerticalScroll(id="packing-body", can_focus=False):
            yield Static("reading the recording's header…", id="packing-info", markup=False)
            yield Label("Error budget per channel: 0.02 (channel units), 0.1% (of range) or lossless",
                        classes="section", markup=False)
            yield VerticalScroll(id="packing-budgets", can_focus=False)
            with Horizontal(classes="field-row"):
                yield Label("rate Hz", classes="field-label")
                yield Input(placeholder="from file", id="packing-rate", compact=True, classes="short")
                yield Label("window", classes="field-label")
                yield Input(placeholder="auto", id="packing-window", compact=True, classes="short")
                yield Label("code size", classes="field-label")
                yield Input(placeholder="auto", id="packing-code", compact=True, classes="short",
                            tooltip="numbers per window code; 0 packs without the autoencoder")
                yield Label("train s", classes="field-label")
                yield Input(placeholder="60", id="packing-train", compact=True, classes="short",
                            tooltip="at most this many seconds of autoencoder training")
            with Horizontal(classes="field-row"):
                yield Label("archive", classes="field-label")
                yield Input(free_archive_name(self.source.parent, self.source.stem), id="packing-target", compact=True)
                yield Checkbox(replace_label(False), id="packing-replace", compact=True)
                yield Button("Start packing", id="packing-start", compact=True)
            yield StageProgress(id="packing-progress")
            yield DataTable(id="packing-summary", cursor_type="row")
            yield Static("", id="packing-result", markup=False)
        yield Footer()

    def on_mount(self) -> None:
        self.query_one("#packing-progress").display = False
        summary = self.query_one("#packing-summary", DataTable)
        summary.add_columns(*SUMMARY_COLUMNS)
        summary.display = False
        self.inspect(None)

    # -- reading the header ------------------------------------------------
    @work(thread=True, exclusive=True, group="packing-inspect", exit_on_error=False)
    def inspect(self, rate: float | None) -> None:
        try:
            rec = tsarchive.inspect_source(self.source, rate=rate)
        except TsArchiveError as exc:
            self.post_message(WorkFailed(str(exc), title="Cannot read the recording"))
            self.post_message(RecordingInspected(None, str(exc)))
            return
        self.post_message(RecordingInspected(rec))

    def on_recording_inspected(self, message: RecordingInspected) -> None:
        if message.recording is None:
            self.query_one("#packing-info", Static).update(
                f"Cannot read it as it stands: {message.problem}\n"
                "If it needs a sample rate, type it in 'rate Hz' and press Enter.")
            self.query_one("#packing-rate", Input).focus()
            return
        rec = self.recording = message.recording
        start = f" · starts {rec.start:%Y-%m-%d %H:%M:%S}" if rec.start is not None else ""
        self.query_one("#packing-info", Static).update(
            f"{fmt.rate(rec.rate)} · {rec.n_samples} samples · {fmt.duration(rec.duration)} · "
            f"{len(rec.channels)} channel{'' if len(rec.channels) == 1 else 's'}{start}")
        self._rate_shown = f"{rec.rate:g}"
        self.query_one("#packing-rate", Input).value = self._rate_shown
        box = self.query_one("#packing-budgets", VerticalScroll)
        old = {row.channel.name: row.spec for row in box.query(BudgetRow)}
        box.remove_children()
        box.mount_all([BudgetRow(i, ch, spec=old.get(ch.name, DEFAULT_SPEC)) for i, ch in enumerate(rec.channels)])
        self.call_after_refresh(self._attach_validators)

    def _attach_validators(self) -> None:
        fields = list(self.query(".budget-input").results(Input))
        for field in fields:
            field.validators = [Function(_budget_ok, "write 0.02, 0.1% or lossless")]
        if fields:
            fields[0].focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if event.input.id == "packing-rate":
            try:
                rate = float(event.value) if event.value.strip() else None
            except ValueError:
                self.notify("rate must be a number of samples per second, such as 100", severity="error")
                return
            self.inspect(rate)
        else:
            self.screen.focus_next()

    # -- packing ------------------------------------------------------------
    def _settings(self) -> dict:
        """Arguments for ``tsarchive.pack`` from the fields; raises BadInput when one is wrong."""
        if self.recording is None:
            raise BadInput("the recording's header could not be read; fix the rate (or the file) and press Enter in it")
        rows = list(self.query(BudgetRow).results(BudgetRow))
        for row in rows:
            if not _budget_ok(row.spec):
                raise BadInput(f"budget {row.spec!r} for {row.channel.name} is not 0.02, 0.1% or lossless; fix it")
        budget = spec_from_fields([r.channel.name for r in rows], [r.spec for r in rows])
        rate_text = self.query_one("#packing-rate", Input).value.strip()
        rate = None
        if rate_text and rate_text != self._rate_shown:
            try:
                rate = float(rate_text)
            except ValueError as exc:
                raise BadInput(f"rate {rate_text!r} is not a number; type samples per second") from exc
        name = self.query_one("#packing-target", Input).value.strip() or self.source.stem
        target = Path(name).expanduser()
        if not target.is_absolute():
            target = self.source.parent / target
        if target.suffix not in ARCHIVE_SUFFIXES:  # a typed older .tsa name is kept as typed
            target = target.with_name(target.name + ARCHIVE_SUFFIX)
        replace = self.query_one("#packing-replace", Checkbox).value
        if target.exists() and not replace:
            raise BadInput(f"{target.name} already exists; tick 'replace' or type another archive name")
        settings = dict(archive=target, budget=budget,
                        window=parse_optional_int(self.query_one("#packing-window", Input).value, "window", 2),
                        code_size=parse_optional_int(self.query_one("#packing-code", Input).value, "code size", 0),
                        force=replace)
        train = parse_optional_float(self.query_one("#packing-train", Input).value, "training time")
        if train is not None:
            settings["train_seconds"] = train
        # the header already read is the recording itself: hand it over instead of reading the file again
        settings["source"] = self.recording if rate is None else self.source
        if rate is not None:
            settings["rate"] = rate
        return settings

    def action_start(self) -> None:
        if self.running:
            return
        try:
            settings = self._settings()
        except TsArchiveError as exc:
            self.notify(str(exc), title="Check the fields", severity="error")
            return
        self.result = None
        self.cancel_event = threading.Event()
        self.running = True
        self.run_pack(settings, self.cancel_event)

    def on_checkbox_changed(self, event: Checkbox.Changed) -> None:
        if event.checkbox.id == "packing-replace":
            event.checkbox.label = replace_label(event.value)

    def on_button_pressed(self, event: Button.Pressed) -> None:
        if event.button.id == "packing-start":
            self.action_start()

    @work(thread=True, exclusive=True, group="packing-pack", exit_on_error=False)
    def run_pack(self, settings: dict, cancel: threading.Event) -> None:
        last = {"stage": None, "at": 0.0}

        def on_progress(p) -> None:
            now = time.monotonic()
            if p.stage != last["stage"] or p.done >= p.total or now - last["at"] >= PROGRESS_EVERY_S:
                last.update(stage=p.stage, at=now)
                self.post_message(PackStep(p))

        try:
            result = tsarchive.pack(progress=on_progress, cancel=cancel, **settings)
        except Cancelled as exc:
            self.post_message(PackHalted(str(exc) or "packing cancelled; nothing was written", cancelled=True))
            return
        except TsArchiveError as exc:
            self.post_message(PackHalted(str(exc), cancelled=False))
            return
        self.post_message(PackDone(result))

    def watch_running(self, running: bool) -> None:
        for field in self.query(Input).results(Input):
            field.disabled = running
        self.query_one("#packing-start", Button).disabled = running
        progress = self.query_one("#packing-progress", StageProgress)
        if running:
            progress.display = True
            progress.reset()
            self.query_one("#packing-summary").display = False
            self.query_one("#packing-result", Static).update("packing… Escape cancels (nothing is written then).")
        self.refresh_bindings()

    def on_pack_step(self, message: PackStep) -> None:
        self.query_one("#packing-progress", StageProgress).advance(message.progress)

    def on_pack_halted(self, message: PackHalted) -> None:
        self.running = False
        self.query_one("#packing-progress", StageProgress).halt("cancelled" if message.cancelled else "failed")
        self.query_one("#packing-result", Static).update(
            "Cancelled: no archive was written." if message.cancelled else f"Packing failed: {message.text}")
        if not message.cancelled:
            self.notify(message.text, title="Packing failed", severity="error", timeout=8)

    def on_pack_done(self, message: PackDone) -> None:
        res = self.result = message.result
        self.running = False
        self.query_one("#packing-progress", StageProgress).finish(f"done in {fmt.duration(res.elapsed_s)}")
        table = self.query_one("#packing-summary", DataTable)
        table.clear()
        for ch in res.channels:
            unit = f" {ch.unit}" if ch.unit else ""
            bound = "0 (lossless)" if ch.eps == 0 else f"±{fmt.num(ch.eps)}{unit}"
            table.add_row(ch.name, f"{ch.budget} = {bound}", f"{fmt.num(ch.worst_error)}{unit}",
                          fmt.pct(ch.used_pct), fmt.ratio(ch.ratio), f"{ch.bits_per_sample:.2f}", key=ch.name)
        table.display = True
        within = res.within_budget
        self.app.checks.pop(Path(res.archive), None)  # type: ignore[attr-defined]
        self.query_one("#packing-result", Static).update(
            f"{Path(res.archive).name} written: {fmt.size(res.archive_bytes)} for {fmt.size(res.source_bytes)} "
            f"of source, ratio {fmt.ratio(res.ratio)}; "
            f"{'every channel within budget' if within else 'SOME CHANNEL OVER BUDGET'}.\n{USED_HELP}.\n"
            "Keep the original until the archive verifies: Ctrl+O opens it in the Contents screen, then V verifies.")
        table.focus()
        self.refresh_bindings()

    # -- leaving -------------------------------------------------------------
    def action_cancel_or_back(self) -> None:
        if self.running and self.cancel_event is not None:
            self.cancel_event.set()
            self.query_one("#packing-result", Static).update("cancelling… waiting for the library to stop")
            return
        self.app.pop_screen()

    def action_open_archive(self) -> None:
        if self.result is not None:
            archive = Path(self.result.archive)
            self.app.pop_screen()
            self.app.open_archive(archive)  # type: ignore[attr-defined]

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "open_archive":
            return self.result is not None and not self.running
        if action == "start":
            return not self.running
        return True

    def work_stopped(self, worker) -> None:
        if worker.group == "packing-pack":
            self.running = False
            self.query_one("#packing-progress", StageProgress).halt("stopped by an unexpected problem")
