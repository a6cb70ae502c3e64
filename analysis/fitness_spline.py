"""The nonparametric fitness function: a cubic smoothing spline with a bootstrap band.

Relative fitness against a standardized trait is smoothed by the natural cubic spline that
minimizes  Σ c_k (ȳ_k − g(t_k))² + λ ∫ g''(t)² dt  (ties in the trait pooled: ȳ_k is the mean and c_k
the number of individuals at the value t_k, which gives exactly the fit to the individuals), with λ
chosen by generalized cross-validation (Craven & Wahba 1979, Numer. Math. 31:377–403), as Schluter
(1988, Evolution 42:849–861) proposed for fitness functions. The band is the pointwise 95 %
percentile interval of the curves refitted to bootstrap resamples of individuals within cells, with
fitness re-relativized in each resample and λ held at its value for the data.

Computation: the Reinsch form (Green & Silverman 1994, *Nonparametric Regression and Generalized
Linear Models*, §2.3 and §3.5): (R + λQᵀW⁻¹Q)γ = Qᵀȳ, g = ȳ − λW⁻¹Qγ, a five-diagonal system solved
in O(m); the trace of the smoother for GCV from the central band of the inverse (Hutchinson &
de Hoog 1985, Numer. Math. 47:99–106). Checked against scipy's ``make_smoothing_spline`` in the
tests. No I/O here.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_solve_banded, cholesky_banded, solveh_banded
from scipy.optimize import minimize_scalar

__all__ = ["SplineFit", "FitnessFunction", "smoothing_spline", "evaluate", "resample_rng", "resample_counts",
           "fitness_function"]

MIN_DISTINCT = 5          # fewer distinct trait values: no curve
# trait values closer than this fraction of their range are pooled (the knots' spacing sets how well
# the band system is conditioned; 1/1000 of the range is finer than field measurements)
RESOLUTION = 1e-3
LEVEL = 0.95


@dataclass(frozen=True)
class SplineFit:
    """A fitted natural cubic spline: values ``g`` and second derivatives ``gamma`` at the knots."""

    knots: np.ndarray
    g: np.ndarray
    gamma: np.ndarray          # second derivatives at the knots (0 at both ends)
    lam: float
    edf: float                 # trace of the smoother (effective degrees of freedom)
    gcv: float

    def __call__(self, x) -> np.ndarray:
        return evaluate(self.knots, self.g, self.gamma, np.asarray(x, float))


@dataclass(frozen=True)
class FitnessFunction:
    """The curve on ``grid`` with its pointwise band (NaN where no band could be formed)."""

    grid: np.ndarray
    curve: np.ndarray
    low: np.ndarray
    high: np.ndarray
    fit: SplineFit
    n: int
    resamples: int             # resamples that gave a curve


def _grid(x: np.ndarray) -> np.ndarray:
    """x on a grid of RESOLUTION × its range (values closer than that are pooled)."""
    step = RESOLUTION * (x.max() - x.min()) if len(x) else 0.0
    return np.round(x / step) * step if step > 0 else x


def _pool_ties(x: np.ndarray, y: np.ndarray, c: np.ndarray):
    """Distinct x (ascending), the weighted mean of y at each, and the summed weights."""
    knots, inverse = np.unique(x, return_inverse=True)
    weight = np.bincount(inverse, weights=c, minlength=len(knots))
    ybar = np.bincount(inverse, weights=c * y, minlength=len(knots)) / weight
    return knots, ybar, weight, inverse


class _Reinsch:
    """The band matrices of one set of knots and weights (Green & Silverman 1994, §2.1.2)."""

    def __init__(self, knots: np.ndarray, weight: np.ndarray):
        h = np.diff(knots)
        self.a, self.c = 1.0 / h[:-1], 1.0 / h[1:]
        self.b = -self.a - self.c
        iw = 1.0 / weight
        a, b, c = self.a, self.b, self.c
        m2 = len(knots) - 2
        # C = Qᵀ W⁻¹ Q (five diagonals) and R (three), in scipy's upper banded storage
        self.C = np.zeros((3, m2))
        self.C[2] = a * a * iw[:-2] + b * b * iw[1:-1] + c * c * iw[2:]
        self.C[1, 1:] = b[:-1] * a[1:] * iw[1:-2] + c[:-1] * b[1:] * iw[2:-1]
        self.C[0, 2:] = c[:-2] * a[2:] * iw[2:-2]
        self.R = np.zeros((3, m2))
        self.R[2] = (h[:-1] + h[1:]) / 3.0
        self.R[1, 1:] = h[1:-1] / 6.0
        self.iw = iw

    def qt(self, y: np.ndarray) -> np.ndarray:
        return self.a * y[:-2] + self.b * y[1:-1] + self.c * y[2:]

    def q(self, gamma: np.ndarray) -> np.ndarray:
        out = np.zeros(len(gamma) + 2)
        out[:-2] += self.a * gamma
        out[1:-1] += self.b * gamma
        out[2:] += self.c * gamma
        return out

    def solve(self, ybar: np.ndarray, lam: float):
        """(g, γ interior, Cholesky factor) for one λ."""
        factor = cholesky_banded(self.R + lam * self.C, lower=False, check_finite=False)
        gamma = cho_solve_banded((factor, False), self.qt(ybar), check_finite=False)
        g = ybar - lam * self.iw * self.q(gamma)
        return g, gamma, factor

    def fitted(self, ybar: np.ndarray, lam: float):
        """(g, γ with the zero ends) for one λ, in one banded solve (the resampling loop)."""
        gamma = solveh_banded(self.R + lam * self.C, self.qt(ybar), check_finite=False)
        g = ybar - lam * self.iw * self.q(gamma)
        return g, np.concatenate([[0.0], gamma, [0.0]])

    def trace_residual(self, factor: np.ndarray, lam: float) -> float:
        """tr(I − A) = λ tr(B⁻¹C), B = R + λC, from the central band of B⁻¹ (Hutchinson & de Hoog 1985)."""
        u0, u1, u2 = factor[2], factor[1], factor[0]   # diagonal, first and second superdiagonal
        n = len(u0)
        s0 = [0.0] * (n + 2)     # s0[i] = Σ[i, i]
        s1 = [0.0] * (n + 2)     # s1[i] = Σ[i, i+1]
        s2 = [0.0] * (n + 2)     # s2[i] = Σ[i, i+2]
        d, e1, e2 = u0.tolist(), [0.0, *u1[1:].tolist(), 0.0, 0.0], [0.0, 0.0, *u2[2:].tolist(), 0.0, 0.0]
        # e1[i + 1] = U[i, i+1], e2[i + 2] = U[i, i+2]
        for i in range(n - 1, -1, -1):
            p, r = e1[i + 1] if i + 1 < n else 0.0, e2[i + 2] if i + 2 < n else 0.0
            di = d[i]
            s2i = -(p * s1[i + 1] + r * s0[i + 2]) / di
            s1i = -(p * s0[i + 1] + r * s1[i + 1]) / di
            s0[i] = (1.0 / di - p * s1i - r * s2i) / di
            s1[i], s2[i] = s1i, s2i
        C = self.C
        s0, s1, s2 = np.array(s0), np.array(s1), np.array(s2)
        tr = float(np.dot(s0[:n], C[2]) + 2 * np.dot(s1[:n - 1], C[1, 1:]) + 2 * np.dot(s2[:n - 2], C[0, 2:]))
        return lam * tr


def evaluate(knots: np.ndarray, g: np.ndarray, gamma: np.ndarray, x: np.ndarray) -> np.ndarray:
    """A natural cubic spline from its values and second derivatives (Green & Silverman 1994, eq. 2.5);
    straight lines beyond the end knots.

    Parameters: a ``SplineFit`` and the points. Returns the values there.
    """
    h = np.diff(knots)
    i = np.clip(np.searchsorted(knots, x, side="right") - 1, 0, len(knots) - 2)
    left, right = x - knots[i], knots[i + 1] - x
    hi = h[i]
    inside = ((left * g[i + 1] + right * g[i]) / hi
              - left * right / 6.0 * ((1 + left / hi) * gamma[i + 1] + (1 + right / hi) * gamma[i]))
    slope0 = (g[1] - g[0]) / h[0] - h[0] / 6.0 * gamma[1]
    slope1 = (g[-1] - g[-2]) / h[-1] + h[-1] / 6.0 * gamma[-2]
    out = np.where(x < knots[0], g[0] + (x - knots[0]) * slope0, inside)
    return np.where(x > knots[-1], g[-1] + (x - knots[-1]) * slope1, out)


def smoothing_spline(x, y, weights=None, lam: float | None = None, pool: bool = True) -> SplineFit:
    """The cubic smoothing spline of y on x; λ by GCV when not given. Raises ValueError with too few
    distinct x values. ``pool`` puts x on the RESOLUTION grid first.

    Parameters: ``x``, ``y``, optionally weights, λ and ``pool``. Returns a ``SplineFit``. Source: Reinsch
    1967 (Numer. Math. 10:177-183); GCV, Craven & Wahba 1979 (Numer. Math. 31:377-403); Green & Silverman 1994
    (Nonparametric Regression and Generalized Linear Models).
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    c = np.ones_like(x) if weights is None else np.asarray(weights, float)
    keep = np.isfinite(x) & np.isfinite(y) & (c > 0)
    x, y, c = x[keep], y[keep], c[keep]
    if pool:
        x = _grid(x)
    knots, ybar, weight, inverse = _pool_ties(x, y, c)
    if len(knots) < MIN_DISTINCT:
        raise ValueError(f"a smoothing spline needs at least {MIN_DISTINCT} distinct trait values, "
                         f"not {len(knots)}")
    within = float(np.sum(c * (y - ybar[inverse]) ** 2))
    n = float(np.sum(c))
    system = _Reinsch(knots, weight)

    def score(log_lam: float) -> float:
        lam_ = float(np.exp(log_lam))
        try:
            g, _, factor = system.solve(ybar, lam_)
        except np.linalg.LinAlgError:       # rounding at an extreme λ: not a candidate
            return np.inf
        rss = float(np.sum(weight * (ybar - g) ** 2)) + within
        resid_df = system.trace_residual(factor, lam_) - (len(knots) - n)   # n − tr(A)
        return n * rss / resid_df ** 2 if resid_df > 0 else np.inf

    if lam is None:
        # from nearly interpolating to nearly a straight line: λ in units of (trait range)³
        scale = 3.0 * float(np.log(knots[-1] - knots[0]))
        logs = scale + np.linspace(-25.0, 8.0, 28)
        scores = [score(s) for s in logs]
        k = int(np.argmin(scores))
        lo, hi = logs[max(k - 1, 0)], logs[min(k + 1, len(logs) - 1)]
        best = minimize_scalar(score, bounds=(lo, hi), method="bounded", options={"xatol": 1e-6})
        log_lam = float(best.x) if best.fun <= scores[k] else float(logs[k])
        lam = float(np.exp(log_lam))
    g, gamma, factor = system.solve(ybar, lam)
    edf = len(knots) - system.trace_residual(factor, lam)
    rss = float(np.sum(weight * (ybar - g) ** 2)) + within
    gcv = n * rss / (n - edf) ** 2 if n > edf else float("inf")
    return SplineFit(knots, g, np.concatenate([[0.0], gamma, [0.0]]), float(lam), float(edf), float(gcv))


def resample_rng(seed: int, *labels: str) -> np.random.Generator:
    """The generator of one band: depends only on the seed and the labels (season, site, trait).

    Parameters: ``seed`` and the labels. Returns a numpy Generator. Source: none (bookkeeping, no published
    method).
    """
    return np.random.default_rng(np.random.SeedSequence([seed, *(zlib.crc32(s.encode()) for s in labels)]))


def resample_counts(rng: np.random.Generator, cells: np.ndarray, size: int) -> np.ndarray:
    """``size`` bootstrap resamples as counts per individual (size × n): n_c draws with replacement
    within each cell c (``cells`` holds integer cell numbers).

    Parameters: a Generator, integer ``cells`` and ``size``. Returns the counts. Source: the bootstrap within
    strata, Efron & Tibshirani 1993, An Introduction to the Bootstrap.
    """
    k = int(cells.max()) + 1
    order = np.argsort(cells, kind="stable")                # rows grouped by cell
    sizes = np.bincount(cells, minlength=k)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    row_cell = cells[order]
    n = len(cells)
    picks = order[starts[row_cell] + rng.integers(0, sizes[row_cell], size=(size, n))]
    flat = (picks + (np.arange(size) * n)[:, None]).ravel()
    return np.bincount(flat, minlength=size * n).reshape(size, n).astype(float)


def _per_row(index: np.ndarray, values: np.ndarray, width: int) -> np.ndarray:
    """Row-wise bincount: out[r, j] = Σ values[r, i] over i with index[i] == j."""
    size = values.shape[0]
    flat = (index[None, :] + (np.arange(size) * width)[:, None]).ravel()
    return np.bincount(flat, weights=values.ravel(), minlength=size * width).reshape(size, width)


def _band_curves(knots, inverse, W, cells, counts, lam, grid) -> np.ndarray:
    """Curves on ``grid`` refitted to each row of ``counts`` (NaN rows where none), all at once: the
    resamples' five-diagonal systems are the blocks of one banded system."""
    size, k = counts.shape[0], int(cells.max()) + 1
    sizes = np.bincount(cells, minlength=k)
    cell_mean = _per_row(cells, counts * W[None, :], k) / sizes
    ok = np.all(cell_mean > 0, axis=1)
    weight = _per_row(inverse, counts, len(knots))
    y = W[None, :] / np.where(cell_mean > 0, cell_mean, np.nan)[:, cells]
    ysum = _per_row(inverse, np.nan_to_num(counts * y), len(knots))
    here = weight > 0
    ok &= here.sum(axis=1) >= MIN_DISTINCT
    out = np.full((size, len(grid)), np.nan)
    if not ok.any():
        return out
    good = np.flatnonzero(ok)
    rows, cols = np.nonzero(here[good])          # row-major: by resample, knots ascending
    t = knots[cols]
    w = weight[good][rows, cols]
    yb = ysum[good][rows, cols] / w
    N = len(t)
    h = np.diff(t)
    J = np.flatnonzero(rows[:-2] == rows[2:])    # interior knots (their left neighbour's index)
    a, c = 1.0 / h[J], 1.0 / h[J + 1]
    b = -a - c
    iw = 1.0 / w
    M = np.zeros((3, len(J)))
    M[2] = (h[J] + h[J + 1]) / 3.0 + lam * (a * a * iw[J] + b * b * iw[J + 1] + c * c * iw[J + 2])
    one = np.flatnonzero(J[1:] == J[:-1] + 1) + 1          # t with J[t] = J[t-1] + 1 (same resample)
    j = J[one - 1]
    M[1, one] = h[j + 1] / 6.0 + lam * (b[one - 1] * a[one] * iw[j + 1] + c[one - 1] * b[one] * iw[j + 2])
    two = np.flatnonzero(J[2:] == J[:-2] + 2) + 2
    j = J[two - 2]
    M[0, two] = lam * c[two - 2] * a[two] * iw[j + 2]
    rhs = a * yb[J] + b * yb[J + 1] + c * yb[J + 2]
    try:
        gamma = solveh_banded(M, rhs, check_finite=False)
    except np.linalg.LinAlgError:                # rounding at a very large λ: fall back one by one
        return _band_curves_each(knots, inverse, W, cells, counts, lam, grid)
    q = (np.bincount(J, a * gamma, N) + np.bincount(J + 1, b * gamma, N) + np.bincount(J + 2, c * gamma, N))
    g = yb - lam * iw * q
    second = np.zeros(N)
    second[J + 1] = gamma
    out[good] = _evaluate_stacked(t, rows, g, second, grid, len(good))
    return out


def _evaluate_stacked(t, rows, g, second, grid, m: int) -> np.ndarray:
    """Each of ``m`` stacked natural cubic splines on ``grid`` (m x len(grid)): knots ``t`` of resample
    ``rows``, values ``g`` and second derivatives ``second`` at them (Green & Silverman 1994,
    Nonparametric Regression and Generalized Linear Models), linear beyond the end knots."""
    # shift each resample's knots apart by its row, so one search finds every grid point's interval
    span = 2.0 * (max(t.max(), grid.max()) - min(t.min(), grid.min()) + 1.0)
    first = np.searchsorted(rows, np.arange(m))
    last = np.searchsorted(rows, np.arange(m), side="right") - 1
    xs = (grid[None, :] + (np.arange(m) * span)[:, None])
    ts = t + rows * span
    i = np.searchsorted(ts, xs.ravel(), side="right").reshape(xs.shape) - 1
    i = np.clip(i, first[:, None], (last - 1)[:, None])
    left, right = grid[None, :] - t[i], t[i + 1] - grid[None, :]
    hi = t[i + 1] - t[i]
    val = ((left * g[i + 1] + right * g[i]) / hi
           - left * right / 6.0 * ((1 + left / hi) * second[i + 1] + (1 + right / hi) * second[i]))
    h0, h1 = t[first + 1] - t[first], t[last] - t[last - 1]
    slope0 = (g[first + 1] - g[first]) / h0 - h0 / 6.0 * second[first + 1]
    slope1 = (g[last] - g[last - 1]) / h1 + h1 / 6.0 * second[last - 1]
    below = grid[None, :] < t[first][:, None]
    above = grid[None, :] > t[last][:, None]
    val = np.where(below, g[first][:, None] + (grid[None, :] - t[first][:, None]) * slope0[:, None], val)
    return np.where(above, g[last][:, None] + (grid[None, :] - t[last][:, None]) * slope1[:, None], val)


def _band_curves_each(knots, inverse, W, cells, counts, lam, grid) -> np.ndarray:
    """The same as :func:`_band_curves`, one resample at a time (a resample whose system fails is NaN)."""
    out = np.full((counts.shape[0], len(grid)), np.nan)
    for r in range(counts.shape[0]):
        try:
            out[r] = _band_curves(knots, inverse, W, cells, counts[r:r + 1], lam, grid)[0] \
                if counts.shape[0] > 1 else np.nan
        except np.linalg.LinAlgError:
            pass
    return out


CHUNK = 100       # resamples solved together (memory: CHUNK × n numbers a few times over)


def fitness_function(x, fitness, cells=None, *, resamples: int = 2000, seed: int = 0, labels=(),
                     points: int = 101, level: float = LEVEL) -> FitnessFunction:
    """Relative fitness against the standardized trait ``x``: the GCV spline and its bootstrap band.

    ``fitness`` is absolute fitness W; relative fitness is W / mean(W) within each of ``cells``
    (labels per individual; default one cell), in the data and in every resample. Individuals
    lacking x or W are left out. ``resamples`` = 0 gives the curve alone (NaN band). Resamples are
    drawn by :func:`resample_counts` from :func:`resample_rng` (seed, labels), CHUNK at a time.

    Returns a ``FitnessFunction`` (grid, curve, band). Source: Schluter 1988 (Evolution 42:849-861); the band,
    Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13.
    """
    x, W = np.asarray(x, float), np.asarray(fitness, float)
    cells = np.zeros(len(x), int) if cells is None else np.unique(np.asarray(cells).astype(str),
                                                                  return_inverse=True)[1]
    keep = np.isfinite(x) & np.isfinite(W)
    x, W, cells = x[keep], W[keep], cells[keep]
    if len(x) == 0:
        raise ValueError("no individual has both the trait and the fitness value")
    cells = np.unique(cells, return_inverse=True)[1]
    k = int(cells.max()) + 1
    mean_w = np.bincount(cells, weights=W, minlength=k) / np.bincount(cells, minlength=k)
    if np.any(mean_w <= 0):
        raise ValueError("mean fitness is 0 in a cell, so relative fitness is not defined there")
    w = W / mean_w[cells]
    x = _grid(x)
    fit = smoothing_spline(x, w, pool=False)
    grid = np.linspace(x.min(), x.max(), points)
    curve = fit(grid)
    low = high = np.full(points, np.nan)
    used = 0
    if resamples > 0:
        rng = resample_rng(seed, *labels)
        knots, inverse = np.unique(x, return_inverse=True)
        curves = np.concatenate([
            _band_curves(knots, inverse, W, cells, resample_counts(rng, cells, min(CHUNK, resamples - done)),
                         fit.lam, grid)
            for done in range(0, resamples, CHUNK)])
        good = curves[np.all(np.isfinite(curves), axis=1)]
        used = len(good)
        if used >= 0.95 * resamples and used > 1:
            tail = 100 * (1 - level) / 2
            low, high = np.percentile(good, [tail, 100 - tail], axis=0)
    return FitnessFunction(grid, curve, low, high, fit, int(len(x)), used)
