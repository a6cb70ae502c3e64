"""The one-line status bar: study, batches, last refresh, what is updating, last error."""

from __future__ import annotations

from textual.content import Content
from textual.widgets import Static


class StatusLine(Static):
    """Shows ``app.status_content()``; the app calls :meth:`update_from_app` on changes."""

    DEFAULT_CSS = """
    StatusLine { height: 1; background: $panel; color: $foreground; padding: 0 1;
                 text-wrap: nowrap; text-overflow: ellipsis; }
    """

    def on_mount(self) -> None:
        self.update_from_app()

    def update_from_app(self) -> None:
        maker = getattr(self.app, "status_content", None)
        self.update(maker() if maker else Content(""))
