"""Intervals of the predicted response to selection R = h^2 S (breeder's equation).

R* = h2* x S* for each bootstrap resample: S* is the resample's selection
differential (individuals resampled within cells, as for every interval), and
h2* is drawn from a normal distribution with the heritability's estimate and
standard error (a parametric bootstrap of h^2, which comes from other
individuals: parents and offspring, or an entered value; with no standard
error h^2 is taken as exact). The 95 % interval is the percentile interval
of R* (Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13);
``response_pct`` divides by the trait's mean.

``response_multi``: Delta z* = G* beta_raw* per resample (Lande 1979, Evolution 33:402-416), with
beta_raw* and the phenotypic covariance P* of the resample (the same individuals serve both, so they
are resampled jointly), h2* drawn as above for every trait (independently, kept within 0 to 1 so that
G* has real genetic standard deviations) and G*_jk = r_g,jk sqrt(h2*_j P*_jj h2*_k P*_kk); entered
genetic correlations are held fixed, assumed ones are the resample's phenotypic correlations. Its
standard error is the standard deviation of the replicates (with ``bootstrap`` 0 it has none).
"""

from __future__ import annotations

import zlib

import numpy as np

from fieldslope.analysis.resample import PHENOTYPIC_COV, percentile_interval
from fieldslope.common.names import Q

__all__ = ["heritability_draws", "response_intervals", "multi_response_replicates", "given_correlations",
           "multi_response_intervals"]


def heritability_draws(h2: float, se: float | None, size: int, rng: np.random.Generator) -> np.ndarray:
    """``size`` draws of h^2 from a normal distribution with its estimate and se (all equal to h2 when the se is
    unknown). Parameters: ``h2``, ``se``, ``size`` and a Generator. Returns the draws. Source: the parametric
    bootstrap, Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 6.
    """
    if se is None or not np.isfinite(se) or se <= 0:
        return np.full(size, float(h2))
    return h2 + se * rng.standard_normal(size)


def response_intervals(rows: list[dict], boot: dict, used_h2: dict, seed: int, season: str) -> None:
    """Fill ci_low and ci_high of a season's ``response`` and ``response_pct`` rows in place.

    Parameters: the season's rows, its bootstrap replicates, the h^2 used, the seed and the season. Returns
    nothing (rows filled). Source: Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13.
    """
    means = {(r["site"], r["fitness"], r["term"]): r["estimate"] for r in rows if r["quantity"] == Q.MEAN}
    for r in rows:
        if r["quantity"] not in (Q.RESPONSE, Q.RESPONSE_PCT) or r["term"] not in used_h2:
            continue
        S = boot.get((r["site"], r["fitness"], Q.DIFFERENTIAL, r["term"]))
        if S is None:
            continue
        h2, se = used_h2[r["term"]]
        where = zlib.crc32(f"{season}\n{r['site']}\n{r['fitness']}\n{r['term']}".encode())
        rng = np.random.default_rng(np.random.SeedSequence([seed, where, 3]))  # the same draws for R and R %
        R = heritability_draws(h2, se, len(S), rng) * S
        if r["quantity"] == Q.RESPONSE_PCT:
            mean = means.get((r["site"], r["fitness"], r["term"]))
            if not mean:
                continue
            R = 100 * R / mean
        r["ci_low"], r["ci_high"], _ = percentile_interval(R)


def multi_response_replicates(beta_raw: np.ndarray, P: np.ndarray, h2: np.ndarray, h2_se, rg_given: np.ndarray,
                              rng: np.random.Generator) -> np.ndarray:
    """Delta z* (B x p) from replicates of beta_raw (B x p) and P (B x p x p), heritabilities ``h2`` (p) with
    standard errors ``h2_se`` (None or NaN: exact), and ``rg_given`` (p x p, NaN where a genetic correlation
    is taken equal to the phenotypic one)."""
    B, p = beta_raw.shape
    draws = np.column_stack([heritability_draws(h, se, B, rng) for h, se in zip(h2, h2_se)])
    draws = np.clip(draws, 0.0, 1.0)
    var = np.diagonal(P, axis1=1, axis2=2)
    sd = np.sqrt(np.where(var > 0, var, np.nan))
    rg = np.where(np.isnan(rg_given), P / (sd[:, :, None] * sd[:, None, :]), rg_given)
    g_sd = np.sqrt(draws * var)
    G = rg * g_sd[:, :, None] * g_sd[:, None, :]
    G[:, np.arange(p), np.arange(p)] = g_sd**2
    return np.einsum("bjk,bk->bj", G, beta_raw)


def given_correlations(traits, given: dict | None) -> np.ndarray:
    """The entered genetic correlations as a matrix, NaN where none was entered (1 on the diagonal)."""
    p = len(traits)
    rg = np.full((p, p), np.nan)
    np.fill_diagonal(rg, 1.0)
    for j in range(p):
        for k in range(p):
            if j != k and given:
                val = given.get((traits[j], traits[k]), given.get((traits[k], traits[j])))
                if val is not None:
                    rg[j, k] = val
    return rg


def multi_response_intervals(rows: list[dict], boot: dict, used_h2: dict, rg_given: dict | None, traits,
                             seed: int, season: str) -> None:
    """Fill ci_low, ci_high and se of a season's ``response_multi`` rows in place: the percentile interval and
    the standard deviation of the replicates (the bootstrap standard error; Efron & Tibshirani 1993, An
    Introduction to the Bootstrap, ch. 6)."""
    blocks = {(r["site"], r["fitness"]) for r in rows if r["quantity"] == Q.RESPONSE_MULTI}
    rg = given_correlations(traits, rg_given)
    for site, fitness in sorted(blocks):
        P = boot.get((site, fitness, PHENOTYPIC_COV, ""))
        beta = [boot.get((site, fitness, Q.GRADIENT_RAW, t)) for t in traits]
        if P is None or any(b is None for b in beta):
            continue
        where = zlib.crc32(f"{season}\n{site}\n{fitness}".encode())
        rng = np.random.default_rng(np.random.SeedSequence([seed, where, 4]))
        dz = multi_response_replicates(np.column_stack(beta), P, np.array([used_h2[t][0] for t in traits]),
                                       [used_h2[t][1] for t in traits], rg, rng)
        for r in rows:
            if r["quantity"] == Q.RESPONSE_MULTI and (r["site"], r["fitness"]) == (site, fitness):
                reps = dz[:, traits.index(r["term"])]
                r["ci_low"], r["ci_high"], _ = percentile_interval(reps)
                reps = reps[np.isfinite(reps)]
                r["se"] = float(np.std(reps, ddof=1)) if len(reps) > 1 else np.nan
