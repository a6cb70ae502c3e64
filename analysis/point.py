"""Point estimates and classical standard errors for one cell, or pooled over a season's cells.

A block is a list of prepared cells (one cell, or every cell of a season for
the pooled estimate). Fitness is relativized and traits standardized within
each cell, then one regression is fitted on all rows of the block.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from fieldslope.analysis.cells import Prepared, Sample
from fieldslope.analysis.fitness import relative
from fieldslope.analysis.likelihood_ratio import slope_p_values
from fieldslope.analysis.linear import Collinear, ols
from fieldslope.analysis.logistic import Separation, fit_logistic, logistic_gradient
from fieldslope.analysis.quadratic import canonical_axes, gamma_matrix, quad_features, quad_pairs, quad_terms
from fieldslope.analysis.standardize import standardize
from fieldslope.common.names import Q


@dataclass(frozen=True)
class Row:
    quantity: str
    term: str
    estimate: float
    se: float
    n: int
    p: float = np.nan  # a p-value from the model itself (logistic gradients); NaN = from permutations


@dataclass
class BlockResult:
    rows: list[Row] = field(default_factory=list)
    notes: list[tuple[str, str]] = field(default_factory=list)
    # for responses: phenotypic covariance (raw units) and beta_raw of the complete cases
    P: np.ndarray | None = None
    beta_raw: np.ndarray | None = None
    n_multi: int = 0


def stack(samples: list[Sample]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Raw traits, standardized traits, relative fitness, absolute fitness of the block's rows."""
    z = np.vstack([s.z for s in samples])
    x = np.vstack([standardize(s.z)[0] for s in samples])
    w = np.concatenate([relative(s.W) for s in samples])
    W = np.concatenate([s.W for s in samples])
    return z, x, w, W


def pooled_cov(samples: list[Sample]) -> np.ndarray:
    """Phenotypic covariance (ddof 1): of the one cell, or pooled within cells."""
    num = sum((len(s.W) - 1) * np.atleast_2d(np.cov(s.z, rowvar=False, ddof=1)) for s in samples)
    return num / sum(len(s.W) - 1 for s in samples)


def with_intercept(x: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones(len(x)), x])


def point_block(preps: list[Prepared], traits: tuple[str, ...], where: str, tests: bool = False) -> BlockResult:
    """Every estimate of the block; ``where`` names the block in notes."""
    res = BlockResult()
    fitness = preps[0].fitness
    opp = [pr.opp for pr in preps if pr.opp is not None]
    if opp:
        _, _, w, _ = stack([Sample(s.rows, s.z[:, :0], s.W) for s in opp])
        res.rows.append(Row(Q.OPPORTUNITY, "", float(np.var(w, ddof=0)), np.nan, len(w)))
    for j, name in enumerate(traits):
        samples = [pr.single[j] for pr in preps if pr.single and pr.single[j] is not None]
        if not samples:
            continue
        z, x, w, _ = stack(samples)
        z, x = z[:, 0], x[:, 0]
        n = len(w)
        res.rows.append(Row(Q.MEAN, name, float(z.mean()), np.nan, n))
        res.rows.append(Row(Q.SD, name, float(z.std(ddof=1)), np.nan, n))
        fit_z = ols(with_intercept(z), w)
        fit_x = ols(with_intercept(x), w)
        S = float(np.mean(w * z) - np.mean(z))
        S_std = float(np.mean(w * x) - np.mean(x))
        res.rows.append(Row(Q.DIFFERENTIAL, name, S, float(fit_z.se[1] * np.var(z)), n))
        res.rows.append(Row(Q.DIFFERENTIAL_STD, name, S_std, float(fit_x.se[1] * np.var(x)), n))
    multi = [pr.multi for pr in preps if pr.multi is not None]
    if not multi:
        return res
    z, x, w, W = stack(multi)
    n, p = x.shape
    P = pooled_cov(multi)
    sd = np.sqrt(np.diag(P))
    try:
        lin = ols(with_intercept(x), w)
    except Collinear:
        res.notes.append((Q.GRADIENT, f"The traits are collinear {where}, so no gradients are estimated for {fitness}."))
        return res
    beta, beta_se = lin.coef[1:], lin.se[1:]
    res.P, res.beta_raw, res.n_multi = P, beta / sd, n
    for j, name in enumerate(traits):
        res.rows.append(Row(Q.GRADIENT, name, float(beta[j]), float(beta_se[j]), n))
    for j, name in enumerate(traits):
        res.rows.append(Row(Q.GRADIENT_RAW, name, float(beta[j] / sd[j]), float(beta_se[j] / sd[j]), n))
    if all(pr.binary for pr in preps if pr.multi is not None):
        try:
            lg = fit_logistic(with_intercept(x), W)
        except Separation:
            res.notes.append((Q.GRADIENT_LOGISTIC, f"{fitness} is separated by the traits {where} (logistic estimates run off to infinity), so no logistic gradients."))
        else:
            factor = np.mean(lg.p_hat * (1 - lg.p_hat)) / np.mean(W)
            grad = logistic_gradient(lg.coef, lg.p_hat, W)
            p_lr = slope_p_values(with_intercept(x), W, lg.p_hat) if tests else np.full(p, np.nan)
            for j, name in enumerate(traits):
                res.rows.append(Row(Q.GRADIENT_LOGISTIC, name, float(grad[j]), float(lg.se[1 + j] * factor), n, float(p_lr[j])))
    q = len(quad_pairs(p))
    if n < 2 + p + q:
        res.notes.append((Q.QUADRATIC, f"Only {n} complete cases {where} for {fitness}; the quadratic model needs at least {2 + p + q}."))
        return res
    try:
        quad = ols(with_intercept(np.column_stack([x, quad_features(x)])), w)
    except Collinear:
        res.notes.append((Q.QUADRATIC, f"The quadratic terms are collinear {where} (for example a 0/1 trait), so no quadratic gradients for {fitness}."))
        return res
    g, g_se = quad.coef[1 + p:], quad.se[1 + p:]
    for (j, k), term, est, se in zip(quad_pairs(p), quad_terms(traits), g, g_se):
        res.rows.append(Row(Q.QUADRATIC if j == k else Q.CORRELATIONAL, term, float(est), float(se), n))
    vals, _ = canonical_axes(gamma_matrix(g, p))
    for i, v in enumerate(vals):
        res.rows.append(Row(Q.CANONICAL, f"m{i + 1}", float(v), np.nan, n))
    return res
