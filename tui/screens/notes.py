"""The notes of the view in the screen underneath (the estimators' notes about the cell in view, the
pedigree's notes, why a season has no estimates), all of them, in a scrollable dialog."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.content import Content
from textual.screen import ModalScreen
from textual.widgets import Static

from fieldslope.tui.widgets.literal import assemble, literal


class NotesScreen(ModalScreen[None]):
    """``notes`` (plain sentences from the estimators and the data: shown literally) under ``title``."""

    BINDINGS = [
        Binding("escape,n,q", "close", "Close", id="notes_close"),
    ]

    def __init__(self, title: str, notes: list[str]):
        super().__init__()
        self.title_text = title
        self.notes = list(dict.fromkeys(n for n in notes if n))   # each once, in order

    def compose(self) -> ComposeResult:
        count = len(self.notes)
        with Vertical(id="notes-box", classes="dialog"):
            yield Static(assemble((self.title_text, "bold $primary"),
                                  (f"  {count} note{'' if count == 1 else 's'}", "$text-muted")),
                         classes="dialog-title")
            with VerticalScroll(id="notes-scroll", can_focus=True):
                body = [literal(f"• {n}") for n in self.notes] or [literal("No notes for this view.")]
                yield Static(Content("\n").join(body), id="notes-text")
            yield Static("↑ ↓ PgUp PgDn scroll · Esc or n closes.", id="notes-foot")

    def on_mount(self) -> None:
        self.query_one("#notes-scroll", VerticalScroll).focus()

    def action_close(self) -> None:
        self.dismiss(None)
