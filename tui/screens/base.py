"""What every study screen shares: a body, the status line, the footer, and snapshot hand-off."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.screen import Screen
from textual.widgets import Footer
from textual.worker import Worker, WorkerState

from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.widgets.status import StatusLine


class WorkerFailures:
    """For a screen that runs workers: their failures reach the app's one handler.

    ``Worker.StateChanged`` does not bubble from a screen to the app, so without this a screen's failed
    worker would vanish without a word.
    """

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        event.stop()
        if event.state == WorkerState.ERROR:
            self.app.worker_failure(event.worker, self)

    FORM_GROUP = ""      # the worker group that stores what ``self.form`` holds (see worker_failed)
    form = None          # an open FormScreen waiting for the store's answer, if any

    def worker_failed(self, group: str, text: str) -> bool:
        """Show a failure of this screen's worker here; True when shown (the app then does not notify).

        A failure of the ``FORM_GROUP`` worker goes to the open form, which stays open with what
        was typed and says what is wrong."""
        form = self.form
        if group == self.FORM_GROUP and form is not None and form.is_attached:
            form.failed(text)
            return True
        return False


class StudyScreen(WorkerFailures, Screen):
    """A screen that renders from the app's current :class:`Snapshot`.

    Subclasses implement :meth:`body` and :meth:`show`. The screen watches the app's reactive
    ``snapshot`` and ``updating``: ``show`` runs on the main thread whenever a newer snapshot
    exists and the screen is in view (a screen out of view catches up when it is shown again).
    """

    TITLE_TEXT = ""
    _shown: tuple | None = None

    def compose(self) -> ComposeResult:
        yield from self.body()
        yield StatusLine()
        yield Footer(compact=True)

    def body(self) -> ComposeResult:  # pragma: no cover - overridden
        yield from ()

    def on_mount(self) -> None:
        if hasattr(type(self.app), "snapshot"):
            self.watch(self.app, "snapshot", self._snapshot_changed, init=False)
            self.watch(self.app, "updating", self._updating_changed, init=False)

    def _snapshot_changed(self, _old: object, _new: object) -> None:
        if self.is_current:
            self.refresh_from_app()

    def _updating_changed(self, _old: str, new: str) -> None:
        if self.is_current:
            self.mark_updating(new)

    def on_screen_resume(self) -> None:
        self.refresh_from_app()
        self.mark_updating(getattr(self.app, "updating", ""))

    def refresh_from_app(self, force: bool = False) -> None:
        snap = getattr(self.app, "snapshot", None)
        if snap is None:
            return
        key = (snap.generation, snap.intervals, snap.resamples, snap.outliers_left_out)
        if force or key != self._shown:
            self._shown = key
            self.show(snap)

    def show(self, snap: Snapshot) -> None:  # pragma: no cover - overridden
        pass

    def view_notes(self) -> tuple[str, list[str]]:
        """The title and the notes of what this screen shows now (key n lists them all)."""
        return self.TITLE_TEXT, []

    def action_notes(self) -> None:
        from fieldslope.tui.screens.notes import NotesScreen

        title, notes = self.view_notes()
        self.app.push_screen(NotesScreen(title, notes))

    def mark_updating(self, what: str) -> None:
        """Mark panels (widgets with class ``panel``) as updating while a worker runs."""
        for panel in self.query(".panel"):
            panel.set_class(bool(what), "-updating")
