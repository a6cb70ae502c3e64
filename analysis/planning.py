"""Planning a season: how many individuals a gradient of given precision needs."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from fieldslope.common.errors import EstimationError

__all__ = ["variance_inflation", "individuals_for_gradient"]


def variance_inflation(correlation: np.ndarray) -> np.ndarray:
    """Variance inflation factor of each trait: the diagonal of the inverse trait correlation matrix.

    Parameters: the trait ``correlation`` matrix. Returns the VIFs. Source: Marquardt 1970 (Technometrics
    12:591-612).
    """
    return np.diag(np.linalg.inv(np.atleast_2d(correlation)))


def individuals_for_gradient(
    half_width: float, residual_variance: float, vif: float = 1.0, n_traits: int = 1, level: float = 0.95
) -> int:
    """Individuals needed so that the ``level`` interval of a gradient is +- ``half_width``.

    For standardized traits the OLS standard error of a gradient is about
    sqrt(residual_variance * VIF / (n - n_traits - 1)), with
    ``residual_variance`` the residual variance of relative fitness; the
    interval is t * se with t from n - n_traits - 1 degrees of freedom.
    Starts from the normal-theory lower bound and steps up to the smallest n
    that is narrow enough.

    Returns the number of individuals. Source: the OLS standard error of a coefficient (Draper & Smith 1998,
    Applied Regression Analysis, 3rd ed.); planning by it is common practice.
    """
    for name, value, low in (("interval half width", half_width, 0.0), ("residual variance", residual_variance, 0.0)):
        if not (math.isfinite(value) and value > low):
            raise EstimationError(f"The planning {name} is {value}; give a positive number to plan a sample size.")
    if not (math.isfinite(vif) and vif >= 1 - 1e-9):
        raise EstimationError(f"The variance inflation factor is {vif}; it is at least 1, so give 1 or more.")
    z = stats.norm.ppf(0.5 + level / 2)
    n = max(n_traits + 3, math.ceil((z / half_width) ** 2 * residual_variance * vif) + n_traits + 1)
    while True:
        df = n - n_traits - 1
        if stats.t.ppf(0.5 + level / 2, df) * math.sqrt(residual_variance * vif / df) <= half_width:
            return n
        n += 1
