"""Seasons: gradients per season and site with their intervals, the weighted mean, τ² and sign
changes; and how this season's β moved batch by batch, with the sample needed for an interval width."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.content import Content
from textual.message import Message
from textual.widgets import Input, Label, Static, TabbedContent, TabPane, Tabs
from textual.worker import get_current_worker

from fieldslope.common.names import Q
from fieldslope.tui.screens.base import StudyScreen
from fieldslope.tui.screens.choices import ChoiceKeys, Choices
from fieldslope.tui.snapshot import ALL, Snapshot
from fieldslope.tui.widgets.literal import assemble, literal
from fieldslope.tui.number_text import tau2_text
from fieldslope.tui.widgets.pictures import fmt, interval_rows


class SeasonsScreen(ChoiceKeys, StudyScreen):
    TITLE_TEXT = "Seasons"
    BINDINGS = [
        Binding("w", "next_fitness", "Fitness", id="sea_fitness"),
        Binding("x", "next_trait", "Trait", id="sea_trait"),
        Binding("t", "next_site", "Site (trend)", id="sea_site"),
        Binding("s", "next_season", "Season (trend)", id="sea_season"),
        Binding("v", "next_view", "View", id="sea_view"),
        # not in the key bar (it would push Help off at 80 columns): the summary below says "n", F1 lists it
        Binding("n", "notes", "Notes", id="sea_notes", show=False),
        Binding("i", "focus_width", "Interval width", id="sea_width", show=False),
        Binding("escape", "leave_field", "Leave field", id="sea_leave", show=False),
    ]

    @dataclass
    class Trend(Message):
        key: tuple
        rows: list

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.choices = Choices()
        self.trend_key: tuple | None = None
        self.trend_rows: list = []
        self.trend_done = False

    def body(self) -> ComposeResult:
        yield Static(id="sea-choices", classes="choices")
        with TabbedContent(id="sea-tabs"):
            with TabPane("Across seasons", id="sea-across"):
                with VerticalScroll():
                    yield Static(id="sea-forest", classes="picture panel")
                    yield Static(id="sea-summary", classes="notes panel")
            with TabPane("This season by batch", id="sea-trend"):
                with VerticalScroll():
                    yield Static(id="sea-trend-pic", classes="picture panel")
                    with Horizontal(id="sea-width-row"):
                        yield Label("interval width wanted ")
                        yield Input("0.2", id="sea-width", compact=True, type="number")
                    yield Static(id="sea-plan", classes="notes")

    # -- keys --------------------------------------------------------------
    def action_next_view(self) -> None:
        tabs = self.query_one("#sea-tabs", TabbedContent)
        tabs.active = "sea-trend" if tabs.active == "sea-across" else "sea-across"

    def action_focus_width(self) -> None:
        self.query_one("#sea-tabs", TabbedContent).active = "sea-trend"
        self.query_one("#sea-width", Input).focus()

    def action_leave_field(self) -> None:
        # the tab row takes the focus (the TabbedContent itself cannot), so the next keys are commands again
        self.query_one("#sea-tabs", TabbedContent).query_one(Tabs).focus()

    def view_notes(self) -> tuple[str, list[str]]:
        """The notes across seasons for the fitness measure in view, then those of the season in view."""
        snap, c = self.app.snapshot, self.choices
        if snap is None:
            return "Notes", []
        across = [getattr(n, "message", str(n)) for n in snap.notes
                  if getattr(n, "season", "") == ALL and getattr(n, "fitness", "") == c.fitness]
        this = snap.notes_for(c.season, c.site, c.fitness) if c.season is not None else []
        return f"Notes: {c.fitness or '–'} across seasons", [c.later_without_estimates(snap), *across, *this]

    # -- across seasons ----------------------------------------------------
    def show(self, snap: Snapshot) -> None:
        c = self.choices
        c.settle(snap)
        trait = c.trait_name(snap)
        self.query_one("#sea-choices", Static).update(c.bar(snap, ("fitness", "trait", "season", "site")))
        self._across(snap, trait)
        self._start_trend(snap)
        self._show_trend(snap, trait)

    def _across(self, snap: Snapshot, trait: str) -> None:
        c = self.choices
        width = max(50, self.size.width - 4)
        rows, marks = [], []
        sites = sorted({s for s in snap.rows(fitness=c.fitness, quantity=Q.GRADIENT, term=trait)["site"]})
        per_site = [s for s in sites if s != ALL] or sites
        se_based = False
        for season in snap.seasons():
            for site in per_site:
                v = snap.value(season, site, c.fitness, Q.GRADIENT, trait)
                if v is None:
                    continue
                lo, hi = v["ci_low"], v["ci_high"]
                if lo is None and v["se"] is not None:   # until the bootstrap is in: β ± 1.96 se
                    lo, hi, se_based = v["estimate"] - 1.96 * v["se"], v["estimate"] + 1.96 * v["se"], True
                rows.append((f"{season} {site}", v["estimate"], lo, hi))
                marks.append("se" if v["ci_low"] is None else "")
        summary: list[Content] = []
        for site in per_site + ([ALL] if ALL in sites and per_site != sites else []):
            name = "pooled" if site == ALL else site
            mean = snap.value(ALL, site, c.fitness, Q.GRADIENT_MEAN, trait)
            if mean is not None:
                lo, hi = mean["ci_low"], mean["ci_high"]
                if lo is None and mean["se"] is not None:  # fixed-effect interval, mean ± 1.96 se
                    lo, hi = mean["estimate"] - 1.96 * mean["se"], mean["estimate"] + 1.96 * mean["se"]
                rows.append((f"mean {name}", mean["estimate"], lo, hi))
                marks.append("")          # the row's label says Q.MEAN; "w" would read as fitness
            tau2 = snap.value(ALL, site, c.fitness, Q.GRADIENT_TAU2, trait)
            q = snap.value(ALL, site, c.fitness, Q.GRADIENT_Q, trait)
            sc = snap.value(ALL, site, c.fitness, Q.SIGN_CHANGES, trait)
            if mean or tau2 or sc:
                summary.append(assemble(
                    (f"{name}: ", "bold"), "weighted mean β ", (_e(mean), "bold"), "  τ² ", (tau2_text(tau2["estimate"]) if tau2 else "–", "bold"),
                    "  Q ", (_e(q), "bold"), (f" (p {fmt(q['p_value'])})" if q and q["p_value"] is not None else ""),
                    "  sign changes ", (_e(sc, digits=0), "bold")))
        forest = self.query_one("#sea-forest", Static)
        if rows:
            forest.update(Content("\n").join([
                assemble((f"β of {trait} for {c.fitness}, 95 % interval", "bold"),
                                 ("  se: β ± 1.96 se until the bootstrap is in" if se_based else "", "$accent")),
                interval_rows(rows, width=width, marks=marks)]))
        else:
            forest.update("No gradients yet for this trait and fitness measure.")
        if not summary:
            summary.append(Content("Across-season summaries need at least two seasons with gradients at a site."))
        summary.append(assemble(("Weighted mean: weights 1/se²; τ²: DerSimonian–Laird between-season "
                                         "variance; a mean row's interval is the random-effects one when τ² > 0, else ± 1.96 se. "
                                 "n lists the notes.", "$text-muted")))
        self.query_one("#sea-summary", Static).update(Content("\n").join(summary))

    # -- this season, batch by batch ---------------------------------------
    def _start_trend(self, snap: Snapshot) -> None:
        c = self.choices
        if c.season is None:
            self.query_one("#sea-trend-pic", Static).update(
                "No season has a β yet: β needs fitness, which arrives with the census batches.")
            return
        key = (snap.generation, snap.outliers_left_out, c.season, c.fitness)
        if key == self.trend_key:
            return
        self.trend_key = key
        self.trend_rows = []
        self.trend_done = False
        self.query_one("#sea-trend-pic", Static).update("Recomputing β after each batch …")
        self._trend_worker(self.app.study_dir, snap.protocol, key)

    @work(thread=True, exclusive=True, exit_on_error=False, group="seasons-trend")
    def _trend_worker(self, study_dir: Path, protocol, key: tuple) -> None:
        from fieldslope.tui.loading import batch_trend

        worker = get_current_worker()
        rows = batch_trend(study_dir, protocol, key[2], key[3], key[1], should_stop=lambda: worker.is_cancelled)
        if not worker.is_cancelled:
            self.post_message(self.Trend(key, rows))

    def on_seasons_screen_trend(self, msg: Trend) -> None:
        if msg.key != self.trend_key:
            return
        self.trend_rows = msg.rows
        self.trend_done = True
        snap = self.app.snapshot
        if snap is not None:
            traits = snap.protocol.trait_names
            self._show_trend(snap, traits[self.choices.trait] if traits else "")

    def _show_trend(self, snap: Snapshot, trait: str) -> None:
        c = self.choices
        pic = self.query_one("#sea-trend-pic", Static)
        rows = [r for r in self.trend_rows if r["trait"] == trait and r["site"] == c.site]
        if not rows:
            if self.trend_rows:
                pic.update(literal(f"No β for {trait} at this site after any batch of season {c.season}."))
            elif self.trend_done:
                pic.update(literal(f"No batch of season {c.season} gives a β for {trait} yet: β needs fitness, "
                                   "which arrives with the census batches."))
            return
        width = max(50, self.size.width - 4)
        items = [(f"batch {r['batch']} n={r['n']}", r["estimate"], r["ci_low"], r["ci_high"]) for r in rows]
        lines = [
            assemble((f"β of {trait} after each batch, season {c.season}, ", "bold"),
                             ("pooled" if c.site == ALL else str(c.site), "bold"),
                             ("  β ± 1.96·se", "$text-muted")),
            interval_rows(items, width=width)]
        if len(rows) < 3:
            lines.append(assemble((few_batches_sentence(len(rows)), "$text-muted")))
        pic.update(Content("\n").join(lines))
        self._plan(rows[-1])

    @on(Input.Changed, "#sea-width")
    def _width_changed(self) -> None:
        snap = self.app.snapshot
        if snap is None:
            return
        traits = snap.protocol.trait_names
        trait = traits[self.choices.trait] if traits else ""
        rows = [r for r in self.trend_rows if r["trait"] == trait and r["site"] == self.choices.site]
        if rows:
            self._plan(rows[-1])

    def _plan(self, last: dict) -> None:
        from fieldslope.tui.projection import sample_size_text

        self.query_one("#sea-plan", Static).update(
            sample_size_text(last, self.query_one("#sea-width", Input).value.strip(),
                             len(self.app.snapshot.protocol.trait_names)))


def few_batches_sentence(n: int) -> str:
    """Why a batch trend has so few points (shown below fewer than 3)."""
    return (f"Only {n} batch{'' if n == 1 else 'es'} so far changed this β: it needs fitness, which arrives with "
            "the census batches, so batches of measurements alone leave it unchanged and are not shown.")


def _e(row: dict | None, digits: int = 3) -> str:
    if row is None or row["estimate"] is None:
        return "–"
    return f"{row['estimate']:.0f}" if digits == 0 else fmt(row["estimate"])
