"""Protocol parsing: the spec's example parses; each mistake names file, key and line."""

from pathlib import Path

import pytest

from fieldslope.common.errors import ProtocolError
from fieldslope.schemas.protocol import load_protocol, parse_protocol

EXAMPLE = """\
[study]
name = "Example"
id = "tag"
season = "season"
groups = ["site"]

[traits.femur]
unit = "mm"
min = 8.0
max = 16.0
label = "hind femur length"

[traits.pronotum]
unit = "mm"

[fitness.survived]
kind = "binary"
[fitness.pods]
kind = "count"
[fitness.total]
product = ["survived", "pods"]

[parents]
mother = "dam"
father = "sire"

[checks]
outlier_z = 4.0
missing = ["NA"]
[checks.allowed]
site = ["North Scree", "Lower Fan"]
"""


def test_example_parses_in_file_order():
    p = parse_protocol(EXAMPLE)
    assert p.id_col == "tag" and p.season_col == "season" and p.groups == ("site",)
    assert p.trait_names == ("femur", "pronotum")
    assert p.traits["femur"].min == 8.0 and p.traits["femur"].max == 16.0
    assert p.traits["femur"].in_range(8.0) and not p.traits["femur"].in_range(16.5)
    assert p.component_names == ("survived", "pods")
    assert p.totals == {"total": ("survived", "pods")}
    assert p.parent_cols == ("dam", "sire")
    assert p.allowed == {"site": ("North Scree", "Lower Fan")}
    assert p.missing_codes == ("", "NA")


@pytest.mark.parametrize(
    "old, new, key, line",
    [
        ('kind = "count"', 'kind = "counts"', "fitness.pods.kind", 19),
        ("min = 8.0", "min = 18.0", "traits.femur.min", 9),
        ('product = ["survived", "pods"]', 'product = ["survived", "seeds"]', "fitness.total.product", 21),
        ("outlier_z = 4.0", "outlier_z = -1", "checks.outlier_z", 28),
    ],
)
def test_mistakes_name_key_and_line(old, new, key, line):
    with pytest.raises(ProtocolError) as err:
        parse_protocol(EXAMPLE.replace(old, new), Path("p.toml"))
    msg = str(err.value)
    assert msg.startswith(f"p.toml, line {line}: {key}")
    assert "\n" not in msg


def test_toml_syntax_error_names_line(tmp_path):
    f = tmp_path / "protocol.toml"
    f.write_text(EXAMPLE.replace('unit = "mm"\nmin', 'unit = "mm\nmin', 1))
    with pytest.raises(ProtocolError) as err:
        load_protocol(f)
    assert "line 8" in str(err.value)


def test_missing_file_is_one_sentence(tmp_path):
    with pytest.raises(ProtocolError, match="not found"):
        load_protocol(tmp_path / "nope.toml")
