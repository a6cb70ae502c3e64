"""Rows derived from other estimates: heritability, responses to selection, selection across seasons."""

from __future__ import annotations

import numpy as np
import pandas as pd

from fieldslope.analysis.design import Design
from fieldslope.analysis.heritability import code_pedigree, parent_offspring
from fieldslope.analysis.point import BlockResult
from fieldslope.analysis.response import breeders_response, genetic_covariance, multivariate_response, response_se
from fieldslope.analysis.seasons import combine, sign_changes, significant_sign_changes
from fieldslope.common.names import ALL, Q

__all__ = ["row", "heritabilities", "response_rows", "temporal_rows"]


def row(season, site, fitness, quantity, term, estimate, se=np.nan, p=np.nan, n=None) -> dict:
    """A table row as a dict with the binding columns (intervals NaN). Parameters: the key columns, the estimate,
    and optionally se, p and n. Source: none (bookkeeping, no published method).
    """
    return dict(season=season, site=site, fitness=fitness, quantity=quantity, term=term, estimate=float(estimate),
                se=float(se), ci_low=np.nan, ci_high=np.nan, p_value=float(p), n=n)


def heritabilities(data: pd.DataFrame, design: Design, entered: dict | None):
    """(rows, notes, used) where used maps trait -> (h2, se or None) for the responses.

    Parameters: effective data, ``design`` and the entered h^2 (trait -> (value, se, source)). Source: parent-
    offspring regression, Falconer & Mackay 1996, Introduction to Quantitative Genetics, 4th ed., ch. 10.
    """
    rows, notes, used = [], [], {}
    entered = entered or {}
    pedigree = code_pedigree(data, design) if design.mother is not None or design.father is not None else None
    for trait in design.traits:
        fit, why = parent_offspring(data, design, trait, pedigree)
        if fit is not None:
            rows.append(row(ALL, ALL, "", Q.HERITABILITY, trait, fit.estimate, fit.se, n=fit.n_families))
            notes.append((ALL, ALL, "", Q.HERITABILITY, fit.describe()))
            used[trait] = (fit.estimate, fit.se)
            if not 0 <= fit.estimate <= 1:
                notes.append((ALL, ALL, "", Q.HERITABILITY,
                              f"The estimated heritability of {trait} ({fit.estimate:.3g}) lies outside 0 to 1; "
                              "its responses use it as it is, and no multivariate response is given."))
            continue
        if trait in entered:
            value, se, source = entered[trait]
            used[trait] = (float(value), None if se is None else float(se))
            exact = "" if se is not None else "; with no standard error entered, response standard errors treat it as exact"
            notes.append((ALL, ALL, "", Q.RESPONSE,
                          f"Responses of {trait} use the entered heritability {value:g} ({source}), "
                          f"as it cannot be estimated here: {why}{exact}."))
        else:
            notes.append((ALL, ALL, "", Q.RESPONSE,
                          f"No heritability for {trait} ({why}); enter one to get its response to selection."))
    return rows, notes, used


def correlation_matrix(traits, P: np.ndarray, given: dict | None) -> tuple[np.ndarray, bool]:
    """Genetic correlations: given pairs, the rest taken equal to the phenotypic ones (True if any was)."""
    sd = np.sqrt(np.diag(P))
    rg = P / np.outer(sd, sd)
    assumed = False
    for j in range(len(traits)):
        for k in range(j + 1, len(traits)):
            val = None
            if given:
                val = given.get((traits[j], traits[k]), given.get((traits[k], traits[j])))
            if val is None:
                assumed = True
            else:
                rg[j, k] = rg[k, j] = val
    return rg, assumed


def response_rows(season, site, fitness, res: BlockResult, traits, used: dict, rg_given) -> tuple[list, bool]:
    """response, response_pct and response_multi rows of one block; True if phenotypic r were assumed for r_g.

    Parameters: the block's key, its ``BlockResult``, the traits, the h^2 used and the given r_g. Returns
    (rows, assumed). Source: the breeder's equation R = h^2 S (Falconer & Mackay 1996, Introduction to
    Quantitative Genetics, 4th ed., ch. 11); Delta z = G beta, Lande 1979 (Evolution 33:402-416).
    """
    found = {(r.quantity, r.term): r for r in res.rows}
    out = []
    for name in traits:
        S, mean = found.get((Q.DIFFERENTIAL, name)), found.get((Q.MEAN, name))
        if name not in used or S is None:
            continue
        h2, h2_se = used[name]
        R = breeders_response(h2, S.estimate)
        se = response_se(h2, h2_se, S.estimate, S.se)
        out.append(row(season, site, fitness, Q.RESPONSE, name, R, se, n=S.n))
        if mean is not None and mean.estimate != 0:
            out.append(row(season, site, fitness, Q.RESPONSE_PCT, name, 100 * R / mean.estimate,
                           100 * se / abs(mean.estimate), n=S.n))
    assumed = False
    if res.P is not None and all(t in used and 0 <= used[t][0] <= 1 for t in traits):
        rg, assumed = correlation_matrix(traits, res.P, rg_given)
        G = genetic_covariance(res.P, np.array([used[t][0] for t in traits]), rg)
        dz = multivariate_response(G, res.beta_raw)
        out.extend(row(season, site, fitness, Q.RESPONSE_MULTI, t, dz[j], n=res.n_multi) for j, t in enumerate(traits))
    return out, assumed


def temporal_rows(table_rows: list[dict], season_order: list[str], method: str = "dl") -> tuple[list[dict], list[tuple]]:
    """Across-season rows per site, fitness and trait from the seasons' gradients (``method``: the
    random-effects interval, "dl" DerSimonian-Laird or "hk" Hartung-Knapp; see ``seasons.combine``).

    Parameters: the seasons' rows, the seasons in order and the method. Returns (rows, notes). Source: Cochran
    1954 (Biometrics 10:101-129); DerSimonian & Laird 1986 (Controlled Clinical Trials 7:177-188); Hartung &
    Knapp 2001 (Stat. Med. 20:3875-3889); sign changes as counted by Siepielski, DiBattista & Carlson 2009
    (Ecol. Lett. 12:1261-1276).
    """
    rows, notes = [], []
    rank = {s: i for i, s in enumerate(season_order)}
    series: dict[tuple, list] = {}
    for r in table_rows:
        if r["quantity"] == Q.GRADIENT and r["season"] in rank and np.isfinite(r["estimate"]) and r["se"] > 0:
            series.setdefault((r["site"], r["fitness"], r["term"]), []).append(r)
    for (site, fitness, term), rs in series.items():
        rs = sorted(rs, key=lambda r: rank[r["season"]])
        if len(rs) < 2:
            notes.append((ALL, site, fitness, Q.GRADIENT_MEAN,
                          f"Gradients of {term} at site {site} exist for one season only, so nothing is combined across seasons."))
            continue
        b = np.array([r["estimate"] for r in rs])
        c = combine(b, np.array([r["se"] for r in rs]), method)
        n = int(sum(r["n"] for r in rs))
        lo, hi = c.interval
        rows.append(row(ALL, site, fitness, Q.GRADIENT_MEAN, term, c.mean, c.se, n=n) | dict(ci_low=lo, ci_high=hi))
        rows.append(row(ALL, site, fitness, Q.GRADIENT_MEAN_RE, term, c.mean_re, c.se_re, p=c.p_re, n=n)
                    | dict(ci_low=c.ci_re[0], ci_high=c.ci_re[1]))
        rows.append(row(ALL, site, fitness, Q.GRADIENT_TAU2, term, c.tau2, n=n))
        rows.append(row(ALL, site, fitness, Q.GRADIENT_Q, term, c.q, p=c.q_p, n=n))
        rows.append(row(ALL, site, fitness, Q.SIGN_CHANGES, term, sign_changes(b), n=n))
        lows, highs = [r["ci_low"] for r in rs], [r["ci_high"] for r in rs]
        if np.all(np.isfinite(lows)) and np.all(np.isfinite(highs)):
            rows.append(row(ALL, site, fitness, Q.SIGN_CHANGES_SIGNIFICANT, term, significant_sign_changes(lows, highs), n=n))
    return rows, notes
