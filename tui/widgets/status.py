"""The one-line status bar: study, batches, last refresh, what is updating, last error."""

from __future__ import annotations

from textual.content import Content
from textual.widgets import Static

#: the app's reactive attributes the status line follows
WATCHED = ("snapshot", "updating", "progress", "error", "note", "readonly", "locked", "study_ready")


class StatusLine(Static):
    """Shows ``app.status_content()``, redrawn whenever one of the app's ``WATCHED`` attributes changes."""

    DEFAULT_CSS = """
    StatusLine { height: 1; background: $panel; color: $foreground; padding: 0 1;
                 text-wrap: nowrap; text-overflow: ellipsis; }
    """

    def on_mount(self) -> None:
        for name in WATCHED:
            if hasattr(type(self.app), name):
                self.watch(self.app, name, self._changed, init=False)
        self.update_from_app()

    def _changed(self, _old: object, _new: object) -> None:
        self.update_from_app()

    def update_from_app(self) -> None:
        maker = getattr(self.app, "status_content", None)
        # this line's own screen, not the one in view: every mounted screen's line follows the app's state
        self.update(maker(self.screen) if maker else Content(""))
