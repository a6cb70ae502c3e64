"""Each p-value answers its own row's question: checks by simulation and against statsmodels.

Simulated seasons draw traits and fitness from a known model, so the true
answer of each test is known: under a null hypothesis a 5 % test rejects in
about 5 % of seasons (the definition of a level-0.05 test; Freedman & Lane
1983, J. Bus. Econ. Stat. 1:292-298, and Anderson & Robinson 2001, Aust. N. Z.
J. Stat. 43:75-88, for the permutation of reduced-model residuals). The runs
here are sized for the test suite (a few seconds); benchmarks/bench_inference.py
repeats them with more seasons and permutations.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from threadpoolctl import threadpool_limits

from fieldslope.analysis.cells import prepare, split_cells
from fieldslope.analysis.design import Design
from fieldslope.analysis.permute import SeasonPermuter, permute_season
from fieldslope.analysis.table import BLAS_THREADS, estimate_table

TWO = Design(traits=("a", "b"), fitness={"w": "continuous"}, groups=("rep",))


def season(rng: np.random.Generator, n: int, beta_a: float, beta_b: float, r: float = 0.5, gamma: float = 0.0):
    """Traits a, b (sd 1, correlation r) and fitness 5 + beta_a a + beta_b b + gamma a^2 / 2 + normal noise (sd 0.5)."""
    z = rng.multivariate_normal([0.0, 0.0], [[1.0, r], [r, 1.0]], size=n)
    W = 5 + beta_a * z[:, 0] + beta_b * z[:, 1] + 0.5 * gamma * z[:, 0] ** 2 + rng.normal(0.0, 0.5, n)
    return pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "a": z[:, 0], "b": z[:, 1], "w": W})


def seasons(rng: np.random.Generator, k: int, n: int, *args, **kw) -> pd.DataFrame:
    """``k`` simulated seasons, each a cell of its own (group column ``rep``), so one run tests them all."""
    return pd.concat([season(rng, n, *args, **kw).assign(rep=f"r{i}", id=lambda d, i=i: f"{i}-" + d["id"])
                      for i in range(k)], ignore_index=True)


def p_values(frame: pd.DataFrame, P: int, seed: int = 1) -> pd.DataFrame:
    """Permutation p-values of every cell (simulated season) of ``frame``: one row per cell, columns (quantity, term)."""
    cells = split_cells(frame, TWO, ["w"])["s"]
    preps = {"w": [prepare(c, "w", "continuous", TWO.traits) for c in cells]}
    with threadpool_limits(limits=BLAS_THREADS, user_api="blas"):  # as estimate_table runs it
        p = permute_season(SeasonPermuter(preps, TWO.traits, pooled=False), "s", P, seed, lambda k: None)
    out = pd.Series(p)
    out.index = pd.MultiIndex.from_tuples([(site, q, t) for site, _, q, t in p])
    return out.unstack([1, 2])


def shuffled_fitness_p(frame: pd.DataFrame, P: int, rng: np.random.Generator) -> float:
    """The test the table used before: fitness shuffled, gradient of b refitted (no selection at all as the null)."""
    z = frame[["a", "b"]].to_numpy()
    X = np.column_stack([np.ones(len(z)), (z - z.mean(0)) / z.std(0, ddof=1)])
    w = frame["w"].to_numpy() / frame["w"].mean()
    coef_b = np.linalg.pinv(X)[2]
    observed = coef_b @ w
    reps = rng.permuted(np.broadcast_to(w, (P, len(w))), axis=1) @ coef_b
    return (1 + np.count_nonzero(np.abs(reps) >= abs(observed))) / (1 + P)


def test_partial_null_keeps_its_level_and_partial_test_has_more_power():
    """beta_b = 0 while b is correlated 0.5 with a strongly selected trait a (n = 300): the 5 % test of
    beta_b rejects in 3-7 % of 500 seasons. With beta_b = 0.15 it rejects more often than the test that
    shuffles fitness, whose null (no selection on any trait) spreads the statistic by a's selection too."""
    rng = np.random.default_rng(2026)
    P = 199
    null = p_values(seasons(rng, 500, 300, beta_a=0.6, beta_b=0.0), P)
    assert 0.03 <= (null[("gradient", "b")] < 0.05).mean() <= 0.07
    assert (null[("gradient_raw", "b")] == null[("gradient", "b")]).all()
    frame = seasons(rng, 150, 300, beta_a=0.6, beta_b=0.15)
    partial = (p_values(frame, P)[("gradient", "b")] < 0.05).sum()
    plain = sum(shuffled_fitness_p(g, P, rng) < 0.05 for _, g in frame.groupby("rep"))
    assert partial > plain + 10


def test_no_nonlinear_selection_largest_eigenvalue_rarely_significant():
    """gamma = 0 with strong linear selection (beta_a = 0.6, beta_b = 0.3): the largest canonical eigenvalue
    is called significant at 5 % in at most 7 % of 500 seasons, as is the smallest (Freedman-Lane with the
    linear model as the reduced model: a null of no nonlinear selection). With gamma_aa = 0.4 it is found."""
    rng = np.random.default_rng(99)
    P = 199
    null = p_values(seasons(rng, 500, 200, beta_a=0.6, beta_b=0.3), P)
    assert (null[("canonical", "m1")] < 0.05).mean() <= 0.07
    assert (null[("canonical", "m2")] < 0.05).mean() <= 0.07
    found = p_values(seasons(rng, 40, 200, 0.6, 0.3, gamma=0.4), P)
    assert (found[("canonical", "m1")] < 0.05).sum() >= 30


def test_logistic_gradient_p_value_is_statsmodels_likelihood_ratio_test():
    """p-value of a logistic gradient: likelihood-ratio test of its slope given the other traits, equal to
    statsmodels Logit fits with and without the trait (chi-square tail from scipy.stats, 1 df)."""
    from scipy import stats

    rng = np.random.default_rng(5)
    n = 250
    z = rng.multivariate_normal([0, 0], [[1, 0.4], [0.4, 1]], size=n)
    alive = (rng.random(n) < 1 / (1 + np.exp(-(0.3 + 0.8 * z[:, 0] + 0.25 * z[:, 1])))).astype(float)
    frame = pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "a": z[:, 0], "b": z[:, 1], "alive": alive})
    design = Design(traits=("a", "b"), fitness={"alive": "binary"}, groups=())
    t = estimate_table(frame, design, bootstrap=0, permutations=99).table
    x = (z - z.mean(0)) / z.std(0, ddof=1)
    full = sm.Logit(alive, sm.add_constant(x)).fit(disp=0)
    for j, name in enumerate(("a", "b")):
        reduced = sm.Logit(alive, sm.add_constant(np.delete(x, j, axis=1))).fit(disp=0)
        ref = stats.chi2.sf(2 * (full.llf - reduced.llf), 1)
        got = t[(t.quantity == "gradient_logistic") & (t.term == name)].p_value.iloc[0]
        assert got == pytest.approx(ref, rel=1e-6)
