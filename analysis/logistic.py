"""Logistic regression for 0/1 fitness: one fit, and many weighted fits at once."""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations_with_replacement

import numpy as np

__all__ = ["Separation", "LogitFit", "expit", "fit_logistic", "logistic_gradient", "batched_logistic",
           "taylor_start", "weighted_pass", "ascend"]

MAX_ITER = 100
TOL = 1e-11
# the batched fits of resamples: a resample stops once its Newton step is below STEP_TOL (relative to
# max(1, |coefficient|)); Newton's method converges quadratically, so what remains is of order
# STEP_TOL squared. Stated tolerance: every coefficient and logistic gradient within RESULT_TOL
# (relative, likewise) of the maximum-likelihood fit; tested against statsmodels Logit fits
# (tests/test_analysis_bootstrap.py), measured worst 1e-9.
STEP_TOL = 3e-5
RESULT_TOL = 1e-8
# linear predictors beyond this mean fitted probabilities of 0 or 1: separation
ETA_LIMIT = 30.0
# the third-order start is used while the resample's coefficients on X~ stay this close to the
# full-sample fit (measured: the expansion then leaves an error far below the Newton tolerance)
TAYLOR_REACH = 0.5
# resamples the batched Newton iteration cannot finish are refitted one by one (with step halving)
# when they are at most this share of a batch; beyond it most are separated, the interval is
# withheld anyway (over 5 % unusable), and refits would cost more than the batch
REFIT_SHARE = 0.1


def expit(eta: np.ndarray) -> np.ndarray:
    """The logistic function 1 / (1 + exp(-eta)) in numpy (within 1 ulp of scipy.special.expit, without
    loading scipy at start-up).

    Parameters: linear predictor ``eta``. Returns probabilities. Source: McCullagh & Nelder 1989 (Generalized
    Linear Models, ch. 4).
    """
    with np.errstate(over="ignore"):
        return 1.0 / (1.0 + np.exp(-eta))


class Separation(ValueError):
    """A combination of traits separates survivors from the dead: no finite estimate."""


@dataclass(frozen=True)
class LogitFit:
    """Logistic coefficients (intercept first), their standard errors and the fitted probabilities."""

    coef: np.ndarray
    se: np.ndarray
    p_hat: np.ndarray


def fit_logistic(X: np.ndarray, y: np.ndarray) -> LogitFit:
    """Maximum-likelihood logistic regression of 0/1 ``y`` on ``X`` (include the intercept column).

    Newton-Raphson with step halving; standard errors from the inverse
    information matrix. Raises ``Separation`` when the estimates run off to
    infinity.

    Returns ``LogitFit`` (coefficients, standard errors, fitted probabilities). Source: McCullagh & Nelder
    1989 (Generalized Linear Models, ch. 4).
    """
    if y.min() == y.max():
        raise Separation("all values equal")
    k = X.shape[1]
    beta = np.zeros(k)
    beta[0] = np.log(y.mean() / (1 - y.mean()))

    def loglik(b: np.ndarray) -> float:
        eta = X @ b
        return float(np.sum(y * eta - np.logaddexp(0.0, eta)))

    def newton_step(b: np.ndarray) -> np.ndarray:
        p = expit(X @ b)
        return np.linalg.solve((X * (p * (1 - p))[:, None]).T @ X, X.T @ (y - p))

    def diverged(b: np.ndarray) -> bool:
        return bool(np.max(np.abs(X @ b)) > ETA_LIMIT)

    beta = ascend(beta, loglik, newton_step, diverged)
    p = expit(X @ beta)
    if np.max(np.abs(X @ beta)) > ETA_LIMIT:
        raise Separation("estimates diverge")
    H = (X * (p * (1 - p))[:, None]).T @ X
    cov = np.linalg.inv(H)
    return LogitFit(coef=beta, se=np.sqrt(np.diag(cov)), p_hat=p)


def ascend(beta: np.ndarray, loglik, step_at, diverged) -> np.ndarray:
    """Maximize ``loglik`` from ``beta`` by the steps ``step_at(beta)`` (Newton or Fisher scoring), each
    halved until the log-likelihood does not fall; stops when a step is below TOL (relative). Raises
    ``Separation`` when the information is singular, ``diverged(beta)`` says the estimates run off to
    infinity, or MAX_ITER steps do not converge."""
    ll = loglik(beta)
    for _ in range(MAX_ITER):
        try:
            step = step_at(beta)
        except np.linalg.LinAlgError as err:
            raise Separation("singular information") from err
        t = 1.0
        while True:
            new = beta + t * step
            new_ll = loglik(new)
            if (np.isfinite(new_ll) and new_ll >= ll - 1e-12) or t < 1e-6:
                break
            t /= 2
        beta, ll = new, new_ll
        if np.max(np.abs(t * step)) < TOL * max(1.0, np.max(np.abs(beta))):
            return beta
        if diverged(beta):
            raise Separation("estimates diverge")
    raise Separation("no convergence")


def logistic_gradient(coef: np.ndarray, p_hat: np.ndarray, w_abs: np.ndarray) -> np.ndarray:
    """Logistic selection gradient b_j * mean(p(1-p)) / mean(W) for the slope coefficients (Janzen & Stern 1998).

    Parameters: coefficients (intercept first), fitted probabilities and absolute fitness. Returns one
    gradient per slope. Source: Janzen & Stern 1998 (Evolution 52:1564-1571).
    """
    return coef[1:] * np.mean(p_hat * (1 - p_hat)) / np.mean(w_abs)


def batched_logistic(
    cells: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]],
    start: np.ndarray,
    max_iter: int = 30,
    step_tol: float = STEP_TOL,
    sums: list[np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Count-weighted logistic fits of many resamples at once (Newton's method, batched).

    ``cells`` holds, per cell, the fixed design X~ (n x k, intercept first), the
    0/1 outcome y (n), the counts C (B x n) and the affine map T (B x k x k)
    taking X~ to the resample's standardized design (x = T x~). Coefficients
    are on the standardized scale, pooled over the cells. A resample stops
    once its Newton step is below ``step_tol`` (relative); as convergence is
    quadratic the remaining error is of order step_tol squared (stated:
    ``RESULT_TOL``, far below the Monte Carlo error of a bootstrap interval), and only the
    resamples not yet converged take another pass. Returns (coefficients
    B x k, mean of p(1-p), mean of y, usable mask), the means weighted by the
    counts; mean p(1-p) is carried to the final coefficients by its first
    derivative (error of order step squared), so no pass is spent on it.
    ``sums`` may give, per cell, the count-weighted sums [C y x~ (k), C y, C]
    (B x k+2) when they are known already.

    Source: Newton's method for the logistic likelihood, McCullagh & Nelder 1989 (Generalized Linear Models,
    ch. 4), applied to bootstrap resamples given as counts (Efron & Tibshirani 1993, An Introduction to the
    Bootstrap).
    """
    beta = start.copy()
    B, k = beta.shape
    prep = cell_sums(cells, sums)
    ok = np.ones(B, dtype=bool)
    pq_sum = np.zeros(B)
    active = np.arange(B)
    eye = np.eye(k)
    for _ in range(max_iter):
        H, g, v, pq = newton_terms(cells, prep, beta, active)
        bad = ~ok[active] | ~np.isfinite(H).all(axis=(1, 2)) | ~np.isfinite(g).all(axis=1)
        ok[active[bad]] = False
        H[bad] = eye
        g[bad] = 0.0
        step = solve_each(H, g, ok, active)
        beta[active] += step
        # d/dbeta of sum C p(1-p) is v: carry the mean to the stepped coefficients
        pq_sum[active] = pq + np.einsum("bi,bi->b", v, step)
        done = np.abs(step).max(axis=1) < step_tol * np.maximum(1.0, np.abs(beta[active]).max(axis=1))
        active = active[~done & ok[active]]
        if not len(active):
            break
    ok[active] = False  # no convergence
    failed = np.flatnonzero(~ok)
    if len(failed) <= REFIT_SHARE * B:  # rare (steep fits, poor start): refit one by one, with step halving
        for i in failed:
            beta[i], pq_sum[i], ok[i] = refit_one(cells, i)
    ok &= ~separated(cells, beta, ok)
    y_sum = sum(const[:, k] for _, const, _ in prep)
    n_sum = sum(const[:, k + 1] for _, const, _ in prep)
    beta[~ok] = np.nan
    return beta, pq_sum / n_sum, y_sum / n_sum, ok


def cell_sums(cells: list, sums: list[np.ndarray] | None) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Per cell, what every Newton pass reuses: the products of pairs of columns of X~ (upper triangle, in
    ``np.triu_indices`` order), the count-weighted sums [C y x~, C y, C] (B x k+2; ``sums`` if given), and X~'."""
    prep = []
    for i, (X, y, C, _) in enumerate(cells):
        a, b = np.triu_indices(X.shape[1])
        feats = X[:, a] * X[:, b]  # products of pairs; the first, x~_0 x~_0, is 1 (intercept)
        if sums is not None:
            const = sums[i]
        else:  # sum C y x, sum C y, sum C
            const = C @ np.column_stack([X * y[:, None], y, np.ones(len(X))])
        prep.append((feats, const, np.ascontiguousarray(X.T)))
    return prep


def newton_terms(cells: list, prep: list, beta: np.ndarray, active: np.ndarray):
    """For the ``active`` resamples at coefficients ``beta``, summed over the cells on the standardized scale:
    the information H (m x k x k), the score g (m x k), v = d/dbeta of sum C p(1-p) (m x k), and sum C p(1-p)."""
    k = beta.shape[1]
    a, b = np.triu_indices(k)
    H = np.zeros((len(active), k, k))
    g = np.zeros((len(active), k))
    v = np.zeros((len(active), k))
    pq = np.zeros(len(active))
    for (X, _, C, T), (feats, const, XT) in zip(cells, prep):
        Ta = T[active]
        theta = np.einsum("bak,ba->bk", Ta, beta[active])
        packed, gz, vz = weighted_pass(X, XT, feats, C, active, theta)
        gz = const[active, :k] - gz  # sum C (y - p) x~
        vz = packed[:, :k] - 2 * vz  # sum C p(1-p)(1-2p) x~ (x~_0 = 1)
        Hz = np.empty((len(active), k, k))
        Hz[:, a, b] = packed
        Hz[:, b, a] = packed
        H += Ta @ Hz @ np.swapaxes(Ta, 1, 2)
        g += np.einsum("bij,bj->bi", Ta, gz)
        v += np.einsum("bij,bj->bi", Ta, vz)
        pq += packed[:, 0]  # sum C p(1-p)
    return H, g, v, pq


def taylor_start(beta0: np.ndarray, terms: list, ok: np.ndarray, rounds: int = 5) -> np.ndarray:
    """Starting coefficients (B x k) for ``batched_logistic``: the root of each resample's likelihood
    equations expanded to third order around the full-sample fit ``beta0``.

    ``terms`` holds per cell (T, theta0, H0, g0, D0): the resample's map T (B x k x k), the full-sample
    coefficients on X~ (k), and at theta0 the count-weighted sums H0 = sum C p(1-p) x~ x~' (B x k x k),
    g0 = sum C (y - p) x~ (B x k) and D0 = sum C p(1-p)(1-2p) x~_a x~_b x~_c over a <= b <= c
    (B x number of triples). With d = T' beta - theta0 the score is about
    g0 - H0 d - D0[d, d] / 2; a few Newton rounds on these small arrays find its root, whose
    error is of third order in d, so one pass over the data then reaches the convergence tolerance.
    Where that root is not found, or lies far from theta0 (|d| > TAYLOR_REACH, small cells), the
    start is the first Newton step from beta0 (the expansion to second order) instead.

    Source: a third-order Taylor expansion of the score (Householder-type start), no published method for this
    use.
    """
    k = len(beta0)
    where = {t: i for i, t in enumerate(combinations_with_replacement(range(k), 3))}
    full = np.array([where[tuple(sorted(t))] for t in np.ndindex(k, k, k)])
    cells = [(T, theta0, H0, g0, D0[:, full].reshape(-1, k, k, k)) for T, theta0, H0, g0, D0 in terms]
    B = cells[0][0].shape[0]
    beta = np.broadcast_to(beta0, (B, k)).copy()
    eye = np.eye(k)
    use = ok.copy()
    newton = beta
    for r in range(rounds + 1):
        G = np.zeros((B, k))
        J = np.zeros((B, k, k))
        reach = np.zeros(B)
        for T, theta0, H0, g0, D in cells:
            d = np.einsum("bak,ba->bk", T, beta) - theta0
            Dd = np.einsum("bijl,bl->bij", D, d) if r else np.zeros_like(H0)
            G += np.einsum("bij,bj->bi", T, g0 - np.einsum("bij,bj->bi", H0 + 0.5 * Dd, d))
            J += T @ (H0 + Dd) @ np.swapaxes(T, 1, 2)
            reach = np.maximum(reach, np.abs(d).max(axis=1))
        use &= np.isfinite(J).all(axis=(1, 2)) & np.isfinite(G).all(axis=1)
        J[~use] = eye
        G[~use] = 0.0
        try:
            step = np.linalg.solve(J, G[..., None])[..., 0]
        except np.linalg.LinAlgError:
            return newton
        beta = beta + step
        if not r:  # round 0: the second-order (Newton) start, kept as the fallback
            newton = beta
    found = use & (np.abs(step).max(axis=1) < 1e-9 * np.maximum(1.0, np.abs(beta).max(axis=1)))
    found &= reach <= TAYLOR_REACH
    return np.where(found[:, None], beta, newton)


def refit_one(cells: list, i: int) -> tuple[np.ndarray, float, bool]:
    """Resample ``i`` fitted on its drawn rows by ``fit_logistic``: (coefficients, sum of p(1-p), usable)."""
    rows = [(np.repeat(X, C[i].astype(np.intp), axis=0) @ T[i].T, np.repeat(y, C[i].astype(np.intp)))
            for X, y, C, T in cells]
    X = np.vstack([r[0] for r in rows])
    y = np.concatenate([r[1] for r in rows])
    try:
        fit = fit_logistic(X, y)
    except (Separation, ValueError):
        return np.full(X.shape[1], np.nan), np.nan, False
    return fit.coef, float(np.sum(fit.p_hat * (1 - fit.p_hat))), True


def separated(cells: list, beta: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Resamples whose linear predictor exceeds ETA_LIMIT in size on some complete case of a cell
    (fitted probabilities of 0 or 1: separation), as ``fit_logistic`` checks. A bound from the
    largest |x~| of each trait clears almost every resample; the rest are checked row by row."""
    out = np.zeros(len(beta), dtype=bool)
    safe = np.where(ok[:, None], beta, 0.0)
    for X, _, _, T in cells:
        theta = np.einsum("bak,ba->bk", T, safe)
        bound = np.abs(theta[:, 0]) + np.abs(theta[:, 1:]) @ np.abs(X[:, 1:]).max(axis=0, initial=0.0)
        check = np.flatnonzero(ok & (bound >= ETA_LIMIT))
        if len(check):
            out[check] |= np.abs(theta[check] @ X.T).max(axis=1) >= ETA_LIMIT
    return out


def solve_each(H: np.ndarray, g: np.ndarray, ok: np.ndarray, active: np.ndarray) -> np.ndarray:
    """Newton steps H^-1 g of the active resamples; a singular one gets step 0 and is marked unusable."""
    try:
        return np.linalg.solve(H, g[..., None])[..., 0]
    except np.linalg.LinAlgError:
        step = np.zeros_like(g)
        for i in range(len(H)):
            try:
                step[i] = np.linalg.solve(H[i], g[i])
            except np.linalg.LinAlgError:
                ok[active[i]] = False
        return step


# resamples per pass over a cell are processed in blocks of about this many numbers, so the
# working arrays stay in the processor cache (measured fastest near 2e4 to 1e5 here)
BLOCK = 60_000


def weighted_pass(X, XT, feats, C, active, theta):
    """For resamples ``active`` (coefficients ``theta`` on X~): sum C p(1-p) feats, sum C p x~,
    and sum C p^2 (1-p) x~, block by block.

    Parameters: X~, its transpose, the pair products ``feats``, the counts C, the ``active`` resamples and
    their ``theta``. Returns (packed information sums, score sums, v sums). Source: none (bookkeeping, no
    published method).
    """
    m, n = len(active), X.shape[0]
    k = X.shape[1]
    packed = np.empty((m, feats.shape[1]))
    gz = np.empty((m, k))
    vz = np.empty((m, k))
    rows = max(1, BLOCK // max(n, 1))
    eta = np.empty((rows, n))
    cp = np.empty((rows, n))
    Ca = C if m == C.shape[0] else C[active]  # active is sorted: all rows, or the few not converged
    for lo in range(0, m, rows):
        hi = min(m, lo + rows)
        e, c = eta[: hi - lo], cp[: hi - lo]
        np.matmul(-theta[lo:hi], XT, out=e)  # -eta
        with np.errstate(over="ignore"):
            np.exp(e, out=e)
        e += 1.0
        np.reciprocal(e, out=e)  # p (numpy's vectorized exp is faster than expit here)
        np.multiply(Ca[lo:hi], e, out=c)  # C p
        np.matmul(c, X, out=gz[lo:hi])
        np.subtract(1.0, e, out=e)  # 1 - p
        c *= e  # C p (1 - p)
        np.matmul(c, feats, out=packed[lo:hi])
        e *= c
        np.subtract(c, e, out=e)  # C p (1 - p) - C p (1 - p)^2 = C p^2 (1 - p)
        np.matmul(e, X, out=vz[lo:hi])
    return packed, gz, vz
