"""Ordinary least squares with classical standard errors, and selection differentials."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["OLSFit", "Collinear", "ols", "slope_se", "differential"]

# a design whose condition number exceeds this is treated as collinear
CONDITION_LIMIT = 1e10


@dataclass(frozen=True)
class OLSFit:
    """Least-squares coefficients, their classical standard errors and the residual degrees of freedom."""

    coef: np.ndarray
    se: np.ndarray
    df_resid: int


class Collinear(ValueError):
    """The design matrix is (numerically) rank deficient."""


def ols(X: np.ndarray, y: np.ndarray) -> OLSFit:
    """Least-squares fit of ``y`` on the columns of ``X`` (include the intercept column yourself).

    Standard errors are the classical ones: sqrt(diag((X'X)^-1) * RSS / (n - k)).
    Raises ``Collinear`` when the columns are linearly dependent and ValueError
    when there are no residual degrees of freedom.

    Parameters: design ``X`` (n x k) and response ``y`` (n). Returns ``OLSFit`` (coefficients, standard
    errors, residual df). Source: Draper & Smith 1998 (Applied Regression Analysis, 3rd ed., ch. 5); least
    squares by QR, Golub & Van Loan 2013 (Matrix Computations, 4th ed., 5.3).
    """
    n, k = X.shape
    if n <= k:
        raise ValueError("no residual degrees of freedom")
    # scale columns so the condition number reflects dependence, not units
    scale = np.sqrt((X**2).sum(axis=0))
    scale[scale == 0] = 1.0
    Xs = X / scale
    # QR of [X y]: R's first k columns are X's factor, its last column holds Q'y over the residual's norm
    # (Golub & Van Loan 2013, 5.3.3); Q itself is never formed (the costly part at large n)
    R = np.linalg.qr(np.column_stack([Xs, y]), mode="r")
    r = R[:k, :k]
    sv = np.linalg.svd(r, compute_uv=False)  # singular values of X (scaled), from the small factor
    if sv[-1] <= 0 or sv[0] / sv[-1] > CONDITION_LIMIT:
        raise Collinear("collinear design")
    r_inv = np.linalg.inv(r)
    coef_s = r_inv @ R[:k, k]
    df = n - k
    sigma2 = float(R[k, k]) ** 2 / df
    cov_diag = (r_inv**2).sum(axis=1)
    return OLSFit(coef=coef_s / scale, se=np.sqrt(cov_diag * sigma2) / scale, df_resid=df)


def slope_se(v: np.ndarray, y: np.ndarray) -> float:
    """Classical standard error of the slope of ``y`` on one variable ``v`` (with an intercept): the same
    number as ``ols(column_stack([1, v]), y).se[1]`` in closed form, sqrt(RSS / (n - 2) / sum (v - mean v)^2),
    without a factorization (one per trait, cell and fitness measure on the live refresh path).

    Raises ``Collinear`` when v is constant and ValueError when n <= 2. Source: Draper & Smith 1998
    (Applied Regression Analysis, 3rd ed., ch. 1).
    """
    n = len(v)
    if n <= 2:
        raise ValueError("no residual degrees of freedom")
    vc = v - v.mean()
    sxx = float(vc @ vc)
    if not sxx > 0 or sxx <= (np.abs(v).max() ** 2) * n / CONDITION_LIMIT**2:
        raise Collinear("constant variable")
    yc = y - y.mean()
    b = float(vc @ yc) / sxx
    resid = yc - b * vc
    return float(np.sqrt(float(resid @ resid) / (n - 2) / sxx))


def differential(z: np.ndarray, w: np.ndarray) -> float:
    """Selection differential S = mean(w z) - mean(z) for relative fitness ``w``.

    Parameters: trait values ``z`` and relative fitness ``w``. Returns S, the covariance of w and z (Price
    1970, Nature 227:520-521; Lande & Arnold 1983, Evolution 37:1210-1226).
    """
    return float(np.mean(w * z) - np.mean(z))
