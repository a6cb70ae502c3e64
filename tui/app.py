"""The fieldslope dashboard (Textual).

Start it with :func:`run_app` (what ``fieldslope`` calls) or build
:class:`FieldslopeApp` yourself. The app keeps one immutable
:class:`~tui.snapshot.Snapshot` of the study; workers build new ones when the
store changes, and the screens render from it.

Live refresh is :class:`~tui.pipeline.RefreshPipeline` (poll → point estimates →
intervals). What the screens and the status line show is reactive state on the
app (``snapshot``, ``updating``, ``progress``, ``error``, ``note``, ``readonly``,
``locked``): they watch it, and nothing calls them one by one.

Heavy modules (pandas, the estimators, the store) are imported inside workers,
after the first frame.
"""

from __future__ import annotations

import threading
import time
from datetime import datetime
from importlib import resources
from pathlib import Path
from typing import Callable

from textual import on, work
from textual.app import App, ScreenStackError
from textual.binding import Binding
from textual.command import CommandPalette, DiscoveryHit, Hit, Hits, Provider
from textual.content import Content
from textual.reactive import var
from textual.screen import Screen
from textual.worker import Worker, WorkerState

from fieldslope.common.words import plural
from fieldslope.tui.messages import (
    DemoNote,
    IntervalsProgress,
    IntervalsReady,
    Polled,
    PointsReady,
    ReportWritten,
    StoreWritten,
    StudyFailed,
    StudyReady,
)
from fieldslope.tui.pipeline import GROUPS as PIPELINE_GROUPS
from fieldslope.tui.pipeline import RefreshPipeline
from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.typeahead import TypeAheadApp

SCREENS_IN_ORDER = ("intake", "flags", "selection", "response", "seasons")
SCREEN_TITLES = {
    "intake": "Intake",
    "flags": "Flags",
    "selection": "Selection",
    "response": "Response",
    "seasons": "Seasons",
}

# A demo feed is a blocking function run in a worker thread: it imports batches
# through its own store connection, calls ``say`` with a short line for the
# status bar, and returns early once ``stop`` is set (use ``stop.wait(seconds)``
# to pause between batches).
DemoFeed = Callable[[threading.Event, Callable[[str], None]], None]


class FieldslopeCommands(Provider):
    """Command palette entries for the dashboard's main actions."""

    def _commands(self) -> list[tuple[str, str, Callable[[], object]]]:
        app: FieldslopeApp = self.app  # type: ignore[assignment]
        out: list[tuple[str, str, Callable[[], object]]] = []
        if app.study_ready:
            for mode in SCREENS_IN_ORDER:
                out.append((f"Show {SCREEN_TITLES[mode]}", f"switch to the {SCREEN_TITLES[mode]} screen",
                            lambda m=mode: app.action_show(m)))
            out += [
                ("Refresh now", "re-read the store and recompute the estimates", app.action_refresh),
                ("Write the report", "an HTML page and its pictures, into the study's reports folder",
                 app.action_write_report),
                ("Save a screenshot", "an SVG picture of this screen, into the study's reports folder",
                 lambda: app.deliver_screenshot()),
                ("Toggle open outliers", "show the estimates with or without open outlier flags",
                 app.action_toggle_sensitivity),
                ("Take in a file by path", "open a batch file that is not in the drop folder",
                 lambda: app.action_show("intake", then="open_path")),
                ("Next fitness component", "Selection: use the next fitness component",
                 lambda: app.action_show("selection", then="next_fitness")),
                ("Next season", "Selection: show the next season", lambda: app.action_show("selection", then="next_season")),
                ("Next site", "Selection: show the next site or pooled", lambda: app.action_show("selection", then="next_site")),
                ("Enter a heritability", "Response: enter h² for a trait with its source",
                 lambda: app.action_show("response", then="enter_h2")),
            ]
        out.append(("Keys of this screen", "list the keys of the current screen", app.action_help))
        return out

    async def discover(self) -> Hits:
        for name, help_text, callback in self._commands():
            yield DiscoveryHit(name, callback, help=help_text)

    async def search(self, query: str) -> Hits:
        matcher = self.matcher(query)
        for name, help_text, callback in self._commands():
            score = matcher.match(name)
            if score > 0:
                yield Hit(score, matcher.highlight(name), callback, help=help_text)


class Palette(CommandPalette):
    """The command palette with a plain-text prompt sign (Textual's is an emoji, which many
    terminal fonts lack and which some terminals draw two cells wide)."""

    def on_mount(self) -> None:
        from textual.command import SearchIcon

        self.query_one(SearchIcon).icon = ">"


class FieldslopeApp(TypeAheadApp):
    """The dashboard.

    ``study_dir``: the study folder (None, or a folder without a study, opens
    the start screen). ``demo_feed``: see :data:`DemoFeed`. ``bootstrap`` and
    ``seed``: resamples and seed for the intervals. ``clock``: returns the
    text shown as the last refresh time (tests pass a fixed one). ``start_mode``: the screen to open on
    (default: Selection, or Intake for a study with no batch in the record yet).
    """

    CSS = resources.files("fieldslope.tui").joinpath("app.tcss").read_text(encoding="utf-8")
    TITLE = "fieldslope"
    COMMANDS = App.COMMANDS | {FieldslopeCommands}
    ENABLE_COMMAND_PALETTE = True
    BINDINGS = [
        Binding("f1", "help", "Help", id="help", key_display="F1"),
        Binding("question_mark", "help", "Help", id="help_q", show=False, key_display="?"),
        # the footer shows one entry for the five screen keys; F1 lists each
        Binding("1", "show('intake')", "Screens", id="go_intake", key_display="1-5",
                tooltip="1 Intake, 2 Flags, 3 Selection, 4 Response, 5 Seasons"),
        Binding("2", "show('flags')", "Flags screen", id="go_flags", show=False),
        Binding("3", "show('selection')", "Selection screen", id="go_selection", show=False),
        Binding("4", "show('response')", "Response screen", id="go_response", show=False),
        Binding("5", "show('seasons')", "Seasons screen", id="go_seasons", show=False),
        Binding("o", "toggle_sensitivity", "Outliers in/out", id="sensitivity", show=False),
        Binding("ctrl+r", "refresh", "Refresh now", id="refresh", show=False),
        Binding("p", "write_report", "Write the report into reports/", id="write_report", show=False),
        Binding("ctrl+q", "quit", "Quit", id="quit", show=False),
    ]

    # What the screens and the status line show: they watch these (``watch``), nothing calls them.
    #: the immutable picture of the study the panels draw from (None until the first point estimates)
    snapshot: var[Snapshot | None] = var(None, always_update=True)
    #: what is being computed ("updating…", "intervals…"), "" when nothing is
    updating: var[str] = var("")
    #: the latest progress of the intervals ("intervals 40%"), "" when none are being computed
    progress: var[str] = var("")
    #: the last failure, one sentence ("" when none stands)
    error: var[str] = var("")
    #: a passing note (the demo feed, what was just stored, the report being written)
    note: var[str] = var("")
    #: the store can only be read (permissions, damage); ``readonly_reason`` says why
    readonly: var[bool] = var(False)
    #: another program holds the store's write lock, for now
    locked: var[bool] = var(False)
    #: the study is open (the screens are installed)
    study_ready: var[bool] = var(False)

    def __init__(
        self,
        study_dir: Path | str | None = None,
        *,
        demo_feed: DemoFeed | None = None,
        bootstrap: int = 2000,
        seed: int | None = None,
        poll_interval: float = 0.5,
        clock: Callable[[], str] | None = None,
        start_mode: str | None = None,
    ):
        super().__init__()
        self.study_dir = Path(study_dir) if study_dir else None
        self.demo_feed = demo_feed
        self.bootstrap = bootstrap
        self.seed = seed
        self.poll_interval = poll_interval
        self.clock = clock or (lambda: datetime.now().strftime("%H:%M:%S"))
        self.start_mode = start_mode
        self.protocol = None
        self.readonly_reason = ""      # the sentence that explains read-only mode, when known
        self.sensitivity = False
        self.pipeline: RefreshPipeline | None = None   # live refresh, once a study is open
        self.stop = threading.Event()        # set on exit: background loops end
        self.timings: dict[str, float] = {}  # for the benchmark: when things happened
        if self.no_color:
            # no-color.org: no colour at all. Textual's own NO_COLOR filter only greys the colours out.
            from fieldslope.tui.colourless import Colourless

            self._filters = [f for f in self._filters if type(f).__name__ not in ("Monochrome", "NoColor")]
            self._filters.append(Colourless())

    # -- modes (screens) ---------------------------------------------------
    def _install_modes(self) -> None:
        from fieldslope.tui.screens.flags import FlagsScreen
        from fieldslope.tui.screens.intake import IntakeScreen
        from fieldslope.tui.screens.response import ResponseScreen
        from fieldslope.tui.screens.seasons import SeasonsScreen
        from fieldslope.tui.screens.selection import SelectionScreen

        for name, cls in (("intake", IntakeScreen), ("flags", FlagsScreen), ("selection", SelectionScreen),
                          ("response", ResponseScreen), ("seasons", SeasonsScreen)):
            if name not in self._modes:
                self.add_mode(name, cls)

    def on_mount(self) -> None:
        from fieldslope.tui.screens.start import StartScreen

        self.add_mode("start", StartScreen)
        self.timings["mounted"] = time.perf_counter()
        if self.study_dir is not None and (self.study_dir / "protocol.toml").is_file():
            self.switch_mode("start")
            self.open_study(self.study_dir)
        else:
            self.switch_mode("start")

    def on_unmount(self) -> None:
        self.stop.set()
        if self.pipeline is not None:
            self.pipeline.close()

    def open_study(self, study_dir: Path) -> None:
        self.study_dir = Path(study_dir)
        self.note = f"opening {self.study_dir} …"
        self._open_worker(self.study_dir)

    @work(thread=True, exclusive=True, exit_on_error=False, group="open")
    def _open_worker(self, study_dir: Path) -> None:
        from fieldslope.tui.loading import open_study

        opened = open_study(study_dir)
        self.post_message(StudyReady(opened.protocol, opened.readonly, opened.warning, opened.has_data))

    def on_study_ready(self, msg: StudyReady) -> None:
        self.protocol, self.readonly = msg.protocol, msg.readonly
        self.readonly_reason = msg.warning if msg.readonly else ""
        self.study_ready = True
        self.error = msg.warning
        self.note = ""
        if msg.warning:
            self.notify(msg.warning, severity="warning", timeout=10)
        self._install_modes()
        # a new study has nothing to show but the drop folder: it opens on Intake
        self.switch_mode(self.start_mode or ("selection" if msg.has_data else "intake"))
        if self.pipeline is not None:
            self.pipeline.close()
        self.pipeline = RefreshPipeline(self, self.study_dir, bootstrap=self.bootstrap, seed=self.seed,
                                        poll_interval=self.poll_interval, clock=self.clock)
        self.pipeline.start()
        if self.demo_feed is not None:
            self._demo_worker()

    def on_study_failed(self, msg: StudyFailed) -> None:
        self.error = msg.reason
        self.notify(msg.reason, severity="error", timeout=10)

    # -- live refresh (tui.pipeline) --------------------------------------
    @on(Polled)
    @on(PointsReady)
    @on(IntervalsProgress)
    @on(IntervalsReady)
    def _to_pipeline(self, msg) -> None:
        """The pipeline's workers post to the app's queue; their results go back to it here."""
        if self.pipeline is not None:
            self.pipeline.receive(msg)

    def start_points(self) -> None:
        """Recompute the point estimates now (and then the intervals)."""
        if self.pipeline is not None:
            self.pipeline.start_points()

    @property
    def _poller(self):
        """The pipeline's poll connection (tests drop it, as after a restart of the connection)."""
        return None if self.pipeline is None else self.pipeline.poller

    @_poller.setter
    def _poller(self, value) -> None:
        if self.pipeline is not None:
            self.pipeline.poller = value

    def on_store_written(self, msg: StoreWritten) -> None:
        """A screen of this app stored something; the poller will see it too (another connection)."""
        self.note = msg.what

    # -- read-only while another program writes ----------------------------
    def set_locked(self, locked: bool) -> None:
        """Enter or leave the read-only mode that lasts while another program holds the store."""
        from fieldslope.tui.loading import LOCKED_SENTENCE

        if locked == self.locked:
            return
        self.locked = locked
        if locked:
            self.notify(LOCKED_SENTENCE, severity="warning", timeout=10)
        else:
            self.notify("The record store is free again: taking in, resolving and entering h² work.", timeout=5)

    def write_refusal(self) -> str:
        """One sentence saying why nothing can be written now, or "" when writing is possible."""
        from fieldslope.tui.loading import LOCKED_SENTENCE

        if self.readonly:
            return self.readonly_reason or (
                "The record store cannot be written from this account (file or folder permissions), so "
                "the dashboard is read-only: ask for group write access to the study folder.")
        if self.locked:
            return LOCKED_SENTENCE
        return ""

    # -- demo --------------------------------------------------------------
    @work(thread=True, exclusive=True, exit_on_error=False, group="demo")
    def _demo_worker(self) -> None:
        self.demo_feed(self.stop, lambda text: self.post_message(DemoNote(text)))

    def on_demo_note(self, msg: DemoNote) -> None:
        self.note = msg.text

    # -- notifications -----------------------------------------------------
    def notify(self, message: str, *, title: str = "", severity="information", timeout: float | None = None,
               markup: bool = False) -> None:
        """Every notification is plain text: messages carry file names, IDs and reasons (never markup)."""
        from fieldslope.tui.safe_text import escape_controls

        super().notify(escape_controls(message, keep_newlines=True), title=escape_controls(title),
                       severity=severity, timeout=timeout, markup=False)

    # -- failures ----------------------------------------------------------
    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """Failures of the app's own workers (a screen's workers report through ``WorkerFailures``)."""
        if event.state == WorkerState.ERROR:
            self.worker_failure(event.worker, self.screen)

    def worker_failure(self, worker: Worker, screen) -> None:
        """The one place where a failed worker becomes a visible sentence.

        ``screen`` (the screen that ran the worker, or the current one for the app's workers) gets
        ``worker_failed(group, text)`` first; when that returns True it has shown the sentence itself (in
        an open form, say), else the sentence is a notification and stays on the status line.
        """
        from fieldslope.common.errors import FieldslopeError

        err = worker.error
        if isinstance(err, FieldslopeError):
            text = str(err)
        else:        # a bug, still one sentence: what was running, what went wrong
            what = WORKER_TASKS.get(worker.group, worker.name or "a background task")
            text = f"{what} failed ({type(err).__name__}: {err}); nothing more was changed. Please report it."
        shown = screen.worker_failed(worker.group, text) if hasattr(screen, "worker_failed") else False
        if worker.group in WRITE_GROUPS and _is_busy(err):
            # a write found the store held by another program: read-only until the poller sees it free
            self.set_locked(True)
            return
        if not shown:
            self.error = text
            self.notify(text, severity="error", timeout=10)
        group = worker.group
        if group in ("open", "report"):
            self.note = ""
        elif group in PIPELINE_GROUPS and self.pipeline is not None and worker.node is self.pipeline:
            self.pipeline.worker_failed(group)

    # -- showing -----------------------------------------------------------
    def refresh_status(self) -> None:
        """Redraw the status line now (it follows the reactive state by itself; this is for a new screen title)."""
        from fieldslope.tui.widgets.status import StatusLine

        try:
            screen = self.screen
        except ScreenStackError:  # no screen yet, or the app is closing: nothing to update
            return
        for status in screen.query(StatusLine):
            status.update_from_app()

    def status_content(self, screen: Screen | None = None) -> Content:
        """The status line of ``screen`` (the current one by default): its title, batches, open flags,
        last refresh, mode, what is running, notes."""
        from fieldslope.tui.widgets.literal import assemble

        parts: list[tuple[str, str] | str] = []
        if self.error:
            return assemble(("! ", "bold $error"), (self.error, "$error"))
        title = getattr(screen if screen is not None else self.screen, "TITLE_TEXT", "")
        if title:
            parts.append((title, "bold $accent"))
        snap = self.snapshot
        if snap is not None:
            parts.append(f" │ {plural(snap.n_batches, 'batch')} │ {plural(snap.flags_open, 'flag')} │ {snap.refreshed_at}")
            if snap.outliers_left_out:
                parts.append((" │ outliers out", "bold $warning"))
            if self.readonly:
                parts.append((" │ read-only", "bold $warning"))
            elif self.locked:
                parts.append((" │ read-only: store in use elsewhere", "bold $warning"))
        elif self.study_ready:
            parts.append(" │ reading the store …")
        if self.progress:
            parts.append((f" │ {self.progress}", "$accent"))
        elif self.updating:
            parts.append((f" │ {self.updating}", "$accent"))
        if self.note:
            parts.append((f" │ {self.note}", "$text-muted"))
        return assemble(*parts)

    # -- actions -----------------------------------------------------------
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action in ("show", "toggle_sensitivity", "refresh", "write_report") and not self.study_ready:
            return False
        return True

    async def action_show(self, mode: str, then: str | None = None) -> None:
        if not self.study_ready or mode not in SCREENS_IN_ORDER:
            return
        if self.current_mode != mode:
            # Wait for the switch: on a busy machine the old screen could still be current when
            # the follow-up action runs, and the action would go to the wrong screen.
            await self.switch_mode(mode)
        if then:
            await self.screen.run_action(then)

    def get_system_commands(self, screen):
        """Textual's own palette entries, less its screenshot: ours ("Save a screenshot") says where it goes."""
        for command in super().get_system_commands(screen):
            if command.title != "Screenshot":
                yield command

    def action_command_palette(self) -> None:
        if self.use_command_palette and not CommandPalette.is_open(self):
            self.push_screen(Palette(id="--command-palette"))

    def action_help(self) -> None:
        from fieldslope.tui.screens.dialogs import HelpScreen

        if isinstance(self.screen, HelpScreen):
            self.pop_screen()
            return
        self.push_screen(HelpScreen(self.screen))

    def action_toggle_sensitivity(self) -> None:
        self.sensitivity = not self.sensitivity
        self.notify("Open outlier flags left out." if self.sensitivity else "Open outlier flags included.",
                    timeout=3)
        self.start_points()

    def action_refresh(self) -> None:
        if self.study_ready:
            self.start_points()

    # -- the report and screenshots (into the study's reports/ folder) ----
    def action_write_report(self) -> None:
        if not self.study_ready or self.study_dir is None:
            return
        self.note = "writing the report …"
        self.write_report()

    @work(thread=True, exclusive=True, exit_on_error=False, group="report")
    def write_report(self) -> None:
        from fieldslope.tui.report_task import write_study_report

        page, figures, count = write_study_report(self.study_dir, bootstrap=self.bootstrap, seed=self.seed)
        self.post_message(ReportWritten(str(page), str(figures), count))

    def on_report_written(self, msg: ReportWritten) -> None:
        self.note = ""
        self.notify(f"Report written to {msg.page} ({msg.count} pictures in {msg.figures})", timeout=12)

    def deliver_screenshot(self, filename: str | None = None, path: str | None = None,
                           time_format: str | None = None) -> str | None:
        """Save an SVG screenshot into the study's reports/ folder (the current folder without a study)
        and say where; Textual's default wants a downloads folder, which many accounts lack."""
        from fieldslope.common.errors import FieldslopeError

        try:
            if path is None:
                if self.study_dir is not None and self.study_ready:
                    from fieldslope.tui.report_task import reports_dir

                    path = str(reports_dir(self.study_dir))
                else:
                    path = str(Path.cwd())
            saved = self.save_screenshot(filename, path, time_format)
        except FieldslopeError as exc:
            self.notify(str(exc), severity="error", timeout=10)
            return None
        except OSError as exc:
            self.notify(f"{path}: cannot save the screenshot ({exc.strerror}); check the folder.",
                        severity="error", timeout=10)
            return None
        self.notify(f"Screenshot saved to {saved}", timeout=10)
        return saved


WRITE_GROUPS = ("intake-import", "flags-resolve", "resp-h2")
WORKER_TASKS = {      # what a worker group was doing, for the sentence when it fails with a bug
    "open": "Opening the study", "poll": "Looking for changes", "points": "Computing the estimates",
    "intervals": "Computing the intervals", "demo": "The demo feed", "create": "Creating the study",
    "intake-list": "Listing the drop folder", "intake-check": "Checking the file",
    "intake-import": "Taking the file in", "flags-resolve": "Recording the decision",
    "resp-h2": "Keeping the heritability", "seasons-trend": "Computing β after each batch",
}


def _is_busy(err: BaseException | None) -> bool:
    """A store error that means another program holds the write lock (not damage, not a full disk)."""
    from fieldslope.common.errors import BusyError

    return isinstance(err, BusyError)


def run_app(study_dir: Path | None, **kwargs) -> None:
    """Run the dashboard until the user quits (what ``fieldslope`` calls)."""
    FieldslopeApp(study_dir, **kwargs).run()
