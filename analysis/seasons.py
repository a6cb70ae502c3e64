"""Selection across seasons: weighted mean gradient, heterogeneity, random-effects mean and sign changes.

Fixed effect: the inverse-variance weighted mean (weights 1/se^2) and its se
sqrt(1 / sum of weights); Cochran's Q with its chi-square tail (k - 1 df); the
DerSimonian & Laird (1986, Controlled Clinical Trials 7:177-188) between-season
variance tau^2 (moment estimator, truncated at 0). Random effects: weights
1/(se^2 + tau^2), the mean and its se sqrt(1 / sum of those weights) with a
normal 95 % interval (DerSimonian & Laird 1986), or, as an option, the
Hartung & Knapp (2001, Stat. Med. 20:3875-3889) interval: se scaled by
sqrt(sum w*(b - mean)^2 / (k - 1)) and a t quantile with k - 1 df. With
tau^2 = 0 the random-effects mean is the fixed-effect one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fieldslope.analysis.tails import Z975, chi2_upper, normal_two_sided, t_quantile, t_upper2

__all__ = ["METHODS", "Combined", "combine", "sign_changes", "significant_sign_changes"]

METHODS = ("dl", "hk")


@dataclass(frozen=True)
class Combined:
    """Gradients of one trait combined across seasons: fixed-effect and random-effects means, Q and tau^2."""

    mean: float  # inverse-variance weighted mean
    se: float  # sqrt(1 / sum of weights)
    q: float  # Cochran's Q
    q_p: float  # upper tail of chi-square with k - 1 df
    tau2: float  # DerSimonian-Laird between-season variance
    k: int
    mean_re: float = math.nan  # random-effects mean (weights 1 / (se^2 + tau^2))
    se_re: float = math.nan  # its standard error (Hartung-Knapp scaled with method "hk")
    ci_re: tuple[float, float] = (math.nan, math.nan)  # its 95 % interval
    p_re: float = math.nan  # two-sided p-value of mean_re = 0, the same normal (or t) reference as ci_re
    method: str = "dl"

    @property
    def interval(self) -> tuple[float, float]:
        """The mean's 95 % interval: the random-effects one when tau^2 > 0, else mean +- 1.96 se."""
        if self.tau2 > 0:
            return self.ci_re
        return self.mean - Z975 * self.se, self.mean + Z975 * self.se


def combine(estimates: np.ndarray, ses: np.ndarray, method: str = "dl") -> Combined:
    """Fixed-effect mean, Cochran's Q, the DerSimonian & Laird tau^2 and the random-effects mean of
    k >= 2 estimates; ``method`` "dl" (normal interval) or "hk" (Hartung-Knapp).

    Parameters: the estimates and their standard errors (k each) and ``method``. Returns ``Combined``. Source:
    Cochran 1954 (Biometrics 10:101-129); DerSimonian & Laird 1986 (Controlled Clinical Trials 7:177-188);
    Hartung & Knapp 2001 (Stat. Med. 20:3875-3889).
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}")
    b = np.asarray(estimates, dtype=float)
    v = np.asarray(ses, dtype=float) ** 2
    w = 1.0 / v
    k = len(b)
    mean = float(np.sum(w * b) / np.sum(w))
    q = float(np.sum(w * (b - mean) ** 2))
    c = np.sum(w) - np.sum(w**2) / np.sum(w)
    tau2 = float(max(0.0, (q - (k - 1)) / c)) if c > 0 else 0.0
    w_re = 1.0 / (v + tau2)
    mean_re = float(np.sum(w_re * b) / np.sum(w_re))
    se_re = float(np.sqrt(1 / np.sum(w_re)))
    if method == "hk":
        se_re *= math.sqrt(float(np.sum(w_re * (b - mean_re) ** 2)) / (k - 1))
        crit = t_quantile(0.975, k - 1)
        p_re = t_upper2(mean_re / se_re, k - 1) if se_re > 0 else math.nan
    else:
        crit = Z975
        p_re = normal_two_sided(mean_re / se_re) if se_re > 0 else math.nan
    ci = (mean_re - crit * se_re, mean_re + crit * se_re)
    return Combined(mean, float(np.sqrt(1 / np.sum(w))), q, chi2_upper(q, k - 1), tau2, k,
                    mean_re, se_re, ci, p_re, method)


def sign_changes(values) -> int:
    """How often consecutive values change sign (zeros are skipped).

    Parameters: the values in season order. Returns the count. Source: Siepielski, DiBattista & Carlson 2009
    (Ecol. Lett. 12:1261-1276) count changes of sign of selection between years.
    """
    s = np.sign(np.asarray(values, dtype=float))
    s = s[s != 0]
    return int(np.count_nonzero(s[1:] != s[:-1]))


def significant_sign_changes(lows, highs) -> int:
    """How often consecutive seasons both have intervals that exclude zero, on opposite sides.

    Parameters: the lower and upper interval bounds in season order. Returns the count. Source: Siepielski,
    DiBattista & Carlson 2009 (Ecol. Lett. 12:1261-1276).
    """
    side = np.where(np.asarray(lows, dtype=float) > 0, 1, np.where(np.asarray(highs, dtype=float) < 0, -1, 0))
    return int(np.count_nonzero(side[1:] * side[:-1] == -1))
