"""Response: h² per trait, R = h²S, R as % of the mean, Δz̄ = Gβ, the Robertson–Price response, and a projection.

The animal models (pedigree h² and the Robertson–Price covariances) are slow, so
this screen fits them in its own worker, once per data version, while the
point estimates go on refreshing; until they are in, the pedigree line shows
the progress and the table the parent–offspring or entered h².
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.message import Message
from textual.widgets import DataTable, Input, Label, Static
from textual.worker import Worker, WorkerState

from fieldslope.analysis.response import breeders_response
from fieldslope.analysis.response_agreement import brief, disagreements
from fieldslope.common.names import Q
from fieldslope.tui.messages import StoreWritten
from fieldslope.tui.screens.base import StudyScreen
from fieldslope.tui.screens.choices import ChoiceKeys, Choices
from fieldslope.tui.screens.dialogs import FormScreen
from fieldslope.schemas.operator import login_name
from fieldslope.tui.snapshot import ALL, Snapshot
from fieldslope.tui.widgets.literal import LiteralTable, assemble
from fieldslope.tui.widgets.pictures import fmt
from fieldslope.tui.screens.selection import unit_of


class ResponseScreen(ChoiceKeys, StudyScreen):
    TITLE_TEXT = "Response"
    FORM_GROUP = "resp-h2"
    BINDINGS = [
        Binding("s", "next_season", "Season", id="resp_season"),
        Binding("t", "next_site", "Site", id="resp_site"),
        Binding("w", "next_fitness", "Fitness", id="resp_fitness"),
        Binding("h", "enter_h2", "Set h²", id="resp_h2"),
        Binding("g", "focus_generations", "Project", id="resp_project"),
        # not in the key bar (it would push Help off at 80 columns): the notes box says "press n", F1 lists it
        Binding("n", "notes", "Notes", id="resp_notes", show=False),
        Binding("escape", "leave_field", "Leave field", id="resp_leave", show=False),
    ]
    #: what the figures mean, listed under the keys in help (F1)
    TERMS = (
        ("unit", "the trait's unit from the protocol: S, R, Δz̄ and Price are in it."),
        ("h²", "heritability; from: pedigree (animal model), parents (offspring on midparent) or entered."),
        ("S", "selection differential in this season, site and fitness measure."),
        ("R=h²S", "expected change of the mean in one generation (breeder's equation); R % of the mean."),
        ("Δz̄=Gβ", "the multi-trait response, G times the gradients in trait units (Lande 1979)."),
        ("Price", "the Robertson–Price response: covariance of relative fitness with the breeding value."),
    )

    @dataclass
    class H2Saved(Message):
        text: str

    @dataclass
    class PedigreeProgress(Message):
        text: str

    @dataclass
    class PedigreeFitted(Message):
        version: int
        genetics: object  # fieldslope.analysis.genetics.Genetics
        estimates: object  # fieldslope.analysis.table.Estimates with it (point estimates): Gβ with the pedigree G

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.form: FormScreen | None = None     # the open h² form, until the store answers
        self.choices = Choices()
        self._genetics = None
        self._with_pedigree: dict = {}  # (season, site, fitness, quantity, term) -> row, estimates with the pedigree G
        self._pedigree_notes: tuple = ()
        self._pedigree_table = None
        self._genetics_version: int | None = None
        self._fitting: int | None = None  # the data version being fitted
        self._pedigree_text = ""
        self._notes: list[str] = []       # every note of the view, for the notes dialog (n)
        self._r_pedigree: dict[str, float] = {}  # R = h²S with the pedigree h², per trait, for the projection
        self._pedigree_extra: list[str] = []   # the animal models' own notes

    def body(self) -> ComposeResult:
        yield Static(id="resp-choices", classes="choices")
        yield Static(id="resp-pedigree")
        with VerticalScroll():
            yield LiteralTable(id="resp-table", cursor_type="row", zebra_stripes=True, classes="panel")
            yield Static(id="resp-g", classes="notes")
            with Horizontal(id="resp-inputs"):
                yield Label("generations k ")
                yield Input("10", id="resp-k", compact=True, type="integer")
                yield Label("  target change ")
                yield Input("", id="resp-target", compact=True, placeholder="trait units", type="number")
            yield Static(id="resp-projection", classes="notes panel")

    def on_mount(self) -> None:
        self.query_one("#resp-table", DataTable).add_columns("trait", "unit", "h²", "h² 95 %", "from", "S", "R=h²S",
                                                            "R %", "Δz̄=Gβ", "Price")

    def action_focus_generations(self) -> None:
        self.query_one("#resp-k", Input).focus()

    def action_leave_field(self) -> None:
        self.query_one("#resp-table", DataTable).focus()

    # -- the numbers -------------------------------------------------------
    def h2_of(self, snap: Snapshot, trait: str) -> tuple[dict | None, str]:
        """h² of a trait as the estimates used it, and where it came from.

        The estimators take parent–offspring estimates first and entered values
        otherwise; an estimate equal to the latest entry is labelled as entered.
        """
        rows = snap.rows(quantity=Q.HERITABILITY, term=trait)
        entry = snap.entered_h2(trait)
        if not rows.empty:
            r = rows.iloc[0]
            est = snap.value(r["season"], r["site"], r["fitness"], Q.HERITABILITY, trait)
            if entry and est is not None and est["estimate"] is not None \
                    and abs(entry.value - est["estimate"]) < 1e-12:
                return est, f"entered: {entry.source}"
            return est, "parent–offspring"
        if entry:
            return {"estimate": entry.value, "se": entry.se}, f"entered: {entry.source}"
        return None, "none: press h"

    def show(self, snap: Snapshot) -> None:
        c = self.choices
        c.settle(snap)
        self.query_one("#resp-choices", Static).update(c.bar(snap, ("season", "site", "fitness"), "h sets h²"))
        table = self.query_one("#resp-table", DataTable)
        keep = table.cursor_row
        table.clear()
        key = dict(season=c.season, site=c.site, fitness=c.fitness)
        gen = self._genetics if self._genetics_version == snap.data_version else None
        self._r_pedigree = {}
        for trait in snap.protocol.trait_names:
            h2, source = self.h2_of(snap, trait)
            s = snap.value(**key, quantity=Q.DIFFERENTIAL, term=trait)
            r = snap.value(**key, quantity=Q.RESPONSE, term=trait)
            rp = snap.value(**key, quantity=Q.RESPONSE_PCT, term=trait)
            rm = (self._with_pedigree.get((c.season, c.site, c.fitness, Q.RESPONSE_MULTI, trait)) if gen is not None
                  else snap.value(**key, quantity=Q.RESPONSE_MULTI, term=trait))
            ped = _genetics_row(gen, Q.HERITABILITY_PEDIGREE, trait, "")
            price = _genetics_row(gen, Q.RESPONSE_PRICE, trait, c.fitness or "")
            span = "–"
            if ped is not None:   # the pedigree h² takes precedence: R = h²S with it
                h2, source = {"estimate": ped["estimate"]}, "pedigree"
                span = f"{fmt(ped['ci_low'], 2)}–{fmt(ped['ci_high'], 2)}"
                r = None if s is None else {"estimate": breeders_response(ped["estimate"], s["estimate"])}
                if r is not None:
                    self._r_pedigree[trait] = r["estimate"]
                mean = snap.value(**key, quantity=Q.MEAN, term=trait)
                rp = None if r is None or mean is None or not mean["estimate"] else {
                    "estimate": 100 * r["estimate"] / mean["estimate"]}
            table.add_row(trait, unit_of(snap, trait), fmt(h2["estimate"]) if h2 else "–", span, _short_source(source),
                          _e(s), _e(r), _e(rp), _e(rm), _e(price), key=trait)
        self._fit_pedigree(snap)
        self._show_pedigree_line()
        if snap.protocol.trait_names:
            table.move_cursor(row=max(0, min(keep, len(snap.protocol.trait_names) - 1)))
        order = (Q.RESPONSE_MULTI, Q.RESPONSE, Q.RESPONSE_PCT, Q.HERITABILITY)   # the G assumption first
        picked = [n for n in (self._pedigree_notes if gen is not None else snap.notes)
                  if getattr(n, "quantity", "") in order
                  and getattr(n, "season", c.season) in (c.season, ALL)]
        picked.sort(key=lambda n: order.index(n.quantity))
        notes = [getattr(n, "message", str(n)) for n in picked]
        if gen is not None:   # the three predictions side by side: say first where they disagree
            found = [d for d in disagreements(self._pedigree_table, gen.rows, gen.h2) if d.fitness == (c.fitness or "")]
            first = sum(getattr(n, "quantity", "") == Q.RESPONSE_MULTI for n in picked)   # after which G
            notes[first:first] = [brief(found)] if found else []
        head = "Δz̄ = G·β_raw (Lande 1979); n lists every note. "
        room = 4 * max(40, self.size.width - 4) - len(head) - 12   # the notes box is 4 lines high
        self._notes = [*list(dict.fromkeys(notes)), *self._pedigree_extra, c.later_without_estimates(snap),
                       *(snap.notes_for(c.season, c.site, c.fitness) if c.season is not None else ())]
        g_text = head + whole_sentences(list(dict.fromkeys(notes)), room)
        self.query_one("#resp-g", Static).update(assemble((g_text, "$text-muted")))
        self._projection()

    def view_notes(self) -> tuple[str, list[str]]:
        return f"Notes: {self.choices.where()}", [self._pedigree_text, *self._notes]

    # -- the animal models, in their own worker -------------------------------
    def _fit_pedigree(self, snap: Snapshot) -> None:
        if self._fitting is not None or self._genetics_version == snap.data_version:
            return
        self._fitting = snap.data_version
        self._pedigree_text = "Pedigree: fitting the animal models…"
        self._pedigree_worker(snap.frame, snap.protocol, snap.h2, snap.data_version)

    @work(thread=True, exclusive=True, exit_on_error=False, group="resp-pedigree")
    def _pedigree_worker(self, frame, protocol, h2, version: int) -> None:
        from fieldslope.tui.bridge import estimates_for_frame, pedigree_genetics

        def progress(done: int, total: int, label: str) -> None:
            self.post_message(self.PedigreeProgress(f"Pedigree: fitting animal models, {done} of {total} ({label})…"))

        genetics = pedigree_genetics(frame, protocol, progress=progress)
        self.post_message(self.PedigreeProgress("Pedigree: Δz̄ = Gβ with the pedigree G…"))
        # the point estimates again, now with the pedigree h² and genetic correlations in G
        estimates = estimates_for_frame(frame, protocol, bootstrap=0, h2=h2, genetics=genetics)
        self.post_message(self.PedigreeFitted(version, genetics, estimates))

    def on_response_screen_pedigree_progress(self, msg: PedigreeProgress) -> None:
        if self._fitting is not None:
            self._pedigree_text = msg.text
            self._show_pedigree_line()

    def on_response_screen_pedigree_fitted(self, msg: PedigreeFitted) -> None:
        self._fitting = None
        self._genetics, self._genetics_version = msg.genetics, msg.version
        table = msg.estimates.table
        self._pedigree_table, self._pedigree_notes = table, msg.estimates.notes
        self._with_pedigree = {k: dict(estimate=v) for k, v in zip(
            zip(table["season"], table["site"], table["fitness"], table["quantity"], table["term"]), table["estimate"])}
        notes = [n[-1] for n in msg.genetics.notes]
        self._pedigree_extra = notes
        self._pedigree_text = msg.genetics.summary or (notes[0] if notes else "")
        if self.app.snapshot is not None:
            self.show(self.app.snapshot)   # refits if the data changed meanwhile

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group != "resp-pedigree" or event.state != WorkerState.ERROR:
            return
        self._genetics, self._genetics_version = None, self._fitting   # no retry until the data change
        self._fitting = None
        self._pedigree_text = f"Pedigree: the animal models failed ({event.worker.error}); the table uses other h²."
        self._show_pedigree_line()
        self.app.notify(self._pedigree_text, severity="error")

    def _show_pedigree_line(self) -> None:
        self.query_one("#resp-pedigree", Static).update(assemble((self._pedigree_text, "$text-muted")))

    @on(Input.Changed, "#resp-k")
    @on(Input.Changed, "#resp-target")
    def _inputs_changed(self) -> None:
        self._projection()

    def _projection(self) -> None:
        from fieldslope.tui.projection import projection_text

        snap = self.app.snapshot
        out = self.query_one("#resp-projection", Static)
        if snap is None or self.choices.season is None:
            out.update("")
            return
        table = self.query_one("#resp-table", DataTable)
        traits = snap.protocol.trait_names
        if not traits:
            return
        trait = traits[max(0, min(table.cursor_row, len(traits) - 1))]
        k_text = self.query_one("#resp-k", Input).value.strip()
        target_text = self.query_one("#resp-target", Input).value.strip()
        out.update(projection_text(snap, self.choices.season, self.choices.site, self.choices.fitness, trait,
                                   k_text, target_text, self._r_pedigree.get(trait)))

    @on(DataTable.RowHighlighted, "#resp-table")
    def _row(self) -> None:
        self._projection()

    # -- entering h² -------------------------------------------------------
    def action_enter_h2(self) -> None:
        snap = self.app.snapshot
        refusal = self.app.write_refusal() or ("" if snap is not None else "The store is still being read; try again in a moment.")
        if refusal:
            self.app.notify(refusal, severity="warning")
            return
        traits = snap.protocol.trait_names
        table = self.query_one("#resp-table", DataTable)
        trait = traits[max(0, min(table.cursor_row, len(traits) - 1))]
        fields = [("value", "h² (0 to 1)", ""), ("se", "its standard error (optional)", ""),
                  ("source", "Source (study, population, year)", "")]

        def numbers(values: dict) -> tuple[float, float | None]:
            return float(values["value"]), float(values["se"]) if values["se"] else None

        def check(values: dict) -> str:
            try:
                value, se = numbers(values)
            except ValueError:
                return "h² and its se must be numbers, e.g. 0.35; correct them, then OK."
            if not 0 <= value <= 1 or (se is not None and not se > 0):
                return "h² must lie between 0 and 1 and its se be positive; correct them, then OK."
            return ""

        def submit(values: dict) -> None:
            value, se = numbers(values)
            self._h2_worker(self.app.study_dir, trait, value, se, values["source"])

        h2, source = self.h2_of(snap, trait)
        text = "Used where the study has no parent–offspring data for this trait; kept in the study with its source."
        if h2 is not None and source == "parent–offspring":
            text = (f"This study estimates h² of {trait} from parents and offspring ({fmt(h2['estimate'])}); "
                    "that estimate stays in use. An entered value is kept with its source for reference.")
        self.form = FormScreen(f"Heritability of {trait}", text, fields, ("value", "source"), check=check,
                               submit=submit)
        self.app.push_screen(self.form)

    @work(thread=True, exclusive=True, exit_on_error=False, group="resp-h2")
    def _h2_worker(self, study_dir: Path, trait: str, value: float, se: float | None, source: str) -> None:
        from fieldslope.tui.loading import set_heritability

        set_heritability(study_dir, trait, value, se, source, login_name())
        self.post_message(self.H2Saved(f"h² of {trait} = {value:g} kept ({source})."))

    @on(H2Saved)     # (by name the handler would be on_response_screen_h2saved: easy to get wrong)
    def _h2_saved(self, msg: H2Saved) -> None:
        form, self.form = self.form, None
        if form is not None:
            form.succeeded()
        self.app.notify(msg.text, timeout=4)
        self.post_message(StoreWritten(msg.text))


def whole_sentences(notes: list[str], limit: int) -> str:
    """The notes joined, as many whole notes as fit in ``limit`` characters (never cut mid-sentence);
    when some are left out, the last part says how many and where to read them."""
    if sum(len(n) + 1 for n in notes) <= limit:
        return " ".join(notes)
    out: list[str] = []
    for note in notes:
        if out and sum(len(n) + 1 for n in out) + len(note) > limit - 55:
            left = len(notes) - len(out)
            out.append(f"({left} more note{'' if left == 1 else 's'}: press n to read them all.)")
            break
        out.append(note)
    return " ".join(out)


def _short_source(source: str) -> str:
    """The h² source in a narrow column: pedigree, parents (parent–offspring), entered, or none (h)."""
    if source.startswith("entered"):
        return "entered"
    return {"parent–offspring": "parents", "pedigree": "pedigree"}.get(source, "none (h)")


def _genetics_row(gen, quantity: str, term: str, fitness: str) -> dict | None:
    if gen is None:
        return None
    return next((r for r in gen.rows if r["quantity"] == quantity and r["term"] == term and r["fitness"] == fitness),
                None)


def _e(row: dict | None) -> str:
    return "–" if row is None else fmt(row["estimate"])

