"""First run: no study yet. Create one from a protocol file, open a folder, or open the demo."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Button, Footer, Input, Label, Static

from fieldslope.tui.screens.base import WorkerFailures
from fieldslope.tui.widgets.literal import literal
from fieldslope.tui.widgets.status import StatusLine

WELCOME = ("No study is open. A study is a folder with a protocol.toml (what is measured), "
           "an intake/ drop folder for batch files, and one record store.")


class StartScreen(WorkerFailures, Screen):
    """Shown when there is no study: one form to create or open one."""

    # ctrl keys, because a text field has the focus here and takes plain letters
    BINDINGS = [
        Binding("ctrl+n", "create", "Create study", id="start_create"),
        Binding("ctrl+o", "open_folder", "Open folder", id="start_open"),
        Binding("ctrl+t", "demo", "Open the demo", id="start_demo"),
    ]

    @dataclass
    class Created(Message):
        study_dir: Path

    def compose(self) -> ComposeResult:
        with Vertical(id="start-box"):
            yield Static("fieldslope", id="start-title")
            yield Static(WELCOME, id="start-text")
            yield Label("Protocol file (protocol.toml):")
            yield Input(placeholder="path/to/protocol.toml", id="start-protocol", compact=True)
            yield Label("Study folder (created if missing, or an existing study to open):")
            yield Input(value=str(self.app.study_dir or ""), placeholder="path/to/study", id="start-dir", compact=True)
            with Horizontal(id="start-buttons"):
                yield Button("Create study ^n", id="start-create-btn", variant="primary", compact=True)
                yield Button("Open folder ^o", id="start-open-btn", compact=True)
                yield Button("Open the demo ^t", id="start-demo-btn", compact=True)
            yield Static("", id="start-message")
        yield StatusLine()
        yield Footer(compact=True)

    def say(self, text: str, error: bool = False) -> None:
        msg = self.query_one("#start-message", Static)
        msg.update(literal(text, keep_newlines=True))
        msg.set_class(error, "-error")

    @on(Button.Pressed, "#start-create-btn")
    @on(Input.Submitted, "#start-protocol")
    def action_create(self) -> None:
        protocol = self.query_one("#start-protocol", Input).value.strip()
        folder = self.query_one("#start-dir", Input).value.strip()
        if not protocol or not folder:
            self.say("Give both the protocol file and the study folder, then press Create study.", error=True)
            return
        self.say("Creating the study …")
        self._create(Path(folder).expanduser(), Path(protocol).expanduser())

    @work(thread=True, exclusive=True, exit_on_error=False, group="create")
    def _create(self, folder: Path, protocol: Path) -> None:
        from fieldslope.tui.loading import create_study

        create_study(folder, protocol)
        self.post_message(self.Created(folder))

    def on_start_screen_created(self, msg: Created) -> None:
        self.say(f"Created {msg.study_dir}.")
        self.app.open_study(msg.study_dir)

    @on(Button.Pressed, "#start-open-btn")
    @on(Input.Submitted, "#start-dir")
    def action_open_folder(self) -> None:
        folder = Path(self.query_one("#start-dir", Input).value.strip() or ".").expanduser()
        if not (folder / "protocol.toml").is_file():
            self.say(f"{folder} holds no protocol.toml; give a protocol file above to create a study there.",
                     error=True)
            return
        self.app.open_study(folder)

    @on(Button.Pressed, "#start-demo-btn")
    def action_demo(self) -> None:
        self.say("Building the demo study …")
        self._demo()

    @work(thread=True, exclusive=True, exit_on_error=False, group="create")
    def _demo(self) -> None:
        from fieldslope.tui.loading import demo_study

        folder, feed = demo_study()
        self.app.call_from_thread(self._demo_ready, folder, feed)

    def _demo_ready(self, folder: Path, feed) -> None:
        self.app.demo_feed = feed
        self.app.open_study(folder)

    def worker_failed(self, group: str, text: str) -> bool:
        self.say(text, error=True)
        return group == "create"
