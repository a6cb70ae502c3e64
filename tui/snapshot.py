"""The immutable picture of a study that every dashboard panel renders from.

A :class:`Snapshot` is built in a worker thread (which opens its own store
connection) and handed to the screens on the main thread; panels never query
the database. This module does not import Textual.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from functools import cached_property
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

from fieldslope.common.names import ALL, Q, Outcome

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from fieldslope.schemas.protocol import Protocol
    from fieldslope.schemas.store_types import BatchInfo, HeritabilityEntry, StoredFlag

#: A row of the estimates table: (season, site, fitness, quantity, term).
RowKey = tuple[str, str, str, str, str]


@dataclass(frozen=True)
class Sensitivity:
    """The comparison shown while the open outlier flags are left out: the point estimates of the
    same data with those values kept in (S, β and γ: ``tui.loading.SENSITIVITY_QUANTITIES``)."""

    kept_in: Mapping[RowKey, float] = field(default_factory=lambda: MappingProxyType({}))

    def value(self, season: str, site: str, fitness: str, quantity: str, term: str) -> float | None:
        """The estimate with the open outliers kept in, or None where there is none."""
        return self.kept_in.get((season, site, fitness, quantity, term))

    def gradients(self, season: str, site: str, fitness: str, traits) -> dict[str, float]:
        """trait -> β with the open outliers kept in, for the traits that have one."""
        found = ((t, self.value(season, site, fitness, Q.GRADIENT, t)) for t in traits)
        return {t: v for t, v in found if v is not None}


@dataclass(frozen=True)
class Snapshot:
    """Everything the panels show, as of one store version.

    ``table`` is the tidy estimates table (columns of estimation.md), ``frame``
    the effective data it was computed from (for the pictures and the counts of
    missing fitness), ``flags`` every flag (open and resolved), ``batches`` every
    batch taken in or refused, ``heritability`` every entered h², all as the
    store's own records. ``sensitivity`` is set while the open outlier flags are
    left out (None while they are kept in); ``h2`` is the latest entered h² per
    trait as the estimators take it.
    """

    protocol: "Protocol"
    table: "pd.DataFrame"
    notes: tuple            # analysis.table.Note: season, site, fitness, quantity, message
    frame: "pd.DataFrame"
    flags: "tuple[StoredFlag, ...]"
    batches: "tuple[BatchInfo, ...]"
    heritability: "tuple[HeritabilityEntry, ...]"
    data_version: int
    refreshed_at: str
    sensitivity: Sensitivity | None = None
    intervals: bool = False        # True once the bootstrap intervals are in
    resamples: int = 0             # resamples (and permutations) behind those intervals and p-values
    generation: int = 0
    readonly: bool = False
    h2: "Mapping[str, tuple[float, float | None, str]] | None" = None

    # -- what there is ---------------------------------------------------
    @property
    def n_batches(self) -> int:
        """Batches whose rows went into the record (stored or partly stored; not refused ones)."""
        return sum(1 for b in self.batches if b.outcome in (Outcome.STORED, Outcome.PARTIAL))

    @property
    def flags_open(self) -> int:
        return sum(1 for f in self.flags if f.is_open)

    @property
    def fitness_names(self) -> tuple[str, ...]:
        return (*self.protocol.component_names, *self.protocol.totals)

    @property
    def site_col(self) -> str | None:
        return self.protocol.groups[0] if self.protocol.groups else None

    def seasons(self) -> list[str]:
        if self.table is None or self.table.empty:
            return []
        return sorted(s for s in self.table["season"].dropna().unique() if s != ALL)

    def seasons_with_selection(self) -> list[str]:
        """Seasons with a selection differential or gradient for some fitness measure (what the screens open on)."""
        if self.table is None or self.table.empty:
            return []
        t = self.table[self.table["quantity"].isin((Q.DIFFERENTIAL, Q.GRADIENT))]
        return sorted(s for s in t["season"].dropna().unique() if s != ALL)

    def seasons_recorded(self) -> list[str]:
        """Every season of the effective data, with estimates or not."""
        f = self.frame
        if f is None or f.empty or self.protocol.season_col not in f.columns:
            return []
        return sorted({str(s) for s in f[self.protocol.season_col].dropna()})

    def why_no_estimates(self, season: str, fitness: str | None) -> str:
        """One sentence: why ``season`` has no selection estimates (for ``fitness``, the measure in view)."""
        f = self.cell_frame(season, ALL)
        n = 0 if f is None else len(f)
        measure = fitness or "fitness"
        if n and fitness and self.missing_fitness(season, ALL, fitness) >= n:
            return (f"Season {season} has no estimates yet: none of its {n} individuals has {measure} recorded; "
                    "they follow once a census batch brings it.")
        return f"Season {season} has no estimates yet: too few individuals with {measure} (n lists the notes)."

    def sites(self, season: str | None = None) -> list[str]:
        """``all`` (pooled) first, then each site with estimates in that season."""
        if self.table is None or self.table.empty:
            return []
        t = self.table if season is None else self.table[self.table["season"] == season]
        names = sorted(s for s in t["site"].dropna().unique() if s != ALL)
        return [ALL, *names] if len(names) > 1 or (ALL in set(t["site"])) else names

    # -- looking up numbers ----------------------------------------------
    def rows(self, *, season=None, site=None, fitness=None, quantity=None, term=None) -> "pd.DataFrame":
        t = self.table
        for col, val in (("season", season), ("site", site), ("fitness", fitness),
                         ("quantity", quantity), ("term", term)):
            if val is not None:
                t = t[t[col] == val]
        return t

    @cached_property
    def _index(self) -> dict:
        """(season, site, fitness, quantity, term) -> the row's numbers, built once per snapshot."""
        out: dict = {}
        if self.table is None or self.table.empty:
            return out
        cols = ("season", "site", "fitness", "quantity", "term", "estimate", "se", "ci_low", "ci_high", "p_value", "n")
        for rec in zip(*(self.table[c].tolist() for c in cols)):
            key = tuple("" if v is None or v != v else v for v in rec[:5])
            out.setdefault(key, dict(zip(cols[5:], (_num(v) for v in rec[5:]))))
        return out

    @cached_property
    def _terms(self) -> dict:
        """(season, site, fitness, quantity) -> its terms in table order."""
        out: dict = {}
        for key in self._index:
            out.setdefault(key[:4], []).append(key[4])
        return out

    def value(self, season, site, fitness, quantity, term) -> dict | None:
        """One row of the table as a dict (estimate, se, ci_low, ci_high, p_value, n), or None."""
        return self._index.get((season, site, fitness, quantity, term))

    def terms(self, season, site, fitness, quantity) -> list[str]:
        return list(self._terms.get((season, site, fitness, quantity), ()))

    def cell_frame(self, season: str, site: str) -> "pd.DataFrame":
        """The effective data of one cell (all sites of the season for ``all``)."""
        f = self.frame
        if f is None or f.empty:
            return f
        f = f[f[self.protocol.season_col].astype(str) == str(season)]
        groups = list(self.protocol.groups)
        if site != ALL and groups:
            # a cell is named by its group values joined with "/" (as the estimators name it)
            key = f[groups].astype(str).agg("/".join, axis=1) if len(groups) > 1 else f[groups[0]].astype(str)
            f = f[key == str(site)]
        return f

    def missing_fitness(self, season: str, site: str, fitness: str) -> int:
        """Individuals of the cell lacking this fitness value (a total as the estimators form it); an individual
        whose earlier component is 0 (it died) has nothing to lack in a later one and is not counted."""
        f = self.cell_frame(season, site)
        if f is None or f.empty:
            return 0
        if fitness in self.protocol.totals:
            from fieldslope.analysis.fitness import add_totals
            from fieldslope.tui.bridge import design_from_protocol

            f = add_totals(f, design_from_protocol(self.protocol))
        if fitness not in f.columns:
            return len(f)
        missing = f[fitness].isna()
        for earlier in self.protocol.earlier_components(fitness):
            if earlier in f.columns:      # died before this component: nothing to count, not missing
                missing &= f[earlier] != 0
        return int(missing.sum())

    def notes_for(self, season: str, site: str, fitness: str) -> list[str]:
        """The estimators' notes about one cell (and its pooled estimate) for one fitness measure."""
        out = []
        for n in self.notes:
            if getattr(n, "season", season) == season and getattr(n, "fitness", fitness) == fitness \
                    and getattr(n, "site", site) in (site, ALL):
                out.append(getattr(n, "message", str(n)))
        return out

    @property
    def outliers_left_out(self) -> bool:
        return self.sensitivity is not None

    def entered_h2(self, trait: str) -> "HeritabilityEntry | None":
        """The latest h² entered for a trait (the one the estimators use), or None."""
        entries = [e for e in self.heritability if e.trait == trait]
        return entries[-1] if entries else None

    def with_(self, **changes: Any) -> "Snapshot":
        return replace(self, **changes)


def _num(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None

