"""The sparse REML animal model against independent computations.

- a dense REML written here from the textbook likelihood
  (-2 log L = log|V| + log|X'V^-1X| + y'Py; Patterson & Thompson 1971,
  Biometrika 58:545-554), maximised by scipy.optimize, on small pedigrees;
- the half-sib design, where the animal model equals the sire model and
  h^2 = 4 s2_sire / s2_P from the one-way analysis of variance
  (Falconer & Mackay 1996, Introduction to Quantitative Genetics, 4th ed., ch. 10);
- coverage of the profile-likelihood interval over simulated studies with known h^2.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import minimize
from threadpoolctl import threadpool_limits

from animal_sim import simulate, tabular_a
from fieldslope.analysis.animal_data import model_data
from fieldslope.analysis.animal_model import Kernel, Surface, fit_bivariate, fit_univariate
from fieldslope.analysis.design import Design
from fieldslope.analysis.pedigree import from_frame

@pytest.fixture(autouse=True)
def one_blas_thread():
    # many small dense products: one thread avoids thread contention on a shared machine
    with threadpool_limits(limits=1, user_api="blas"):
        yield


DESIGN = Design(traits=("t0", "t1"), fitness={}, id="id", season="season", groups=("site",), mother="dam", father="sire")


def build(df, cols):
    ped = from_frame(df, "id", "season", "dam", "sire")
    data, _ = model_data(df, DESIGN, ped, df[cols])
    A = tabular_a(list(ped.dam), list(ped.sire))
    Z = data.Z.toarray()
    return data, data.X.toarray(), Z @ A @ Z.T


def dense_deviance(V, X, y):
    Vi = np.linalg.inv(V)
    XtViX = X.T @ Vi @ X
    P = Vi - Vi @ X @ np.linalg.solve(XtViX, X.T @ Vi)
    return np.linalg.slogdet(V)[1] + np.linalg.slogdet(XtViX)[1] + y @ P @ y


def test_univariate_equals_dense_reml():
    df = simulate(np.random.default_rng(11), [[0.5]], [[0.5]], generations=3, per_generation=50, pairs=15)
    data, X, ZAZ = build(df, ["t0"])
    y = data.Y[:, 0]
    n = len(y)

    def dev(lp):
        return dense_deviance(np.exp(lp[0]) * ZAZ + np.exp(lp[1]) * np.eye(n), X, y)

    res = minimize(dev, np.log([0.3, 0.6]), method="Nelder-Mead",
                   options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    va, ve = np.exp(res.x)
    fit = fit_univariate(Kernel(data))
    assert 0.05 < fit.h2 < 0.95  # an interior optimum, so both methods must find the same point
    assert fit.va == pytest.approx(va, abs=1e-4)
    assert fit.ve == pytest.approx(ve, abs=1e-4)
    assert fit.h2 == pytest.approx(va / (va + ve), abs=1e-4)
    assert fit.deviance == pytest.approx(res.fun, abs=1e-6)
    # the profile interval's ends lie 3.84 above the minimum of the dense profile deviance
    for h in (fit.h2_low, fit.h2_high):
        prof = minimize(lambda lc: dev([np.log(h) + lc[0], np.log(1 - h) + lc[0]]), [0.0], method="Nelder-Mead",
                        options={"xatol": 1e-10, "fatol": 1e-12}).fun
        assert prof - res.fun == pytest.approx(3.841459, abs=1e-3)


def test_bivariate_equals_dense_reml():
    G0 = np.array([[0.5, 0.25], [0.25, 0.4]])
    R0 = np.array([[0.5, -0.1], [-0.1, 0.6]])
    df = simulate(np.random.default_rng(5), G0, R0, generations=3, per_generation=40, pairs=12)
    data, X, ZAZ = build(df, ["t0", "t1"])
    n = len(data.Y)
    y = data.Y.T.reshape(-1)  # trait-major
    X2 = np.kron(np.eye(2), X)
    I = np.eye(n)

    def mats(p):
        Lg = np.array([[np.exp(p[0]), 0], [p[1], np.exp(p[2])]])
        Lr = np.array([[np.exp(p[3]), 0], [p[4], np.exp(p[5])]])
        return Lg @ Lg.T, Lr @ Lr.T

    def dev(p):
        G, R = mats(p)
        return dense_deviance(np.kron(G, ZAZ) + np.kron(R, I), X2, y)

    res = minimize(dev, [np.log(0.6), 0.1, np.log(0.6), np.log(0.7), 0.0, np.log(0.7)], method="BFGS",
                   options={"gtol": 1e-9})
    G, R = mats(res.x)
    fit = fit_bivariate(Surface(Kernel(data)), (0, 1))
    np.testing.assert_allclose(fit.G, G, atol=1e-4)
    np.testing.assert_allclose(fit.R, R, atol=1e-4)
    assert fit.rg == pytest.approx(G[0, 1] / np.sqrt(G[0, 0] * G[1, 1]), abs=1e-4)
    assert fit.deviance == pytest.approx(res.fun, abs=1e-5)


def test_half_sibs_agree_with_the_sire_model():
    # 30 unrelated sires, each mated to 8 unrelated dams with one offspring each; dams unknown
    rng = np.random.default_rng(3)
    s, k, va, ve = 30, 8, 0.4, 0.6
    a_sire = rng.normal(0, np.sqrt(va), s)
    rows = []
    for i in range(s):
        a = a_sire[i] / 2 + rng.normal(0, np.sqrt(0.75 * va), k)  # half the sire's value, plus dam and segregation
        for j in range(k):
            rows.append({"id": f"o{i}-{j}", "season": "1", "site": "x", "dam": "", "sire": f"s{i}",
                         "t0": a[j] + rng.normal(0, np.sqrt(ve))})
    df = pd.DataFrame(rows)
    data, _, _ = build(df, ["t0"])
    fit = fit_univariate(Kernel(data))
    y = df["t0"].to_numpy().reshape(s, k)
    ms_between = k * y.mean(axis=1).var(ddof=1)
    ms_within = y.var(axis=1, ddof=1).mean()
    s2_sire = (ms_between - ms_within) / k
    h2_anova = 4 * s2_sire / (s2_sire + ms_within)
    assert 0 < h2_anova < 1
    # balanced data with the estimate inside the parameter space: REML equals the ANOVA estimate
    assert fit.h2 == pytest.approx(h2_anova, abs=1e-4)


def test_profile_interval_covers_true_h2_in_about_95_percent_of_studies():
    rng = np.random.default_rng(2026)
    hits, studies = 0, 100
    for _ in range(studies):
        df = simulate(rng, [[0.4]], [[0.6]], generations=3, per_generation=80, pairs=25)
        data, _ = model_data(df, DESIGN, from_frame(df, "id", "season", "dam", "sire"), df[["t0"]])
        fit = fit_univariate(Kernel(data))
        hits += fit.h2_low <= 0.4 <= fit.h2_high
    # 95 % nominal; 90-99 % allows for 100 studies (binomial sd 2.2 points)
    assert 90 <= hits <= 99


def test_genetic_correlation_interval_covers_the_truth_in_about_95_percent_of_studies():
    """r_g = 0.12 / sqrt(0.4 x 0.3) = 0.346 in every study: its Wald interval on the atanh scale (Fisher 1921,
    Metron 1:3-32, for the transformation) holds it in 90-99 % of 100 studies (binomial sd 2.2 points)."""
    G0 = np.array([[0.40, 0.12], [0.12, 0.30]])
    R0 = np.array([[0.60, 0.10], [0.10, 0.70]])
    true = G0[0, 1] / np.sqrt(G0[0, 0] * G0[1, 1])
    rng = np.random.default_rng(2027)
    hits = have = 0
    for _ in range(100):
        df = simulate(rng, G0, R0, generations=3, per_generation=120, pairs=40)
        data, _ = model_data(df, DESIGN, from_frame(df, "id", "season", "dam", "sire"), df[["t0", "t1"]])
        fit = fit_bivariate(Surface(Kernel(data)), (0, 1))
        if fit.rg_low == fit.rg_low:
            have += 1
            hits += fit.rg_low <= true <= fit.rg_high
    assert have >= 95   # an interval unless the estimate sits on the edge (|r_g| near 1)
    assert 0.90 * have <= hits <= 0.99 * have
