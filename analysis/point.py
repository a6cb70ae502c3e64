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
from fieldslope.analysis.linear import Collinear, differential, ols, slope_se
from fieldslope.analysis.logistic import Separation, fit_logistic, logistic_gradient
from fieldslope.analysis.quadratic import canonical_axes, gamma_matrix, oriented, quad_features, quad_pairs, quad_terms
from fieldslope.analysis.standardize import standardize
from fieldslope.common.names import Q

__all__ = ["Row", "BlockResult", "point_block", "stack"]


@dataclass(frozen=True)
class Row:
    """One point estimate of a block: quantity, term, estimate, se, n and a model p-value (NaN if none)."""

    quantity: str
    term: str
    estimate: float
    se: float
    n: int
    p: float = np.nan  # a p-value from the model itself (logistic gradients); NaN = from permutations


@dataclass
class BlockResult:
    """A block's rows and notes, and what the responses need (P, beta in trait units, n)."""

    rows: list[Row] = field(default_factory=list)
    notes: list[tuple[str, str]] = field(default_factory=list)
    # for responses: phenotypic covariance (raw units) and beta_raw of the complete cases
    P: np.ndarray | None = None
    beta_raw: np.ndarray | None = None
    n_multi: int = 0


def stack(samples: list[Sample]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Raw traits, standardized traits, relative fitness, absolute fitness of the block's rows.

    Parameters: the block's samples. Returns (z, x, w, W). Source: standardization and relative fitness within
    cells, Lande & Arnold 1983, Evolution 37:1210-1226.
    """
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
    """Every point estimate of one block, with classical (OLS) standard errors.

    Parameters: ``preps``, the block's prepared cells for one fitness measure (one cell, or every cell of
    a season for the pooled estimate); ``traits``, their names; ``where``, the block's place in notes
    ("in season 2024, site north"); ``tests``, whether to add the likelihood-ratio p-values of logistic
    gradients. Returns a ``BlockResult``: table rows, notes, and the phenotypic covariance and raw
    gradients the responses need. Methods: opportunity I (Arnold & Wade 1984, Evolution 38:709-719);
    differentials and linear and quadratic gradients by least squares on relative fitness and
    standardized traits (Lande & Arnold 1983, Evolution 37:1210-1226); logistic gradients (Janzen &
    Stern 1998, Evolution 52:1564-1571); canonical axes of gamma (Phillips & Arnold 1989, Evolution
    43:1209-1222).
    """
    res = BlockResult()
    opp = [pr.opp for pr in preps if pr.opp is not None]
    if opp:
        res.rows.append(opportunity_row(opp))
    for j, name in enumerate(traits):
        samples = [pr.single[j] for pr in preps if pr.single and pr.single[j] is not None]
        if samples:
            res.rows.extend(trait_rows(samples, name))
    multi = [pr.multi for pr in preps if pr.multi is not None]
    if not multi:
        return res
    _, x, w, W = stack(multi)
    fitness = preps[0].fitness
    if linear_rows(res, x, w, pooled_cov(multi), traits, fitness, where):
        if all(pr.binary for pr in preps if pr.multi is not None):
            logistic_rows(res, x, W, traits, fitness, where, tests)
        quadratic_rows(res, x, w, traits, fitness, where)
    return res


def opportunity_row(opp: list[Sample]) -> Row:
    """Opportunity for selection I = var(w), divisor n, of relative fitness within cells (Arnold & Wade 1984,
    Evolution 38:709-719)."""
    _, _, w, _ = stack([Sample(s.rows, s.z[:, :0], s.W) for s in opp])
    return Row(Q.OPPORTUNITY, "", float(np.var(w, ddof=0)), np.nan, len(w))


def trait_rows(samples: list[Sample], name: str) -> list[Row]:
    """Mean, sd, and the differentials S and S / sd of one trait, each with the OLS se of the slope of w on
    the trait times its variance (divisor n) (Lande & Arnold 1983, Evolution 37:1210-1226)."""
    z, x, w, _ = stack(samples)
    z, x = z[:, 0], x[:, 0]
    n = len(w)
    return [Row(Q.MEAN, name, float(z.mean()), np.nan, n),
            Row(Q.SD, name, float(z.std(ddof=1)), np.nan, n),
            Row(Q.DIFFERENTIAL, name, differential(z, w), slope_se(z, w) * float(np.var(z)), n),
            Row(Q.DIFFERENTIAL_STD, name, differential(x, w), slope_se(x, w) * float(np.var(x)), n)]


def linear_rows(res: BlockResult, x: np.ndarray, w: np.ndarray, P: np.ndarray, traits, fitness: str,
                where: str) -> bool:
    """The linear gradients beta (standardized traits ``x``, relative fitness ``w``) and beta / sd into ``res``,
    with the phenotypic covariance ``P`` the responses need (Lande & Arnold 1983, Evolution 37:1210-1226);
    False (and a note) when the traits are collinear."""
    n = len(x)
    sd = np.sqrt(np.diag(P))
    try:
        lin = ols(with_intercept(x), w)
    except Collinear:
        res.notes.append((Q.GRADIENT, f"The traits are collinear {where}, so no gradients are estimated for {fitness}."))
        return False
    beta, beta_se = lin.coef[1:], lin.se[1:]
    res.P, res.beta_raw, res.n_multi = P, beta / sd, n
    for j, name in enumerate(traits):
        res.rows.append(Row(Q.GRADIENT, name, float(beta[j]), float(beta_se[j]), n))
    for j, name in enumerate(traits):
        res.rows.append(Row(Q.GRADIENT_RAW, name, float(beta[j] / sd[j]), float(beta_se[j] / sd[j]), n))
    return True


def logistic_rows(res: BlockResult, x: np.ndarray, W: np.ndarray, traits, fitness: str, where: str,
                  tests: bool) -> None:
    """Logistic gradients of 0/1 fitness ``W`` on standardized traits ``x`` into ``res`` (Janzen & Stern 1998,
    Evolution 52:1564-1571), with likelihood-ratio p-values when ``tests``; a note instead when the traits
    separate the outcomes."""
    n, p = x.shape
    try:
        lg = fit_logistic(with_intercept(x), W)
    except Separation:
        res.notes.append((Q.GRADIENT_LOGISTIC, f"{fitness} is separated by the traits {where} (logistic estimates run off to infinity), so no logistic gradients."))
        return
    factor = np.mean(lg.p_hat * (1 - lg.p_hat)) / np.mean(W)
    grad = logistic_gradient(lg.coef, lg.p_hat, W)
    p_lr = slope_p_values(with_intercept(x), W, lg.p_hat) if tests else np.full(p, np.nan)
    for j, name in enumerate(traits):
        res.rows.append(Row(Q.GRADIENT_LOGISTIC, name, float(grad[j]), float(lg.se[1 + j] * factor), n, float(p_lr[j])))


def quadratic_rows(res: BlockResult, x: np.ndarray, w: np.ndarray, traits, fitness: str, where: str) -> None:
    """Quadratic and correlational gradients (gamma, from 1/2 x^2 and x_j x_k columns) and the eigenvalues of
    gamma into ``res`` (Lande & Arnold 1983, Evolution 37:1210-1226; Stinchcombe et al. 2008, Evolution
    62:2435-2440; Phillips & Arnold 1989, Evolution 43:1209-1222); a note when there are too few cases."""
    n, p = x.shape
    q = len(quad_pairs(p))
    if n < 2 + p + q:
        res.notes.append((Q.QUADRATIC, f"Only {n} complete cases {where} for {fitness}; the quadratic model needs at least {2 + p + q}."))
        return
    try:
        quad = ols(with_intercept(np.column_stack([x, quad_features(x)])), w)
    except Collinear:
        res.notes.append((Q.QUADRATIC, f"The quadratic terms are collinear {where} (for example a 0/1 trait), so no quadratic gradients for {fitness}."))
        return
    g, g_se = quad.coef[1 + p:], quad.se[1 + p:]
    for (j, k), term, est, se in zip(quad_pairs(p), quad_terms(traits), g, g_se):
        res.rows.append(Row(Q.QUADRATIC if j == k else Q.CORRELATIONAL, term, float(est), float(se), n))
    vals, vecs = canonical_axes(gamma_matrix(g, p))
    for i, v in enumerate(vals):
        res.rows.append(Row(Q.CANONICAL, f"m{i + 1}", float(v), np.nan, n))
    vecs = oriented(vecs)
    for i in range(p):
        for j, name in enumerate(traits):
            res.rows.append(Row(Q.CANONICAL_LOADING, f"m{i + 1}:{name}", float(vecs[j, i]), np.nan, n))
