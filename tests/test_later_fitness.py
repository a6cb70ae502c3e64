"""A fitness component that follows another in a total is not "missing" for an individual whose earlier
component is 0: a beetle that died has no later clutch to count (total fitness as the product of its
components, Arnold & Wade 1984, Evolution 38:709-719; the product is 0 whatever the later part)."""

from __future__ import annotations

from fieldslope.schemas.readers import read_sheet
from fieldslope.schemas.validate import check_sheet

from tests.test_validate import HEADER, PROTOCOL, flags_of


def test_protocol_names_the_components_before_each_one():
    assert PROTOCOL.earlier_components("clutch") == ("survived",)
    assert PROTOCOL.earlier_components("survived") == ()
    assert PROTOCOL.earlier_components("gain") == ()       # in no total


def test_a_dead_individuals_later_component_is_not_missing_fitness():
    sheet = read_sheet("b.csv", "\n".join([
        HEADER,
        "R001,2025,Cinder Flat,5,1,1,,0.5,,",    # alive, clutch blank: missing
        "R002,2025,Cinder Flat,5,1,0,,0.5,,",    # died: no clutch to count, not missing
        "R003,2025,Cinder Flat,5,1,,,0.5,,",     # survival unknown: both missing
        "R004,2025,Cinder Flat,5,1,1,3,0.5,,",   # complete
    ]).encode())
    report = check_sheet(PROTOCOL, sheet)
    assert flags_of(report, "missing_fitness") == [(2, "clutch", ""), (4, "survived", ""), (4, "clutch", "")]
