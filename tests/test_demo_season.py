"""The demo season's generator: it reproduces the committed files, and its true values are right.

The true values in demo_season/README.md are computed by the generator's own
least-squares code (numpy), independent of analysis/; here that code is
checked against statsmodels, and its parent-offspring computation against the
theory it implements. The pedigree the generator draws respects sex, and the
animal model on the demo study recovers the generating model's V_A, h² and
genetic correlations.
"""

from __future__ import annotations

from io import BytesIO
from pathlib import Path

import numpy as np
import pytest

from fieldslope.demo_season import generate as gen

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_season"


def _cells(data: bytes) -> list[tuple]:
    from openpyxl import load_workbook

    ws = load_workbook(BytesIO(data), read_only=True).active
    return [tuple(row) for row in ws.iter_rows(values_only=True)]


def test_committed_batches_equal_the_generators_output(tmp_path):
    written = gen.write_batches(tmp_path)
    committed = sorted((DEMO / "batches").iterdir())
    assert [p.name for p in written] == [p.name for p in committed]
    for new, old in zip(written, committed):
        if new.suffix == ".csv":
            assert new.read_bytes() == old.read_bytes(), new.name
        else:  # workbooks: same cells (zip bytes may differ between library versions)
            assert _cells(new.read_bytes()) == _cells(old.read_bytes()), new.name


def test_file_names_sort_in_arrival_order():
    names = [p.name for p in sorted((DEMO / "batches").iterdir())]
    dates = [n.split("_")[1] for n in names]
    assert dates == sorted(dates)
    assert [int(n[:2]) for n in names] == list(range(1, len(names) + 1))


def test_the_planted_mistakes_are_where_the_readme_says():
    batches = DEMO / "batches"
    slip = (batches / "02_2023-05-18_birch_saddle_measures.csv").read_text().splitlines()[137]
    assert slip.startswith("BS23-0137,") and slip.split(",")[4] == "14.0"
    dup = (batches / "06_2024-05-14_upper_ridge_measures.csv").read_text().splitlines()
    assert dup[212] == dup[213] and dup[212].startswith("UR24-0212,")
    assert "Lower Ridge" in (batches / "13_2025-05-14_birch_saddle_measures.csv").read_text().splitlines()[58]
    assert "BS23-0931," in (batches / "04_2023-07-20_census_survival.csv").read_text()
    assert "season" not in (batches / "08_2024-05-17_mosskettle_scree_measures.csv").read_text().splitlines()[0]
    semi = (batches / "07_2024-05-15_birch_saddle_measures.csv").read_bytes()
    assert semi.startswith(b"\xef\xbb\xbftag;season;site;") and b"\r\n" in semi


def test_truth_regression_matches_statsmodels():
    """The generator's OLS (slopes and classical se) against statsmodels OLS (reference library)."""
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(3)
    x = rng.normal(size=(400, 3))
    y = 1 + x @ np.array([0.3, -0.2, 0.1]) + 0.5 * x[:, 0] * x[:, 1] + rng.normal(size=400)
    X, _ = gen._quadratic_design(x)
    coef, se = gen._ols(y, X)
    ref = sm.OLS(y, sm.add_constant(X)).fit()
    np.testing.assert_allclose(coef, ref.params[1:], rtol=1e-10)
    np.testing.assert_allclose(se, ref.bse[1:], rtol=1e-10)


def test_truth_heritability_is_the_models_h2():
    """Offspring family mean on midparent has slope h² for unselected parents
    (Falconer & Mackay 1996, Introduction to Quantitative Genetics, ch. 10)."""
    rows = gen.heritability_truth(np.random.default_rng(11), 200_000)
    for r, h2 in zip(rows, gen.H2):
        assert abs(r["value"] - h2) < 4 * r["mc_se"], r


def test_stated_true_values_match_the_committed_table():
    """The README's pooled table is the content of true_values.csv (rounded to 3 decimals)."""
    import pandas as pd

    truth = pd.read_csv(DEMO / "true_values.csv", dtype={"season": str})
    readme = (DEMO / "README.md").read_text()
    pooled = truth[(truth.site == "all") & (truth.quantity == "gradient")]
    for r in pooled.itertuples():
        assert f"{r.value:+.3f}".replace("-", "−") in readme, r
    assert len(pooled) == 27


def test_the_pedigree_respects_sex_and_spans_three_generations():
    """Dams and sires come from the previous season at the same site; no tag is both a dam and a sire;
    some 2025 beetles descend from 2023 beetles; some sires have two mates (paternal half-sibs)."""
    cells = gen.simulate(np.random.default_rng(gen.SEED))
    dams = {d for c in cells.values() for d in c["dam"] if d}
    sires = {s for c in cells.values() for s in c["sire"] if s}
    assert dams and sires and not dams & sires
    for (season, code), c in cells.items():
        young = c["dam"] != ""
        assert (young == (c["sire"] != "")).all()
        if season == gen.SEASONS[0]:
            assert not young.any()
            continue
        prev = gen.SEASONS[gen.SEASONS.index(season) - 1]
        assert all(d.startswith(f"{code}{prev[2:]}-") for d in c["dam"][young])
        assert all(s.startswith(f"{code}{prev[2:]}-") for s in c["sire"][young])
        pairs = set(zip(c["dam"][young], c["sire"][young]))
        assert len(pairs) == gen.PAIRS_PER_CELL and len({s for _, s in pairs}) == gen.SIRES_PER_CELL
    born_2024 = {i for code in gen.SITES for i, d in zip(cells[("2024", code)]["ids"], cells[("2024", code)]["dam"]) if d}
    assert any(d in born_2024 for code in gen.SITES for d in cells[("2025", code)]["dam"])


def test_true_genetic_values_are_the_generating_models():
    """true_values.csv records the model's V_A = h² V_P, h² and genetic correlations exactly, and G and E
    are covariance matrices (positive definite)."""
    import pandas as pd

    truth = pd.read_csv(DEMO / "true_values.csv", dtype={"season": str, "term": str})
    exact = truth[truth.quantity.isin(["additive_variance", "heritability_pedigree", "genetic_correlation"])]
    value = exact.set_index(["quantity", "term"])["value"]
    for j, t in enumerate(gen.TRAITS):
        assert value["heritability_pedigree", t] == pytest.approx(gen.H2[j])
        assert value["additive_variance", t] == pytest.approx(gen.H2[j] * gen.SD[j] ** 2, rel=1e-3)
    assert value["genetic_correlation", "elytron:mass"] == pytest.approx(gen.GEN_CORR[0, 2])
    assert exact.mc_se.isna().all()
    assert np.linalg.eigvalsh(gen.G).min() > 0 and np.linalg.eigvalsh(gen.E).min() > 0


@pytest.fixture(scope="module")
def demo_data(tmp_path_factory):
    """The demo study's effective data and protocol, every batch taken in."""
    from fieldslope.schemas.study import Study
    from fieldslope.tui.demo import create_demo_study, feed_batches

    target = create_demo_study(tmp_path_factory.mktemp("demo-ped") / "study")
    feed_batches(target, delay=0)
    with Study.open(target) as study:
        return study.store.effective_frame(), study.protocol


@pytest.fixture(scope="module")
def demo_genetics(demo_data):
    """The animal models on the demo study as `fieldslope estimate` fits them."""
    from fieldslope.tui.bridge import pedigree_genetics

    return pedigree_genetics(*demo_data)


def test_animal_model_on_the_demo_recovers_the_true_genetic_values(demo_genetics):
    """One fixed realization, so each check passes or fails for good: every 95 % interval (profile likelihood
    for h², Wald on the atanh scale for r_g; Kruuk 2004, Phil. Trans. R. Soc. B 359:873-890) holds the
    generating model's value, and each V_A lies within 1.96 of its standard errors of the true V_A."""
    import pandas as pd

    rows = pd.DataFrame(demo_genetics.rows)
    truth = pd.read_csv(DEMO / "true_values.csv", dtype={"season": str, "term": str})
    true = truth[truth.season == "all"].set_index(["quantity", "term"])["value"]
    checked = 0
    for r in rows.itertuples():
        if r.quantity in ("heritability_pedigree", "genetic_correlation"):
            assert r.ci_low < true[r.quantity, r.term] < r.ci_high, r
            checked += 1
        elif r.quantity == "additive_variance":
            assert abs(r.estimate - true[r.quantity, r.term]) < 1.96 * r.se, r
            checked += 1
    assert checked == 9
    assert not any("both as a dam and as a sire" in n[-1] for n in demo_genetics.notes)
    assert "2 generations deep" in demo_genetics.summary


def test_robertson_price_on_the_demo_lies_among_the_seasons_values(demo_genetics):
    """cov_A(trait, relative fitness) differs between seasons as selection does; the pooled animal model's
    95 % interval must reach the range of the three seasons' true values (Robertson 1966, Anim. Prod. 8:95-108;
    Morrissey, Kruuk & Wilson 2010, J. Evol. Biol. 23:2277-2288)."""
    import pandas as pd

    rows = pd.DataFrame(demo_genetics.rows)
    rows = rows[(rows.quantity == "response_price") & rows.fitness.isin(["survived", "total"])]
    truth = pd.read_csv(DEMO / "true_values.csv", dtype={"season": str, "term": str})
    seasons = truth[truth.quantity == "response_price"].groupby(["fitness", "term"])["value"].agg(["min", "max"])
    assert len(rows) == 6
    for r in rows.itertuples():
        low, high = seasons.loc[(r.fitness, r.term)]
        assert r.ci_low <= high and r.ci_high >= low, r


def test_on_the_demo_only_the_breeders_equation_parts_from_the_other_predictions(demo_data, demo_genetics):
    """Demo fitness depends on the measured traits only, so cov_A(z, w) = Gβ (Robertson 1966; Morrissey,
    Kruuk & Wilson 2010): no Robertson-Price note. Its genetic correlations differ from the phenotypic ones
    (mass: r_g 0.70 with elytron against r_P 0.55), so R = h²S misses the correlated response that Gβ
    carries: the true values give Gβ = 0.93 against h²S = 0.82 for mass and total fitness in 2023 (G and β from
    true_values.csv and the model), and the demo's estimates disagree for mass in the same direction."""
    from fieldslope.analysis.response_agreement import BREEDER, LANDE, disagreements
    from fieldslope.tui.bridge import estimates_for_frame

    est = estimates_for_frame(*demo_data, bootstrap=0, genetics=demo_genetics)
    found = {(d.fitness, d.trait): d for d in disagreements(est.table, demo_genetics.rows, demo_genetics.h2)}
    assert all(d.pairs == ((BREEDER, LANDE),) for d in found.values()), found
    mass = found[("total", "mass")]
    r, g = (p.mean for p in mass.predictions[:2])
    assert g > r
    notes = [n.message for n in est.notes if n.quantity == "response_price" and n.fitness == "total"]
    assert any(m.startswith("For total, the predicted responses of mass") for m in notes)
