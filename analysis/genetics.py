"""Quantitative genetics from the whole pedigree: the rows the animal model adds to the estimates table.

Per trait (univariate animal model): ``heritability_pedigree`` (h^2 with its
REML standard error and profile-likelihood 95 % interval) and
``additive_variance`` (V_A, trait units squared). Per pair of traits
(bivariate): ``genetic_correlation`` (term ``a:b``). Per trait and fitness
measure (bivariate with relative fitness, relative within its cell):
``response_price``, the additive genetic covariance of the trait with relative
fitness, which is the expected change of the mean per generation by the
Robertson-Price identity (Robertson 1966, Anim. Prod. 8:95-108; Price 1970,
Nature 227:520-521; Morrissey, Kruuk & Wilson 2010, J. Evol. Biol.
23:2277-2288). All rows have season ``all`` and site ``all``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from fieldslope.analysis.animal_data import model_data, relative_fitness
from fieldslope.analysis.animal_model import H_MAX, Kernel, Surface, fit_bivariate, fit_univariate
from fieldslope.analysis.derived import row
from fieldslope.analysis.design import Design
from fieldslope.analysis.fitness import add_totals
from fieldslope.analysis.pedigree import Pedigree, from_frame, summarize
from fieldslope.analysis.progress import Progress, ProgressCallback
from fieldslope.analysis.tails import Z975
from fieldslope.common.errors import PedigreeError
from fieldslope.common.names import ALL, Q

__all__ = ["Genetics", "pedigree_estimates", "use_pedigree", "related"]

MIN_RECORDS = 10  # records for an animal model (beyond the cell means)


@dataclass(frozen=True)
class Genetics:
    """The animal model's rows and notes, and the h^2 (with se) and r_g the responses then use."""

    rows: list[dict]
    notes: list[tuple[str, str, str, str, str]]  # (season, site, fitness, quantity, sentence)
    h2: dict[str, tuple[float, float]] = field(default_factory=dict)  # trait -> (h2, se)
    rg: dict[tuple[str, str], float] = field(default_factory=dict)
    summary: str = ""


def _row(fitness, quantity, term, estimate, se=math.nan, low=math.nan, high=math.nan, n=None) -> dict:
    """A table row of season and site ``all`` with its interval."""
    return row(ALL, ALL, fitness, quantity, term, estimate, se, n=n) | dict(ci_low=float(low), ci_high=float(high))


def related(ped: Pedigree, data) -> bool:
    """True if two measured individuals are related: one is the other's parent, or they share a parent.

    Parameters: the pedigree and the model data. Source: additive variance is told apart only among relatives,
    Kruuk 2004 (Phil. Trans. R. Soc. B 359:873-890).
    """
    measured = np.zeros(ped.n, dtype=bool)
    measured[data.Z.nonzero()[1]] = True
    for par in (ped.dam, ped.sire):
        kids = measured & (par >= 0)
        if (measured[par[kids]]).any():
            return True
        counts = np.bincount(par[kids], minlength=ped.n)
        if (counts >= 2).any():
            return True
    return False


def pedigree_estimates(frame: pd.DataFrame, design: Design, fitness_names=None,
                       progress: ProgressCallback | None = None) -> Genetics:
    """All pedigree rows for ``frame`` (effective data, every season); notes say what is missing and why.

    Parameters: ``frame`` and ``design`` as for ``estimate_table``; ``fitness_names`` (default all, totals
    included) for the Robertson-Price rows; ``progress(done, total, label)`` after each model. Returns a
    ``Genetics``: rows (``heritability_pedigree``, ``additive_variance``, ``genetic_correlation``,
    ``response_price``), notes, and the h^2 and r_g the responses then use. Methods: the animal model by
    REML (Henderson 1984, Applications of Linear Models in Animal Breeding; Kruuk 2004, Phil. Trans. R. Soc.
    B 359:873-890) and the Robertson-Price identity (Robertson 1966, Anim. Prod. 8:95-108; Price 1970, Nature
    227:520-521; Morrissey, Kruuk & Wilson 2010, J. Evol. Biol. 23:2277-2288).
    """
    if design.mother is None and design.father is None:
        return Genetics([], [(ALL, ALL, "", Q.HERITABILITY_PEDIGREE, "The protocol names no parent columns, so there is no pedigree.")])
    try:
        ped = from_frame(frame, design.id, design.season, design.mother, design.father)
    except PedigreeError as err:
        return Genetics([], [(ALL, ALL, "", Q.HERITABILITY_PEDIGREE, f"No animal model: {err}")])
    summary = summarize(ped).describe()
    notes: list[tuple] = [(ALL, ALL, "", Q.HERITABILITY_PEDIGREE, summary)]
    notes.extend((ALL, ALL, "", Q.HERITABILITY_PEDIGREE, p) for p in ped.problems)
    data = add_totals(frame, design)
    fitness_names = list(design.fitness_names if fitness_names is None else fitness_names)
    traits = list(design.traits)
    values = data[traits].apply(pd.to_numeric, errors="coerce").astype(float)
    ticker = Progress(len(traits) + 1 + len(fitness_names), progress)
    rows: list[dict] = []
    h2 = heritability_rows(data, design, ped, values, ticker, rows, notes)
    rg = correlation_rows(data, design, ped, values, ticker, rows, notes)
    price_rows(data, design, ped, values, fitness_names, ticker, rows, notes)
    return Genetics(rows, notes, h2, rg, summary)


def heritability_rows(data, design: Design, ped: Pedigree, values: pd.DataFrame, ticker: Progress,
                      rows: list[dict], notes: list[tuple]) -> dict[str, tuple[float, float]]:
    """Univariate animal models: h^2 (REML se, profile-likelihood interval) and V_A of each trait into
    ``rows``; returns trait -> (h^2, se)."""
    h2: dict = {}
    later_total = 0
    for t in values.columns:
        md, later = model_data(data, design, ped, values[[t]])
        later_total = max(later_total, later)
        ticker.tick(1, f"animal model, {t}")
        why = _unusable(ped, md)
        if why:
            notes.append((ALL, ALL, "", Q.HERITABILITY_PEDIGREE, f"No pedigree heritability of {t}: {why}."))
            continue
        fit = fit_univariate(Kernel(md))
        rows.append(_row("", Q.HERITABILITY_PEDIGREE, t, fit.h2, fit.h2_se, fit.h2_low, fit.h2_high, fit.n))
        rows.append(_row("", Q.ADDITIVE_VARIANCE, t, fit.va, fit.va_se, n=fit.n))
        h2[t] = (fit.h2, fit.h2_se)
        if fit.h2_high >= H_MAX or fit.h2_low <= 0.0:
            notes.append((ALL, ALL, "", Q.HERITABILITY_PEDIGREE,
                          f"The likelihood interval of the heritability of {t} reaches the end of the range searched "
                          f"({'0' if fit.h2_low <= 0 else f'{H_MAX:g}'})."))
    if later_total:
        notes.append((ALL, ALL, "", Q.HERITABILITY_PEDIGREE,
                      "Individuals measured in several seasons enter the animal model with their earliest record "
                      "(the model has no permanent-environment effect)."))
    return h2


def correlation_rows(data, design: Design, ped: Pedigree, values: pd.DataFrame, ticker: Progress,
                     rows: list[dict], notes: list[tuple]) -> dict[tuple[str, str], float]:
    """Bivariate animal models: the genetic correlation of each pair of traits into ``rows``; returns them."""
    traits = list(values.columns)
    rg: dict = {}
    if len(traits) < 2:
        ticker.tick(1, "")
        return rg
    md, _ = model_data(data, design, ped, values[traits])
    ticker.tick(1, "animal model, genetic correlations")
    why = _unusable(ped, md)
    if why:
        notes.append((ALL, ALL, "", Q.GENETIC_CORRELATION, f"No genetic correlations: {why}."))
        return rg
    surface = Surface(Kernel(md))
    for j in range(len(traits)):
        for k in range(j + 1, len(traits)):
            fit = fit_bivariate(surface, (j, k))
            term = f"{traits[j]}:{traits[k]}"
            rows.append(_row("", Q.GENETIC_CORRELATION, term, fit.rg, fit.rg_se, fit.rg_low, fit.rg_high, fit.n))
            rg[(traits[j], traits[k])] = fit.rg
    notes.append((ALL, ALL, "", Q.GENETIC_CORRELATION,
                  "Genetic correlations come from bivariate animal models on the individuals with every trait; "
                  "their intervals are Wald intervals on the atanh scale."))
    return rg


def price_rows(data, design: Design, ped: Pedigree, values: pd.DataFrame, fitness_names: list[str],
               ticker: Progress, rows: list[dict], notes: list[tuple]) -> None:
    """Robertson-Price responses: the additive genetic covariance of each trait with relative fitness, from
    bivariate animal models, with a normal 95 % interval, into ``rows``."""
    traits = list(values.columns)
    for f in fitness_names:
        w = relative_fitness(data, design, f).rename("__w")
        md, _ = model_data(data, design, ped, pd.concat([values[traits], w], axis=1))
        ticker.tick(1, f"animal model, {f}")
        why = _unusable(ped, md)
        if why:
            notes.append((ALL, ALL, f, Q.RESPONSE_PRICE, f"No Robertson-Price response for {f}: {why}."))
            continue
        surface = Surface(Kernel(md))
        for j, t in enumerate(traits):
            fit = fit_bivariate(surface, (j, len(traits)))
            half = Z975 * fit.cov_a_se
            rows.append(_row(f, Q.RESPONSE_PRICE, t, fit.cov_a, fit.cov_a_se, fit.cov_a - half, fit.cov_a + half, fit.n))
    if any(r["quantity"] == Q.RESPONSE_PRICE for r in rows):
        notes.append((ALL, ALL, "", Q.RESPONSE_PRICE,
                      "Robertson-Price responses are additive genetic covariances of each trait with relative fitness "
                      "(relative within its season and site) per generation, from bivariate animal models on the "
                      "individuals with every trait and that fitness; intervals are estimate +- 1.96 se."))


def _unusable(ped: Pedigree, md) -> str:
    n, p = md.X.shape
    if n - p < MIN_RECORDS:
        return f"only {n} individuals have the values needed, in {p} season-site cells"
    if not related(ped, md):
        return ("no two measured individuals are related in the pedigree (parent and offspring, or sharing a parent), "
                "so additive genetic variance cannot be told apart from the rest")
    return ""


def use_pedigree(genetics: Genetics, used_h2: dict, traits) -> list[tuple]:
    """Put the pedigree heritabilities into ``used_h2`` (they take precedence) and say which G the responses use.

    Parameters: the ``Genetics``, the h^2 used (changed in place) and the traits. Returns notes. Source: Delta
    z = G beta, Lande 1979 (Evolution 33:402-416).
    """
    notes = []
    for t, value in genetics.h2.items():
        used_h2[t] = value
    if genetics.h2:
        notes.append((ALL, ALL, "", Q.RESPONSE,
                      f"Responses of {', '.join(genetics.h2)} use the pedigree heritability (animal model)."))
    pairs = len(traits) * (len(traits) - 1) // 2
    if pairs and len(genetics.rg) == pairs and all(t in genetics.h2 for t in traits):
        notes.append((ALL, ALL, "", Q.RESPONSE_MULTI,
                      "Δz̄ = Gβ uses G from the animal model: pedigree heritabilities and genetic correlations."))
    elif genetics.rg:
        notes.append((ALL, ALL, "", Q.RESPONSE_MULTI,
                      "Δz̄ = Gβ uses the pedigree genetic correlations where they were estimated."))
    return notes
