"""Standardized traits: x = (z - mean) / sd with sd of divisor n - 1."""

from __future__ import annotations

import numpy as np

__all__ = ["standardize", "constant_columns"]


def standardize(z: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Columns of ``z`` (n x p) standardized; returns (x, mean, sd), sd with ddof 1.

    The caller makes sure every sd is positive (a constant trait has no
    standardized value).

    Source: Lande & Arnold 1983, Evolution 37:1210-1226.
    """
    mean = z.mean(axis=0)
    sd = z.std(axis=0, ddof=1)
    return (z - mean) / sd, mean, sd


def constant_columns(z: np.ndarray) -> list[int]:
    """Indices of columns whose values are all equal (or that have fewer than two values).

    Parameters: ``z`` (n x p). Returns the column indices. Source: none (bookkeeping, no published method).
    """
    if z.shape[0] < 2:
        return list(range(z.shape[1]))
    spread = z.max(axis=0) - z.min(axis=0)
    scale = np.maximum(np.abs(z).max(axis=0), 1.0)
    return [int(j) for j in np.flatnonzero(spread <= 1e-12 * scale)]
