"""Small modal screens: the key list (help), a confirmation, and a form with a required reason."""

from __future__ import annotations

from typing import Callable

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.content import Content
from textual.screen import ModalScreen, Screen
from textual.widgets import Button, Input, Label, Static

from fieldslope.tui.widgets.literal import literal


def key_name(app, binding) -> str:
    if binding.key_display:
        return binding.key_display
    return app.get_key_display(binding)


class HelpScreen(ModalScreen[None]):
    """The keys of the screen underneath (its own, its focused widget's, and the app's)."""

    BINDINGS = [
        Binding("escape,f1,question_mark,q", "close", "Close", id="help_close"),
    ]

    def __init__(self, under: Screen):
        super().__init__()
        self.under = under

    def compose(self) -> ComposeResult:
        rows: list[list[str]] = []
        index: dict[tuple[str, str], list[str]] = {}
        for key, active in self.under.active_bindings.items():
            b = active.binding
            if not b.description:
                continue
            where = "app" if active.node is self.app else "screen" if active.node is self.under else "field"
            known = index.get((b.action, b.description))
            if known is not None:
                known[0] += " / " + key_name(self.app, b)
                continue
            if b.id == "go_intake":  # the footer's "1-5 Screens" entry: list the one key it is
                row = ["1", "Intake screen", where]
            else:
                row = [key_name(self.app, b), b.description, where]
            # fieldslope's own keys (they have ids) first: this screen's, then the global ones;
            # Textual's generic keys (focus, scrolling, copying) last
            row.append(0 if b.id and where == "screen" else 1 if b.id and where == "app" else 2)
            index[(b.action, b.description)] = row
            rows.append(row)
        order = {"screen": 0, "field": 1, "app": 2}
        rows.sort(key=lambda r: (r[3], order[r[2]]))
        lines = [Content.assemble((f"{k:>12}  ", "bold $accent"), d) for k, d, _, _ in rows]
        lines.append(Content.assemble((f"{'ctrl+p':>12}  ", "bold $accent"), "Command palette (all actions, themes)"))
        terms = getattr(self.under, "TERMS", ())
        if terms:   # what the figures of this screen mean
            lines.append(Content.styled("\nWhat the figures mean", "bold"))
            lines += [Content.assemble((f"{term}: ", "bold $accent"), text) for term, text in terms]
        title = getattr(self.under, "TITLE_TEXT", "") or type(self.under).__name__.replace("Screen", "")
        with Vertical(id="help-box"):
            yield Static(Content.assemble(("Keys: ", "bold"), (title, "bold $primary")), id="help-title")
            with VerticalScroll(id="help-scroll"):
                yield Static(Content("\n").join(lines), id="help-keys")
            yield Static("Esc, F1 or ? closes this list.", id="help-foot")

    def action_close(self) -> None:
        self.dismiss(None)


class ConfirmScreen(ModalScreen[bool]):
    """Yes/no with the full text of what will happen."""

    BINDINGS = [
        Binding("y", "answer(True)", "Yes", id="confirm_yes"),
        Binding("n,escape", "answer(False)", "No", id="confirm_no"),
    ]

    def __init__(self, title: str, text: str, yes: str = "Yes"):
        super().__init__()
        self.title_text, self.text, self.yes = title, text, yes

    def compose(self) -> ComposeResult:
        with Vertical(id="confirm-box", classes="dialog"):
            yield Static(literal(self.title_text), classes="dialog-title")
            with VerticalScroll(classes="dialog-body"):
                yield Static(literal(self.text, keep_newlines=True))
            with Horizontal(classes="dialog-buttons"):
                yield Button(f"{self.yes} (y)", id="confirm-yes", variant="primary", compact=True)
                yield Button("Cancel (n)", id="confirm-no", compact=True)

    def action_answer(self, value: bool) -> None:
        self.dismiss(value)

    @on(Button.Pressed, "#confirm-yes")
    def _yes(self) -> None:
        self.dismiss(True)

    @on(Button.Pressed, "#confirm-no")
    def _no(self) -> None:
        self.dismiss(False)


class FormScreen(ModalScreen[dict | None]):
    """A few labelled text fields; fields named in ``required`` must be filled before OK.

    ``check(values)`` returns "" or the sentence saying what is wrong; the form then stays open with what
    was typed. With ``submit(values)`` the form also stays open while the owner stores the values (in a
    worker): the owner calls :meth:`succeeded` (the form closes) or :meth:`failed` with the sentence (the
    form stays open, the fields as typed, the sentence shown). Without ``submit`` the form closes on OK
    and hands the values to the ``push_screen`` callback.
    """

    BINDINGS = [
        Binding("escape", "cancel", "Cancel", id="form_cancel"),
        Binding("ctrl+s", "submit", "OK", id="form_ok"),
    ]
    AUTO_FOCUS = "Input"     # the first field, also when a scrolling detail comes before it

    def __init__(self, title: str, text: str, fields: list[tuple[str, str, str]], required: tuple[str, ...],
                 check: Callable[[dict], str] | None = None, submit: Callable[[dict], None] | None = None,
                 detail: Content | None = None):
        """``fields``: (name, label, initial value); ``detail``: content shown above the text (scrolls)."""
        super().__init__()
        self.title_text, self.text, self.fields, self.required = title, text, fields, required
        self.check, self.submit, self.detail = check, submit, detail
        self.busy = False

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(literal(self.title_text), classes="dialog-title")
            if self.detail is not None:
                with VerticalScroll(classes="dialog-detail", id="form-detail"):
                    yield Static(self.detail)
            if self.text or self.detail is not None:
                yield Static(literal(self.text, keep_newlines=True), classes="dialog-text")
            for name, label, value in self.fields:
                yield Label(label + (" (required)" if name in self.required else ""))
                yield Input(value=value, id=f"form-{name}", compact=True)
            yield Static("", id="form-message", classes="dialog-error")
            with Horizontal(classes="dialog-buttons"):
                yield Button("OK (ctrl+s)", id="form-ok", variant="primary", compact=True)
                yield Button("Cancel (esc)", id="form-cancel", compact=True)

    def show_detail(self, detail: Content, text: str | None = None) -> None:
        """Replace the detail (and the text) once the owner has read what they show."""
        self.detail = detail
        if text is not None:
            self.text = text
        for shown in self.query("#form-detail Static").results(Static):    # none yet before compose
            shown.update(detail)
        for shown in self.query(".dialog-text").results(Static):
            shown.update(literal(self.text, keep_newlines=True))

    def values(self) -> dict[str, str]:
        return {name: self.query_one(f"#form-{name}", Input).value.strip() for name, _, _ in self.fields}

    @on(Button.Pressed, "#form-ok")
    @on(Input.Submitted)
    def action_submit(self) -> None:
        if self.busy:
            return
        vals = self.values()
        missing = [label for name, label, _ in self.fields if name in self.required and not vals[name]]
        problem = f"{missing[0]} is required; fill it in, then OK." if missing else (
            self.check(vals) if self.check else "")
        if problem:
            self.failed(problem)
            return
        if self.submit is None:
            self.dismiss(vals)
            return
        self.busy = True
        self.query_one("#form-message", Static).update(literal("Storing …"))
        self.submit(vals)

    def failed(self, text: str) -> None:
        """Say what is wrong; the form stays open with what was typed."""
        self.busy = False
        self.query_one("#form-message", Static).update(literal(text))

    def succeeded(self) -> None:
        self.busy = False
        if self.is_attached:
            self.dismiss(None)

    @on(Button.Pressed, "#form-cancel")
    def action_cancel(self) -> None:
        self.dismiss(None)
