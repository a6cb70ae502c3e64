"""Generalized selection gradients from a model of the fitness function (Morrissey & Sakrejda 2013,
Evolution 67:2094-2100).

Expected fitness is modelled with the distribution that suits the fitness measure: logistic
regression for 0/1 fitness, Poisson or negative binomial regression (log link) for counts, the
negative binomial when the counts are overdispersed (``glm.choose_count_family``). With W(x) = h(eta(x))
the fitted expected fitness of an individual with standardized traits x, and W-bar the mean of W(x)
over the individuals,

- ``gradient_glm``: beta_j = mean_i dW(x_i)/dx_j / W-bar, from the model with linear terms only
  (eta = a + b'x, as the OLS gradient comes from the linear model), so beta_j = b_j mean h'(eta) / W-bar:
  for logistic regression Janzen & Stern's b_j mean(p(1-p)) / mean(W) (1998, Evolution 52:1564-1571),
  for a Poisson fit with an intercept exactly b_j;
- ``quadratic_glm`` and ``correlational_glm``: gamma_jk = mean_i d2W(x_i)/dx_j dx_k / W-bar, from
  the model with eta = a + b'x + x'G x / 2 (G from the coefficients of x_j^2 / 2 and x_j x_k, as in the
  OLS quadratic model), where d2W/dx_j dx_k = h''(eta) eta_j eta_k + h'(eta) G_jk and eta_j = b_j + (G x)_j.

A season's pooled block fits one model to all its cells' rows (traits standardized within cells,
absolute fitness, one intercept), as for the pooled logistic gradient. Standard errors by the delta
method from the fit's inverse information; p-values of ``gradient_glm`` from the likelihood-ratio test
of b_j = 0 (beta_j is 0 exactly when b_j is), those of the gamma rows from the bootstrap replicates
(``bootstrap_p``), so that each answers the question of its interval.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from fieldslope.analysis.cells import Prepared
from fieldslope.analysis.glm import BINOMIAL, Family, choose_count_family, fit_glm, slope_p_values
from fieldslope.analysis.logistic import Separation
from fieldslope.analysis.point import Row, stack, with_intercept
from fieldslope.analysis.quadratic import gamma_matrix, quad_features, quad_pairs, quad_terms
from fieldslope.common.names import Q

__all__ = ["linear_gradients", "quadratic_gradients", "delta_se", "Fitted", "Spec", "GLMBlock", "glm_block",
           "bootstrap_p", "fill_bootstrap_p"]

# relative step of the central differences that carry the fit's covariance to the gradients (delta method)
DELTA_STEP = 1e-6


def linear_gradients(family: Family, coef: np.ndarray, X: np.ndarray) -> np.ndarray:
    """beta_j = mean dW/dx_j / mean W for the linear-predictor model ``coef`` on [1, x] = ``X``."""
    mu = family.mean(X @ coef)
    return coef[1:] * np.mean(family.d1(mu)) / np.mean(mu)


def quadratic_gradients(family: Family, coef: np.ndarray, X: np.ndarray, p: int) -> np.ndarray:
    """gamma_jk = mean d2W/dx_j dx_k / mean W (order of ``quad_pairs``) for the quadratic-predictor model
    ``coef`` on [1, x, quadratic features] = ``X``."""
    mu = family.mean(X @ coef)
    G = gamma_matrix(coef[1 + p :], p)
    slope = coef[1 : 1 + p] + X[:, 1 : 1 + p] @ G  # eta_j of each individual
    curv = (slope * family.d2(mu)[:, None]).T @ slope / len(mu) + np.mean(family.d1(mu)) * G
    j, k = np.array(quad_pairs(p)).T
    return curv[j, k] / np.mean(mu)


def delta_se(fn, coef: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Delta-method standard errors of ``fn(coef)`` (Jacobian by central differences)."""
    cols = []
    for i in range(len(coef)):
        h = DELTA_STEP * max(1.0, abs(coef[i]))
        up, down = coef.copy(), coef.copy()
        up[i] += h
        down[i] -= h
        cols.append((fn(up) - fn(down)) / (2 * h))
    J = np.column_stack(cols)
    return np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", J, cov, J), 0.0))


@dataclass(frozen=True)
class Fitted:
    """One fitted model of a block, for its bootstrap: coefficients (the start of each resample's fit),
    their standard errors (the scale of its convergence test) and the linear predictor of the block's rows."""

    coef: np.ndarray
    se: np.ndarray
    eta: np.ndarray


@dataclass(frozen=True)
class Spec:
    """A block's fitted models (None where that model failed) and family; a negative binomial keeps its
    alpha in resamples."""

    family: Family
    linear: Fitted | None
    quadratic: Fitted | None


def fitted(fit, X: np.ndarray) -> Fitted:
    return Fitted(fit.coef, np.sqrt(np.diag(fit.cov)), X @ fit.coef)


@dataclass
class GLMBlock:
    rows: list[Row] = field(default_factory=list)
    notes: list[tuple[str, str]] = field(default_factory=list)
    spec: Spec | None = None


def whole_numbers(W: np.ndarray) -> bool:
    return bool(np.all(W == np.round(W)))


def glm_block(preps: list[Prepared], traits: tuple[str, ...], where: str, tests: bool = False) -> GLMBlock:
    """Generalized gradients of one block (a cell, or a season's cells pooled) for a 0/1 or count fitness."""
    out = GLMBlock()
    multi = [pr.multi for pr in preps if pr.multi is not None]
    kinds = {pr.kind for pr in preps if pr.multi is not None}
    if not multi or not kinds <= {"binary", "count"}:
        return out
    fitness = preps[0].fitness
    _, x, _, W = stack(multi)
    n, p = x.shape
    X = with_intercept(x)
    if kinds == {"binary"}:
        if not all(pr.binary for pr in preps if pr.multi is not None):
            return out  # not 0/1 after all: said by the logistic gradient's note
        family = Family(BINOMIAL)
    elif not whole_numbers(W):
        out.notes.append((Q.GRADIENT_GLM, f"{fitness} is declared a count but has values that are not whole numbers {where}, "
                                          "so it has no generalized gradients."))
        return out
    else:
        try:
            choice = choose_count_family(X, W)
        except Separation:
            out.notes.append((Q.GRADIENT_GLM, f"The count model of {fitness} cannot be fitted {where} (fitted counts run off to 0), "
                                              "so no generalized gradients."))
            return out
        family = choice.family
        pv = "p < 0.001" if choice.p_overdispersion < 0.001 else f"p = {choice.p_overdispersion:.2g}"
        verdict = ("overdispersed" if family.name != "Poisson" else "not overdispersed")
        out.notes.append((Q.GRADIENT_GLM, f"{fitness} counts {where} are {verdict} given the traits (likelihood-ratio test "
                                          f"of the negative binomial's alpha = 0, {pv}): generalized gradients from a "
                                          f"{family.describe()} model with a log link."))
    linear = quadratic = None
    try:
        lin = fit_glm(X, W, family)
    except Separation:
        out.notes.append((Q.GRADIENT_GLM, f"The {family.name} model of {fitness} on the traits cannot be fitted {where} "
                                          "(fitted values run off to their limits), so no generalized gradients."))
    else:
        linear = fitted(lin, X)
        beta = linear_gradients(family, lin.coef, X)
        se = delta_se(lambda c: linear_gradients(family, c, X), lin.coef, lin.cov)
        p_lr = slope_p_values(X, W, lin) if tests else np.full(p, np.nan)
        out.rows.extend(Row(Q.GRADIENT_GLM, t, float(beta[j]), float(se[j]), n, float(p_lr[j])) for j, t in enumerate(traits))
    q = len(quad_pairs(p))
    if n >= 2 + p + q:
        Xq = np.column_stack([X, quad_features(x)])
        try:
            quad = fit_glm(Xq, W, family, np.concatenate([linear.coef, np.zeros(q)]) if linear is not None else None)
        except Separation:
            out.notes.append((Q.QUADRATIC_GLM, f"The quadratic {family.name} model of {fitness} cannot be fitted {where} "
                                               "(fitted values run off to their limits), so no generalized quadratic gradients."))
        else:
            quadratic = fitted(quad, Xq)
            gam = quadratic_gradients(family, quad.coef, Xq, p)
            se = delta_se(lambda c: quadratic_gradients(family, c, Xq, p), quad.coef, quad.cov)
            for (j, k), term, g, s in zip(quad_pairs(p), quad_terms(traits), gam, se):
                out.rows.append(Row(Q.QUADRATIC_GLM if j == k else Q.CORRELATIONAL_GLM, term, float(g), float(s), n))
    if linear is not None or quadratic is not None:
        out.spec = Spec(family, linear, quadratic)
    return out


def bootstrap_p(replicates: np.ndarray) -> float:
    """Two-sided p-value from bootstrap replicates: twice the smaller share on either side of 0, each share
    (1 + count) / (1 + usable replicates), at most 1; below 0.05 about when the 95 % percentile interval
    excludes 0 (the interval inverted; Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 16)."""
    good = replicates[np.isfinite(replicates)]
    if len(good) < 2:
        return float("nan")
    lo = (1 + np.sum(good <= 0)) / (1 + len(good))
    hi = (1 + np.sum(good >= 0)) / (1 + len(good))
    return float(min(1.0, 2 * min(lo, hi)))


def fill_bootstrap_p(rows: list[dict], boot: dict) -> None:
    """p-values of the generalized gamma rows of a season from their bootstrap replicates, in place."""
    for r in rows:
        if r["quantity"] in (Q.QUADRATIC_GLM, Q.CORRELATIONAL_GLM):
            rep = boot.get((r["site"], r["fitness"], r["quantity"], r["term"]))
            if rep is not None:
                r["p_value"] = bootstrap_p(rep)
