"""Likelihood-ratio tests of the slopes of a logistic regression (the p-values of logistic gradients).

Each slope b_j is tested given the other traits: the model without trait j
is fitted and twice the drop in log-likelihood, D, is referred to a
chi-square distribution with 1 degree of freedom (Wilks 1938, Ann. Math.
Stat. 9:60-62; McCullagh & Nelder 1989, Generalized Linear Models, ch. 4).
For 1 degree of freedom the upper tail is erfc(sqrt(D / 2)), so no
statistics library is needed.
"""

from __future__ import annotations

import numpy as np

from fieldslope.analysis.logistic import Separation, fit_logistic
from fieldslope.analysis.tails import chi2_upper

__all__ = ["log_likelihood", "slope_p_values"]


def log_likelihood(y: np.ndarray, p_hat: np.ndarray) -> float:
    """Bernoulli log-likelihood of 0/1 ``y`` at fitted probabilities ``p_hat``.

    Returns the log-likelihood. Source: McCullagh & Nelder 1989 (Generalized Linear Models, ch. 4).
    """
    p = np.clip(p_hat, 1e-300, 1 - 1e-16)
    return float(np.sum(y * np.log(p) + (1 - y) * np.log1p(-p)))


def slope_p_values(X: np.ndarray, y: np.ndarray, p_hat: np.ndarray) -> np.ndarray:
    """Likelihood-ratio p-value of each slope (columns 1.. of ``X``; column 0 is the intercept),
    given the full fit's fitted probabilities ``p_hat``; NaN where the reduced model is separated.

    Parameters: the design ``X`` (intercept first), 0/1 ``y`` and the full fit's ``p_hat``. Returns one
    p-value per slope. Source: Wilks 1938 (Ann. Math. Stat. 9:60-62).
    """
    full = log_likelihood(y, p_hat)
    out = np.full(X.shape[1] - 1, np.nan)
    for j in range(1, X.shape[1]):
        try:
            reduced = fit_logistic(np.delete(X, j, axis=1), y)
        except Separation:
            continue
        out[j - 1] = chi2_upper(2 * (full - log_likelihood(y, reduced.p_hat)), 1)
    return out
