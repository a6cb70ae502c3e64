"""Generalized linear models of the fitness function: binomial (logit link), Poisson and negative
binomial (log link), one fit by Fisher scoring, and the choice between Poisson and negative binomial.

The negative binomial is the NB2 form, variance mu + alpha mu^2 (Cameron & Trivedi 2013, Regression
Analysis of Count Data, 2nd ed., ch. 3); alpha is estimated by maximum likelihood, profiling the
likelihood over alpha (each alpha a GLM fit), and Poisson is kept unless the likelihood-ratio test of
alpha = 0 rejects at 5 %: alpha = 0 lies on the edge of its range, so the p-value is half the
chi-square (1 df) tail (Self & Liang 1987, J. Am. Stat. Assoc. 82:605-610). Standard errors come
from the expected information (scale 1), as a GLM reports them (McCullagh & Nelder 1989,
Generalized Linear Models, ch. 2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldslope.analysis.tails import chi2_upper
from fieldslope.analysis.logistic import ETA_LIMIT, Separation, ascend, expit

__all__ = ["Family", "GLMFit", "fit_glm", "fit_negative_binomial", "CountChoice", "choose_count_family", "slope_p_values",
           "BINOMIAL", "POISSON", "NEGATIVE_BINOMIAL"]

BINOMIAL, POISSON, NEGATIVE_BINOMIAL = "binomial", "Poisson", "negative binomial"
# overdispersion: negative binomial when the boundary likelihood-ratio test of alpha = 0 has p below this
OVERDISPERSION_LEVEL = 0.05
# the range searched for alpha (log scale); at the lower end the model is Poisson for every purpose
LOG_ALPHA_RANGE = (-14.0, 6.0)


@dataclass(frozen=True)
class Family:
    """Distribution and link of a fitness model: ``name`` and, for the negative binomial, ``alpha``."""

    name: str
    alpha: float = 0.0

    def mean(self, eta: np.ndarray) -> np.ndarray:
        """Expected fitness h(eta)."""
        if self.name == BINOMIAL:
            return expit(eta)
        with np.errstate(over="ignore"):
            return np.exp(eta)

    def d1(self, mu: np.ndarray) -> np.ndarray:
        """h'(eta), written with mu = h(eta)."""
        return mu * (1 - mu) if self.name == BINOMIAL else mu

    def d2(self, mu: np.ndarray) -> np.ndarray:
        """h''(eta), written with mu = h(eta)."""
        return mu * (1 - mu) * (1 - 2 * mu) if self.name == BINOMIAL else mu

    def info(self, mu: np.ndarray) -> np.ndarray:
        """Expected information weight of one observation: h'(eta)^2 / Var(W | eta)."""
        if self.name == NEGATIVE_BINOMIAL:
            return mu / (1 + self.alpha * mu)
        return self.d1(mu)

    def score(self, y: np.ndarray, mu: np.ndarray) -> np.ndarray:
        """Score weight (y - mu) h'(eta) / Var(W | eta); times the feature vector, the score."""
        if self.name == NEGATIVE_BINOMIAL:
            return (y - mu) / (1 + self.alpha * mu)
        return y - mu

    def loglik(self, y: np.ndarray, eta: np.ndarray, mu: np.ndarray) -> float:
        if self.name == BINOMIAL:
            return float(np.sum(y * eta - np.logaddexp(0.0, eta)))
        from scipy.special import gammaln

        if self.name == POISSON:
            return float(np.sum(y * eta - mu - gammaln(y + 1)))
        r = 1.0 / self.alpha
        return float(np.sum(gammaln(y + r) - gammaln(r) - gammaln(y + 1)
                            + r * np.log(r / (r + mu)) + y * np.log(mu / (r + mu))))

    def describe(self) -> str:
        return f"negative binomial (alpha {self.alpha:.3g})" if self.name == NEGATIVE_BINOMIAL else self.name


@dataclass(frozen=True)
class GLMFit:
    family: Family
    coef: np.ndarray
    cov: np.ndarray  # inverse expected information
    mu: np.ndarray
    loglik: float


def start_coef(X: np.ndarray, y: np.ndarray, family: Family) -> np.ndarray:
    beta = np.zeros(X.shape[1])
    m = float(np.mean(y))
    beta[0] = np.log(m / (1 - m)) if family.name == BINOMIAL else np.log(m)
    return beta


def fit_glm(X: np.ndarray, y: np.ndarray, family: Family, start: np.ndarray | None = None) -> GLMFit:
    """Maximum-likelihood fit of ``y`` on ``X`` (intercept column first) by Fisher scoring with step
    halving (Newton-Raphson for the binomial and Poisson, whose links are canonical).

    Raises ``Separation`` when the fitted means run to 0 or 1 (|eta| beyond ETA_LIMIT) or the
    information is singular."""
    if family.name == BINOMIAL and y.min() == y.max():
        raise Separation("all values equal")
    beta = start_coef(X, y, family) if start is None else np.array(start, dtype=float)

    def loglik(b: np.ndarray) -> float:
        eta = X @ b
        return family.loglik(y, eta, family.mean(eta))

    def scoring_step(b: np.ndarray) -> np.ndarray:
        mu = family.mean(X @ b)
        return np.linalg.solve((X * family.info(mu)[:, None]).T @ X, X.T @ family.score(y, mu))

    def diverged(b: np.ndarray) -> bool:
        return bool(np.max(np.abs(X @ b)) > ETA_LIMIT)

    beta = ascend(beta, loglik, scoring_step, diverged)
    eta = X @ beta
    if diverged(beta):
        raise Separation("estimates diverge")
    mu = family.mean(eta)
    ll = family.loglik(y, eta, mu)
    H = (X * family.info(mu)[:, None]).T @ X
    try:
        cov = np.linalg.inv(H)
    except np.linalg.LinAlgError as err:
        raise Separation("singular information") from err
    return GLMFit(family, beta, cov, mu, ll)


def fit_negative_binomial(X: np.ndarray, y: np.ndarray, start: GLMFit | None = None) -> GLMFit:
    """NB2 fit with alpha at its maximum-likelihood value: the root in log alpha of the profile likelihood's
    derivative, which at the coefficients fitted for that alpha is the partial derivative in alpha alone
    (the coefficients' score is 0 there), found by Brent's method; at the lower end of LOG_ALPHA_RANGE
    when the likelihood rises towards alpha = 0 (no overdispersion)."""
    from scipy.optimize import brentq
    from scipy.special import digamma

    warm = [None if start is None else start.coef]
    fits: dict[float, GLMFit] = {}

    def slope(log_alpha: float) -> float:
        """d log L / d log alpha at the coefficients fitted for that alpha."""
        fit = fit_glm(X, y, Family(NEGATIVE_BINOMIAL, float(np.exp(log_alpha))), warm[0])
        warm[0] = fit.coef
        fits[log_alpha] = fit
        r, mu = 1.0 / fit.family.alpha, fit.mu
        d_r = np.sum(digamma(y + r) - digamma(r) + np.log(r / (r + mu)) + (mu - y) / (r + mu))
        return float(-r * d_r)

    lo, hi = LOG_ALPHA_RANGE
    if slope(lo) <= 0:
        return fits[lo]
    if slope(hi) >= 0:
        return fits[hi]
    best = brentq(slope, lo, hi, xtol=1e-9, rtol=1e-12)
    return fit_glm(X, y, Family(NEGATIVE_BINOMIAL, float(np.exp(best))), warm[0])


@dataclass(frozen=True)
class CountChoice:
    family: Family
    p_overdispersion: float  # boundary likelihood-ratio test of alpha = 0


def choose_count_family(X: np.ndarray, y: np.ndarray) -> CountChoice:
    """Poisson, or the negative binomial when the counts are overdispersed given the model ``X``."""
    poisson = fit_glm(X, y, Family(POISSON))
    try:
        nb = fit_negative_binomial(X, y, poisson)
    except Separation:
        return CountChoice(Family(POISSON), 1.0)
    d = 2 * (nb.loglik - poisson.loglik)
    p = 0.5 * chi2_upper(d, 1) if d > 0 else 1.0
    return CountChoice(nb.family if p < OVERDISPERSION_LEVEL else Family(POISSON), p)


def slope_p_values(X: np.ndarray, y: np.ndarray, fit: GLMFit) -> np.ndarray:
    """Likelihood-ratio p-value of each slope (columns 1..) given the others, family as fitted (alpha of a
    negative binomial held at its value in the full model); NaN where the reduced model cannot be fitted."""
    out = np.full(X.shape[1] - 1, np.nan)
    for j in range(1, X.shape[1]):
        try:
            reduced = fit_glm(np.delete(X, j, axis=1), y, fit.family, np.delete(fit.coef, j))
        except Separation:
            continue
        out[j - 1] = chi2_upper(2 * (fit.loglik - reduced.loglik), 1)
    return out
