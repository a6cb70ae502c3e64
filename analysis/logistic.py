"""Logistic regression for 0/1 fitness: one fit, and many weighted fits at once."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import expit

MAX_ITER = 100
TOL = 1e-11
# linear predictors beyond this mean fitted probabilities of 0 or 1: separation
ETA_LIMIT = 30.0


class Separation(ValueError):
    """A combination of traits separates survivors from the dead: no finite estimate."""


@dataclass(frozen=True)
class LogitFit:
    coef: np.ndarray
    se: np.ndarray
    p_hat: np.ndarray


def fit_logistic(X: np.ndarray, y: np.ndarray) -> LogitFit:
    """Maximum-likelihood logistic regression of 0/1 ``y`` on ``X`` (include the intercept column).

    Newton-Raphson with step halving; standard errors from the inverse
    information matrix. Raises ``Separation`` when the estimates run off to
    infinity.
    """
    if y.min() == y.max():
        raise Separation("all values equal")
    k = X.shape[1]
    beta = np.zeros(k)
    beta[0] = np.log(y.mean() / (1 - y.mean()))

    def loglik(b: np.ndarray) -> float:
        eta = X @ b
        return float(np.sum(y * eta - np.logaddexp(0.0, eta)))

    ll = loglik(beta)
    for _ in range(MAX_ITER):
        p = expit(X @ beta)
        H = (X * (p * (1 - p))[:, None]).T @ X
        g = X.T @ (y - p)
        try:
            step = np.linalg.solve(H, g)
        except np.linalg.LinAlgError as err:
            raise Separation("singular information") from err
        t = 1.0
        while True:
            new = beta + t * step
            new_ll = loglik(new)
            if new_ll >= ll - 1e-12 or t < 1e-6:
                break
            t /= 2
        beta, ll = new, new_ll
        if np.max(np.abs(t * step)) < TOL * max(1.0, np.max(np.abs(beta))):
            break
        if np.max(np.abs(X @ beta)) > ETA_LIMIT:
            raise Separation("estimates diverge")
    else:
        raise Separation("no convergence")
    p = expit(X @ beta)
    if np.max(np.abs(X @ beta)) > ETA_LIMIT:
        raise Separation("estimates diverge")
    H = (X * (p * (1 - p))[:, None]).T @ X
    cov = np.linalg.inv(H)
    return LogitFit(coef=beta, se=np.sqrt(np.diag(cov)), p_hat=p)


def logistic_gradient(coef: np.ndarray, p_hat: np.ndarray, w_abs: np.ndarray) -> np.ndarray:
    """Logistic selection gradient b_j * mean(p(1-p)) / mean(W) for the slope coefficients (Janzen & Stern 1998)."""
    return coef[1:] * np.mean(p_hat * (1 - p_hat)) / np.mean(w_abs)


def batched_logistic(
    cells: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]],
    start: np.ndarray,
    max_iter: int = 30,
    step_tol: float = 1e-4,
    sums: list[np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Count-weighted logistic fits of many resamples at once (Newton's method, batched).

    ``cells`` holds, per cell, the fixed design X~ (n x k, intercept first), the
    0/1 outcome y (n), the counts C (B x n) and the affine map T (B x k x k)
    taking X~ to the resample's standardized design (x = T x~). Coefficients
    are on the standardized scale, pooled over the cells. Newton steps stop
    once every step is below ``step_tol`` (relative); as convergence is
    quadratic the remaining error is of order step_tol squared (about 1e-8,
    far below the Monte Carlo error of a bootstrap interval). Returns
    (coefficients B x k, mean of p(1-p), mean of y, usable mask), the means
    weighted by the counts and taken at the final coefficients. ``sums``
    may give, per cell, the count-weighted sums [C y x~ (k), C y, C] (B x k+2)
    when they are known already.
    """
    beta = start.copy()
    B, k = beta.shape
    a, b = np.triu_indices(k)
    prep = []
    for i, (X, y, C, _) in enumerate(cells):
        feats = np.column_stack([X[:, a] * X[:, b], np.ones(len(X))])
        if sums is not None:
            const = sums[i]
        else:  # sum C y x, sum C y, sum C
            const = C @ np.column_stack([X * y[:, None], y, np.ones(len(X))])
        prep.append((feats, const, np.empty(C.shape), np.empty(C.shape), np.ascontiguousarray(X.T)))
    ok = np.ones(B, dtype=bool)
    eye = np.eye(k)

    def predict_negative(XT, T, out):
        """Minus the linear predictors of every resample (B x n), into ``out``."""
        theta = np.einsum("bak,ba->bk", T, -beta)
        np.matmul(theta, XT, out=out)
        return out

    def sigmoid_of_negative(neg_eta):
        """1 / (1 + exp(-eta)) in place from -eta (numpy's vectorized exp is faster than expit here)."""
        with np.errstate(over="ignore"):
            np.exp(neg_eta, out=neg_eta)
        neg_eta += 1.0
        return np.reciprocal(neg_eta, out=neg_eta)

    for _ in range(max_iter):
        H = np.zeros((B, k, k))
        g = np.zeros((B, k))
        for (X, _, C, T), (feats, const, buf, cp, XT) in zip(cells, prep):
            p = sigmoid_of_negative(predict_negative(XT, T, buf))
            np.multiply(C, p, out=cp)  # C p
            gz = const[:, :k] - cp @ X  # sum C (y - p) x
            np.multiply(cp, p, out=buf)
            np.subtract(cp, buf, out=buf)  # C p (1 - p)
            packed = buf @ feats
            Hz = np.empty((B, k, k))
            Hz[:, a, b] = packed[:, :-1]
            Hz[:, b, a] = packed[:, :-1]
            H += T @ Hz @ np.swapaxes(T, 1, 2)
            g += np.einsum("bij,bj->bi", T, gz)
        bad = ~ok | ~np.isfinite(H).all(axis=(1, 2)) | ~np.isfinite(g).all(axis=1)
        ok &= ~bad
        H[bad] = eye
        g[bad] = 0.0
        try:
            step = np.linalg.solve(H, g[..., None])[..., 0]
        except np.linalg.LinAlgError:
            step = np.zeros_like(g)
            for i in range(B):
                try:
                    step[i] = np.linalg.solve(H[i], g[i])
                except np.linalg.LinAlgError:
                    ok[i] = False
        beta += step
        done = np.abs(step).max(axis=1) < step_tol * np.maximum(1.0, np.abs(beta).max(axis=1))
        if np.all(done | ~ok):
            break
    else:
        ok &= done
    # final pass at the final coefficients: separation check and the count-weighted means
    pq_sum = np.zeros(B)
    y_sum = np.zeros(B)
    n_sum = np.zeros(B)
    for (_, _, C, T), (_, const, buf, cp, XT) in zip(cells, prep):
        neg_eta = predict_negative(XT, T, buf)
        ok &= np.abs(neg_eta).max(axis=1, initial=0.0) < ETA_LIMIT
        p = sigmoid_of_negative(neg_eta)
        np.multiply(p, p, out=cp)
        np.subtract(p, cp, out=cp)  # p (1 - p)
        pq_sum += np.einsum("bn,bn->b", C, cp)
        y_sum += const[:, k]
        n_sum += const[:, k + 1]
    beta[~ok] = np.nan
    return beta, pq_sum / n_sum, y_sum / n_sum, ok
