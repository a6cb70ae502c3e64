"""Logistic regression for 0/1 fitness: one fit, and many weighted fits at once."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import expit

MAX_ITER = 100
TOL = 1e-11
# linear predictors beyond this mean fitted probabilities of 0 or 1: separation
ETA_LIMIT = 30.0


class Separation(ValueError):
    """A combination of traits separates survivors from the dead: no finite estimate."""


@dataclass(frozen=True)
class LogitFit:
    coef: np.ndarray
    se: np.ndarray
    p_hat: np.ndarray


def fit_logistic(X: np.ndarray, y: np.ndarray) -> LogitFit:
    """Maximum-likelihood logistic regression of 0/1 ``y`` on ``X`` (include the intercept column).

    Newton-Raphson with step halving; standard errors from the inverse
    information matrix. Raises ``Separation`` when the estimates run off to
    infinity.
    """
    if y.min() == y.max():
        raise Separation("all values equal")
    k = X.shape[1]
    beta = np.zeros(k)
    beta[0] = np.log(y.mean() / (1 - y.mean()))

    def loglik(b: np.ndarray) -> float:
        eta = X @ b
        return float(np.sum(y * eta - np.logaddexp(0.0, eta)))

    ll = loglik(beta)
    for _ in range(MAX_ITER):
        p = expit(X @ beta)
        H = (X * (p * (1 - p))[:, None]).T @ X
        g = X.T @ (y - p)
        try:
            step = np.linalg.solve(H, g)
        except np.linalg.LinAlgError as err:
            raise Separation("singular information") from err
        t = 1.0
        while True:
            new = beta + t * step
            new_ll = loglik(new)
            if new_ll >= ll - 1e-12 or t < 1e-6:
                break
            t /= 2
        beta, ll = new, new_ll
        if np.max(np.abs(t * step)) < TOL * max(1.0, np.max(np.abs(beta))):
            break
        if np.max(np.abs(X @ beta)) > ETA_LIMIT:
            raise Separation("estimates diverge")
    else:
        raise Separation("no convergence")
    p = expit(X @ beta)
    if np.max(np.abs(X @ beta)) > ETA_LIMIT:
        raise Separation("estimates diverge")
    H = (X * (p * (1 - p))[:, None]).T @ X
    cov = np.linalg.inv(H)
    return LogitFit(coef=beta, se=np.sqrt(np.diag(cov)), p_hat=p)


def logistic_gradient(coef: np.ndarray, p_hat: np.ndarray, w_abs: np.ndarray) -> np.ndarray:
    """Logistic selection gradient b_j * mean(p(1-p)) / mean(W) for the slope coefficients (Janzen & Stern 1998)."""
    return coef[1:] * np.mean(p_hat * (1 - p_hat)) / np.mean(w_abs)
