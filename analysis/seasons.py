"""Selection across seasons: weighted mean gradient, heterogeneity and sign changes."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats


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
    return Combined(mean, float(np.sqrt(1 / np.sum(w))), q, float(stats.chi2.sf(q, k - 1)), float(tau2), k)


def sign_changes(values) -> int:
    """How often consecutive values change sign (zeros are skipped)."""
    s = np.sign(np.asarray(values, dtype=float))
    s = s[s != 0]
    return int(np.count_nonzero(s[1:] != s[:-1]))
