"""Reference distributions the tests of the estimates are referred to: normal, chi-square and Student's t.

One definition of each critical value and tail, so the p-values and intervals that stand side by
side in the table use the same numbers. Plain ``math`` where a closed form exists, so estimating
needs not load scipy.stats for one tail; Student's t loads ``scipy.special`` only when asked.
"""

from __future__ import annotations

import math

__all__ = ["Z975", "chi2_upper", "normal_two_sided", "t_quantile", "t_upper2"]

#: The 97.5 % point of the standard normal distribution: a normal 95 % interval is estimate +- Z975 se
#: (Abramowitz & Stegun 1964, Handbook of Mathematical Functions, table 26.5).
Z975 = 1.959963984540054


def normal_two_sided(z: float) -> float:
    """Two-sided tail P(|Z| >= |z|) of the standard normal distribution, erfc(|z| / sqrt 2).

    Parameters: ``z``, the standardized statistic. Returns the p-value (NaN for NaN).
    Source: Abramowitz & Stegun 1964, Handbook of Mathematical Functions, 7.1.2 and 26.2.29.
    """
    return math.erfc(abs(z) / math.sqrt(2))


def chi2_upper(x: float, df: int) -> float:
    """Upper tail P(X >= x) of a chi-square variable with a whole number ``df`` of degrees of freedom.

    Parameters: the statistic ``x`` and ``df`` >= 1. Returns the tail probability (1 for x <= 0,
    0 for x = inf, NaN for NaN). Closed forms of the regularized upper gamma function at half-integer
    shape (Abramowitz & Stegun 1964, Handbook of Mathematical Functions, 26.4.4 and 26.4.5): a finite
    Poisson sum for even df, erfc plus a finite sum for odd df (for df = 1 exactly erfc(sqrt(x / 2))).
    """
    if not math.isfinite(x):
        return math.nan if math.isnan(x) else 0.0
    if x <= 0:
        return 1.0
    half = x / 2
    if df % 2 == 0:
        term, total = 1.0, 1.0
        for i in range(1, df // 2):
            term *= half / i
            total += term
        return min(1.0, math.exp(-half) * total)
    term = math.sqrt(half) / math.gamma(1.5)  # (x/2)^(1/2) / Gamma(3/2)
    total = 0.0
    for i in range((df - 1) // 2):
        total += term
        term *= half / (i + 1.5)  # Gamma(i + 5/2) = (i + 3/2) Gamma(i + 3/2)
    return min(1.0, math.erfc(math.sqrt(half)) + math.exp(-half) * total)


def t_quantile(p: float, df: int) -> float:
    """Quantile of Student's t with ``df`` degrees of freedom at probability ``p`` (scipy.special.stdtrit;
    Student 1908, Biometrika 6:1-25). Returns the quantile."""
    from scipy.special import stdtrit

    return float(stdtrit(df, p))


def t_upper2(t: float, df: int) -> float:
    """Two-sided tail P(|T| >= |t|) of Student's t with ``df`` degrees of freedom (scipy.special.stdtr;
    Student 1908, Biometrika 6:1-25). Returns the p-value."""
    from scipy.special import stdtr

    return float(2 * stdtr(df, -abs(t)))
