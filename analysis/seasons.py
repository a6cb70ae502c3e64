"""Selection across seasons: weighted mean gradient, heterogeneity and sign changes."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Combined:
    mean: float  # inverse-variance weighted mean
    se: float  # sqrt(1 / sum of weights)
    q: float  # Cochran's Q
    q_p: float  # upper tail of chi-square with k - 1 df
    tau2: float  # DerSimonian-Laird between-season variance
    k: int


def combine(estimates: np.ndarray, ses: np.ndarray) -> Combined:
    """Fixed-effect weighted mean, Cochran's Q and the DerSimonian & Laird (1986) tau^2 of k >= 2 estimates."""
    b = np.asarray(estimates, dtype=float)
    w = 1.0 / np.asarray(ses, dtype=float) ** 2
    k = len(b)
    mean = float(np.sum(w * b) / np.sum(w))
    q = float(np.sum(w * (b - mean) ** 2))
    c = np.sum(w) - np.sum(w**2) / np.sum(w)
    tau2 = max(0.0, (q - (k - 1)) / c) if c > 0 else 0.0
    return Combined(mean, float(np.sqrt(1 / np.sum(w))), q, chi2_upper(q, k - 1), float(tau2), k)


def chi2_upper(x: float, df: int) -> float:
    """Upper tail P(X >= x) of a chi-square variable with a whole number ``df`` of degrees of freedom.

    Closed forms of the regularized upper gamma function at half-integer shape (Abramowitz & Stegun
    1964, 26.4.4 and 26.4.5): a finite Poisson sum for even df, erfc plus a finite sum for odd df.
    Plain ``math``, so the estimates need not load scipy.stats for one tail.
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


def sign_changes(values) -> int:
    """How often consecutive values change sign (zeros are skipped)."""
    s = np.sign(np.asarray(values, dtype=float))
    s = s[s != 0]
    return int(np.count_nonzero(s[1:] != s[:-1]))
