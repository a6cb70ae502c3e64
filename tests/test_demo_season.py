"""The demo season's generator: it reproduces the committed files, and its true values are right.

The true values in demo_season/README.md are computed by the generator's own
least-squares code (numpy), independent of analysis/; here that code is
checked against statsmodels, and its parent-offspring computation against the
theory it implements.
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
    assert slip.startswith("BS23-0137,") and slip.split(",")[4] == "11.5"
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
