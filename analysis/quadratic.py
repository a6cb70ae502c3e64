"""Second-order selection: features, the gamma matrix and its canonical axes."""

from __future__ import annotations

import numpy as np


def quad_pairs(p: int) -> list[tuple[int, int]]:
    """Index pairs (j, k), j <= k, in the order of the quadratic features."""
    return [(j, k) for j in range(p) for k in range(j, p)]


def quad_terms(traits: tuple[str, ...] | list[str]) -> list[str]:
    """Term names of the quadratic features: ``a^2`` for a square, ``a:b`` for a product."""
    return [f"{traits[j]}^2" if j == k else f"{traits[j]}:{traits[k]}" for j, k in quad_pairs(len(traits))]


def quad_features(x: np.ndarray) -> np.ndarray:
    """Columns 1/2 x_j^2 (j = k) and x_j x_k (j < k), so their coefficients are gamma_jj and gamma_jk."""
    cols = [0.5 * x[:, j] ** 2 if j == k else x[:, j] * x[:, k] for j, k in quad_pairs(x.shape[1])]
    return np.column_stack(cols) if cols else np.empty((x.shape[0], 0))


def gamma_matrix(quad_coef: np.ndarray, p: int) -> np.ndarray:
    """Symmetric gamma matrix(es) from coefficients ordered as ``quad_pairs`` (last axis)."""
    coef = np.asarray(quad_coef)
    g = np.zeros(coef.shape[:-1] + (p, p))
    for i, (j, k) in enumerate(quad_pairs(p)):
        g[..., j, k] = coef[..., i]
        g[..., k, j] = coef[..., i]
    return g


def canonical_axes(gamma: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues of gamma, largest first, and the matching eigenvectors as columns.

    The eigenvectors give the canonical axes m1, m2, ... as combinations of
    the standardized traits (Phillips & Arnold 1989). Works on stacks too.
    """
    vals, vecs = np.linalg.eigh(gamma)
    return vals[..., ::-1], vecs[..., ::-1]
