"""Second-order selection: features, the gamma matrix and its canonical axes."""

from __future__ import annotations

import numpy as np

__all__ = ["quad_pairs", "quad_terms", "quad_features", "gamma_matrix", "canonical_axes", "oriented", "aligned"]


def quad_pairs(p: int) -> list[tuple[int, int]]:
    """Index pairs (j, k), j <= k, in the order of the quadratic features.

    Parameters: the number of traits ``p``. Source: none (bookkeeping, no published method).
    """
    return [(j, k) for j in range(p) for k in range(j, p)]


def quad_terms(traits: tuple[str, ...] | list[str]) -> list[str]:
    """Term names of the quadratic features: ``a^2`` for a square, ``a:b`` for a product.

    Parameters: the trait names. Source: none (bookkeeping, no published method).
    """
    return [f"{traits[j]}^2" if j == k else f"{traits[j]}:{traits[k]}" for j, k in quad_pairs(len(traits))]


def quad_features(x: np.ndarray) -> np.ndarray:
    """Columns 1/2 x_j^2 (j = k) and x_j x_k (j < k), so their coefficients are gamma_jj and gamma_jk.

    Parameters: standardized traits ``x`` (n x p). Returns n x p(p+1)/2 columns. Source: Lande & Arnold 1983,
    Evolution 37:1210-1226; the 1/2 on squares, Stinchcombe et al. 2008 (Evolution 62:2435-2440).
    """
    cols = [0.5 * x[:, j] ** 2 if j == k else x[:, j] * x[:, k] for j, k in quad_pairs(x.shape[1])]
    return np.column_stack(cols) if cols else np.empty((x.shape[0], 0))


def gamma_matrix(quad_coef: np.ndarray, p: int) -> np.ndarray:
    """Symmetric gamma matrix(es) from coefficients ordered as ``quad_pairs`` (last axis).

    Parameters: the coefficients and ``p``. Returns p x p (or stacked) gamma. Source: Lande & Arnold 1983,
    Evolution 37:1210-1226.
    """
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

    Parameters: gamma (p x p, or stacked). Returns (eigenvalues, eigenvectors). Source: Phillips & Arnold 1989
    (Evolution 43:1209-1222).
    """
    vals, vecs = np.linalg.eigh(gamma)
    return vals[..., ::-1], vecs[..., ::-1]


def oriented(vecs: np.ndarray) -> np.ndarray:
    """Eigenvectors (columns) with their largest element in size made positive (an eigenvector's sign is
    arbitrary; this fixes the one reported)."""
    top = np.argmax(np.abs(vecs), axis=0)
    return vecs * np.sign(vecs[top, np.arange(vecs.shape[1])])


def aligned(vecs: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Eigenvectors of many resamples (B x p x p, columns) each signed to point the way of the same
    column of ``reference`` (p x p): a column whose inner product with it is negative is reversed."""
    dots = np.einsum("bji,ji->bi", vecs, reference)
    return vecs * np.where(dots < 0, -1.0, 1.0)[:, None, :]
