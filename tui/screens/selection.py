"""Selection: S, S/σ, β, γ and the canonical axes of one season and site, with two pictures."""

from __future__ import annotations

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.widgets import DataTable, Static, TabbedContent, TabPane

from fieldslope.common.names import Q
from fieldslope.tui.screens.base import StudyScreen
from fieldslope.tui.screens.choices import ChoiceKeys, Choices
from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.widgets.literal import LiteralTable, assemble, literal
from fieldslope.tui.widgets.pictures import fmt, scatter_picture, surface_picture


def ci_text(row: dict | None, pending: bool = True) -> str:
    """The 95 % interval; "…" while the bootstrap is still running, "–" when there is none."""
    if row is None or row["ci_low"] is None or row["ci_high"] is None:
        return "…" if pending else "–"
    return f"{fmt(row['ci_low'])}, {fmt(row['ci_high'])}"


def p_text(row: dict | None, pending: bool = True) -> str:
    if row is None or row["p_value"] is None:
        return "…" if pending else "–"
    p = row["p_value"]
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def est_text(row: dict | None) -> str:
    return "–" if row is None else fmt(row["estimate"])


def axes_text(snap: Snapshot, key: dict) -> str:
    """The canonical axes as combinations of the standardized traits (Phillips & Arnold 1989),
    from the γ of the table through the estimators' own eigen-decomposition."""
    import numpy as np

    from fieldslope.analysis.quadratic import canonical_axes

    traits = snap.protocol.trait_names
    p = len(traits)
    g = np.full((p, p), np.nan)
    for j, a in enumerate(traits):
        v = snap.value(**key, quantity=Q.QUADRATIC, term=f"{a}^2")
        g[j, j] = np.nan if v is None or v["estimate"] is None else v["estimate"]
        for k in range(j + 1, p):
            v = snap.value(**key, quantity=Q.CORRELATIONAL, term=f"{a}:{traits[k]}")
            g[j, k] = g[k, j] = np.nan if v is None or v["estimate"] is None else v["estimate"]
    if p < 2 or not np.isfinite(g).all():
        return ""
    _, vecs = canonical_axes(g)
    axes = []
    for i in range(p):
        col = vecs[:, i] * (1 if vecs[np.argmax(np.abs(vecs[:, i])), i] >= 0 else -1)
        axes.append(f"m{i + 1} = " + " ".join(f"{c:+.2f}·{t}" for c, t in zip(col, traits)))
    return "; ".join(axes) + "."


def more_notes(left: int) -> list[str]:
    """The pointer to the notes dialog when ``left`` notes are not shown inline (none when none are left)."""
    return [f"({left} more note{'' if left == 1 else 's'}: press n to read them all.)"] if left > 0 else []


def unit_of(snap: Snapshot, trait: str) -> str:
    """The trait's unit from the protocol ("–" when it names none)."""
    spec = snap.protocol.traits.get(trait)
    return (spec.unit if spec is not None else "") or "–"


def n_parts(snap: Snapshot, season: str, site: str, fitness: str) -> list[tuple[str, str]]:
    """The sample size above the table: one n when the rows' n is the same, else both, each named."""
    opp = snap.value(season, site, fitness, Q.OPPORTUNITY, "")
    grads = [snap.value(season, site, fitness, Q.GRADIENT, t) for t in snap.protocol.trait_names]
    rows = sorted({int(g["n"]) for g in grads if g and g["n"] is not None})
    with_fitness = int(opp["n"]) if opp and opp["n"] is not None else None
    if with_fitness is None and not rows:
        return [("n ", "$text-muted"), ("–", "bold")]
    if with_fitness is None or rows in ([], [with_fitness]):
        return [("n ", "$text-muted"), (str(with_fitness if with_fitness is not None else rows[-1]), "bold")]
    shown = "/".join(map(str, rows))
    return [("n ", "$text-muted"), (str(with_fitness), "bold"), (" with fitness, ", "$text-muted"),
            (shown, "bold"), (" with every trait (rows)", "$text-muted")]


def no_estimates_sentence(snap: Snapshot) -> str:
    """Why the Selection screen has no figures yet, in one sentence."""
    if not snap.n_batches:
        return "No estimates yet: take in a batch on the Intake screen [1]."
    frame = snap.frame
    measured = [f for f in snap.protocol.component_names if frame is not None and f in frame.columns]
    if any(frame[f].notna().any() for f in measured):
        return "No estimates yet: the notes below say what each season and site still lacks."
    return ("No estimates yet: the batches so far carry no fitness; they appear once a batch with fitness "
            "(a census) is taken in.")


class SelectionScreen(ChoiceKeys, StudyScreen):
    TITLE_TEXT = "Selection"
    BINDINGS = [
        Binding("s", "next_season", "Season", id="sel_season"),
        Binding("S", "prev_season", "Previous season", id="sel_season_prev", show=False),
        Binding("t", "next_site", "Site", id="sel_site"),
        Binding("w", "next_fitness", "Fitness", id="sel_fitness"),
        Binding("x", "next_trait", "Trait", id="sel_trait"),
        Binding("v", "next_view", "View", id="sel_view"),
        Binding("n", "notes", "Notes", id="sel_notes"),
    ]
    #: what the figures mean, listed under the keys in help (F1)
    TERMS = (
        ("n", "individuals in the estimate. The line above the table counts those with fitness (what I "
              "uses); the rows count those with fitness and every trait measured (the regressions need "
              "complete cases)."),
        ("missing fitness", "individuals of the cell without this fitness value; an individual whose "
                            "earlier component is 0 (it died) has no later one to miss and is not counted."),
        ("I", "opportunity for selection: the variance of relative fitness (Arnold & Wade 1984). It bounds "
              "selection on any trait: |S/σ| ≤ √I. I = 0 means every individual had the same fitness."),
        ("S", "selection differential: fitness-weighted mean minus mean, in the trait's unit (column unit)."),
        ("S/σ", "S in standard deviations of the trait."),
        ("β", "selection gradient: change of relative fitness per standard deviation of the trait, the "
              "other traits held constant (Lande & Arnold 1983)."),
        ("γ, λ", "quadratic and correlational gradients per sd²; λ the eigenvalues of γ (Phillips & Arnold "
                 "1989)."),
    )
    VIEWS = ("sel-table", "sel-picture", "sel-surface")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.choices = Choices()
        self._drawn: tuple | None = None

    def body(self) -> ComposeResult:
        yield Static(id="sel-choices", classes="choices")
        yield Static(id="sel-summary", classes="summary panel")
        with TabbedContent(id="sel-tabs"):
            with TabPane("Table", id="sel-table"):
                with VerticalScroll():
                    yield LiteralTable(id="sel-linear", cursor_type="row", zebra_stripes=True, classes="panel")
                    yield LiteralTable(id="sel-gamma", cursor_type="row", classes="panel")
                    yield Static(id="sel-notes", classes="notes")
            with TabPane("w vs trait", id="sel-picture"):
                yield Static(id="sel-scatter", classes="picture panel")
            with TabPane("Surface", id="sel-surface"):
                yield Static(id="sel-surf", classes="picture panel")

    LINEAR_COLUMNS = ("trait", "unit", "S", "S/σ", "β", "95% CI", "p", "n")
    GAMMA_COLUMNS = ("term", "γ", "95% CI", "p")

    def on_mount(self) -> None:
        self._columns(self.query_one("#sel-linear", DataTable), self.query_one("#sel-gamma", DataTable), False)

    def _columns(self, lin: DataTable, gam: DataTable, compare: bool) -> None:
        """The table columns; with the sensitivity comparison, S, β and γ with the open outliers kept in too."""
        want = len(self.LINEAR_COLUMNS) + (2 if compare else 0)
        if len(lin.columns) == want:
            return
        lin.clear(columns=True)
        gam.clear(columns=True)
        lin.add_columns(*self.LINEAR_COLUMNS, *(("S (in)", "β (in)") if compare else ()))
        gam.add_columns(*self.GAMMA_COLUMNS, *(("γ (in)",) if compare else ()))

    # -- keys --------------------------------------------------------------
    def action_next_view(self) -> None:
        tabs = self.query_one("#sel-tabs", TabbedContent)
        i = self.VIEWS.index(tabs.active) if tabs.active in self.VIEWS else 0
        tabs.active = self.VIEWS[(i + 1) % len(self.VIEWS)]

    def on_resize(self) -> None:
        if self.app.snapshot is not None:
            self.show(self.app.snapshot)

    # -- rendering ---------------------------------------------------------
    def show(self, snap: Snapshot) -> None:
        c = self.choices
        c.settle(snap)
        trait = c.trait_name(snap)
        self.query_one("#sel-choices", Static).update(c.bar(snap, ("season", "site", "fitness", "trait")))
        if c.season is None:
            self.query_one("#sel-summary", Static).update(no_estimates_sentence(snap))
            for t in ("#sel-linear", "#sel-gamma"):
                self.query_one(t, DataTable).clear()
            notes = [getattr(n, "message", str(n)) for n in snap.notes]
            self.query_one("#sel-notes", Static).update(literal("\n".join(notes[:6] + more_notes(len(notes) - 6)),
                                                                keep_newlines=True))
            return
        self._summary(snap)
        self._tables(snap)
        self._drawn = None
        self._pictures(snap, trait)

    def _summary(self, snap: Snapshot) -> None:
        c = self.choices
        opp = snap.value(c.season, c.site, c.fitness, Q.OPPORTUNITY, "")
        parts = [*n_parts(snap, c.season, c.site, c.fitness),
                 ("  missing fitness ", "$text-muted"), (str(snap.missing_fitness(c.season, c.site, c.fitness)), "bold"),
                 ("  I ", "$text-muted"), (fmt(opp["estimate"]) if opp else "–", "bold")]
        if snap.outliers_left_out:
            parts.append(("  open outliers left out", "bold $warning"))
        if not snap.intervals:
            parts.append(("  intervals: computing …" if self.app.bootstrap else "  intervals off", "$accent"))
        elif snap.resamples < self.app.bootstrap:
            parts.append((f"  intervals from {snap.resamples} of {self.app.bootstrap} resamples …", "$accent"))
        self.query_one("#sel-summary", Static).update(assemble(*parts))

    def view_notes(self) -> tuple[str, list[str]]:
        snap, c = self.app.snapshot, self.choices
        if snap is None:
            return "Notes", []
        later = c.later_without_estimates(snap)
        if c.season is None:
            return "Notes: no estimates yet", [no_estimates_sentence(snap), later,
                                                *(getattr(n, "message", str(n)) for n in snap.notes)]
        return f"Notes: {c.where()}", [later, *snap.notes_for(c.season, c.site, c.fitness)]

    def _tables(self, snap: Snapshot) -> None:
        c = self.choices
        key = dict(season=c.season, site=c.site, fitness=c.fitness)
        wait = not snap.intervals and self.app.bootstrap > 0
        kept = snap.sensitivity
        lin = self.query_one("#sel-linear", DataTable)
        gam = self.query_one("#sel-gamma", DataTable)
        self._columns(lin, gam, kept is not None)

        def kept_in(quantity: str, term: str) -> list[str]:
            """The figure with the open outliers kept in (an extra column in the comparison only)."""
            if kept is None:
                return []
            v = kept.value(c.season, c.site, c.fitness, quantity, term)
            return ["–" if v is None else fmt(v)]

        lin.clear()
        for trait in snap.protocol.trait_names:
            s = snap.value(**key, quantity=Q.DIFFERENTIAL, term=trait)
            s_std = snap.value(**key, quantity=Q.DIFFERENTIAL_STD, term=trait)
            b = snap.value(**key, quantity=Q.GRADIENT, term=trait)
            n = b["n"] if b and b["n"] is not None else (s["n"] if s and s["n"] is not None else None)
            lin.add_row(trait, unit_of(snap, trait), est_text(s), est_text(s_std), est_text(b), ci_text(b, wait), p_text(b, wait),
                        "–" if n is None else str(int(n)), *kept_in(Q.DIFFERENTIAL, trait),
                        *kept_in(Q.GRADIENT, trait), key=trait)
        for term in snap.terms(**key, quantity=Q.GRADIENT_LOGISTIC):
            v = snap.value(**key, quantity=Q.GRADIENT_LOGISTIC, term=term)
            lin.add_row(f"{term} (logit β)", "", "", "", est_text(v), ci_text(v, wait), p_text(v, wait),
                        "–" if v["n"] is None else str(int(v["n"])), *([""] * (2 if kept is not None else 0)),
                        key=f"logit:{term}")
        gam.clear()
        for quantity, label in ((Q.QUADRATIC, "γ "), (Q.CORRELATIONAL, "γ "), (Q.CANONICAL, "λ ")):
            for term in snap.terms(**key, quantity=quantity):
                v = snap.value(**key, quantity=quantity, term=term)
                extra = [] if kept is None else [""] if quantity == Q.CANONICAL else kept_in(quantity, term)
                gam.add_row(label + str(term), est_text(v), ci_text(v, wait) if quantity != Q.CANONICAL else "",
                            p_text(v, wait), *extra, key=f"{quantity}:{term}")  # λ: no interval, tested against γ = 0
        every = snap.notes_for(c.season, c.site, c.fitness)
        notes = every[:4] + more_notes(len(every) - 4)
        parts: list[tuple[str, str]] = []
        if kept is not None:
            kept_b = kept.gradients(c.season, c.site, c.fitness, snap.protocol.trait_names)
            shown = [f"{t} {fmt(v)}" for t, v in kept_b.items()]
            parts.append(("β with the open outliers kept in: " + (", ".join(shown) or "none") + "; the columns "
                          "marked (in) give S, β and γ with them kept in, all other figures leave them out. ",
                          "$warning"))
        axes = axes_text(snap, key)
        if axes:
            parts.append(("λ: eigenvalues of γ; " + axes + " ", "$text-muted"))
        self.query_one("#sel-notes", Static).update(assemble(*parts, *[(n + " ", "$text-muted") for n in notes]))

    @on(TabbedContent.TabActivated, "#sel-tabs")
    def _tab_shown(self) -> None:
        snap = self.app.snapshot
        if snap is not None and self.choices.season is not None:
            self._pictures(snap, self.choices.trait_name(snap))

    def _pictures(self, snap: Snapshot, trait: str) -> None:
        """Draw the picture of the tab in view (the other is drawn when its tab is shown)."""
        tab = self.query_one("#sel-tabs", TabbedContent).active
        key = (snap.generation, snap.intervals, snap.resamples, tab, trait, self.choices.season, self.choices.site,
               self.choices.fitness, self.size)
        if tab == "sel-table" or key == self._drawn:
            return
        self._drawn = key
        if tab == "sel-picture":
            self._scatter(snap, trait)
        else:
            self._surface(snap, trait)

    def _scatter(self, snap: Snapshot, trait: str) -> None:
        from fieldslope.tui.picture_data import scatter_data

        c = self.choices
        width = max(40, self.size.width - 4)
        height = max(8, self.size.height - 9)
        x, w, bins = scatter_data(snap, c.season, c.site, c.fitness, trait)
        b = snap.value(c.season, c.site, c.fitness, Q.GRADIENT, trait)
        self.query_one("#sel-scatter", Static).update(
            scatter_picture(x, w, b["estimate"] if b else None, bins, width=width, height=height, xlabel=trait))

    def _surface(self, snap: Snapshot, trait: str) -> None:
        c = self.choices
        width = max(40, self.size.width - 4)
        height = max(8, self.size.height - 9)
        traits = snap.protocol.trait_names
        surf = self.query_one("#sel-surf", Static)
        if len(traits) < 2:
            surf.update("The fitness surface needs two traits; this protocol has one.")
            return
        a, bname = traits[c.trait], traits[(c.trait + 1) % len(traits)]
        first, second = (a, bname) if traits.index(a) < traits.index(bname) else (bname, a)
        vals = {}
        for q, t in ((Q.GRADIENT, a), (Q.GRADIENT, bname), (Q.QUADRATIC, f"{a}^2"), (Q.QUADRATIC, f"{bname}^2"),
                     (Q.CORRELATIONAL, f"{first}:{second}")):
            v = snap.value(c.season, c.site, c.fitness, q, t)
            vals[(q, t)] = None if v is None else v["estimate"]
        if any(v is None for v in vals.values()):
            surf.update(literal(f"No quadratic model for {a} and {bname} here (see the notes on the Table tab)."))
            return
        beta = (vals[(Q.GRADIENT, a)], vals[(Q.GRADIENT, bname)])
        g12 = vals[(Q.CORRELATIONAL, f"{first}:{second}")]
        gamma = ((vals[(Q.QUADRATIC, f"{a}^2")], g12), (g12, vals[(Q.QUADRATIC, f"{bname}^2")]))
        surf.update(surface_picture(beta, gamma, (a, bname), width=width, height=height))
