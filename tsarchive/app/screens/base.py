"""What every screen of the app shares: worker failures become notifications.

Workers are started with ``exit_on_error=False`` and catch
:class:`tsarchive.errors.TsArchiveError` themselves (posting
:class:`~tsarchive.app.messages.WorkFailed`). Anything else a worker raises
ends it in the ERROR state, and :meth:`Notices.on_worker_state_changed`
turns that into an in-app notification too, so the user never sees a traceback.
"""

from __future__ import annotations

from textual.worker import Worker, WorkerState

from tsarchive.app.messages import WorkFailed


class Notices:
    """Mixin for Screen / ModalScreen subclasses."""

    def on_work_failed(self, message: WorkFailed) -> None:
        message.stop()
        self.notify(message.text, title=message.title, severity="error", timeout=8)  # type: ignore[attr-defined]
        self.work_failed(message)

    def work_failed(self, message: WorkFailed) -> None:
        """Hook: tidy the screen after a worker reported ``message`` (default: nothing)."""

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.state == WorkerState.ERROR:
            error = event.worker.error
            text = f"{type(error).__name__}: {error}" if error is not None else "unknown problem"
            self.notify(f"Unexpected problem, the work was stopped ({text})",  # type: ignore[attr-defined]
                        title="Something went wrong", severity="error", timeout=10)
            self.work_stopped(event.worker)

    def work_stopped(self, worker: Worker) -> None:
        """Hook: reset the screen after ``worker`` died unexpectedly (default: nothing)."""
