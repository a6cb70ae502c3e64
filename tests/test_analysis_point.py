"""Point estimates and standard errors against a reference library and published formulas.

Sources, named beside each check:
- statsmodels OLS and Logit (reference library).
- Lande & Arnold 1983, Evolution 37:1210-1226: beta = P^-1 S; for 0/1 fitness
  S is the survivors' mean minus everyone's mean; Gaussian fitness results.
- Falconer & Mackay 1996, Introduction to Quantitative Genetics, appendix
  table of selection intensities (values from memory), and scipy.stats.norm.
- Janzen & Stern 1998, Evolution 52:1564-1571: logistic gradient.
- Arnold & Wade 1984, Evolution 38:709-719: opportunity for selection.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from fieldslope.analysis.design import Design
from fieldslope.analysis.quadratic import canonical_axes
from fieldslope.analysis.table import COLUMNS, estimate_table

TRAITS = ("mass", "wing", "bill")


def season_frame(n_per_site=(160, 220), seed=3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for site, n in zip(("north", "south"), n_per_site):
        z = rng.multivariate_normal([30, 8, 12], [[9, 1.2, 0.5], [1.2, 1, 0.2], [0.5, 0.2, 2.25]], size=n)
        eta = 0.3 + 0.25 * (z[:, 0] - 30) / 3 - 0.2 * ((z[:, 1] - 8) ** 2)
        surv = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
        eggs = rng.poisson(np.exp(0.8 + 0.1 * (z[:, 2] - 12))).astype(float)
        parts.append(pd.DataFrame({"id": [f"{site}{i}" for i in range(n)], "season": "2031", "site": site,
                                   "mass": z[:, 0], "wing": z[:, 1], "bill": z[:, 2], "surv": surv, "eggs": eggs}))
    return pd.concat(parts, ignore_index=True)


DESIGN = Design(traits=TRAITS, fitness={"surv": "binary", "eggs": "count"})


def get(table, site, fitness, quantity, term):
    r = table[(table.site == site) & (table.fitness == fitness) & (table.quantity == quantity) & (table.term == term)]
    assert len(r) == 1, (site, fitness, quantity, term)
    return r.iloc[0]


def reference_design(cells):
    """Standardize (ddof 1) and relativize within each cell, then stack."""
    xs, ws, Ws = [], [], []
    for d in cells:
        z = d[list(TRAITS)].to_numpy()
        xs.append((z - z.mean(0)) / z.std(0, ddof=1))
        ws.append(d["W"].to_numpy() / d["W"].mean())
        Ws.append(d["W"].to_numpy())
    return np.vstack(xs), np.concatenate(ws), np.concatenate(Ws)


@pytest.fixture(scope="module")
def season():
    frame = season_frame()
    return frame, estimate_table(frame, DESIGN, bootstrap=0)


def test_columns_are_the_binding_ones(season):
    _, est = season
    assert list(est.table.columns) == COLUMNS
    assert est.table["estimate"].notna().all()


@pytest.mark.parametrize("fitness", ["surv", "eggs"])
@pytest.mark.parametrize("site", ["north", "south", "all"])
def test_gradients_match_statsmodels_ols(season, fitness, site):
    frame, est = season
    t = est.table
    cells = [g.assign(W=g[fitness]) for s, g in frame.groupby("site") if site in (s, "all")]
    x, w, _ = reference_design(cells)
    lin = sm.OLS(w, sm.add_constant(x)).fit()  # statsmodels OLS (reference library)
    for j, name in enumerate(TRAITS):
        r = get(t, site, fitness, "gradient", name)
        assert r.estimate == pytest.approx(lin.params[1 + j], rel=1e-8)
        assert r.se == pytest.approx(lin.bse[1 + j], rel=1e-8)
        assert r.n == len(w)
    pairs = [(j, k) for j in range(3) for k in range(j, 3)]
    quad = np.column_stack([x] + [x[:, j] * x[:, k] for j, k in pairs])
    fit = sm.OLS(w, sm.add_constant(quad)).fit()  # statsmodels OLS on x_j^2 (not 1/2 x_j^2)
    for i, (j, k) in enumerate(pairs):
        coef, se = fit.params[4 + i], fit.bse[4 + i]
        if j == k:  # gamma_jj is twice the coefficient of x_j^2 (Stinchcombe et al. 2008, Evolution 62:2435-2440)
            r = get(t, site, fitness, "quadratic", f"{TRAITS[j]}^2")
            assert r.estimate == pytest.approx(2 * coef, rel=1e-8)
            assert r.se == pytest.approx(2 * se, rel=1e-8)
        else:
            r = get(t, site, fitness, "correlational", f"{TRAITS[j]}:{TRAITS[k]}")
            assert r.estimate == pytest.approx(coef, rel=1e-8)
            assert r.se == pytest.approx(se, rel=1e-8)


@pytest.mark.parametrize("site", ["north", "south", "all"])
def test_logistic_gradient_matches_statsmodels_logit(season, site):
    frame, est = season
    cells = [g.assign(W=g["surv"]) for s, g in frame.groupby("site") if site in (s, "all")]
    x, _, W = reference_design(cells)
    lg = sm.Logit(W, sm.add_constant(x)).fit(disp=0, tol=1e-12, maxiter=200)  # statsmodels Logit
    p = lg.predict()
    factor = np.mean(p * (1 - p)) / W.mean()  # Janzen & Stern 1998
    for j, name in enumerate(TRAITS):
        r = get(est.table, site, "surv", "gradient_logistic", name)
        assert r.estimate == pytest.approx(lg.params[1 + j] * factor, rel=1e-8)
        assert r.se == pytest.approx(lg.bse[1 + j] * factor, rel=1e-7)
    # count fitness gets no logistic gradient
    assert not ((est.table.fitness == "eggs") & (est.table.quantity == "gradient_logistic")).any()


def test_binary_differential_is_survivors_mean_minus_mean_and_beta_is_P_inverse_S(season):
    """Lande & Arnold 1983: S = mean of survivors - mean of all (0/1 fitness); beta = P^-1 S."""
    frame, est = season
    d = frame[frame.site == "north"]
    z = d[list(TRAITS)].to_numpy()
    alive = d["surv"].to_numpy() == 1
    S = z[alive].mean(0) - z.mean(0)
    P = np.cov(z, rowvar=False, ddof=0)  # same divisor as S
    beta_raw = np.linalg.solve(P, S)
    for j, name in enumerate(TRAITS):
        assert get(est.table, "north", "surv", "differential", name).estimate == pytest.approx(S[j], rel=1e-10)
        assert get(est.table, "north", "surv", "differential_std", name).estimate == pytest.approx(
            S[j] / z[:, j].std(ddof=1), rel=1e-10)
        assert get(est.table, "north", "surv", "gradient_raw", name).estimate == pytest.approx(beta_raw[j], rel=1e-8)


def test_opportunity_is_variance_of_relative_fitness(season):
    """Arnold & Wade 1984: I = var(w), divisor n; for 0/1 fitness I = (1 - p)/p with p the survivors' share."""
    frame, est = season
    d = frame[frame.site == "south"]
    p = d["surv"].mean()
    assert get(est.table, "south", "surv", "opportunity", "").estimate == pytest.approx((1 - p) / p, rel=1e-12)


def test_canonical_axes_are_eigenvalues_of_gamma(season):
    """Phillips & Arnold 1989, Evolution 43:1209-1222: canonical values are the eigenvalues of gamma (scipy eigh)."""
    from scipy.linalg import eigh

    _, est = season
    t = est.table
    g = np.zeros((3, 3))
    for j in range(3):
        g[j, j] = get(t, "north", "eggs", "quadratic", f"{TRAITS[j]}^2").estimate
        for k in range(j + 1, 3):
            g[j, k] = g[k, j] = get(t, "north", "eggs", "correlational", f"{TRAITS[j]}:{TRAITS[k]}").estimate
    ref = eigh(g, eigvals_only=True)[::-1]
    for i in range(3):
        assert get(t, "north", "eggs", "canonical", f"m{i + 1}").estimate == pytest.approx(ref[i], rel=1e-10)
    vals, vecs = canonical_axes(g)
    assert np.allclose(g @ vecs, vecs * vals)


def test_gaussian_fitness_recovers_lande_arnold_beta_and_gamma():
    """Gaussian fitness on a normal trait (Lande & Arnold 1983).

    z ~ N(mu, 1), W(z) = exp(-(z - theta)^2 / (2 omega^2)). The product of the
    two Gaussian curves is Gaussian: after selection z has variance
    P* = (1 + 1/omega^2)^-1 = omega^2/(1 + omega^2) and mean
    mu* = P*(mu + theta/omega^2). Hence S = mu* - mu = (theta - mu)/(1 + omega^2),
    beta = S/P = (theta - mu)/(1 + omega^2), and with
    C = P* - P + S^2 = beta^2 - 1/(1 + omega^2), gamma = C/P^2 = beta^2 - 1/(1 + omega^2).
    For a normal trait the quadratic regression coefficient equals gamma.
    The fitness here has no noise, so the OLS se understates the sampling
    error; that error is measured over 40 independent samples instead.
    """
    rng = np.random.default_rng(42)
    n, mu, theta, omega = 20_000, 0.0, 1.0, 2.0
    design = Design(traits=("z",), fitness={"W": "continuous"}, groups=())
    betas, gammas = [], []
    for _ in range(40):
        z = rng.normal(mu, 1.0, n)
        W = np.exp(-((z - theta) ** 2) / (2 * omega**2))
        frame = pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "z": z, "W": W})
        est = estimate_table(frame, design, bootstrap=0).table
        betas.append(est[est.quantity == "gradient"].estimate.iloc[0])
        gammas.append(est[est.quantity == "quadratic"].estimate.iloc[0])
    beta = (theta - mu) / (1 + omega**2)
    gamma = beta**2 - 1 / (1 + omega**2)
    assert abs(np.mean(betas) - beta) < 4 * np.std(betas, ddof=1) / np.sqrt(40)
    assert abs(np.mean(gammas) - gamma) < 4 * np.std(gammas, ddof=1) / np.sqrt(40)
    assert np.mean(gammas) < 0  # stabilizing


@pytest.mark.parametrize("p, handbook", [(0.5, 0.798), (0.2, 1.400), (0.1, 1.755), (0.05, 2.063)])
def test_truncation_selection_intensity(p, handbook):
    """Top fraction p of a normal trait survive: S/sd = phi(x_p)/p (selection intensity).

    Handbook values: Falconer & Mackay 1996, appendix table (from memory);
    the exact value from scipy.stats.norm.
    """
    exact = stats.norm.pdf(stats.norm.isf(p)) / p
    assert exact == pytest.approx(handbook, abs=6e-4)
    rng = np.random.default_rng(int(p * 1000))
    n = 400_000
    z = rng.normal(5.0, 2.0, n)
    alive = (z > np.quantile(z, 1 - p)).astype(float)
    frame = pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "z": z, "alive": alive})
    t = estimate_table(frame, Design(traits=("z",), fitness={"alive": "binary"}, groups=()), bootstrap=0).table
    r = t[t.quantity == "differential_std"].iloc[0]
    assert r.estimate == pytest.approx(exact, abs=4 * r.se)
    assert r.estimate == pytest.approx(exact, rel=0.01)


def test_slope_se_is_the_ols_slope_standard_error_of_statsmodels():
    """The closed-form se of a simple regression slope (Draper & Smith 1998, ch. 1) equals statsmodels' OLS
    bse of the slope; a constant variable is refused like a collinear design."""
    import statsmodels.api as sm

    from fieldslope.analysis.linear import Collinear, slope_se

    rng = np.random.default_rng(17)
    for n in (5, 40, 3000):
        v = rng.normal(50.0, 7.0, n)
        y = 0.8 + 0.01 * v + rng.gamma(2.0, 0.3, n)
        assert slope_se(v, y) == pytest.approx(sm.OLS(y, sm.add_constant(v)).fit().bse[1], rel=1e-10)
    with pytest.raises(Collinear):
        slope_se(np.full(10, 3.0), rng.normal(size=10))
