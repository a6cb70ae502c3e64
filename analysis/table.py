"""The tidy estimates table: every number the tool reports, one row each, plus notes.

``estimate_table`` is the one entry point the command line and the dashboard
call. Choices within the binding conventions, stated here once:

- per-trait quantities (mean, sd, differentials) use the individuals with that
  trait and the fitness value; models with several traits use complete cases;
- the se of a differential is the OLS se of the slope of w on that trait alone
  times the trait's variance (divisor n), since S = that slope x variance;
- pooled ``mean`` and ``sd`` are over all rows of the season; the pooled
  ``gradient_raw`` divides by the sd pooled within cells;
- the se of a logistic gradient is the logistic coefficient's se times the
  same factor mean(p(1-p))/mean(W);
- ``response`` se by the delta method (h^2 and S independent); its interval from bootstrap S times
  normal draws of h^2 (``response_interval``); ``response_multi``'s from bootstrap beta_raw and P (jointly)
  with the same kind of h^2 draws;
- percentile intervals leave out resamples that cannot be estimated and are
  withheld when more than 5 % cannot (a note says so);
- permutation p-values are two-sided, (1 + #{|T*| >= |T|}) / (1 + P): fitness shuffled for
  differentials; Freedman-Lane partial tests (reduced-model residuals permuted) for gradients and
  gamma terms; canonical eigenvalues against no nonlinear selection, twice the smaller tail, and
  no percentile interval (``NO_INTERVAL``); logistic gradients a likelihood-ratio test (see ``permute``);
- generalized gradients of 0/1 and count fitness (``generalized``) sit beside the OLS rows: a
  likelihood-ratio p-value for gradient_glm, the inverted percentile interval for the gamma terms;
  they come with the bootstrap (not on the fast path, bootstrap=0: their count models take a while).

Columns are exactly ``COLUMNS``; quantities follow the binding estimation
conventions (relative fitness within cells, traits standardized with sd of
divisor n - 1, classical OLS standard errors, percentile bootstrap intervals
and permutation p-values with a fixed default seed).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from fieldslope.analysis.canonical_interval import loading_intervals
from fieldslope.analysis.cells import measured_traits, prepare, split_cells
from fieldslope.analysis.derived import heritabilities, response_rows, temporal_rows
from fieldslope.analysis.design import Design
from fieldslope.common.errors import EstimationError
from fieldslope.analysis.fitness import add_totals, total_kind
from fieldslope.analysis.generalized import fill_bootstrap_p, glm_block
from fieldslope.analysis.permute import SeasonPermuter, permute_season
from fieldslope.analysis.point import point_block
from fieldslope.analysis.progress import Progress, ProgressCallback
from fieldslope.analysis.resample import SeasonResampler, bootstrap_season, percentile_interval
from fieldslope.analysis.response_agreement import disagreements
from fieldslope.analysis.response_interval import multi_response_intervals, response_intervals
from fieldslope.common.names import ALL, Q

__all__ = ["COLUMNS", "DEFAULT_SEED", "NO_INTERVAL", "BLAS_THREADS", "Note", "Estimates", "estimate_table",
           "check_frame"]

if TYPE_CHECKING:  # pragma: no cover
    from fieldslope.analysis.genetics import Genetics

COLUMNS = ["season", "site", "fitness", "quantity", "term", "estimate", "se", "ci_low", "ci_high", "p_value", "n"]
# the default random seed for bootstrap resamples and permutations (same seed, same numbers)
DEFAULT_SEED = 20260601
# quantities without a percentile interval: that of an ordered eigenvalue is biased away from zero
# (the largest upward, the smallest downward); they are tested against no nonlinear selection instead
NO_INTERVAL = {Q.CANONICAL}
# BLAS threads while resampling (measured faster than several on a shared two-core machine)
BLAS_THREADS = 1


@dataclass(frozen=True)
class Note:
    """One sentence about a cell or quantity without an estimate, or an assumption made."""

    season: str
    site: str
    fitness: str
    quantity: str
    message: str


@dataclass(frozen=True)
class Estimates:
    """What ``estimate_table`` returns: the tidy ``table`` (columns ``COLUMNS``) and its ``notes``."""

    table: pd.DataFrame
    notes: tuple[Note, ...]

    def to_csv_text(self) -> str:
        """The table as CSV text with the binding header (no file is written)."""
        return self.table.to_csv(index=False, lineterminator="\n")

    def to_json_obj(self) -> list[dict]:
        """The table as a list of plain dicts; missing numbers are None."""
        out = []
        for rec in self.table.to_dict(orient="records"):
            clean = {}
            for k, v in rec.items():
                if v is pd.NA or (isinstance(v, float) and math.isnan(v)):
                    v = None
                elif isinstance(v, (np.integer,)):
                    v = int(v)
                elif isinstance(v, (np.floating,)):
                    v = float(v)
                clean[k] = v
            out.append(clean)
        return out


def check_frame(frame: pd.DataFrame, design: Design, fitness_names: list[str]) -> None:
    """Raise ``EstimationError`` (one sentence) when ``frame`` lacks a column ``design`` names or a fitness name
    is unknown. Parameters: effective data, ``design`` and the fitness measures asked for. Source: none
    (bookkeeping, no published method).
    """
    needed = [design.id, design.season, *design.groups, *design.traits, *design.fitness]
    missing = [c for c in needed if c not in frame.columns]
    if missing:
        raise EstimationError(
            f"The data lack the column(s) {', '.join(missing)} named in the protocol; "
            "add them to the batch files or correct the protocol."
        )
    unknown = [f for f in fitness_names if f not in design.fitness_names]
    if unknown:
        raise EstimationError(
            f"Unknown fitness measure(s) {', '.join(unknown)}; choose from {', '.join(design.fitness_names)}."
        )
    for name, parts in design.totals.items():
        absent = [p for p in parts if p not in frame.columns]
        if absent:
            raise EstimationError(f"The total {name} needs the column(s) {', '.join(absent)}, which the data lack.")


def row_dicts(season: str, site: str, fitness: str, rows) -> list[dict]:
    """Table rows (dicts with the binding columns) of a block's estimates; intervals filled later."""
    return [dict(season=season, site=site, fitness=fitness, quantity=r.quantity, term=r.term, estimate=r.estimate,
                 se=r.se, ci_low=np.nan, ci_high=np.nan, p_value=r.p, n=r.n) for r in rows]


def attach_uncertainty(season, season_rows, preps_by_f, traits, pooled, B, P, seed, tick, used_h2=None,
                       glm_specs=None, genetic_correlations=None, fitness=None, sites=None) -> list[Note]:
    """Fill ci_low, ci_high (bootstrap) and p_value (permutation; bootstrap for the generalized gamma
    rows, ``generalized.bootstrap_p``) of a season's rows in place.

    ``preps_by_f`` holds every fitness measure (the permutations are drawn for all of them); only the
    measures in ``fitness`` and the sites in ``sites`` (default all; ALL = pooled) are worked out."""
    notes: list[Note] = []
    logistic = {(r["site"], r["fitness"]) for r in season_rows if r["quantity"] == Q.GRADIENT_LOGISTIC}
    boot: dict = {}
    perm: dict = {}
    if B > 0:
        first = next(iter(preps_by_f.values()))
        cells = None if sites is None or ALL in sites else {c for c, pr in enumerate(first) if pr.cell.site in sites}
        resampler = SeasonResampler({f: p for f, p in preps_by_f.items() if fitness is None or f in fitness}, traits,
                                    pooled and cells is None, logistic, glm_specs, cells)
        boot = bootstrap_season(resampler, season, B, seed, lambda k: tick(k, f"bootstrap, season {season}"))
    if P > 0:
        permuter = SeasonPermuter(preps_by_f, traits, pooled, fitness, sites)
        perm = permute_season(permuter, season, P, seed, lambda k: tick(k, f"permutations, season {season}"))
    failed: dict[tuple, dict] = {}  # (site, fitness) -> {"worst": resamples, "none": [rows without interval]}
    for r in season_rows:
        key = (r["site"], r["fitness"], r["quantity"], r["term"])
        if key in boot and r["quantity"] not in NO_INTERVAL:
            lo, hi, bad = percentile_interval(boot[key])
            r["ci_low"], r["ci_high"] = lo, hi
            if bad:
                f = failed.setdefault((r["site"], r["fitness"]), {"worst": 0, "none": []})
                f["worst"] = max(f["worst"], bad)
                if np.isnan(lo):
                    f["none"].append(f"{r['quantity']} {r['term']}".strip())
        if key in perm:
            r["p_value"] = perm[key]
    if boot:
        fill_bootstrap_p(season_rows, boot)
        loading_intervals(season_rows, boot, traits)
    if boot and used_h2:
        response_intervals(season_rows, boot, used_h2, seed, season)
        multi_response_intervals(season_rows, boot, used_h2, genetic_correlations, list(traits), seed, season)
    for (site, fitness), f in failed.items():
        msg = (f"Up to {f['worst']} of {B} resamples could not be estimated in season {season}, site {site} "
               "(a trait constant, mean fitness 0 or separation in the resample) and were left out of the intervals")
        if f["none"]:
            msg += f"; too many for an interval of {', '.join(f['none'])}"
        notes.append(Note(season, site, fitness, "", msg + "."))
    return notes


def estimate_table(
    frame: pd.DataFrame,
    design: Design,
    *,
    bootstrap: int = 2000,
    seed: int = DEFAULT_SEED,
    permutations: int | None = None,
    progress: ProgressCallback | None = None,
    h2: dict[str, tuple[float, float | None, str]] | None = None,
    genetic_correlations: dict[tuple[str, str], float] | None = None,
    fitness: Sequence[str] | None = None,
    genetics: "Genetics | None" = None,
    random_effects: str = "dl",
    only_seasons: Sequence[str] | None = None,
    only_sites: Sequence[str] | None = None,
    generalized: bool = True,
) -> Estimates:
    """All estimates for the effective data ``frame`` under ``design``.

    ``bootstrap`` resamples (0 = point estimates and OLS standard errors only,
    the fast path for live panels) and ``permutations`` (default: as many as
    resamples) drive the intervals and p-values; ``seed`` (default
    ``DEFAULT_SEED`` = 20260601) makes them reproducible. ``h2`` holds entered
    heritabilities per trait as (value, se or None, source); estimated ones
    from parent-offspring data take precedence. ``genetic_correlations`` maps
    trait pairs to r_g (default: the phenotypic correlations, said in a note).
    ``fitness`` picks the fitness measures (default all, totals included);
    ``only_seasons`` the seasons to estimate (default all; heritability still
    uses every season's records, and across-season rows need two or more); ``only_sites`` the sites
    (ALL for the pooled rows; default all). These three restrict the work, not just the rows: the random
    draws are those of the whole table, so the rows asked for have the whole table's numbers.
    ``generalized=False`` leaves out the generalized (fitness-function model) gradients and their
    resampling, for callers that show only the OLS rows; the other rows keep their numbers.
    ``progress(done, total, label)`` is called during resampling. ``genetics``
    (from ``analysis.genetics.pedigree_estimates``, fitted separately because it
    is slow) adds the animal-model rows; its heritabilities and genetic
    correlations then give the responses and the G of Delta z = G beta.
    ``random_effects`` picks the interval of the mean gradient across seasons when tau^2 > 0: "dl" (DerSimonian-Laird, normal) or "hk" (Hartung-Knapp).

    Returns ``Estimates`` (the tidy table with columns ``COLUMNS``, and notes); raises
    ``EstimationError`` (one sentence) when the data lack a column the design names. Methods:
    Lande & Arnold 1983 (Evolution 37:1210-1226) for differentials and gradients on relative fitness
    and standardized traits; percentile bootstrap intervals (Efron & Tibshirani 1993, An Introduction to
    the Bootstrap, ch. 13); permutation p-values (Freedman & Lane 1983, J. Bus. Econ. Stat. 1:292-298);
    the others as their modules say.
    """
    fitness_names = list(fitness) if fitness is not None else list(design.fitness_names)
    check_frame(frame, design, fitness_names)
    wanted_f = None if fitness is None else set(fitness_names)
    wanted_sites = None if only_sites is None else set(only_sites)
    permutations = bootstrap if permutations is None else permutations
    # many small matrix products: one BLAS thread is faster and leaves a core for the dashboard
    with np.errstate(all="ignore"), threadpool_limits(limits=BLAS_THREADS, user_api="blas"):
        data = add_totals(frame, design)
        seasons = split_cells(data, design, list(design.fitness_names))
        if only_seasons is not None:  # work only for what was asked
            seasons = {k: v for k, v in seasons.items() if k in set(only_seasons)}
        h_rows, h_notes, used_h2 = heritabilities(data, design, h2)
        if genetics is not None:
            from fieldslope.analysis.genetics import use_pedigree  # its module loads scipy: only when given

            h_notes += genetics.notes + use_pedigree(genetics, used_h2, design.traits)
            genetic_correlations = {**genetics.rg, **(genetic_correlations or {})}
        run = Run(design, fitness_names, bootstrap, permutations, seed, used_h2, genetic_correlations,
                  Progress(len(seasons) * (bootstrap + permutations), progress), wanted_f, wanted_sites,
                  generalized)
        rows: list[dict] = []
        notes: list[Note] = [Note(*n) for n in h_notes]
        rg_assumed = False
        for season, cells in seasons.items():
            assumed = season_estimates(run, season, cells, rows, notes)
            rg_assumed |= assumed
        if len(seasons) > 1:
            t_rows, t_notes = temporal_rows(rows, list(seasons), random_effects)
            rows.extend(t_rows)
            notes.extend(Note(*n) for n in t_notes)
        rows.extend(h_rows)
        if genetics is not None:
            rows.extend(genetics.rows)
        if rg_assumed:
            notes.append(Note(ALL, ALL, "", Q.RESPONSE_MULTI,
                              "Genetic correlations not entered are taken equal to the phenotypic correlations of each cell."))
    table = pd.DataFrame(rows, columns=COLUMNS)
    table["n"] = table["n"].astype("Int64")
    if genetics is not None:  # the three predictions of the response, side by side: say where they disagree
        notes.extend(Note(ALL, ALL, d.fitness, Q.RESPONSE_PRICE, d.sentence())
                     for d in disagreements(table, genetics.rows, genetics.h2))
    return Estimates(table=table, notes=tuple(notes))


@dataclass(frozen=True)
class Run:
    """What one ``estimate_table`` call asks for, handed to the per-season steps."""

    design: Design
    fitness_names: list[str]
    bootstrap: int
    permutations: int
    seed: int
    used_h2: dict  # trait -> (h2, se or None), as the responses use it
    genetic_correlations: dict | None
    ticker: Progress
    wanted_fitness: set[str] | None = None  # asked for a subset of the measures (else None: all)
    wanted_sites: set[str] | None = None    # asked for some sites (ALL: the pooled rows), else None
    generalized: bool = True                # the generalized gradients too (fitted models, resampled)


def season_estimates(run: Run, season: str, cells: list, rows: list[dict], notes: list[Note]) -> bool:
    """One season's rows (every cell, the pooled block, responses, intervals and p-values) and notes, appended
    to ``rows`` and ``notes``; True if phenotypic correlations stood in for genetic ones."""
    traits, cells, lacking = measured_traits(run.design.traits, cells)
    if lacking:
        notes.append(Note(season, ALL, "", "", f"Season {season} has no values of {', '.join(lacking)}, so its "
                          + (f"estimates use the traits it measured ({', '.join(traits)})." if traits else "traits have no estimates.")))
    if not traits:
        run.ticker.tick(run.bootstrap + run.permutations, f"season {season}")
        return False
    season_rows, preps_by_f, pooled = [], {}, not (len(cells) == 1 and cells[0].site == ALL)
    rg_assumed = False
    glm_specs: dict = {}  # (site, fitness) -> the generalized gradients' fitted models
    for f in run.design.fitness_names:        # every measure: the permutations are drawn for all
        preps_by_f[f] = [prepare(c, f, total_kind(run.design, f), traits) for c in cells]
        if f in run.fitness_names:
            rg_assumed |= fitness_estimates(run, season, traits, f, preps_by_f[f], pooled, season_rows, notes,
                                            glm_specs)
    if run.bootstrap > 0 or run.permutations > 0:
        notes.extend(attach_uncertainty(season, season_rows, preps_by_f, traits, pooled, run.bootstrap,
                                        run.permutations, run.seed, run.ticker.tick, run.used_h2, glm_specs,
                                        run.genetic_correlations, run.wanted_fitness, run.wanted_sites))
    rows.extend(season_rows)
    return rg_assumed


def fitness_estimates(run: Run, season: str, traits, f: str, preps: list, pooled: bool, season_rows: list[dict],
                      notes: list[Note], glm_specs: dict) -> bool:
    """Point estimates and responses of one fitness measure in each cell of a season and pooled over them
    (the generalized gradients' fitted models into ``glm_specs``); True if phenotypic correlations stood in
    for genetic ones."""
    for pr in preps:
        notes.extend(Note(season, pr.cell.site, f, q, m) for q, m in pr.notes)
    units = [(pr.cell.site, [pr]) for pr in preps]
    if pooled:
        units.append((ALL, preps))
    left_out = [pr.cell.site for pr in preps if pr.multi is None]
    if pooled and left_out and len(left_out) < len(preps):
        notes.append(Note(season, ALL, f, Q.GRADIENT,
                          f"Pooled gradients of season {season} for {f} leave out site(s) {', '.join(left_out)} "
                          "(see their notes)."))
    rg_assumed = False
    for site, block in units:
        if run.wanted_sites is not None and site not in run.wanted_sites:
            continue
        where = f"in season {season}, site {site}"
        res = point_block(block, traits, where, tests=run.permutations > 0)
        notes.extend(Note(season, site, f, q, m) for q, m in res.notes)
        season_rows.extend(row_dicts(season, site, f, res.rows))
        if run.bootstrap > 0 and run.generalized:  # the fast path (bootstrap=0) keeps to OLS and the logistic gradient
            gen = glm_block(block, traits, where, tests=run.permutations > 0)
            notes.extend(Note(season, site, f, q, m) for q, m in gen.notes)
            season_rows.extend(row_dicts(season, site, f, gen.rows))
            if gen.spec is not None:
                glm_specs[(site, f)] = gen.spec
        extra, assumed = response_rows(season, site, f, res, traits, run.used_h2, run.genetic_correlations)
        season_rows.extend(extra)
        rg_assumed |= assumed
    return rg_assumed
