"""Intake: the drop folder's files, a file opened by path, the checks, and taking a batch in."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.content import Content
from textual.message import Message
from textual.widgets import DataTable, Input, Static, TabbedContent, TabPane

from fieldslope.common.names import Outcome, flag_label
from fieldslope.common.words import plural
from fieldslope.schemas.operator import login_name
from fieldslope.tui.messages import StoreWritten
from fieldslope.tui.safe_text import escape_controls
from fieldslope.tui.screens.base import StudyScreen
from fieldslope.tui.screens.dialogs import ConfirmScreen
from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.widgets.literal import LiteralTable, assemble, literal


PICK_HINT = "Pick a file and press c to check it; i takes it in, a takes its valid rows."
EMPTY_SENTENCE = "The drop folder is empty: copy batch files into it, or press / to open a file by path."


class IntakeScreen(StudyScreen):
    TITLE_TEXT = "Intake"
    BINDINGS = [
        Binding("enter", "check", "Check", id="intake_check", show=False),
        Binding("c", "check", "Check", id="intake_check_c"),
        Binding("i", "take_in", "Take in", id="intake_take"),
        Binding("a", "take_valid", "Valid rows only", id="intake_take_valid"),
        Binding("slash", "open_path", "Open path", id="intake_path", key_display="/"),
        Binding("r", "rescan", "Rescan", id="intake_rescan", show=False),
        Binding("b", "batches", "Batches taken in", id="intake_batches", show=False),
        Binding("escape", "leave_path", "Leave the path field", id="intake_leave", show=False),
    ]

    @dataclass
    class Listed(Message):
        files: list  # list[dict]: name, path, size, status, batch

    @dataclass
    class Checked(Message):
        path: Path
        result: object        # ImportResult (checked only)
        preview: object       # pandas DataFrame, the first rows as read

    @dataclass
    class TakenIn(Message):
        result: object        # ImportResult

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.files: list[dict] = []
        self.current: Path | None = None
        self.checked = None
        self.problems: list[str] = []
        self.batch_notes: dict[str, tuple[str, ...]] = {}

    def body(self) -> ComposeResult:
        yield Static(id="intake-folder", classes="choices")
        yield LiteralTable(id="intake-files", cursor_type="row", classes="panel")
        yield Static(EMPTY_SENTENCE, id="intake-empty", classes="notes")
        with Horizontal(id="intake-path-row", classes="-hidden"):
            yield Input(placeholder="path of a batch file (CSV, TSV, XLSX); Enter to check", id="intake-path",
                        compact=True)
        yield Static(PICK_HINT, id="intake-summary", classes="summary")
        with TabbedContent(id="intake-tabs"):
            with TabPane("Problems", id="intake-problems"):
                yield LiteralTable(id="intake-report", cursor_type="row", zebra_stripes=True)
                yield Static(id="intake-problem", classes="notes")
            with TabPane("Preview", id="intake-preview"):
                yield LiteralTable(id="intake-sheet", cursor_type="row")
            with TabPane("Taken in", id="intake-taken"):
                yield LiteralTable(id="intake-batches", cursor_type="row", zebra_stripes=True)
                yield Static(id="intake-batch-notes", classes="notes")

    def on_mount(self) -> None:
        self.query_one("#intake-files", DataTable).add_columns("file", "size", "status")
        self.query_one("#intake-report", DataTable).add_columns("row", "column", "value", "problem")
        self.query_one("#intake-batches", DataTable).add_columns("#", "time", "outcome", "stored/rows", "by", "file")
        self.set_interval(1.5, self._tick)

    def _tick(self) -> None:
        """Look at the drop folder again while this screen is shown (arriving files settle)."""
        if self.is_current and self.app.study_ready:
            self.action_rescan()

    # -- listing -----------------------------------------------------------
    def show(self, snap: Snapshot) -> None:
        self._folder_line()
        self._show_batches(snap)
        self.action_rescan()

    def _folder_line(self) -> None:
        """The drop folder, and whether it is empty (said on a line of its own, so the result of a file
        opened by path stays shown below)."""
        from fieldslope.tui.loading import intake_dir

        self.query_one("#intake-folder", Static).update(assemble(
            ("Drop folder ", "$text-muted"), (str(intake_dir(self.app.study_dir)), "bold")))
        self.query_one("#intake-files", DataTable).display = bool(self.files)
        self.query_one("#intake-empty", Static).display = not self.files

    def _show_batches(self, snap: Snapshot) -> None:
        """The batches already taken in (and refused), newest first."""
        from fieldslope.schemas.store_types import BatchInfo
        from fieldslope.tui.batch_list import when_text

        table = self.query_one("#intake-batches", DataTable)
        table.clear()
        for b in reversed(snap.batches):
            b = b if isinstance(b, BatchInfo) else BatchInfo(**b)
            table.add_row(str(b.id), when_text(b.received, short=True), b.outcome, f"{b.n_stored}/{b.n_rows}", b.operator,
                          b.file_name + (f" ({plural(len(b.notes), 'note')})" if b.notes else ""), key=str(b.id))
        self.batch_notes = {str(b.id): ((f"Taken in by {b.by}.",) if b.by != b.operator else ()) + b.notes
                            for b in snap.batches if isinstance(b, BatchInfo)}
        self._show_batch_notes(table.cursor_row)

    def _show_batch_notes(self, row: int) -> None:
        """Who took the highlighted batch in (with the login name when it differs from the operator) and the
        reader's notes on it (further worksheets left out, a guessed encoding)."""
        table = self.query_one("#intake-batches", DataTable)
        notes: tuple = ()
        if 0 <= row < table.row_count:
            notes = self.batch_notes.get(table.coordinate_to_cell_key((row, 0)).row_key.value, ())
        self.query_one("#intake-batch-notes", Static).update(literal("\n".join(
            n if n.startswith("Taken in by ") else f"Note: {n}" for n in notes)))

    @on(DataTable.RowHighlighted, "#intake-batches")
    def _batch_highlighted(self, event: DataTable.RowHighlighted) -> None:
        self._show_batch_notes(event.cursor_row)

    def action_rescan(self) -> None:
        self._list_worker(self.app.study_dir)

    @work(thread=True, exclusive=True, exit_on_error=False, group="intake-list")
    def _list_worker(self, study_dir: Path) -> None:
        from fieldslope.tui.loading import list_intake

        self.post_message(self.Listed(list_intake(study_dir)))

    def on_intake_screen_listed(self, msg: Listed) -> None:
        table = self.query_one("#intake-files", DataTable)
        keep = table.cursor_row
        self.files = msg.files
        table.clear()
        for f in msg.files:
            table.add_row(f["name"], _size(f["size"]), f["status"], key=str(f["path"]))
        if msg.files:
            table.move_cursor(row=min(keep, len(msg.files) - 1))
        self._folder_line()

    # -- checking ----------------------------------------------------------
    def _selected(self) -> Path | None:
        table = self.query_one("#intake-files", DataTable)
        if not self.files or table.cursor_row < 0 or table.cursor_row >= len(self.files):
            return None
        f = self.files[table.cursor_row]
        return None if f["state"] == "arriving" else Path(f["path"])

    def _selected_problem(self) -> str:
        """The sentence of a drop-folder entry that is not a file (a link, folder, pipe or device)."""
        table = self.query_one("#intake-files", DataTable)
        if not self.files or not 0 <= table.cursor_row < len(self.files):
            return ""
        return self.files[table.cursor_row].get("problem", "")

    def action_check(self) -> None:
        path = self._selected()
        problem = self._selected_problem()
        if problem:
            self.current, self.checked = None, None
            self.query_one("#intake-summary", Static).update(assemble((problem, "$error")))
            return
        if path is None:
            self.query_one("#intake-summary", Static).update("Pick a file first (a file still arriving is skipped until its size settles).")
            return
        self.check(path)

    def check(self, path: Path) -> None:
        self.current, self.checked = path, None
        self.query_one("#intake-summary", Static).update(literal(f"Checking {path.name} …"))
        self._check_worker(self.app.study_dir, path)

    @work(thread=True, exclusive=True, exit_on_error=False, group="intake-check")
    def _check_worker(self, study_dir: Path, path: Path) -> None:
        from fieldslope.tui.loading import check_file

        result, preview = check_file(study_dir, path)
        self.post_message(self.Checked(path, result, preview))

    def on_intake_screen_checked(self, msg: Checked) -> None:
        if msg.path != self.current:
            return
        self.checked = msg.result
        r = msg.result
        self.query_one("#intake-summary", Static).update(_summary_line(msg.path.name, r))
        report = self.query_one("#intake-report", DataTable)
        report.clear()
        notes = getattr(r, "notes", ())
        self.problems = ([f"Note: {n}" for n in notes] + [e.sentence() for e in r.errors]
                         + [f"row {f.row}: {f.message}" for f in r.flags])
        self.query_one("#intake-problem", Static).update(literal(self.problems[0] if self.problems else ""))
        for n in notes:                 # how the file was read: further worksheets left out, a guessed encoding
            report.add_row("", "", "", f"note: {n}")
        for e in r.errors:
            report.add_row(str(e.row), e.column, e.value or "", f"ERROR {e.reason}")
        for f in r.flags:
            report.add_row(str(f.row), f.field, f.value or "", f"flag {flag_label(f.kind)}: {f.message}")
        sheet = self.query_one("#intake-sheet", DataTable)
        sheet.clear(columns=True)
        if msg.preview is not None:
            sheet.add_columns(*[str(c) for c in msg.preview.columns])
            for row in msg.preview.itertuples(index=False):
                sheet.add_row(*["" if v is None else str(v) for v in row])

    # -- taking in ---------------------------------------------------------
    def action_take_in(self) -> None:
        self._take(accept_valid=False)

    def action_take_valid(self) -> None:
        self._take(accept_valid=True)

    def _take(self, accept_valid: bool) -> None:
        refusal = self.app.write_refusal()
        if refusal:
            self.app.notify(refusal, severity="warning")
            return
        r = self.checked
        if r is None or self.current is None:
            self.query_one("#intake-summary", Static).update("Check a file first (c), then take it in.")
            return
        if r.outcome == Outcome.REFUSED and not (accept_valid and r.errors and r.n_rows > len(_bad_rows(r))):
            self.app.notify(f"{self.current.name} cannot be taken in: {r.message or 'see the problems listed'}",
                            severity="error")
            return
        if r.outcome == Outcome.DUPLICATE:
            self.app.notify(f"{self.current.name} was taken in before; nothing to do.", severity="warning")
            return
        bad = len(_bad_rows(r))
        if r.errors and not accept_valid:
            self.app.notify(f"{plural(bad, 'row')} {'has' if bad == 1 else 'have'} errors: fix the file, or press a to take in only the valid rows.",
                            severity="warning")
            return
        n_store = r.n_rows - (bad if accept_valid else 0)
        lines = [f"File: {escape_controls(self.current)}", f"Operator: {escape_controls(login_name())}",
                 f"Rows stored as records: {n_store} of {r.n_rows}"]
        if accept_valid and bad:
            lines.append(f"Rows kept in quarantine (visible and fixable on Flags): {bad}")
        if r.flags:
            counts = ", ".join(f"{flag_label(k)} {v}" for k, v in sorted(r.flag_counts().items()))
            lines.append(f"Flags opened: {len(r.flags)} ({counts})")
        lines.append("Stored values are never overwritten; corrections are added later with a reason.")
        title = "Take in the valid rows?" if accept_valid else "Take in this batch?"
        path = self.current

        def done(yes: bool | None) -> None:
            if yes:
                self.query_one("#intake-summary", Static).update(literal(f"Taking in {path.name} …"))
                self._import_worker(self.app.study_dir, path, accept_valid)

        self.app.push_screen(ConfirmScreen(title, "\n".join(lines), yes="Take in"), done)

    @work(thread=True, exclusive=True, exit_on_error=False, group="intake-import")
    def _import_worker(self, study_dir: Path, path: Path, accept_valid: bool) -> None:
        from fieldslope.tui.loading import import_file

        self.post_message(self.TakenIn(import_file(study_dir, path, accept_valid, login_name())))

    def on_intake_screen_taken_in(self, msg: TakenIn) -> None:
        r = msg.result
        text = _outcome_line(r)
        self.query_one("#intake-summary", Static).update(literal(text))
        self.app.notify(text, severity="information" if r.ok else "error", timeout=6)
        if r.ok and (r.flags or r.n_quarantined):
            # the problems listed above are now open flags: say where they are dealt with
            self.query_one("#intake-problem", Static).update(
                literal("Taken in: the problems listed above are now open flags on the Flags screen [2]."))
        self.checked = None
        self.post_message(StoreWritten(text))
        self.action_rescan()

    def action_batches(self) -> None:
        """Show the batches taken in, or go back to the problems of the file checked."""
        tabs = self.query_one("#intake-tabs", TabbedContent)
        tabs.active = "intake-problems" if tabs.active == "intake-taken" else "intake-taken"

    # -- by path -----------------------------------------------------------
    def action_open_path(self) -> None:
        row = self.query_one("#intake-path-row")
        row.remove_class("-hidden")
        self.query_one("#intake-path", Input).focus()

    def action_leave_path(self) -> None:
        self.query_one("#intake-path-row").add_class("-hidden")
        self.query_one("#intake-files", DataTable).focus()

    @on(Input.Submitted, "#intake-path")
    def _path_given(self, event: Input.Submitted) -> None:
        path = Path(event.value.strip()).expanduser()
        if not path.is_file():
            self.query_one("#intake-summary", Static).update(
                assemble((f"{path} is not a file; check the path and press Enter again.", "$error")))
            return
        self.action_leave_path()
        self.check(path)

    @on(DataTable.RowHighlighted, "#intake-report")
    def _problem_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if 0 <= event.cursor_row < len(self.problems):
            self.query_one("#intake-problem", Static).update(literal(self.problems[event.cursor_row]))

    @on(DataTable.RowSelected, "#intake-files")
    def _row_chosen(self) -> None:
        self.action_check()

    def worker_failed(self, group: str, text: str) -> bool:
        if group.startswith("intake"):
            self.query_one("#intake-summary", Static).update(assemble((text, "$error")))
        return False      # also a notification: the summary line may be scrolled past


def _bad_rows(r) -> set[int]:
    return {e.row for e in r.errors}


def _size(n: int) -> str:
    return f"{n} B" if n < 1024 else f"{n / 1024:.0f} kB" if n < 1024 * 1024 else f"{n / 1048576:.1f} MB"


def _summary_line(name: str, r) -> Content:
    if r.outcome == Outcome.DUPLICATE:
        earlier = f" as batch {r.batch_id}" if r.batch_id else ""
        return assemble((f"{name}: ", "bold"), f"already taken in{earlier}; nothing to do.")
    if r.outcome == Outcome.REFUSED and not r.errors:
        return assemble((f"{name}: ", "bold"), (r.message or "refused", "$error"))
    bad = len(_bad_rows(r))
    parts = [(f"{name}: ", "bold"), f"{plural(r.n_rows, 'row')}, "]
    parts.append((f"{bad} with errors", "bold $error") if bad else ("no errors", "$success"))
    parts.append(f", {plural(len(r.flags), 'flag')}. ")
    parts.append(("i take in" if not bad else "a take in the valid rows", "$accent"))
    return assemble(*parts)


def _outcome_line(r) -> str:
    if r.outcome == Outcome.DUPLICATE:
        return f"{r.file_name}: already taken in; nothing stored."
    if r.outcome == Outcome.REFUSED:
        return f"{r.file_name} refused: {r.message}"
    extra = f", {r.n_quarantined} quarantined" if r.n_quarantined else ""
    return (f"{r.file_name}: {plural(r.n_stored, 'row')} stored{extra}, {plural(len(r.flags), 'flag')} "
            f"(batch {r.batch_id}).")
