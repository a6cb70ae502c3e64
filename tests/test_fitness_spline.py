"""The nonparametric fitness function (analysis.fitness_spline) against independent smoothers.

Implementation: our own O(n) Reinsch solver (Green & Silverman 1994, *Nonparametric Regression and
Generalized Linear Models*) with GCV (Craven & Wahba 1979, Numer. Math. 31:377-403).
References here: scipy's ``make_smoothing_spline`` (a B-spline implementation of the same criterion,
λ by GCV when ``lam=None``), and a dense penalized regression written out in this file.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import make_smoothing_spline

from fieldslope.analysis import fitness_spline as fs


def data(seed: int, n: int = 80):
    rng = np.random.default_rng(seed)
    x = np.sort(rng.normal(size=n))
    W = rng.poisson(np.exp(0.4 * x - 0.3 * x ** 2 + 0.5)).astype(float)
    return x, W


def natural(spline, x, lo, hi):
    """scipy's spline, continued as a straight line beyond the end knots (a natural spline's extension)."""
    d = spline.derivative()
    out = spline(np.clip(x, lo, hi))
    out = np.where(x < lo, spline(lo) + (x - lo) * d(lo), out)
    return np.where(x > hi, spline(hi) + (x - hi) * d(hi), out)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_gcv_spline_equals_scipy(seed):
    x, W = data(seed)
    w = W / W.mean()
    mine = fs.smoothing_spline(x, w, pool=False)
    ref = make_smoothing_spline(x, w)                 # lam=None: λ by GCV (scipy's own search)
    grid = np.linspace(x.min(), x.max(), 41)
    # the two λ searches stop at slightly different λ on a flat GCV minimum
    assert np.max(np.abs(mine(grid) - ref(grid))) < 2e-3
    same = make_smoothing_spline(x, w, lam=mine.lam)  # at the same λ the curves agree to rounding
    # (closely spaced knots make both systems ill-conditioned: agreement to ~1e-6 of values near 1)
    assert np.max(np.abs(mine(grid) - same(grid))) < 1e-5


def test_fit_trace_and_gcv_equal_a_dense_penalized_regression():
    # g = (I + λK)⁻¹ y with K = Q R⁻¹ Qᵀ (Green & Silverman 1994, §2.1-2.3), written out densely;
    # GCV(λ) = n RSS / (n − tr A)² (Craven & Wahba 1979).
    x, W = data(4, 60)
    y = W / W.mean()
    n, h = len(x), np.diff(x)
    Q, R = np.zeros((n, n - 2)), np.zeros((n - 2, n - 2))
    for j in range(n - 2):
        Q[j, j], Q[j + 1, j], Q[j + 2, j] = 1 / h[j], -1 / h[j] - 1 / h[j + 1], 1 / h[j + 1]
        R[j, j] = (h[j] + h[j + 1]) / 3
        if j + 1 < n - 2:
            R[j, j + 1] = R[j + 1, j] = h[j + 1] / 6
    K = Q @ np.linalg.solve(R, Q.T)
    for lam in (0.01, 0.3, 5.0):
        A = np.linalg.inv(np.eye(n) + lam * K)
        fit = fs.smoothing_spline(x, y, lam=lam, pool=False)
        assert fit(x) == pytest.approx(A @ y, abs=1e-5)   # both ill-conditioned where knots are close
        assert fit.edf == pytest.approx(np.trace(A), rel=1e-6)
        assert fit.gcv == pytest.approx(n * np.sum((y - A @ y) ** 2) / (n - np.trace(A)) ** 2, rel=1e-6)
    # and the chosen λ is the dense criterion's minimum over a fine grid
    best = fs.smoothing_spline(x, y, pool=False)
    lams = np.exp(np.linspace(np.log(best.lam) - 2, np.log(best.lam) + 2, 81))
    scores = []
    for lam in lams:
        A = np.linalg.inv(np.eye(n) + lam * K)
        scores.append(n * np.sum((y - A @ y) ** 2) / (n - np.trace(A)) ** 2)
    assert best.gcv <= min(scores) * (1 + 1e-6)


def test_tied_trait_values_give_the_fit_to_the_individuals():
    # pooling ties (mean and count) is exact: same curve as scipy on the pooled data with counts as
    # weights, and the same as a dense fit on the individuals with a tiny jitter (the limit of ties)
    rng = np.random.default_rng(7)
    x = np.round(rng.normal(size=120), 1)
    y = rng.poisson(np.exp(0.3 * x)).astype(float)
    fit = fs.smoothing_spline(x, y, lam=0.5, pool=False)
    u, inv = np.unique(x, return_inverse=True)
    c = np.bincount(inv)
    ref = make_smoothing_spline(u, np.bincount(inv, weights=y) / c, w=c.astype(float), lam=0.5)
    assert fit(u) == pytest.approx(ref(u), abs=1e-8)


def test_bootstrap_band_equals_scipy_refits_of_the_same_resamples():
    x, W = data(5, 90)
    cells = np.repeat(["a", "b", "c"], 30)
    ff = fs.fitness_function(x, W, cells, resamples=40, seed=11, labels=("2024", "all", "wing"), points=31)
    # the same resamples, refitted with scipy at the same λ (held fixed, as in the band)
    xg = fs._grid(np.asarray(x, float))
    codes = np.unique(cells, return_inverse=True)[1]
    counts = fs.resample_counts(fs.resample_rng(11, "2024", "all", "wing"), codes, 40)
    knots, inv = np.unique(xg, return_inverse=True)
    curves = []
    for r in counts:
        cell_mean = np.bincount(codes, weights=r * W) / np.bincount(codes)
        y = W / cell_mean[codes]
        wt = np.bincount(inv, weights=r, minlength=len(knots))
        here = wt > 0
        ybar = np.bincount(inv, weights=r * y, minlength=len(knots))[here] / wt[here]
        s = make_smoothing_spline(knots[here], ybar, w=wt[here], lam=ff.fit.lam)
        curves.append(natural(s, ff.grid, knots[here][0], knots[here][-1]))
    low, high = np.percentile(np.array(curves), [2.5, 97.5], axis=0)
    assert ff.resamples == 40
    assert ff.low == pytest.approx(low, abs=1e-5)
    assert ff.high == pytest.approx(high, abs=1e-5)
    assert np.all(ff.low <= ff.curve + 1e-9) or np.mean(ff.low <= ff.curve) > 0.9


def test_too_few_values_and_zero_fitness_say_why():
    with pytest.raises(ValueError, match="at least 5 distinct"):
        fs.smoothing_spline([1, 2, 3, 3], [1, 2, 3, 4])
    with pytest.raises(ValueError, match="mean fitness is 0"):
        fs.fitness_function(np.arange(10.0), np.zeros(10))
