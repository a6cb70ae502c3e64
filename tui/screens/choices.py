"""What a screen is looking at (season, site, fitness measure, trait) and the keys that cycle it."""

from __future__ import annotations

from textual.content import Content

from fieldslope.tui.widgets.literal import assemble

from fieldslope.tui.snapshot import ALL, Snapshot


class Choices:
    """The season, site, fitness measure and trait a screen shows; cycled by keys."""

    def __init__(self):
        self.season: str | None = None
        self.site: str | None = None
        self.fitness: str | None = None
        self.trait = 0
        self.season_picked = False

    def settle(self, snap: Snapshot) -> None:
        """Keep each choice if the snapshot still has it, else take the latest season, pooled, the total.

        Until the user picks a season, the latest one is followed as new seasons arrive.
        """
        seasons = snap.seasons()
        chosen = snap.seasons_with_selection() or seasons   # open on the latest season with S or β
        latest = chosen[-1] if chosen else None
        if self.season not in seasons or not self.season_picked:
            if self.season != latest:
                self.site = None
            self.season = latest
        sites = snap.sites(self.season) if self.season else []
        if self.site not in sites:
            self.site = sites[0] if sites else None
        names = snap.fitness_names
        if self.fitness not in names:
            totals = list(snap.protocol.totals)
            self.fitness = totals[0] if totals else (names[0] if names else None)
        self.trait %= max(1, len(snap.protocol.trait_names))

    def trait_name(self, snap: Snapshot) -> str:
        traits = snap.protocol.trait_names
        return traits[self.trait % len(traits)] if traits else ""

    @staticmethod
    def step(options: list, current, step: int = 1):
        if not options:
            return current
        i = options.index(current) if current in options else -1
        return options[(i + step) % len(options)]

    def bar(self, snap: Snapshot, parts: tuple[str, ...], extra: str = "") -> Content:
        """One line naming the current choices and the key that changes each."""
        items = {
            "season": ("Season", str(self.season or "–"), "s"),
            "site": ("Site", "pooled" if self.site == ALL else str(self.site or "–"), "t"),
            "fitness": ("Fitness", str(self.fitness or "–"), "w"),
            "trait": ("Trait", self.trait_name(snap), "x"),
        }
        out: list[tuple[str, str]] = []
        for name in parts:
            label, value, key = items[name]
            out += [(f"{label} ", "$text-muted"), (value, "bold"), (f" [{key}]  ", "$text-muted")]
        if extra:
            out.append((extra, "$text-muted"))
        later = self.later_without_estimates(snap) if "season" in parts else ""
        if later:
            out.append(("\n" + later, "$warning"))
        return assemble(*out)

    def where(self) -> str:
        """The view in words, for a dialog's title: season, site, fitness."""
        site = "pooled" if self.site == ALL else str(self.site or "–")
        return f"season {self.season or '–'}, {site}, {self.fitness or '–'}"

    def later_without_estimates(self, snap: Snapshot) -> str:
        """Why the latest season on record is not the one shown: it has no estimates yet ("" when it has)."""
        have = set(snap.seasons_with_selection())
        later = [s for s in snap.seasons_recorded() if s not in have and (self.season is None or s > str(self.season))]
        return snap.why_no_estimates(later[-1], self.fitness) if later else ""


class ChoiceKeys:
    """Mixin for a StudyScreen with ``self.choices``: actions that cycle the choices and redraw."""

    choices: Choices

    def _cycle(self, attr: str, options: list, step: int = 1) -> None:
        setattr(self.choices, attr, Choices.step(options, getattr(self.choices, attr), step))
        if attr == "season":
            self.choices.site = None
            self.choices.season_picked = True
        self._redraw()

    def _redraw(self) -> None:
        snap = self.app.snapshot
        if snap is not None:
            self.choices.settle(snap)
            self.show(snap)

    def action_next_season(self) -> None:
        if self.app.snapshot:
            self._cycle("season", self.app.snapshot.seasons())

    def action_prev_season(self) -> None:
        if self.app.snapshot:
            self._cycle("season", self.app.snapshot.seasons(), -1)

    def action_next_site(self) -> None:
        if self.app.snapshot:
            self._cycle("site", self.app.snapshot.sites(self.choices.season))

    def action_next_fitness(self) -> None:
        if self.app.snapshot:
            self._cycle("fitness", list(self.app.snapshot.fitness_names))

    def action_next_trait(self) -> None:
        self.choices.trait += 1
        self._redraw()
