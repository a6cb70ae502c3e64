"""Export safety against CSV injection (OWASP, "CSV Injection")."""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
import pytest

from fieldslope.schemas.export import frame_to_safe_csv, neutralise_cell


@pytest.mark.parametrize("text", [
    "=HYPERLINK(\"http://x\",\"y\")", "+1+cmd|' /C calc'!A0", "-2+3+cmd|' /C calc'!A0", "@SUM(1+9)*cmd|' /C calc'!A0",
    "\t=1+1", "\r=1+1", "\n=1+1", "-x",
])
def test_formula_starts_get_an_apostrophe(text):
    # the payloads are the OWASP page's examples; each starts with one of = + - @ tab CR LF
    assert neutralise_cell(text) == "'" + text


@pytest.mark.parametrize("value", ["femur", "Cinder Flat", "", " =not first", -0.12, 3, np.float64(-1.5), None,
                                   "-0.12", "+4", "1e-5"])
def test_other_values_are_unchanged(value):
    assert neutralise_cell(value) is value


def test_frame_numbers_stay_numbers_and_text_is_neutralised():
    df = pd.DataFrame({
        "term": ["=cmd", "femur", "@x", None],
        "estimate": [-0.12, 0.3, np.nan, 1.5],
        "n": [10, 12, 9, 8],
        "mixed": pd.Series([-2.5, "-y", 3, "+z"], dtype=object),
        "=head": ["a", "b", "c", "d"],
    })
    text = frame_to_safe_csv(df)
    rows = list(csv.reader(io.StringIO(text)))
    assert rows[0] == ["term", "estimate", "n", "mixed", "'=head"]
    assert rows[1] == ["'=cmd", "-0.12", "10", "-2.5", "a"]
    assert rows[2] == ["femur", "0.3", "12", "'-y", "b"]
    assert rows[3] == ["'@x", "", "9", "3", "c"]
    assert rows[4] == ["", "1.5", "8", "'+z", "d"]
    assert "\"-0.12\"" not in text            # a negative estimate is a bare number
