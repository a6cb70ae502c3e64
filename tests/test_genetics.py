"""The animal-model rows of the estimates table, and how the responses use them."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

from animal_sim import simulate
from fieldslope.analysis.animal_data import model_data
from fieldslope.analysis.animal_model import Kernel, fit_univariate
from fieldslope.analysis.design import Design
from fieldslope.analysis.genetics import pedigree_estimates
from fieldslope.analysis.pedigree import from_frame
from fieldslope.analysis.table import estimate_table

DESIGN = Design(traits=("t0", "t1"), fitness={"W": "continuous"}, id="id", season="season", groups=("site",),
                mother="dam", father="sire")


@pytest.fixture(scope="module")
def study():
    rng = np.random.default_rng(44)
    df = simulate(rng, [[0.5, 0.2], [0.2, 0.4]], [[0.5, 0.1], [0.1, 0.6]], generations=3, per_generation=90, pairs=30)
    df["W"] = np.exp(0.3 * (df["t0"] - df["t0"].mean()) + rng.normal(0, 0.3, len(df)))
    with threadpool_limits(limits=1, user_api="blas"):
        return df, pedigree_estimates(df, DESIGN)


def test_unrelated_founders_give_a_note_and_no_estimate():
    df = pd.DataFrame({"id": [f"i{k}" for k in range(40)], "season": "1", "site": "a", "dam": "", "sire": "",
                       "t0": np.linspace(0, 1, 40), "t1": np.cos(np.arange(40)), "W": 1.0 + np.arange(40) % 3})
    g = pedigree_estimates(df, DESIGN)
    assert g.rows == [] and g.h2 == {}
    text = " ".join(n[-1] for n in g.notes)
    assert "No pedigree heritability of t0: no two measured individuals are related" in text
    assert "No genetic correlations" in text and "No Robertson-Price response for W" in text


def test_rows_are_the_animal_model_fits(study):
    df, g = study
    t = pd.DataFrame(g.rows)
    assert set(t["quantity"]) == {"heritability_pedigree", "additive_variance", "genetic_correlation", "response_price"}
    assert (t["season"] == "all").all() and (t["site"] == "all").all()
    fit = fit_univariate(Kernel(model_data(df, DESIGN, from_frame(df, "id", "season", "dam", "sire"), df[["t0"]])[0]))
    h = t[(t["quantity"] == "heritability_pedigree") & (t["term"] == "t0")].iloc[0]
    assert (h["estimate"], h["ci_low"], h["ci_high"], h["n"]) == pytest.approx((fit.h2, fit.h2_low, fit.h2_high, 270))
    rg = t[t["quantity"] == "genetic_correlation"]
    assert list(rg["term"]) == ["t0:t1"] and -1 < rg["estimate"].iloc[0] < 1
    price = t[t["quantity"] == "response_price"]
    assert list(price["term"]) == ["t0", "t1"] and (price["fitness"] == "W").all()
    assert "Pedigree: 270 individuals (90 founders), 2 generations deep" in g.summary


def test_responses_use_the_pedigree_heritability_and_g(study):
    df, g = study
    est = estimate_table(df, DESIGN, bootstrap=0, genetics=g)
    t = est.table
    S = t[(t["quantity"] == "differential") & (t["season"] == "2021") & (t["site"] == "A") & (t["term"] == "t0")]
    R = t[(t["quantity"] == "response") & (t["season"] == "2021") & (t["site"] == "A") & (t["term"] == "t0")]
    assert R["estimate"].iloc[0] == pytest.approx(g.h2["t0"][0] * S["estimate"].iloc[0])  # R = h2 S
    notes = " ".join(n.message for n in est.notes)
    assert "uses G from the animal model" in notes
    assert "taken equal to the phenotypic correlations" not in notes
    assert (t["quantity"] == "heritability_pedigree").sum() == 2
