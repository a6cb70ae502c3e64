"""Flags: open flags grouped by kind, site and batch; keep, exclude or correct with a reason."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.content import Content
from textual.message import Message
from textual.widgets import DataTable, Static

from fieldslope.common.names import flag_label
from fieldslope.tui.messages import StoreWritten
from fieldslope.tui.screens.base import StudyScreen
from fieldslope.tui.screens.dialogs import FormScreen
from fieldslope.tui.screens.intake import operator_name
from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.widgets.literal import LiteralTable, assemble, literal
from fieldslope.tui.widgets.pictures import histogram_strip


def is_open(flag: dict) -> bool:
    return flag.get("status", "open") == "open"


class FlagsScreen(StudyScreen):
    TITLE_TEXT = "Flags"
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

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.history = False
        self.rows: list[dict] = []
        self._index_key: int | None = None
        self._index: dict = {}

    def body(self) -> ComposeResult:
        yield Static(id="flags-counts", classes="choices")
        yield LiteralTable(id="flags-table", cursor_type="row", zebra_stripes=True, classes="panel")
        yield Static(id="flags-detail", classes="notes panel")

    def on_mount(self) -> None:
        self.query_one("#flags-table", DataTable).add_columns("kind", "site", "batch", "ID", "field", "value")

    def record_index(self, snap: Snapshot) -> dict:
        """(ID, season) -> row position in the effective data, built once per snapshot."""
        if self._index_key != snap.generation:
            f, p = snap.frame, snap.protocol
            self._index_key = snap.generation
            self._index = {} if f is None or f.empty else {
                (str(i), str(s)): k for k, (i, s) in enumerate(zip(f[p.id_col], f[p.season_col]))}
        return self._index

    def record_of(self, snap: Snapshot, flag: dict):
        k = self.record_index(snap).get((str(flag.get("individual")), str(flag.get("season"))))
        return None if k is None else snap.frame.iloc[k]

    def site_of(self, snap: Snapshot, flag: dict) -> str:
        rec = self.record_of(snap, flag)
        groups = snap.protocol.groups
        return "" if rec is None or not groups else "/".join(str(rec[g]) for g in groups)

    def show(self, snap: Snapshot) -> None:
        flags = [dict(f) for f in snap.flags if is_open(f) != self.history]
        for f in flags:
            f["_site"] = self.site_of(snap, f)
        flags.sort(key=lambda f: (f.get("kind", ""), f["_site"], f.get("batch_id") or 0, str(f.get("individual"))))
        self.rows = flags
        open_flags = [f for f in snap.flags if is_open(f)]
        counts: dict[str, int] = {}
        for f in open_flags:
            counts[f.get("kind", "")] = counts.get(f.get("kind", ""), 0) + 1
        head = [("History (resolved flags)  " if self.history else "Open flags  ", "bold")]
        head += [(f"{flag_label(k)} {v}  ", "$warning") for k, v in sorted(counts.items())] or [("none", "$success")]
        self.query_one("#flags-counts", Static).update(assemble(*head))
        table = self.query_one("#flags-table", DataTable)
        keep = table.cursor_row
        table.clear()
        last = None
        for f in flags:
            group = (f.get("kind"), f["_site"], f.get("batch_id"))
            kind = flag_label(group[0])
            shown = ("", "", "") if group == last else (kind, str(group[1])[:14], str(group[2]))
            last = group
            table.add_row(*shown, str(f.get("individual", "")), str(f.get("field", ""))[:10],
                          str(f.get("value", ""))[:12], key=str(f.get("id")))
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

    def detail(self, snap: Snapshot, flag: dict) -> None:
        p = snap.protocol
        lines: list[Content] = [assemble((f"{flag_label(flag.get('kind'))}: ", "bold $warning"), str(flag.get("message", "")))]
        lines.append(literal(f"flag {flag.get('id')}, batch {flag.get('batch_id')} {flag.get('file_name', '')}, "
                             f"sheet row {flag.get('row')}"))
        if not is_open(flag):
            lines.append(assemble((f"{flag.get('status')} ", "bold"),
                                          f"by {flag.get('resolved_by')} at {flag.get('resolved_at')}: {flag.get('reason')}",
                                          f" (new value {flag.get('new_value')})" if flag.get("new_value") else ""))
        f = snap.frame
        if f is not None and not f.empty:
            r = self.record_of(snap, flag)
            if r is not None:
                shown = [f"{c}={_short(r[c])}" for c in (*p.groups, *p.trait_names, *p.component_names) if c in f.columns]
                lines.append(assemble(("record ", "$text-muted"), f"{flag.get('individual')} {flag.get('season')}: ",
                                              " ".join(shown)))
            field = flag.get("field")
            if field in f.columns and field in p.traits:
                site = flag.get("_site") or self.site_of(snap, flag)
                cell = snap.cell_frame(str(flag.get("season")), site) if site else f
                try:
                    value = float(str(flag.get("value")).replace(",", "."))
                except ValueError:
                    value = None
                lines.append(assemble(("where the value sits among ", "$text-muted"),
                                              f"{field} in season {flag.get('season')}, site {site or 'all'}:"))
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

    def _picked(self) -> dict | None:
        table = self.query_one("#flags-table", DataTable)
        if self.history or not self.rows or not (0 <= table.cursor_row < len(self.rows)):
            self.app.notify("Pick an open flag first.", severity="warning")
            return None
        refusal = self.app.write_refusal()
        if refusal:
            self.app.notify(refusal, severity="warning")
            return None
        return self.rows[table.cursor_row]

    def action_resolve(self, action: str) -> None:
        flag = self._picked()
        if flag is None:
            return
        what = f"{flag.get('individual')} {flag.get('field') or 'record'} = {flag.get('value')!s} ({flag_label(flag.get('kind'))})"
        fields = [("reason", "Reason", "")]
        if action == "set":
            fields.insert(0, ("value", "New value", str(flag.get("value") or "")))
        required = ("reason", "value") if action == "set" else ("reason",)

        def done(values: dict | None) -> None:
            if values:
                self._resolve_worker(self.app.study_dir, [int(flag["id"])], action, values.get("value"),
                                     values["reason"])

        self.app.push_screen(FormScreen(f"{self.VERBS[action]}: {what}", self.TEXTS[action], fields, required), done)

    def action_resolve_group(self, action: str) -> None:
        """Keep or exclude every open flag of the highlighted group (same kind, site and batch)."""
        flag = self._picked()
        if flag is None:
            return
        group = (flag.get("kind"), flag["_site"], flag.get("batch_id"))
        ids = [int(f["id"]) for f in self.rows if (f.get("kind"), f["_site"], f.get("batch_id")) == group]
        title = (f"{self.VERBS[action]} all {len(ids)} {group[0]} flags of batch {group[2]}"
                 + (f" at {group[1]}" if group[1] else ""))

        def done(values: dict | None) -> None:
            if values:
                self._resolve_worker(self.app.study_dir, ids, action, None, values["reason"])

        self.app.push_screen(FormScreen(title, self.TEXTS[action] + " One reason is recorded for each flag.",
                                        [("reason", "Reason", "")], ("reason",)), done)

    @work(thread=True, exclusive=True, exit_on_error=False, group="flags-resolve")
    def _resolve_worker(self, study_dir: Path, flag_ids: list[int], action: str, value: str | None,
                        reason: str) -> None:
        from fieldslope.tui.loading import resolve_flags

        results = resolve_flags(study_dir, flag_ids, action, value, reason, operator_name())
        msg = (getattr(results[0], "message", "") if len(results) == 1 else
               f"{len(results)} flags: {action} recorded with the reason given.")
        self.post_message(self.Resolved(msg or f"{action} recorded."))

    def on_flags_screen_resolved(self, msg: Resolved) -> None:
        self.app.notify(msg.text, timeout=4)
        self.post_message(StoreWritten(msg.text))


def _short(v) -> str:
    if v is None or (isinstance(v, float) and v != v):
        return "–"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)
