"""Flags: open flags grouped by kind, site and batch; keep, exclude or correct with a reason."""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.content import Content
from textual.message import Message
from textual.widgets import DataTable, Static

from fieldslope.common.names import ID_KINDS, Kind, flag_label
from fieldslope.common.words import plural
from fieldslope.schemas.store_types import StoredFlag
from fieldslope.tui.cli_format import cut
from fieldslope.tui.messages import StoreWritten
from fieldslope.tui.safe_text import escape_controls
from fieldslope.tui.screens.base import StudyScreen
from fieldslope.tui.screens.copies import duplicate_texts, side_by_side
from fieldslope.tui.screens.dialogs import ConfirmScreen, FormScreen
from fieldslope.schemas.operator import login_name
from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.widgets.literal import LiteralTable, assemble, literal
from fieldslope.tui.widgets.pictures import histogram_strip


class FlagsScreen(StudyScreen):
    TITLE_TEXT = "Flags"
    FORM_GROUP = "flags-resolve"
    BINDINGS = [
        Binding("k", "resolve('keep')", "Keep", id="flag_keep"),
        Binding("e", "resolve('exclude')", "Exclude", id="flag_exclude"),
        Binding("c", "resolve('set')", "Correct", id="flag_correct"),
        Binding("h", "toggle_history", "History", id="flag_history"),
        Binding("K", "resolve_group('keep')", "Keep the whole group", id="flag_keep_group", show=False),
        Binding("E", "resolve_group('exclude')", "Exclude the whole group", id="flag_exclude_group",
                show=False),
    ]

    @dataclass
    class Resolved(Message):
        text: str

    @dataclass
    class CopiesRead(Message):
        flag: StoredFlag
        action: str
        copies: list

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.history = False
        self.form: FormScreen | None = None     # the open decision form, until the store answers
        self.rows: list[StoredFlag] = []        # the table's rows, in order
        self.sites: dict[int, str] = {}          # flag id -> the site of its record
        self._index_key: int | None = None
        self._index: dict = {}

    def body(self) -> ComposeResult:
        yield Static(id="flags-counts", classes="choices")
        yield LiteralTable(id="flags-table", cursor_type="row", zebra_stripes=True, classes="panel")
        yield Static(id="flags-detail", classes="notes panel")

    COLUMNS = ("kind", "site", "batch", "ID", "field", "value")

    def on_mount(self) -> None:
        self.query_one("#flags-table", DataTable).add_columns(*self.COLUMNS)

    def record_index(self, snap: Snapshot) -> dict:
        """(ID, season) -> row position in the effective data, built once per snapshot."""
        if self._index_key != snap.generation:
            f, p = snap.frame, snap.protocol
            self._index_key = snap.generation
            self._index = {} if f is None or f.empty else {
                (str(i), str(s)): k for k, (i, s) in enumerate(zip(f[p.id_col], f[p.season_col]))}
        return self._index

    def record_of(self, snap: Snapshot, flag: StoredFlag):
        k = self.record_index(snap).get((str(flag.individual), str(flag.season)))
        return None if k is None else snap.frame.iloc[k]

    def group_of(self, flag: StoredFlag) -> tuple[str, str, int]:
        """Flags shown together and resolved together: same kind, site and batch."""
        return flag.kind, self.sites.get(flag.id, ""), flag.batch_id

    def site_of(self, snap: Snapshot, flag: StoredFlag) -> str:
        rec = self.record_of(snap, flag)
        groups = snap.protocol.groups
        return "" if rec is None or not groups else "/".join(str(rec[g]) for g in groups)

    def show(self, snap: Snapshot) -> None:
        flags = [f for f in snap.flags if f.is_open != self.history]
        self.sites = {f.id: self.site_of(snap, f) for f in flags}
        flags.sort(key=lambda f: (f.kind, self.sites[f.id], f.batch_id or 0, str(f.individual)))
        self.rows = flags
        counts = Counter(f.kind for f in snap.flags if f.is_open)
        head = [("History (resolved flags)  " if self.history else "Open flags  ", "bold")]
        head += [(f"{flag_label(k)} {v}  ", "$warning") for k, v in sorted(counts.items())] or [("none", "$success")]
        self.query_one("#flags-counts", Static).update(assemble(*head))
        table = self.query_one("#flags-table", DataTable)
        keep = table.cursor_row
        columns = (*self.COLUMNS, "decision") if self.history else self.COLUMNS
        if len(table.columns) != len(columns):     # the resolved view has a decision column
            table.clear(columns=True)
            table.add_columns(*columns)
        table.clear()
        last = None
        for f in flags:
            group = self.group_of(f)
            kind = flag_label(group[0])
            shown = ("", "", "") if group == last else (kind, str(group[1])[:(10 if self.history else 14)],
                                                        str(group[2]))
            last = group
            # a whole-row flag (a duplicate ID) names its sheet row: the copies of one ID tell apart
            cells = [*shown, str(f.individual), str(f.field)[:10] or f"row {f.row}",
                     cut(f.value, 10) if self.history else str(f.value)[:12]]
            if self.history:
                cells.append(cut(decision_text(f), 16))
            table.add_row(*cells, key=str(f.id))
        if flags:
            table.move_cursor(row=max(0, min(keep, len(flags) - 1)))
            self.detail(snap, flags[table.cursor_row])
        else:
            self.query_one("#flags-detail", Static).update(
                "No resolved flags yet." if self.history else "No open flags: every stored value passed its checks.")

    @on(DataTable.RowHighlighted, "#flags-table")
    def _highlighted(self, event: DataTable.RowHighlighted) -> None:
        snap = self.app.snapshot
        if snap is not None and 0 <= event.cursor_row < len(self.rows):
            self.detail(snap, self.rows[event.cursor_row])

    def detail(self, snap: Snapshot, flag: StoredFlag) -> None:
        p = snap.protocol
        lines: list[Content] = [assemble((f"{flag_label(flag.kind)}: ", "bold $warning"), str(flag.message))]
        lines.append(literal(f"flag {flag.id}, batch {flag.batch_id} {flag.file_name}, "
                             f"sheet row {flag.row}"))
        if not flag.is_open:
            lines.append(assemble((f"{decision_text(flag)} ", "bold"),
                                  f"by {flag.resolved_by} at {flag.resolved_at}: {flag.reason}"))
        f = snap.frame
        if f is not None and not f.empty:
            r = self.record_of(snap, flag)
            if r is not None:
                shown = [f"{c}={_short(r[c])}" for c in (*p.groups, *p.trait_names, *p.component_names) if c in f.columns]
                lines.append(assemble(("record ", "$text-muted"), f"{flag.individual} {flag.season}: ",
                                              " ".join(shown)))
            field = flag.field
            if field in f.columns and field in p.traits:
                site = self.sites.get(flag.id) or self.site_of(snap, flag)
                cell = snap.cell_frame(str(flag.season), site) if site else f
                try:
                    value = float(str(flag.value).replace(",", "."))
                except ValueError:
                    value = None
                lines.append(assemble(("where the value sits among ", "$text-muted"),
                                              f"{field} in season {flag.season}, site {site or 'all'}:"))
                lines.append(histogram_strip(cell[field].tolist(), value, width=max(20, self.size.width - 4)))
        self.query_one("#flags-detail", Static).update(Content("\n").join(lines))

    # -- actions -----------------------------------------------------------
    def action_toggle_history(self) -> None:
        self.history = not self.history
        if self.app.snapshot is not None:
            self.show(self.app.snapshot)

    TEXTS = {"keep": "The value stays in the estimates as it is.",
             "exclude": "The value (or record) is left out of the estimates; it stays stored.",
             "set": "The new value is used from now on; the old one stays in the history."}
    VERBS = {"keep": "Keep", "exclude": "Exclude", "set": "Correct"}
    MOVE_TEXT = ("The row moves to the ID given (checked like a new row); the row under the old ID is left out "
                 "and stays in the history.")

    def _picked(self, open_only: bool = True) -> StoredFlag | None:
        table = self.query_one("#flags-table", DataTable)
        if (self.history and open_only) or not self.rows or not (0 <= table.cursor_row < len(self.rows)):
            self.app.notify("Pick an open flag first." if open_only else "Pick a flag first.", severity="warning")
            return None
        refusal = self.app.write_refusal()
        if refusal:
            self.app.notify(refusal, severity="warning")
            return None
        return self.rows[table.cursor_row]

    def action_resolve(self, action: str) -> None:
        """Decide the highlighted flag; a flag decided before is decided again only after a confirm step."""
        flag = self._picked(open_only=False)
        if flag is None:
            return
        if flag.is_open:
            self._decide(flag, action, again=False)
            return
        if flag.status == "set" and flag.kind in ID_KINDS:
            self.app.notify(f"Flag {flag.id}: sheet row {flag.row} moved to ID {flag.new_value}; decide on its values "
                            "under that ID.", severity="warning")
            return
        if flag.status == "superseded":
            self.app.notify(f"Flag {flag.id} is superseded: a later batch gave a new value, so there is nothing "
                            "to decide.", severity="warning")
            return
        text = (f"Flag {flag.id} ({flag.individual} {flag.field or f'row {flag.row}'}) was decided: "
                f"{decision_text(flag)} by {flag.resolved_by} at {flag.resolved_at}, because: {flag.reason}\n\n"
                f"{self.VERBS[action]} it instead? The earlier decision stays in the history.")

        def answered(yes: bool | None) -> None:
            if yes:
                self._decide(flag, action, again=True)

        self.app.push_screen(ConfirmScreen(f"Decide flag {flag.id} again?", text, yes="Decide again"), answered)

    def _decide(self, flag: StoredFlag, action: str, again: bool) -> None:
        what = f"{flag.individual} {flag.field or 'record'} = {flag.value!s} ({flag_label(flag.kind)})"
        fields = [("reason", "Reason", "")]
        if action == "set":   # shown as it will be read: control characters in the old value written out
            label = f"Right ID for row {flag.row}" if flag.kind in ID_KINDS else "New value"
            fields.insert(0, ("value", label, escape_controls(flag.value or "")))
        required = ("reason", "value") if action == "set" else ("reason",)

        def submit(values: dict) -> None:
            self._resolve_worker(self.app.study_dir, [flag.id], action, values.get("value"), values["reason"],
                                 again)

        if flag.kind == Kind.DUPLICATE_ID:
            title = (f"{self.VERBS[action]}{' again' if again else ''} sheet row {flag.row}: ID {flag.individual} "
                     f"in {flag.season} (batch {flag.batch_id})")
            form = FormScreen(title, "", fields, required, submit=submit,
                              detail=literal("reading the copies …", "$text-muted"))
            self._open_form(form)
            self._copies_worker(self.app.study_dir, flag, action)
            return
        text = self.MOVE_TEXT if action == "set" and flag.kind in ID_KINDS else self.TEXTS[action]
        self._open_form(FormScreen(f"{self.VERBS[action]}{' again' if again else ''}: {what}", text,
                                   fields, required, submit=submit))

    @work(thread=True, exclusive=True, exit_on_error=False, group="flags-copies")
    def _copies_worker(self, study_dir: Path, flag: StoredFlag, action: str) -> None:
        from fieldslope.tui.loading import duplicate_copies

        self.post_message(self.CopiesRead(flag, action, duplicate_copies(study_dir, flag.id)))

    def on_flags_screen_copies_read(self, msg: CopiesRead) -> None:
        form = self.form
        if form is None or not form.is_attached:
            return
        this = next((c for c in msg.copies if c.flag_id == msg.flag.id), None)
        if this is None:
            form.failed(f"flag {msg.flag.id} has no copies on record any more; close this and look again.")
            return
        width = max(40, min(68, self.size.width - 8))
        text = duplicate_texts(msg.copies, this, str(msg.flag.individual), str(msg.flag.season))[msg.action]
        form.show_detail(side_by_side(msg.copies, msg.flag.id, width), text)

    def action_resolve_group(self, action: str) -> None:
        """Keep or exclude every open flag of the highlighted group (same kind, site and batch)."""
        flag = self._picked()
        if flag is None:
            return
        group = self.group_of(flag)
        ids = [f.id for f in self.rows if self.group_of(f) == group]
        title = (f"{self.VERBS[action]} all {len(ids)} {flag_label(group[0])} flags of batch {group[2]}"
                 + (f" at {group[1]}" if group[1] else ""))

        def submit(values: dict) -> None:
            self._resolve_worker(self.app.study_dir, ids, action, None, values["reason"])

        self._open_form(FormScreen(title, self.TEXTS[action] + " One reason is recorded for each flag."
                                   + (" Of each duplicated ID, the first copy is kept, the others left out."
                                      if group[0] == Kind.DUPLICATE_ID and action == "keep" else ""),
                                   [("reason", "Reason", "")], ("reason",), submit=submit))

    def _open_form(self, form: FormScreen) -> None:
        """The form stays open until the store took the decision, or says why it did not."""
        self.form = form
        self.app.push_screen(form)

    @work(thread=True, exclusive=True, exit_on_error=False, group="flags-resolve")
    def _resolve_worker(self, study_dir: Path, flag_ids: list[int], action: str, value: str | None,
                        reason: str, again: bool = False) -> None:
        from fieldslope.tui.loading import resolve_flags

        results = resolve_flags(study_dir, flag_ids, action, value, reason, login_name(), again=again)
        msg = (getattr(results[0], "message", "") if len(results) == 1 else
               f"{plural(len(results), 'flag')}: {action} recorded with the reason given.")
        self.post_message(self.Resolved(msg or f"{action} recorded."))

    def on_flags_screen_resolved(self, msg: Resolved) -> None:
        form, self.form = self.form, None
        if form is not None:
            form.succeeded()
        self.app.notify(msg.text, timeout=4)
        self.post_message(StoreWritten(msg.text))


def decision_text(flag: StoredFlag) -> str:
    """The decision on a flag in a few words (the resolved view's column)."""
    if flag.status == "set":
        return f"moved to {flag.new_value}" if flag.kind in ID_KINDS else f"set to {flag.new_value}"
    if flag.status == "keep" and flag.quarantined:
        return "joined"
    return {"keep": "kept", "exclude": "left out", "superseded": "superseded"}.get(flag.status, flag.status)


def _short(v) -> str:
    if v is None or (isinstance(v, float) and v != v):
        return "–"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)
