"""Robust z (modified z-score, Iglewicz & Hoaglin 1993) against scipy as the reference."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import median_abs_deviation

from fieldslope.schemas.outliers import robust_z


def reference(x: np.ndarray) -> np.ndarray:
    # scipy's scale="normal" divides the MAD by the normal 0.75 quantile (0.67449...),
    # so (x - median) / MAD_normal is the modified z-score M = 0.6745 (x - median) / MAD
    # of Iglewicz & Hoaglin (1993), "How to Detect and Handle Outliers", ASQC.
    finite = x[np.isfinite(x)]
    return (x - np.median(finite)) / median_abs_deviation(finite, scale="normal")


def test_matches_scipy_on_a_sample():
    x = np.array([10.2, 9.8, 10.0, 10.4, 9.9, 10.1, 14.0, 10.3])
    np.testing.assert_allclose(robust_z(x), reference(x), rtol=1e-4)
    # Iglewicz & Hoaglin recommend |M| > 3.5 as the outlier cut-off: only 14.0 passes it here.
    assert list(np.flatnonzero(np.abs(robust_z(x)) > 3.5)) == [6]


def test_nan_is_ignored_and_kept():
    x = np.array([1.0, np.nan, 2.0, 3.0, 4.0, 50.0])
    z = robust_z(x)
    assert np.isnan(z[1])
    np.testing.assert_allclose(z[[0, 2, 3, 4, 5]], reference(x[[0, 2, 3, 4, 5]]), rtol=1e-4)


@pytest.mark.parametrize("x", [[5.0, 5.0, 5.0, 9.0], [], [np.nan, np.nan], [3.0]])
def test_zero_mad_gives_no_scores(x):
    assert np.all(np.isnan(robust_z(np.array(x, dtype=float))))


@settings(max_examples=100, deadline=None)
@given(st.lists(st.floats(-1e6, 1e6), min_size=3, max_size=50))
def test_agrees_with_scipy_whenever_mad_is_positive(values):
    x = np.array(values)
    if median_abs_deviation(x) <= 1e-9 * max(1.0, np.max(np.abs(x))):
        return
    np.testing.assert_allclose(robust_z(x), reference(x), rtol=1e-4, atol=1e-9)
