"""Generalized selection gradients from a model of the fitness function (analysis.glm, analysis.generalized,
analysis.generalized_resample), each checked against a published formula or a reference library."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

sm = pytest.importorskip("statsmodels.api")

from fieldslope.analysis.cells import Cell, prepare  # noqa: E402
from fieldslope.analysis.design import Design  # noqa: E402
from fieldslope.analysis.generalized import bootstrap_p, glm_block, linear_gradients, quadratic_gradients  # noqa: E402
from fieldslope.analysis.glm import (  # noqa: E402
    BINOMIAL,
    NEGATIVE_BINOMIAL,
    POISSON,
    Family,
    choose_count_family,
    fit_glm,
    fit_negative_binomial,
)
from fieldslope.analysis.quadratic import quad_features, quad_pairs  # noqa: E402
from fieldslope.analysis.resample import SeasonResampler, bootstrap_season, chunk_rng, draw_counts  # noqa: E402
from fieldslope.analysis.table import estimate_table  # noqa: E402
from fieldslope.common.names import Q  # noqa: E402

TRAITS = ("a", "b")


def traits(n, rng):
    z = rng.multivariate_normal([0, 0], [[1, 0.4], [0.4, 1]], size=n)
    return z, np.column_stack([np.ones(n), (z - z.mean(0)) / z.std(0, ddof=1)])


def binary(n=600, seed=1):
    rng = np.random.default_rng(seed)
    z, X = traits(n, rng)
    y = (rng.random(n) < 1 / (1 + np.exp(-(0.3 + 0.8 * X[:, 1] - 0.4 * X[:, 2] - 0.3 * X[:, 1] ** 2)))).astype(float)
    return z, X, y


def counts(n=600, seed=2, size=None):
    rng = np.random.default_rng(seed)
    z, X = traits(n, rng)
    mu = np.exp(0.7 + 0.35 * X[:, 1] - 0.2 * X[:, 2] - 0.1 * X[:, 1] * X[:, 2])
    y = rng.poisson(mu) if size is None else rng.negative_binomial(size, size / (size + mu))
    return z, X, y.astype(float)


def quadratic_design(X):
    return np.column_stack([X, quad_features(X[:, 1:])])


# ----- the fits equal a reference library's GLM (statsmodels) -------------------------------------------


@pytest.mark.parametrize("name, data, ref", [
    (BINOMIAL, binary, lambda: sm.families.Binomial()),
    (POISSON, counts, lambda: sm.families.Poisson()),
    (NEGATIVE_BINOMIAL, lambda: counts(size=2.0), lambda: sm.families.NegativeBinomial(alpha=0.45)),
])
def test_glm_fits_equal_statsmodels_glm(name, data, ref):
    """Coefficients, standard errors and log-likelihood against statsmodels' GLM (same family, link and,
    for the negative binomial, the same alpha), linear and quadratic predictors."""
    _, X, y = data()
    family = Family(name, 0.45 if name == NEGATIVE_BINOMIAL else 0.0)
    for design in (X, quadratic_design(X)):
        ours = fit_glm(design, y, family)
        theirs = sm.GLM(y, design, family=ref()).fit(tol=1e-13)
        np.testing.assert_allclose(ours.coef, theirs.params, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(np.sqrt(np.diag(ours.cov)), theirs.bse, rtol=1e-6)
        assert ours.loglik == pytest.approx(theirs.llf, rel=1e-10)


def test_negative_binomial_alpha_is_the_maximum_likelihood_one_of_statsmodels():
    """alpha of the NB2 model by maximum likelihood against statsmodels' discrete NegativeBinomial (NB2,
    Newton's method to convergence); the coefficients with it."""
    _, X, y = counts(size=1.5, seed=5)
    ours = fit_negative_binomial(X, y)
    theirs = sm.NegativeBinomial(y, X, loglike_method="nb2").fit(method="newton", maxiter=200, tol=1e-12, disp=0)
    assert ours.family.alpha == pytest.approx(theirs.params[-1], rel=1e-5)
    np.testing.assert_allclose(ours.coef, theirs.params[:-1], rtol=1e-5, atol=1e-7)
    assert ours.loglik == pytest.approx(theirs.llf, rel=1e-10)


def test_overdispersed_counts_get_the_negative_binomial_and_poisson_counts_keep_poisson():
    """The boundary likelihood-ratio test of alpha = 0 (Self & Liang 1987): strongly overdispersed NB2
    counts (size 1) choose the negative binomial, Poisson counts keep Poisson."""
    _, X, y = counts(n=800, size=1.0, seed=3)
    choice = choose_count_family(X, y)
    assert choice.family.name == NEGATIVE_BINOMIAL and choice.p_overdispersion < 1e-6
    _, X, y = counts(n=800, seed=4)
    assert choose_count_family(X, y).family.name == POISSON


# ----- the gradients equal published formulas ----------------------------------------------------------


def test_logistic_generalized_gradient_is_the_janzen_stern_gradient():
    """For 0/1 fitness the mean derivative of p(x) = expit(a + b'x) over individuals, divided by mean
    fitness, is b_j mean(p(1-p)) / mean(W) (Janzen & Stern 1998, Evolution 52:1564-1571, their eq. for the
    linear selection gradient from a logistic regression); b and p from statsmodels' GLM."""
    _, X, y = binary()
    ref = sm.GLM(y, X, family=sm.families.Binomial()).fit(tol=1e-13)
    p = ref.fittedvalues
    expected = ref.params[1:] * np.mean(p * (1 - p)) / np.mean(y)
    fit = fit_glm(X, y, Family(BINOMIAL))
    np.testing.assert_allclose(linear_gradients(Family(BINOMIAL), fit.coef, X), expected, rtol=1e-9)


def test_poisson_generalized_gradient_with_an_intercept_is_the_coefficient():
    """For a Poisson log-link fit with an intercept, mean(b_j mu) / mean(mu) = b_j (Morrissey & Sakrejda 2013,
    Evolution 67:2094-2100): the average gradient equals the regression coefficient; b from statsmodels."""
    _, X, y = counts()
    ref = sm.GLM(y, X, family=sm.families.Poisson()).fit(tol=1e-13)
    fit = fit_glm(X, y, Family(POISSON))
    np.testing.assert_allclose(linear_gradients(Family(POISSON), fit.coef, X), ref.params[1:], rtol=1e-8)


@pytest.mark.parametrize("name, data, ref", [
    (BINOMIAL, binary, lambda: sm.families.Binomial()),
    (NEGATIVE_BINOMIAL, lambda: counts(size=2.0), lambda: sm.families.NegativeBinomial(alpha=0.45)),
])
def test_quadratic_generalized_gradients_are_mean_second_derivatives_of_the_fitted_function(name, data, ref):
    """gamma_jk = mean over individuals of d2 W / dx_j dx_k of the fitted fitness function, divided by its
    mean (Morrissey & Sakrejda 2013): the derivatives here by central differences of statsmodels' own
    prediction (its GLM fitted to the same quadratic predictor), not by our formula."""
    _, X, y = data()
    Xq = quadratic_design(X)
    res = sm.GLM(y, Xq, family=ref()).fit(tol=1e-13)

    def predict(x):
        return res.predict(quadratic_design(np.column_stack([np.ones(len(x)), x])))

    x, h = X[:, 1:], 1e-4
    expected = []
    for j, k in quad_pairs(2):
        ej, ek = np.eye(2)[j] * h, np.eye(2)[k] * h
        d2 = (predict(x + ej + ek) - predict(x + ej - ek) - predict(x - ej + ek) + predict(x - ej - ek)) / (4 * h * h)
        expected.append(np.mean(d2) / np.mean(predict(x)))
    family = Family(name, 0.45 if name == NEGATIVE_BINOMIAL else 0.0)
    fit = fit_glm(Xq, y, family)
    np.testing.assert_allclose(quadratic_gradients(family, fit.coef, Xq, 2), expected, rtol=1e-5, atol=1e-8)


def test_bootstrap_p_is_below_005_exactly_when_the_percentile_interval_excludes_zero():
    """The p-value of a generalized gamma row inverts the 95 % percentile interval (Efron & Tibshirani 1993,
    An Introduction to the Bootstrap, ch. 16): over replicate sets centred at several distances from 0,
    p < 0.05 goes with an interval (numpy's quantiles) that excludes 0, apart from ties at its edge."""
    rng = np.random.default_rng(0)
    agree = 0
    for centre in np.linspace(0, 3.5, 60):
        rep = centre + rng.standard_normal(1999)
        lo, hi = np.quantile(rep, [0.025, 0.975])
        agree += (bootstrap_p(rep) < 0.05) == (lo > 0 or hi < 0)
    assert agree >= 59


# ----- the batched bootstrap equals a refit of every resample ------------------------------------------


def one_cell(W, z, kind):
    return prepare(Cell("s", "x", z, {"W": W}), "W", kind, TRAITS)


def refit_replicates(prep, family, counts):
    """Per resample: the drawn rows, traits re-standardized, the GLMs refitted by fit_glm."""
    s = prep.multi
    out = []
    for c in counts:
        idx = np.repeat(np.arange(len(s.W)), c[s.rows].astype(int))
        z, y = s.z[idx], s.W[idx]
        X = np.column_stack([np.ones(len(y)), (z - z.mean(0)) / z.std(0, ddof=1)])
        Xq = quadratic_design(X)
        lin = fit_glm(X, y, family)
        quad = fit_glm(Xq, y, family)
        out.append(np.concatenate([linear_gradients(family, lin.coef, X), quadratic_gradients(family, quad.coef, Xq, 2)]))
    return np.array(out)


@pytest.mark.parametrize("n, kind", [(300, "count"), (300, "binary"), (2400, "count"), (2400, "binary")])
def test_batched_bootstrap_equals_refitting_each_resample(n, kind):
    """The replicates of the batched fits (Newton below 2,000 rows, the chord iteration above) against
    fit_glm on each resample's drawn rows (itself checked against statsmodels above), within 2 % of the
    row's standard error (the iterations stop at steps below 1 % (Newton) or 5 % (chord) of a standard
    error; measured within 1 % here)."""
    z, X, y = counts(n, size=2.0) if kind == "count" else binary(n)
    prep = one_cell(y, z, kind)
    block = glm_block([prep], TRAITS, "here", tests=False)
    spec = block.spec
    resampler = SeasonResampler({"W": [prep]}, TRAITS, False, {("x", "W")} if kind == "binary" else set(),
                                {("x", "W"): spec})
    B = 12
    boot = bootstrap_season(resampler, "s", B, 99, lambda k: None)
    drawn = draw_counts(chunk_rng(99, "s", 0, 0), n, B)
    expected = refit_replicates(prep, spec.family, drawn)
    names = [(Q.GRADIENT_GLM, t) for t in TRAITS] + [(Q.QUADRATIC_GLM, "a^2"), (Q.CORRELATIONAL_GLM, "a:b"), (Q.QUADRATIC_GLM, "b^2")]
    se = {(r.quantity, r.term): r.se for r in block.rows}
    for i, key in enumerate(names):
        got = boot[("x", "W", *key)]
        np.testing.assert_allclose(got, expected[:, i], rtol=0, atol=0.02 * se[key] + 1e-9, err_msg=str(key))


def test_generalized_rows_sit_beside_the_ols_rows_in_the_table():
    """The estimates table keeps its OLS gradients and adds gradient_glm, quadratic_glm and correlational_glm
    for 0/1 and count fitness (none for continuous fitness), with intervals and p-values; for 0/1 fitness
    gradient_glm equals gradient_logistic (both Janzen & Stern 1998); a note names the count model."""
    rng = np.random.default_rng(8)
    n = 400
    z, X = traits(n, rng)
    alive = (rng.random(n) < 1 / (1 + np.exp(-(0.2 + 0.7 * X[:, 1])))).astype(float)
    brood = rng.negative_binomial(1.5, 1.5 / (1.5 + np.exp(0.8 + 0.3 * X[:, 2])))
    frame = pd.DataFrame({"id": [f"i{i}" for i in range(n)], "season": "2030", "site": np.where(np.arange(n) % 2, "p", "q"),
                          "a": z[:, 0], "b": z[:, 1], "alive": alive, "brood": brood.astype(float), "size": z[:, 0] + 3})
    design = Design(traits=TRAITS, fitness={"alive": "binary", "brood": "count", "size": "continuous"})
    est = estimate_table(frame, design, bootstrap=200)
    t = est.table
    for f in ("alive", "brood"):
        for site in ("p", "q", "all"):
            rows = t[(t.fitness == f) & (t.site == site)]
            assert set(rows.quantity) >= {Q.GRADIENT, Q.QUADRATIC, Q.GRADIENT_GLM, Q.QUADRATIC_GLM, Q.CORRELATIONAL_GLM}
            glm = rows[rows.quantity.isin([Q.GRADIENT_GLM, Q.QUADRATIC_GLM, Q.CORRELATIONAL_GLM])]
            assert glm[["estimate", "se", "ci_low", "ci_high", "p_value"]].notna().all().all()
    assert not t[(t.fitness == "size") & t.quantity.str.endswith("_glm")].shape[0]
    a = t[(t.fitness == "alive") & (t.quantity == Q.GRADIENT_GLM)].set_index(["site", "term"])
    b = t[(t.fitness == "alive") & (t.quantity == Q.GRADIENT_LOGISTIC)].set_index(["site", "term"])
    np.testing.assert_allclose(a.estimate, b.loc[a.index].estimate, rtol=1e-7)
    assert any("negative binomial" in n.message and n.fitness == "brood" for n in est.notes)
    # generalized=False (what `summary` asks for) leaves exactly the generalized rows out; every other row,
    # intervals and p-values included, keeps its number (the resamples are drawn the same way)
    lean = estimate_table(frame, design, bootstrap=200, generalized=False).table
    keep = t[~t.quantity.str.endswith("_glm")].reset_index(drop=True)
    assert not lean.quantity.str.endswith("_glm").any()
    pd.testing.assert_frame_equal(lean.reset_index(drop=True), keep)
