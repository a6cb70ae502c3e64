"""``estimate --format table``: 80 columns, no name cut (no two terms that read the same), units stated, and
narrowed by --quantity and --term. The units are those of the estimation contract's quantity table (the
differential in trait units, β in relative fitness per sd, Lande & Arnold 1983, Evolution 37:1210–1226;
β/sd per trait unit; γ per sd²; R in trait units and as % of the mean)."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from fieldslope.common.names import Q
from fieldslope.tui.cli import main
from fieldslope.tui.estimate_text import estimates_text, unit_of

COLUMNS = ["season", "site", "fitness", "quantity", "term", "estimate", "se", "ci_low", "ci_high", "p_value", "n"]
UNITS = {"forewing_length": "mm", "hind_tibia": "mm", "dry_mass": "mg"}


def row(quantity, term, estimate=0.1234, se=0.02, lo=0.08, hi=0.16, p=0.004, n=120):
    return ["2024", "Gull Flat", "total", quantity, term, estimate, se, lo, hi, p, n]


def test_units_follow_the_estimation_contract():
    assert unit_of(Q.MEAN, "dry_mass", UNITS) == "mg"
    assert unit_of(Q.DIFFERENTIAL, "forewing_length", UNITS) == "mm"
    assert unit_of(Q.DIFFERENTIAL_STD, "forewing_length", UNITS) == "sd"
    assert unit_of(Q.GRADIENT, "forewing_length", UNITS) == "w per sd"
    assert unit_of(Q.GRADIENT_RAW, "dry_mass", UNITS) == "w per mg"
    assert unit_of(Q.QUADRATIC, "dry_mass^2", UNITS) == "w per sd²"
    assert unit_of(Q.RESPONSE, "hind_tibia", UNITS) == "mm"
    assert unit_of(Q.RESPONSE_PCT, "hind_tibia", UNITS) == "% of the mean"
    assert unit_of(Q.ADDITIVE_VARIANCE, "dry_mass", UNITS) == "mg²"
    assert unit_of(Q.OPPORTUNITY, "", UNITS) == "" and unit_of(Q.HERITABILITY, "dry_mass", UNITS) == ""


def test_terms_are_whole_and_distinct_and_every_line_fits_80_columns():
    long_term = "a_very_long_trait_name_for_a_test:dry_mass"
    table = pd.DataFrame([row(Q.OPPORTUNITY, "", se=None, lo=None, hi=None, p=None),
                          row(Q.MEAN, "forewing_length", estimate=4.51),
                          row(Q.MEAN, "dry_mass", estimate=71.3),
                          row(Q.CORRELATIONAL, "forewing_length:hind_tibia"),
                          row(Q.CORRELATIONAL, "forewing_length:dry_mass", estimate=-1.23456e-05),
                          row(Q.CORRELATIONAL, long_term),
                          row(Q.GRADIENT, "hind_tibia")], columns=COLUMNS)
    text = estimates_text(table, (), UNITS)
    lines = text.splitlines()
    assert all(len(line) <= 80 for line in lines), text
    assert "…" not in text
    for term in ("forewing_length:hind_tibia", "forewing_length:dry_mass", long_term):
        assert sum(term in line for line in lines) == 1
    # units: in the heading when the rows share one, beside each term when they differ
    assert "correlational (w per sd²)" in lines and "gradient (w per sd)" in lines
    assert any(line.startswith("  forewing_length (mm) ") for line in lines)
    assert any(line.startswith("  dry_mass (mg) ") for line in lines)
    flat = " ".join(text.split())
    assert "w is relative fitness" in flat and "sd is the trait's standard deviation" in flat
    # a term too long for its column stands alone, its numbers on the next line
    at = next(i for i, line in enumerate(lines) if long_term in line)
    assert lines[at].strip() == long_term and "0.1234" in lines[at + 1]


LONG_PROTOCOL_NAMES = {"wing": "forewing_length", "tibia": "hind_tibia_length"}


def test_estimate_table_cuts_no_name_and_narrows_to_quantity_and_term(tmp_path, protocol_text, capsys, write_batch,
                                                                        hopper_rows):
    text = protocol_text
    for old, new in LONG_PROTOCOL_NAMES.items():
        text = text.replace(f"[traits.{old}]", f"[traits.{new}]")
    protocol = tmp_path / "p.toml"
    protocol.write_text(text)
    rows = [{LONG_PROTOCOL_NAMES.get(k, k): v for k, v in r.items()} for r in hopper_rows("2024", "Gull Flat", n=60)]
    study = str(tmp_path / "st")
    assert main(["init", study, "--protocol", str(protocol)]) == 0
    assert main(["import", str(write_batch(rows)), "--study", study]) == 0
    capsys.readouterr()

    assert main(["estimate", "--bootstrap", "0", "--study", study]) == 0
    out = capsys.readouterr().out
    assert "…" not in out and all(len(line) <= 80 for line in out.splitlines())
    lines = [line.strip() for line in out.splitlines()]
    assert "forewing_length:hind_tibia_length" in lines and any(x.startswith("m1:hind_tibia_length ") for x in lines)
    assert "gradient_raw (w per mm)" in out and "differential (mm)" in out

    assert main(["estimate", "--bootstrap", "0", "--study", study, "--quantity", "gradient",
                 "--term", "forewing_length"]) == 0
    out = capsys.readouterr().out
    assert "gradient (w per sd)" in out and "  forewing_length " in out
    assert "hind_tibia_length" not in out and "differential" not in out and "gradient_raw" not in out

    # a trait asks for every term about it; csv is narrowed the same way
    assert main(["estimate", "--bootstrap", "0", "--study", study, "--quantity", "correlational", "--quantity",
                 "quadratic", "--term", "hind_tibia_length", "--format", "json"]) == 0
    got = {(r["quantity"], r["term"]) for r in json.loads(capsys.readouterr().out) if r["site"] == "Gull Flat"}
    assert got == {("quadratic", "hind_tibia_length^2"), ("correlational", "forewing_length:hind_tibia_length")}


@pytest.mark.parametrize("option, value, words", [
    ("--quantity", "slope", "there is no quantity 'slope'"),
    ("--term", "femur", "there is no term 'femur'"),
])
def test_an_unknown_quantity_or_term_is_one_sentence(tmp_path, protocol_file, capsys, write_batch, hopper_rows,
                                                     option, value, words):
    study = str(tmp_path / "st")
    assert main(["init", study, "--protocol", str(protocol_file)]) == 0
    assert main(["import", str(write_batch(hopper_rows("2024", "Gull Flat", n=30))), "--study", study]) == 0
    capsys.readouterr()
    assert main(["estimate", "--bootstrap", "0", "--study", study, option, value]) == 1
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and words in err and "Traceback" not in err
