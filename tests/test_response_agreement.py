"""When do R = h²S, Gβ and the Robertson–Price response disagree beyond their uncertainty?

The rule (analysis/response_agreement.py): a difference of two estimates treated as independent is
significant at 5 % when it exceeds 1.96 standard errors of the difference, sqrt(se1² + se2²) (common
practice; e.g. Sokal & Rohlf 1995, Biometry, 3rd ed., ch. 13). The predictions coincide when fitness
depends on the measured traits only: for one trait, cov_A(z, w) = (V_A / V_P) cov(z, w) = h²S
(Robertson 1966, Anim. Prod. 8:95-108; Morrissey, Kruuk & Wilson 2010, J. Evol. Biol. 23:2277-2288).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from fieldslope.analysis.response_agreement import BREEDER, LANDE, PRICE, brief, disagreements
from fieldslope.analysis.table import COLUMNS


def _table(S: list[tuple[float, float]], gbeta: list[float], fitness: str = "total", trait: str = "wing",
           gbeta_se: float = math.nan):
    rows = []
    for k, ((s, se), g) in enumerate(zip(S, gbeta)):
        base = dict(season=str(2030 + k), site="all", fitness=fitness, term=trait, ci_low=math.nan,
                    ci_high=math.nan, p_value=math.nan, n=100)
        rows.append({**base, "quantity": "differential", "estimate": s, "se": se})
        rows.append({**base, "quantity": "response_multi", "estimate": g, "se": gbeta_se})
        rows.append({**base, "site": "North", "quantity": "differential", "estimate": 99.0, "se": 0.1})  # not pooled
    return pd.DataFrame(rows, columns=COLUMNS)


def _price(estimate: float, se: float, fitness: str = "total", trait: str = "wing") -> dict:
    return dict(season="all", site="all", fitness=fitness, quantity="response_price", term=trait,
                estimate=estimate, se=se, ci_low=estimate - 1.96 * se, ci_high=estimate + 1.96 * se,
                p_value=math.nan, n=500)


def test_predictions_that_coincide_give_no_note():
    """h² = V_A/V_P = 0.4, S = 2 in every season: R = 0.8, and with no other trait Gβ = V_A β = h²S = 0.8
    (Lande & Arnold 1983, Evolution 37:1210-1226); cov_A(z, w) = h²S = 0.8 as well."""
    table = _table([(2.0, 0.2)] * 3, [0.8] * 3)
    assert disagreements(table, [_price(0.8, 0.1)], {"wing": (0.4, 0.05)}) == []


def test_a_price_response_far_outside_the_seasons_range_is_named():
    table = _table([(2.0, 0.2), (1.5, 0.2), (2.5, 0.2)], [0.8, 0.6, 1.0])  # R = 0.8, 0.6, 1.0
    found = disagreements(table, [_price(0.2, 0.1)], {"wing": (0.4, 0.0)})
    assert len(found) == 1
    d = found[0]
    assert set(d.pairs) == {(BREEDER, PRICE), (LANDE, PRICE)}
    # R of the nearest season, 0.6 with se 0.4 x 0.2 = 0.08: |0.2 - 0.6| = 0.4 > 1.96 sqrt(0.08² + 0.1²) = 0.251
    r = next(p for p in d.predictions if p.name == BREEDER)
    np.testing.assert_allclose(r.estimates, [0.8, 0.6, 1.0])
    np.testing.assert_allclose(r.ses, [0.08] * 3)
    text = d.sentence()
    assert "For total, the predicted responses of wing" in text and "Morrissey, Kruuk & Wilson 2010" in text
    assert "over 3 seasons" in text and "Lande & Arnold 1983" not in text
    assert brief(found) == ("Predictions disagree beyond their uncertainty: wing (R vs Price; Gβ vs Price); "
                            "see fieldslope estimate.")


def test_a_price_response_within_the_seasons_range_agrees_even_away_from_their_mean():
    """The animal model pools the seasons with its own weights: any value between the seasons' is consistent."""
    table = _table([(2.0, 0.01), (0.5, 0.01), (2.5, 0.01)], [0.8, 0.2, 1.0])
    assert disagreements(table, [_price(0.25, 0.01)], {"wing": (0.4, 0.0)}) == []


def test_just_inside_and_just_outside_the_combined_standard_error():
    limit = 1.96 * math.hypot(0.08, 0.1)  # R = 0.8 (se 0.08) in one season; price se 0.1; no Gβ
    table = _table([(2.0, 0.2)], [math.nan])
    h2 = {"wing": (0.4, 0.0)}
    assert disagreements(table, [_price(0.8 + 0.99 * limit, 0.1)], h2) == []
    found = disagreements(table, [_price(0.8 - 1.01 * limit, 0.1)], h2)
    assert [d.pairs for d in found] == [((BREEDER, PRICE),)]
    assert "over 1 season." in found[0].sentence()
    # Gβ without a standard error (no resamples): against it only the price's 0.1 counts (limit 0.196)
    table = _table([(2.0, 0.2)], [0.8])
    found = disagreements(table, [_price(0.8 + 0.2, 0.1)], h2)
    assert [d.pairs for d in found] == [((LANDE, PRICE),)]


def test_breeders_equation_and_g_beta_compare_their_means_with_rs_standard_error():
    """Means over seasons: R 0.8 (se of the mean 0.08/sqrt(3) = 0.046), Gβ 1.0: differ by 0.2 > 0.091."""
    table = _table([(2.0, 0.2)] * 3, [1.0] * 3)
    found = disagreements(table, [_price(0.9, 0.2)], {"wing": (0.4, 0.0)})
    assert [d.pairs for d in found] == [((BREEDER, LANDE),)]
    assert "genetic correlations unlike the phenotypic ones" in found[0].sentence()
    assert "Gβ has no standard error without resamples" in found[0].sentence()


def test_g_beta_standard_error_counts_when_the_bootstrap_gives_one():
    """The same means with Gβ's se 0.2 per season: the se of the mean is 0.2/sqrt(3) = 0.115, and with R's
    0.046 the difference of 0.2 is within 1.96 sqrt(0.046² + 0.115²) = 0.244 (standard errors of independent
    means add in quadrature; common practice)."""
    table = _table([(2.0, 0.2)] * 3, [1.0] * 3, gbeta_se=0.2)
    assert disagreements(table, [_price(0.9, 0.2)], {"wing": (0.4, 0.0)}) == []
    found = disagreements(_table([(2.0, 0.2)] * 3, [1.3] * 3, gbeta_se=0.2), [_price(1.05, 0.2)], {"wing": (0.4, 0.0)})
    assert [d.pairs for d in found] == [((BREEDER, LANDE),)]           # 0.5 > 0.244
    assert "no standard error" not in found[0].sentence()


def test_g_beta_rows_carry_the_bootstrap_standard_error():
    """With one trait, Gβ = h² P (S / P) = h²S in every resample, so its bootstrap se is h² times the bootstrap
    se of S. S is a covariance, whose large-sample variance for bivariate normal variables is
    (var z var w + cov(z, w)²) / n (Kendall & Stuart, The Advanced Theory of Statistics, vol. 1; from memory);
    the bootstrap se approximates it (Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 6):
    within 10 % for n = 800 and 2,000 resamples (common practice). Its interval is the differential's scaled
    by h² (the same resamples)."""
    from fieldslope.analysis.design import Design
    from fieldslope.analysis.table import estimate_table

    rng = np.random.default_rng(21)
    z = rng.normal(10.0, 2.0, 800)
    w = 1.0 + 0.05 * (z - 10.0) + rng.normal(0.0, 0.2, 800)
    frame = pd.DataFrame({"id": [f"k{i}" for i in range(800)], "season": "2031", "site": "one", "len": z, "w": w})
    design = Design(traits=("len",), fitness={"w": "continuous"})
    t = estimate_table(frame, design, bootstrap=2000, h2={"len": (0.5, None, "entered")}).table
    row = lambda q: t[(t.quantity == q) & (t.term == "len")].iloc[0]  # noqa: E731
    # equal up to the divisors: the phenotypic variance in G divides by n - 1, the differential by n
    assert row("response_multi").estimate == pytest.approx(0.5 * row("differential").estimate * 800 / 799, rel=1e-9)
    rel = w / w.mean()
    se_cov = np.sqrt((z.var() * rel.var() + np.cov(z, rel, bias=True)[0, 1] ** 2) / 800)
    assert row("response_multi").se == pytest.approx(0.5 * se_cov, rel=0.10)
    for end in ("ci_low", "ci_high"):
        assert row("response_multi")[end] == pytest.approx(0.5 * row("differential")[end] * 800 / 799, rel=1e-3)
    assert estimate_table(frame, design, bootstrap=0, h2={"len": (0.5, None, "entered")}).table.query(
        "quantity == 'response_multi'").se.isna().all()


def test_without_a_pedigree_h2_only_g_beta_and_price_are_compared_and_other_fitness_is_ignored():
    table = _table([(2.0, 0.2)] * 2, [0.8] * 2, fitness="alive")
    price = [_price(0.8, 0.1, fitness="alive"), _price(5.0, 0.1, fitness="eggs"), _price(math.nan, 0.1)]
    assert disagreements(table, price, {}) == []
    found = disagreements(table, [_price(3.0, 0.1, fitness="alive")], {})
    assert [d.pairs for d in found] == [((LANDE, PRICE),)]
