"""Heritability, responses to selection, selection across seasons, planning.

Sources, named beside each check:
- statsmodels OLS (reference library) for the parent-offspring regression.
- Falconer & Mackay 1996, Introduction to Quantitative Genetics: the
  midparent slope estimates h^2, a single-parent slope h^2/2; breeder's
  equation R = h^2 S.
- Lande 1979, Evolution 33:402-416: multivariate response G P^-1 S.
- DerSimonian & Laird 1986, Controlled Clinical Trials 7:177-188, via
  statsmodels.stats.meta_analysis.combine_effects (reference library);
  Cochran's Q against scipy.stats.chi2.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.meta_analysis import combine_effects

from fieldslope.analysis.design import Design
from fieldslope.analysis.planning import individuals_for_gradient, variance_inflation
from fieldslope.analysis.response import generations_needed, project_mean
from fieldslope.analysis.table import estimate_table


def pedigree(h2=0.4, families=300, kids=4, seed=8) -> pd.DataFrame:
    """Parents in season 2030, offspring in 2031; additive model with Vp = 1."""
    rng = np.random.default_rng(seed)
    a_m, a_f = rng.normal(0, np.sqrt(h2), (2, families))
    rows = []
    for i in range(families):
        for sex, a in (("m", a_m[i]), ("f", a_f[i])):
            rows.append(dict(id=f"{sex}{i}", season="2030", site="pond", length=10 + a + rng.normal(0, np.sqrt(1 - h2)),
                             mother=None, father=None))
        for k in range(kids):
            a_o = (a_m[i] + a_f[i]) / 2 + rng.normal(0, np.sqrt(h2 / 2))
            rows.append(dict(id=f"o{i}_{k}", season="2031", site="pond", length=10 + a_o + rng.normal(0, np.sqrt(1 - h2)),
                             mother=f"m{i}", father=f"f{i}"))
    frame = pd.DataFrame(rows)
    frame["alive"] = (rng.random(len(frame)) < 0.6).astype(float)
    return frame


PED_DESIGN = Design(traits=("length",), fitness={"alive": "binary"}, mother="mother", father="father")


def h2_row(table):
    r = table[table.quantity == "heritability"]
    assert len(r) == 1
    return r.iloc[0]


def test_midparent_heritability_matches_statsmodels_and_truth():
    frame = pedigree()
    est = estimate_table(frame, PED_DESIGN, bootstrap=0)
    r = h2_row(est.table)
    assert (r.season, r.site, r.fitness, r.term) == ("all", "all", "", "length")
    # independent computation: family means on midparent, statsmodels OLS
    par = frame[frame.season == "2030"].set_index("id")["length"]
    kids = frame[frame.season == "2031"]
    fam = kids.groupby(["mother", "father"])["length"].mean().reset_index()
    mid = (fam["mother"].map(par) + fam["father"].map(par)) / 2
    fit = sm.OLS(fam["length"].to_numpy(), sm.add_constant(mid.to_numpy())).fit()
    assert r.estimate == pytest.approx(fit.params[1], rel=1e-10)
    assert r.se == pytest.approx(fit.bse[1], rel=1e-10)
    assert r.n == 300
    # Falconer & Mackay 1996: the midparent slope estimates h^2 (true value 0.4)
    assert abs(r.estimate - 0.4) < 3 * r.se
    assert any("midparent" in n.message for n in est.notes if n.quantity == "heritability")


def test_single_parent_heritability_is_twice_the_slope():
    frame = pedigree(seed=9)
    # fathers unmeasured: drop their records; one mother measured twice (mean of her records is used)
    frame = frame[~frame["id"].str.startswith("f")]
    extra = frame[frame["id"] == "m0"].assign(season="2031", length=lambda d: d["length"] + 0.6)
    frame = pd.concat([frame, extra], ignore_index=True)
    r = h2_row(estimate_table(frame, PED_DESIGN, bootstrap=0).table)
    par = frame[frame["id"].str.startswith("m")].groupby("id")["length"].mean()
    kids = frame[frame["id"].str.startswith("o")]
    fam = kids.groupby(["mother", "father"])["length"].mean().reset_index()
    fit = sm.OLS(fam["length"].to_numpy(), sm.add_constant(fam["mother"].map(par).to_numpy())).fit()
    # Falconer & Mackay 1996: single-parent slope = h^2 / 2
    assert r.estimate == pytest.approx(2 * fit.params[1], rel=1e-10)
    assert r.se == pytest.approx(2 * fit.bse[1], rel=1e-10)
    assert abs(r.estimate - 0.4) < 3 * r.se


def selection_frame(seasons=("2030", "2031", "2032", "2033"), seed=4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for i, s in enumerate(seasons):
        for site in ("bay", "cove"):
            n = 150
            z = rng.multivariate_normal([20, 5], [[4, 0.6], [0.6, 1]], n)
            slope = 0.15 * (1 if i % 2 == 0 else -0.5)
            w = np.clip(1 + slope * (z[:, 0] - 20) / 2 + rng.normal(0, 0.6, n), 0, None)
            parts.append(pd.DataFrame({"id": [f"{s}{site}{k}" for k in range(n)], "season": s, "site": site,
                                       "length": z[:, 0], "girth": z[:, 1], "eggs": w}))
    return pd.concat(parts, ignore_index=True)


SEL_DESIGN = Design(traits=("length", "girth"), fitness={"eggs": "continuous"})


def pick(table, **kw):
    m = np.ones(len(table), dtype=bool)
    for k, v in kw.items():
        m &= (table[k] == v).to_numpy()
    r = table[m]
    assert len(r) == 1, kw
    return r.iloc[0]


def test_responses_use_entered_heritability_and_genetic_correlations():
    frame = selection_frame()
    h2 = {"length": (0.5, 0.1, "earlier study"), "girth": (0.3, None, "guess")}
    est = estimate_table(frame, SEL_DESIGN, bootstrap=0, h2=h2, genetic_correlations={("length", "girth"): 0.2})
    t = est.table
    S = pick(t, season="2031", site="bay", quantity="differential", term="length")
    mean = pick(t, season="2031", site="bay", quantity="mean", term="length")
    R = pick(t, season="2031", site="bay", quantity="response", term="length")
    assert R.estimate == pytest.approx(0.5 * S.estimate, rel=1e-12)  # breeder's equation (Falconer & Mackay 1996)
    assert R.se == pytest.approx(np.hypot(0.5 * S.se, 0.1 * S.estimate), rel=1e-12)  # delta method, common practice
    pct = pick(t, season="2031", site="bay", quantity="response_pct", term="length")
    assert pct.estimate == pytest.approx(100 * R.estimate / mean.estimate, rel=1e-12)
    # Lande 1979: delta z = G P^-1 S, computed here independently with numpy
    d = frame[(frame.season == "2031") & (frame.site == "bay")]
    z = d[["length", "girth"]].to_numpy()
    w = d["eggs"].to_numpy() / d["eggs"].mean()
    S_vec = (w[:, None] * z).mean(0) - z.mean(0)
    P1 = np.cov(z, rowvar=False, ddof=1)
    g_sd = np.sqrt(np.array([0.5, 0.3]) * np.diag(P1))
    G = np.array([[g_sd[0] ** 2, 0.2 * g_sd[0] * g_sd[1]], [0.2 * g_sd[0] * g_sd[1], g_sd[1] ** 2]])
    dz = G @ np.linalg.solve(np.cov(z, rowvar=False, ddof=0), S_vec)
    for j, name in enumerate(("length", "girth")):
        r = pick(t, season="2031", site="bay", quantity="response_multi", term=name)
        assert r.estimate == pytest.approx(dz[j], rel=1e-8)
    assert not any(n.quantity == "response_multi" for n in est.notes)  # r_g was given, nothing assumed


def test_no_heritability_means_no_response_and_a_note():
    est = estimate_table(selection_frame(), SEL_DESIGN, bootstrap=0, h2={"length": (0.5, None, "x")})
    t = est.table
    assert not ((t.quantity == "response") & (t.term == "girth")).any()
    assert (t.quantity == "response").any()
    assert not (t.quantity == "response_multi").any()
    assert any("girth" in n.message and n.quantity == "response" for n in est.notes)


def test_across_seasons_match_statsmodels_meta_analysis():
    frame = selection_frame()
    t = estimate_table(frame, SEL_DESIGN, bootstrap=0).table
    for site in ("bay", "cove", "all"):
        g = t[(t.site == site) & (t.quantity == "gradient") & (t.term == "length") & (t.season != "all")]
        g = g.set_index("season").loc[["2030", "2031", "2032", "2033"]]
        ref = combine_effects(g.estimate.to_numpy(), g.se.to_numpy() ** 2, method_re="dl")  # statsmodels
        mean = pick(t, season="all", site=site, quantity="gradient_mean", term="length")
        assert mean.estimate == pytest.approx(ref.mean_effect_fe, rel=1e-10)
        assert mean.se == pytest.approx(ref.sd_eff_w_fe, rel=1e-10)
        tau2 = pick(t, season="all", site=site, quantity="gradient_tau2", term="length")
        assert tau2.estimate == pytest.approx(ref.tau2, rel=1e-10, abs=1e-15)  # DerSimonian & Laird 1986
        q = pick(t, season="all", site=site, quantity="gradient_q", term="length")
        assert q.estimate == pytest.approx(ref.q, rel=1e-10)
        assert q.p_value == pytest.approx(stats.chi2.sf(ref.q, 3), rel=1e-10)  # Cochran's Q, df = k - 1
        signs = np.sign(g.estimate.to_numpy())
        flips = pick(t, season="all", site=site, quantity="sign_changes", term="length")
        assert flips.estimate == np.count_nonzero(signs[1:] != signs[:-1])
        assert mean.n == g.n.sum()


@pytest.mark.parametrize("df", [1, 2, 3, 4, 7, 12, 25])
def test_chi_square_tail_matches_scipy(df):
    from fieldslope.analysis.seasons import chi2_upper

    for x in [0.0, 1e-6, 0.3, 1.0, df - 0.5, df + 2.0, 3.0 * df + 10, 80.0, 400.0]:
        assert chi2_upper(x, df) == pytest.approx(stats.chi2.sf(x, df), rel=1e-12, abs=1e-300)  # scipy.stats
    assert chi2_upper(float("inf"), df) == 0.0 and chi2_upper(-1.0, df) == 1.0


def test_projection_and_generations():
    """Constant response R per generation: mean after k generations is mean0 + k R (breeder's equation, common practice)."""
    assert project_mean(10.0, 0.25, 4).tolist() == [10.0, 10.25, 10.5, 10.75, 11.0]
    assert generations_needed(1.0, 0.25) == 4
    assert generations_needed(1.1, 0.25) == 5
    assert generations_needed(-1.0, 0.25) is None
    assert generations_needed(1.0, 0.0) is None


def test_planning_matches_simulated_ols_standard_errors():
    """The planned n gives a 95 % interval of +- d; checked against statsmodels OLS on simulated data."""
    rho = 0.6
    R = np.array([[1, rho], [rho, 1]])
    vif = variance_inflation(R)
    assert vif[0] == pytest.approx(1 / (1 - rho**2), rel=1e-12)  # VIF = 1/(1 - R^2) for two traits (common practice)
    n = individuals_for_gradient(0.1, 0.5, vif=vif[0], n_traits=2)
    df = n - 3
    assert stats.t.ppf(0.975, df) * np.sqrt(0.5 * vif[0] / df) <= 0.1
    assert stats.t.ppf(0.975, df - 1) * np.sqrt(0.5 * vif[0] / (df - 1)) > 0.1  # smallest such n
    rng = np.random.default_rng(12)
    ses = []
    for _ in range(30):
        x = rng.multivariate_normal([0, 0], R, n)
        x = (x - x.mean(0)) / x.std(0, ddof=1)
        w = 1 + 0.2 * x[:, 0] + rng.normal(0, np.sqrt(0.5), n)
        ses.append(sm.OLS(w, sm.add_constant(x)).fit().bse[1])
    half = 1.96 * np.mean(ses)
    assert half == pytest.approx(0.1, rel=0.1)


@pytest.mark.parametrize(
    ("half_width", "variance", "vif", "words"),
    [(0.0, 0.5, 1.0, "half width"), (-0.1, 0.5, 1.0, "half width"), (0.1, 0.0, 1.0, "residual variance"),
     (0.1, -2.0, 1.0, "residual variance"), (0.1, float("nan"), 1.0, "residual variance"),
     (0.1, 0.5, 0.5, "variance inflation")],
)
def test_planning_refuses_a_zero_or_negative_input_in_one_sentence(half_width, variance, vif, words):
    from fieldslope.common.errors import EstimationError
    from fieldslope.common.errors import FieldslopeError

    with pytest.raises(EstimationError) as err:
        individuals_for_gradient(half_width, variance, vif=vif, n_traits=2)
    assert isinstance(err.value, FieldslopeError)
    msg = str(err.value)
    assert words in msg and msg.count(". ") == 0 and msg.endswith(".") and "\n" not in msg


@pytest.mark.parametrize("method", ["dl", "hk"])
def test_random_effects_mean_and_interval_match_statsmodels(method):
    """Random-effects mean, se and 95 % interval: DerSimonian & Laird 1986 (normal), Hartung & Knapp 2001
    (t with k - 1 df, scaled se), both against statsmodels.stats.meta_analysis.combine_effects."""
    from fieldslope.analysis.seasons import combine

    b = np.array([0.12, 0.31, -0.06, 0.22, 0.02])
    v = np.array([0.010, 0.020, 0.015, 0.008, 0.012])
    ref = combine_effects(b, v, method_re="dl", use_t=method == "hk")
    c = combine(b, np.sqrt(v), method)
    assert c.tau2 > 0 and c.tau2 == pytest.approx(ref.tau2, rel=1e-10)
    assert c.mean_re == pytest.approx(ref.mean_effect_re, rel=1e-10)
    lo, hi = ref.conf_int(use_t=method == "hk")[3 if method == "hk" else 1]
    if method == "hk":
        assert c.se_re == pytest.approx(ref.sd_eff_w_re_hksj, rel=1e-10)
    else:
        assert c.se_re == pytest.approx(ref.sd_eff_w_re, rel=1e-10)
    assert c.ci_re == pytest.approx((lo, hi), rel=1e-9)
    assert c.interval == c.ci_re  # tau^2 > 0: the mean's interval is the random-effects one
    # the p-value answers the interval's question: p < 0.05 exactly when the interval excludes 0
    assert (c.p_re < 0.05) == (lo > 0 or hi < 0)
    # homogeneous estimates: tau^2 = 0 and the fixed-effect interval mean +- 1.96 se
    same = combine(np.array([0.2, 0.21, 0.19]), np.array([0.1, 0.1, 0.1]), method)
    assert same.tau2 == 0 and same.interval == pytest.approx((same.mean - 1.959964 * same.se, same.mean + 1.959964 * same.se))


def test_sign_changes_counted_all_and_significant_opposite():
    """All sign changes between consecutive seasons, and those whose intervals exclude zero on opposite
    sides (the estimation conventions' two counts), by hand for a small series."""
    from fieldslope.analysis.seasons import sign_changes, significant_sign_changes

    est = [0.2, -0.3, 0.3, -0.05, 0.1]
    lows = [0.1, -0.5, 0.2, -0.1, 0.02]
    highs = [0.3, -0.1, 0.4, 0.2, 0.2]
    assert sign_changes(est) == 4
    assert significant_sign_changes(lows, highs) == 2  # (+ -), (- +); the fourth season's interval holds 0


def test_across_season_rows_carry_random_effects_interval_and_both_counts():
    frame = selection_frame()
    t = estimate_table(frame, SEL_DESIGN, bootstrap=200, permutations=0).table
    for site in ("bay", "cove", "all"):
        g = t[(t.site == site) & (t.quantity == "gradient") & (t.term == "length") & (t.season != "all")]
        g = g.set_index("season").loc[["2030", "2031", "2032", "2033"]]
        ref = combine_effects(g.estimate.to_numpy(), g.se.to_numpy() ** 2, method_re="dl")  # statsmodels
        mean = pick(t, season="all", site=site, quantity="gradient_mean", term="length")
        re = pick(t, season="all", site=site, quantity="gradient_mean_re", term="length")
        assert re.estimate == pytest.approx(ref.mean_effect_re, rel=1e-10)
        lo_fe, hi_fe, lo_re, hi_re = (a for pair in ref.conf_int(use_t=False)[:2] for a in pair)
        expect = (lo_re, hi_re) if ref.tau2 > 0 else (lo_fe, hi_fe)
        assert (mean.ci_low, mean.ci_high) == pytest.approx(expect, rel=1e-9)
        assert (re.ci_low, re.ci_high) == pytest.approx((lo_re, hi_re), rel=1e-9)
        side = np.where(g.ci_low > 0, 1, np.where(g.ci_high < 0, -1, 0))
        sig = pick(t, season="all", site=site, quantity="sign_changes_significant", term="length")
        assert sig.estimate == np.count_nonzero(side[1:] * side[:-1] == -1)


def test_trait_added_in_a_later_season():
    """A trait first measured in a later season: earlier seasons keep their gradients on the traits they
    measured (equal to a statsmodels OLS on those traits alone) and a note names the missing trait."""
    import statsmodels.api as sm

    frame = selection_frame()
    frame.loc[frame.season == "2030", "girth"] = np.nan
    est = estimate_table(frame, SEL_DESIGN, bootstrap=0)
    t = est.table
    early = t[(t.season == "2030") & (t.quantity == "gradient")]
    assert set(early.term) == {"length"}
    cell = frame[(frame.season == "2030") & (frame.site == "bay")]
    z, W = cell["length"].to_numpy(), cell["eggs"].to_numpy()
    x = (z - z.mean()) / z.std(ddof=1)
    ref = sm.OLS(W / W.mean(), sm.add_constant(x)).fit().params[1]
    assert pick(t, season="2030", site="bay", quantity="gradient", term="length").estimate == pytest.approx(ref, rel=1e-9)
    assert set(t[(t.season == "2031") & (t.quantity == "gradient")].term) == {"length", "girth"}
    assert any(n.season == "2030" and "girth" in n.message for n in est.notes)


def test_response_interval_covers_the_true_response():
    """R = h^2 S (breeder's equation; Falconer & Mackay 1996): over 200 simulated studies, each with its own
    heritability estimate (true 0.4, se 0.1) and a season under linear selection (true S = 0.6 trait units),
    the 95 % interval of R from bootstrap S and normal h^2 draws covers the true R = 0.24 in at least 90 %."""
    from threadpoolctl import threadpool_limits

    from fieldslope.analysis.cells import prepare, split_cells
    from fieldslope.analysis.resample import SeasonResampler, bootstrap_season
    from fieldslope.analysis.response_interval import heritability_draws
    from fieldslope.analysis.resample import percentile_interval

    rng = np.random.default_rng(31)
    k, n, B = 200, 150, 400
    x = rng.uniform(-np.sqrt(3), np.sqrt(3), (k, n))  # sd 1; bounded noise keeps fitness positive
    W = 1 + 0.3 * x + rng.uniform(-0.4, 0.4, (k, n))
    frame = pd.DataFrame({"id": np.arange(k * n).astype(str), "season": "s", "rep": np.repeat([f"r{i}" for i in range(k)], n),
                          "z": (10 + 2 * x).ravel(), "w": W.ravel()})
    design = Design(traits=("z",), fitness={"w": "continuous"}, groups=("rep",))
    cells = split_cells(frame, design, ["w"])["s"]
    preps = {"w": [prepare(c, "w", "continuous", ("z",)) for c in cells]}
    with threadpool_limits(limits=1, user_api="blas"):
        boot = bootstrap_season(SeasonResampler(preps, ("z",), False, set()), "s", B, 5, lambda k: None)
    hits = 0
    for c in cells:
        h2_hat = 0.4 + 0.1 * rng.standard_normal()
        R = heritability_draws(h2_hat, 0.1, B, rng) * boot[(c.site, "w", "differential", "z")]
        lo, hi, _ = percentile_interval(R)
        hits += lo <= 0.24 <= hi
    assert hits / k >= 0.90


def test_multivariate_response_interval_covers_the_true_response():
    """Delta z = G beta (Lande 1979, Evolution 33:402-416): over 200 simulated studies, each with its own
    heritability estimates (true 0.4 and 0.3, se 0.1), an entered genetic correlation 0.2, and a season of
    150 individuals under linear selection (true beta 0.15 and -0.1 per sd, traits of sd 2 and 1 with
    phenotypic correlation 0.6), the 95 % interval from bootstrap beta_raw and P (the same resamples) with
    normal h^2 draws covers the true Delta z of each trait in at least 90 % of the studies."""
    from threadpoolctl import threadpool_limits

    from fieldslope.analysis.cells import prepare, split_cells
    from fieldslope.analysis.resample import PHENOTYPIC_COV, SeasonResampler, bootstrap_season, percentile_interval
    from fieldslope.analysis.response_interval import multi_response_replicates

    rng = np.random.default_rng(41)
    k, n, B = 200, 150, 400
    u = rng.uniform(-np.sqrt(3), np.sqrt(3), (2, k, n))
    x1, x2 = u[0], 0.6 * u[0] + 0.8 * u[1]  # sd 1, correlation 0.6, bounded
    W = 1 + 0.15 * x1 - 0.1 * x2 + rng.uniform(-0.3, 0.3, (k, n))
    frame = pd.DataFrame({"id": np.arange(k * n).astype(str), "season": "s", "rep": np.repeat([f"r{i}" for i in range(k)], n),
                          "a": (10 + 2 * x1).ravel(), "b": (5 + x2).ravel(), "w": W.ravel()})
    traits = ("a", "b")
    design = Design(traits=traits, fitness={"w": "continuous"}, groups=("rep",))
    cells = split_cells(frame, design, ["w"])["s"]
    preps = {"w": [prepare(c, "w", "continuous", traits) for c in cells]}
    with threadpool_limits(limits=1, user_api="blas"):
        boot = bootstrap_season(SeasonResampler(preps, traits, False, set()), "s", B, 5, lambda k: None)
    P = np.array([[4.0, 1.2], [1.2, 1.0]])
    h2, rg = np.array([0.4, 0.3]), np.array([[1.0, 0.2], [0.2, 1.0]])
    g_sd = np.sqrt(h2 * np.diag(P))
    true = (rg * np.outer(g_sd, g_sd)) @ (np.array([0.15, -0.1]) / np.sqrt(np.diag(P)))
    hits = np.zeros(2)
    for c in cells:
        h2_hat = h2 + 0.1 * rng.standard_normal(2)
        beta = np.column_stack([boot[(c.site, "w", "gradient_raw", t)] for t in traits])
        dz = multi_response_replicates(beta, boot[(c.site, "w", PHENOTYPIC_COV, "")], h2_hat, [0.1, 0.1], rg, rng)
        for j in range(2):
            lo, hi, _ = percentile_interval(dz[:, j])
            hits[j] += lo <= true[j] <= hi
    assert (hits / k >= 0.90).all(), hits / k


def test_multivariate_response_rows_get_an_interval_around_the_estimate():
    """The table's response_multi rows carry a bootstrap interval containing the point estimate G beta_raw."""
    est = estimate_table(selection_frame(), SEL_DESIGN, bootstrap=200, permutations=0,
                         h2={"length": (0.4, 0.05, "earlier study"), "girth": (0.3, None, "guess")},
                         genetic_correlations={("length", "girth"): 0.3})
    m = est.table[est.table.quantity == "response_multi"]
    assert len(m) and m[["ci_low", "ci_high"]].notna().all().all()
    assert ((m.ci_low <= m.estimate) & (m.estimate <= m.ci_high)).all()
