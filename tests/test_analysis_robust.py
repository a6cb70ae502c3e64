"""Awkward data, reproducibility, progress, totals and invariances of the estimates table.

Invariances (property tests with hypothesis): a selection gradient is a
coefficient on standardized traits of relative fitness, so it cannot depend
on the units of a trait, the scale of fitness or the order of individuals
(Lande & Arnold 1983, Evolution 37:1210-1226).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldslope.analysis.design import Design
from fieldslope.analysis.fitness import add_totals
from fieldslope.analysis.table import DEFAULT_SEED, Estimates, EstimationError, estimate_table
from fieldslope.common.errors import FieldslopeError


def frame_for(n=60, seed=1, sites=("reef", "flat")) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for s in sites:
        z = rng.normal([5, 2], [1, 0.4], (n, 2))
        alive = (rng.random(n) < 1 / (1 + np.exp(-(z[:, 0] - 5)))).astype(float)
        parts.append(pd.DataFrame({"id": [f"{s}{i}" for i in range(n)], "season": "2032", "site": s,
                                   "size": z[:, 0], "fin": z[:, 1], "alive": alive,
                                   "clutch": rng.poisson(4, n).astype(float)}))
    return pd.concat(parts, ignore_index=True)


DESIGN = Design(traits=("size", "fin"), fitness={"alive": "binary", "clutch": "count"},
                totals={"lifetime": ("alive", "clutch")})


def rows(t, **kw):
    m = np.ones(len(t), dtype=bool)
    for k, v in kw.items():
        m &= (t[k] == v).to_numpy()
    return t[m]


def run_quiet(*args, **kwargs) -> Estimates:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        est = estimate_table(*args, **kwargs)
    assert est.table["estimate"].notna().all(), "a silent NaN estimate"
    return est


def test_totals_are_products_zero_wins_over_missing():
    f = pd.DataFrame({"alive": [1, 0, 1, np.nan, 0], "clutch": [3, np.nan, np.nan, 2, 5]})
    out = add_totals(f, DESIGN)["lifetime"].to_numpy()
    assert out[0] == 3 and out[1] == 0 and np.isnan(out[2]) and np.isnan(out[3]) and out[4] == 0


def test_unestimable_cells_give_notes_not_numbers():
    f = frame_for()
    tiny = pd.DataFrame({"id": ["t1", "t2"], "season": "2032", "site": "spit", "size": [4.0, 5.0], "fin": [2.0, 2.1],
                         "alive": [1.0, 0.0], "clutch": [1.0, 2.0]})
    dead = frame_for(n=30, seed=2, sites=("marsh",)).assign(alive=0.0)
    const = frame_for(n=30, seed=3, sites=("dune",)).assign(fin=2.0)
    collinear = frame_for(n=30, seed=4, sites=("cliff",))
    collinear["fin"] = 2 * collinear["size"] + 1
    sep = frame_for(n=40, seed=5, sites=("sand",))
    sep["alive"] = (sep["size"] > sep["size"].median()).astype(float)
    data = pd.concat([f, tiny, dead, const, collinear, sep], ignore_index=True)
    est = run_quiet(data, DESIGN, bootstrap=50)
    t, notes = est.table, est.notes
    # too few individuals
    assert rows(t, site="spit", quantity="gradient").empty
    assert any(n.site == "spit" and "at least" in n.message for n in notes)
    # mean fitness 0
    assert rows(t, site="marsh", fitness="alive").empty
    assert any(n.site == "marsh" and n.fitness == "alive" and "Mean alive is 0" in n.message for n in notes)
    assert not rows(t, site="marsh", fitness="clutch", quantity="gradient").empty
    # constant trait
    assert rows(t, site="dune", quantity="gradient").empty and rows(t, site="dune", term="fin").empty
    assert any(n.site == "dune" and "constant" in n.message for n in notes)
    # collinear traits
    assert rows(t, site="cliff", quantity="gradient").empty
    assert any(n.site == "cliff" and "collinear" in n.message for n in notes)
    # logistic separation: the linear gradient exists, the logistic one does not
    assert rows(t, site="sand", fitness="alive", quantity="gradient_logistic").empty
    assert not rows(t, site="sand", fitness="alive", quantity="gradient").empty
    assert any(n.site == "sand" and "separated" in n.message for n in notes)
    # the healthy cells are untouched
    assert len(rows(t, site="reef", fitness="alive", quantity="gradient_logistic")) == 2


def test_missing_fitness_is_counted_and_missing_traits_use_complete_cases():
    f = frame_for()
    f.loc[:4, "alive"] = np.nan
    f.loc[5:7, "fin"] = np.nan
    t = run_quiet(f, DESIGN, bootstrap=0)
    est = t.table
    assert rows(est, site="reef", fitness="alive", quantity="gradient").n.iloc[0] == 60 - 5 - 3
    assert rows(est, site="reef", fitness="alive", quantity="differential", term="size").n.iloc[0] == 55
    assert any("5 individuals" in n.message and n.site == "reef" for n in t.notes)


def test_bad_frame_gives_one_sentence_error():
    with pytest.raises(EstimationError) as err:
        estimate_table(frame_for().drop(columns=["fin"]), DESIGN, bootstrap=0)
    assert isinstance(err.value, FieldslopeError) and "fin" in str(err.value)
    with pytest.raises(FieldslopeError):
        estimate_table(frame_for(), DESIGN, bootstrap=0, fitness=["speed"])


def test_same_seed_same_numbers_and_progress():
    f = frame_for()
    calls = []
    a = estimate_table(f, DESIGN, bootstrap=300, permutations=250, progress=lambda d, t, s: calls.append((d, t, s)))
    b = estimate_table(f, DESIGN, bootstrap=300, permutations=250, seed=DEFAULT_SEED)
    c = estimate_table(f, DESIGN, bootstrap=300, permutations=250, seed=DEFAULT_SEED + 1)
    pd.testing.assert_frame_equal(a.table, b.table)
    both = a.table.ci_low.notna() & c.table.ci_low.notna()  # a seed may leave an interval withheld (small cells)
    assert not np.allclose(a.table.ci_low[both], c.table.ci_low[both])
    assert calls[-1][0] == calls[-1][1] == 550
    assert all(d1 < d2 for (d1, _, _), (d2, _, _) in zip(calls, calls[1:]))
    t = a.table
    g = rows(t, site="reef", fitness="alive", quantity="gradient", term="size").iloc[0]
    assert g.ci_low < g.estimate < g.ci_high and 0 < g.p_value <= 1
    # permutation p-values are multiples of 1/(P + 1); logistic and generalized gradients have a
    # likelihood-ratio p-value, generalized gamma terms one from the bootstrap
    perm = t[~t.quantity.isin(["gradient_logistic", "gradient_glm", "quadratic_glm", "correlational_glm"])].p_value.dropna()
    assert (np.round(perm * 251, 6) % 1 == 0).all()
    assert (np.round(rows(t, quantity="gradient_logistic").p_value * 251, 6) % 1 != 0).any()
    # quantities without uncertainty leave the columns empty
    assert rows(t, quantity="mean").se.isna().all() and rows(t, quantity="mean").ci_low.isna().all()
    # fast path: no intervals, no p-values
    z = estimate_table(f, DESIGN, bootstrap=0).table
    assert z.ci_low.isna().all() and z.p_value.isna().all()
    # the same estimates; the generalized gradients come with the bootstrap only
    assert np.allclose(z.estimate, t[~t.quantity.str.endswith("_glm")].estimate)
    assert not z.quantity.str.endswith("_glm").any()


def test_json_and_csv_helpers():
    est = estimate_table(frame_for(), DESIGN, bootstrap=0)
    obj = est.to_json_obj()
    assert obj[0].keys() == set(est.table.columns)
    assert any(o["se"] is None for o in obj) and all(isinstance(o["n"], int) for o in obj)
    assert est.to_csv_text().splitlines()[0] == "season,site,fitness,quantity,term,estimate,se,ci_low,ci_high,p_value,n"


BASE = frame_for(n=40, seed=11)
GRAD_DESIGN = Design(traits=("size", "fin"), fitness={"clutch": "count"})


def gradients(frame):
    t = estimate_table(frame, GRAD_DESIGN, bootstrap=0).table
    keep = t.quantity.isin(["gradient", "quadratic", "correlational", "differential_std", "opportunity"])
    return t[keep].set_index(["site", "quantity", "term"])["estimate"].sort_index()


REF = gradients(BASE)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(c=st.floats(1e-3, 1e3), d=st.floats(-100, 100), k=st.floats(1e-3, 1e3), seed=st.integers(0, 10_000))
def test_gradients_do_not_depend_on_units_scale_or_order(c, d, k, seed):
    f = BASE.assign(size=BASE["size"] * c + d, clutch=BASE["clutch"] * k)
    f = f.sample(frac=1.0, random_state=seed).reset_index(drop=True)
    pd.testing.assert_series_equal(gradients(f), REF, rtol=1e-7, atol=1e-9)


@pytest.mark.slow
def test_bootstrap_intervals_cover_the_true_gradient():
    """Over 200 simulated seasons with known beta, 95 % percentile intervals cover it 90-99 % of the time.

    Trait uniform with sd 1 and bounded noise keep fitness positive; the
    population regression of w = 1 + beta x + e on x has slope beta.
    """
    rng = np.random.default_rng(2024)
    design = Design(traits=("z",), fitness={"w": "continuous"}, groups=())
    beta, n, hits = 0.3, 120, 0
    for s in range(200):
        x = rng.uniform(-np.sqrt(3), np.sqrt(3), n)
        w = 1 + beta * x + rng.uniform(-0.4, 0.4, n)
        frame = pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "z": x, "w": w})
        t = estimate_table(frame, design, bootstrap=400, permutations=0, seed=s).table
        r = t[t.quantity == "gradient"].iloc[0]
        hits += r.ci_low <= beta <= r.ci_high
    assert 0.90 <= hits / 200 <= 0.99


def test_labels_missing_group_and_numeric_season():
    f = frame_for()
    f.loc[:9, "site"] = None
    f["season"] = 2032
    t = run_quiet(f, DESIGN, bootstrap=0).table
    assert set(t.site) == {"(blank)", "reef", "flat", "all"} and set(t.season) == {"2032"}
    assert run_quiet(f.iloc[:0], DESIGN, bootstrap=20).table.empty


def test_permutation_p_value_is_close_to_the_ols_t_test():
    """With normal errors a permutation p-value approximates the OLS t-test's (statsmodels; common practice)."""
    import statsmodels.api as sm

    rng = np.random.default_rng(77)
    n = 300
    x = rng.normal(size=n)
    W = 5 + 0.12 * x + rng.normal(size=n)
    frame = pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "z": x, "W": W})
    t = estimate_table(frame, Design(traits=("z",), fitness={"W": "continuous"}, groups=()),
                       bootstrap=0, permutations=4000).table
    r = t[t.quantity == "gradient"].iloc[0]
    p_t = sm.OLS(W, sm.add_constant(x)).fit().pvalues[1]
    assert 0.005 < p_t < 0.3
    assert r.p_value == pytest.approx(p_t, abs=0.02)
    # strong selection: no permutation reaches the observed gradient, p = 1 / (P + 1)
    strong = frame.assign(W=12 + 2 * x + rng.normal(size=n))
    s = estimate_table(strong, Design(traits=("z",), fitness={"W": "continuous"}, groups=()),
                       bootstrap=0, permutations=999).table
    assert s[s.quantity == "gradient"].p_value.iloc[0] == pytest.approx(1 / 1000)


BOOT_REF = estimate_table(BASE, GRAD_DESIGN, bootstrap=200, permutations=100).table


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(c=st.floats(1e-3, 1e3), d=st.floats(-1e4, 1e4), k=st.floats(1e-3, 1e3))
def test_intervals_and_p_values_do_not_depend_on_units_or_fitness_scale(c, d, k):
    """Same seed, same resamples: a change of units moves nothing on the standardized scale (Lande & Arnold 1983)."""
    f = BASE.assign(size=BASE["size"] * c + d, clutch=BASE["clutch"] * k)
    t = estimate_table(f, GRAD_DESIGN, bootstrap=200, permutations=100).table
    # (a count scaled by k is no longer whole numbers, so it loses its generalized rows: compare the OLS ones)
    quantities = ["gradient", "quadratic", "correlational", "canonical", "differential_std"]
    cols = ["ci_low", "ci_high", "p_value"]
    pd.testing.assert_frame_equal(t[t.quantity.isin(quantities)][cols].reset_index(drop=True),
                                  BOOT_REF[BOOT_REF.quantity.isin(quantities)][cols].reset_index(drop=True),
                                  rtol=1e-6, atol=1e-9)
