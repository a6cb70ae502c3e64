"""Sheet checks against the protocol: refusals, hard errors per cell, soft flags, typed rows.

The rules tested are those of the intake specification (refuse whole / hard
error / soft flag); each expected value is written out by hand from the sheet
in the test.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldslope.common.errors import SheetError
from fieldslope.schemas.protocol import parse_protocol
from fieldslope.schemas.readers import read_sheet
from fieldslope.schemas.records import Sheet
from fieldslope.schemas.validate import check_sheet

# An invented study: a ground beetle on two invented lava fields.
PROTOCOL = parse_protocol("""\
[study]
name = "Cinder beetles"
id = "ring"
season = "year"
groups = ["field"]

[traits.elytra]
unit = "mm"
min = 3.0
max = 9.0
[traits.horn]
unit = "mm"

[fitness.survived]
kind = "binary"
[fitness.clutch]
kind = "count"
[fitness.gain]
kind = "continuous"
[fitness.total]
product = ["survived", "clutch"]

[parents]
mother = "dam"

[checks]
missing = ["NA", "-"]
[checks.allowed]
field = ["Cinder Flat", "Moss Gully"]
""")

HEADER = "ring,year,field,elytra,horn,survived,clutch,gain,dam,observer"
GOOD = [
    "R001,2025,Cinder Flat,5.5,1.2,1,4,0.5,R100,Ana",
    "R002,2025,Moss Gully,6.0,0.8,0,0,0,,Ana",
    "R003,2025,Moss Gully,4.75,1.0,1,2,1.25,R100,",
]


def check(lines: list[str], header: str = HEADER, name: str = "b.csv"):
    data = "\n".join([header, *lines]).encode()
    return check_sheet(PROTOCOL, read_sheet(name, data))


def errors_of(report) -> list[tuple[int, str, str]]:
    return [(e.row, e.column, e.value) for e in report.errors]


def flags_of(report, kind: str) -> list[tuple[int, str, str]]:
    return [(f.row, f.field, f.value) for f in report.flags if f.kind == kind]


def refusal(lines: list[str], header: str) -> str:
    with pytest.raises(SheetError) as err:
        check(lines, header)
    assert "\n" not in str(err.value)
    return str(err.value)


# -- the file refused whole ------------------------------------------------------------

def test_missing_id_or_season_column_refuses_the_file():
    assert "'ring' (ID)" in refusal(["2025,5"], "year,elytra")
    msg = refusal(["R1,5"], "ring,elytra")
    assert "'year' (season)" in msg and "protocol.toml" in msg


def test_missing_id_column_suggests_the_near_name():
    assert "'Ring' may be meant" in refusal(["R1,2025"], "Ring,year")
    assert "'yaer' may be meant" in refusal(["R1,2025"], "ring,yaer")


def test_unknown_column_is_kept_and_named_once_with_a_fix():
    report = check(["R1,2025,7", "R2,2025,8"], "ring,year,wingspan")
    assert len(report.notes) == 1 and "'wingspan'" in report.notes[0] and "protocol.toml" in report.notes[0]
    assert report.kept == ("wingspan",) and list(report.valid["wingspan"]) == ["7", "8"] and not report.errors


def test_unknown_column_near_a_missing_protocol_column_refuses_naming_both():
    assert "near miss of 'elytra'" in refusal(["R1,2025,5"], "ring,year,Elytra")
    msg = refusal(["R1,2025,5"], "ring,year,cluch")
    assert "'cluch'" in msg and "rename the column to 'clutch'" in msg


def test_product_column_is_refused():
    msg = refusal(["R1,2025,1,4,4"], "ring,year,survived,clutch,total")
    assert "'total'" in msg and "computed" in msg


def test_optional_columns_any_case():
    report = check(["R1,2025,5,14 June,Ana,wet"], "ring,year,elytra,Date,OBSERVER,notes")
    assert list(report.valid.columns) == ["ring", "year", "elytra", "date", "observer", "notes", "_row"]


def test_a_season_in_other_scripts_digits_is_refused():
    # Python's \d also matches fullwidth and Arabic-Indic digits; a season must be plain 0-9,
    # as the store, the filters and the command line compare seasons as text.
    lines = [GOOD[0],
             "R020,\uff12\uff10\uff12\uff15,Cinder Flat,5,1,1,4,0,,",   # fullwidth 2025
             "R021,\u0662\u0660\u0662\u0665,Cinder Flat,5,1,1,4,0,,"]   # Arabic-Indic 2025
    report = check(lines)
    assert [(e.row, e.column) for e in report.errors] == [(3, "year"), (4, "year")]
    assert all("four digits 0-9" in e.reason for e in report.errors)
    assert list(report.valid["_row"]) == [2]


# -- good rows, typed --------------------------------------------------------------------

def test_good_rows_are_typed():
    report = check(GOOD)
    assert report.errors == [] and report.bad_rows == []
    v = report.valid
    assert list(v["ring"]) == ["R001", "R002", "R003"]
    assert list(v["year"]) == ["2025"] * 3 and all(isinstance(x, str) for x in v["year"])
    assert list(v["_row"]) == [2, 3, 4]
    assert v["elytra"].dtype == np.float64 and list(v["elytra"]) == [5.5, 6.0, 4.75]
    assert list(v["clutch"]) == [4.0, 0.0, 2.0]
    assert list(v["dam"]) == ["R100", None, "R100"]
    assert list(v["observer"]) == ["Ana", "Ana", None]
    assert v["dam"].dtype == object and v["ring"].dtype == object
    assert report.census is False and report.flags == []


def test_census_sheet():
    report = check(["R001,2025,1,3", "R002,2025,0,0"], "ring,year,survived,clutch")
    assert report.census is True and len(report.valid) == 2
    assert check(["R001,2025,5"], "ring,year,elytra").census is False


def test_missing_codes_mean_blank_only_when_declared():
    report = check(["R001,2025,Cinder Flat,NA,-,1,4,0.5,,"])
    assert report.errors == []
    assert math.isnan(report.valid["elytra"][0]) and math.isnan(report.valid["horn"][0])
    other = parse_protocol(PROTOCOL_TEXT_WITHOUT_CODES)
    sheet = read_sheet("b.csv", b"ring,year,elytra\nR001,2025,NA\n")
    out = check_sheet(other, sheet)
    assert [(e.row, e.column, e.value) for e in out.errors] == [(2, "elytra", "NA")]


PROTOCOL_TEXT_WITHOUT_CODES = """\
[study]
id = "ring"
season = "year"
groups = []
[traits.elytra]
[fitness.survived]
kind = "binary"
"""


# -- hard errors, one per cell, with the sheet row ------------------------------------------

def test_each_hard_error_is_listed_with_row_column_value():
    lines = [
        GOOD[0],
        "R004,2025,Lava Tube,5,1,1,4,0,,",        # field not allowed
        ",2025,Cinder Flat,5,1,1,4,0,,",          # ID missing
        "R006,,Cinder Flat,5,1,1,4,0,,",          # season missing
        "R007,25,Cinder Flat,5,1,1,4,0,,",        # season not a year
        "R008,2025,Cinder Flat,5.5.1,1,1,4,0,,",  # not a number
        "R009,2025,Cinder Flat,5,1,2,4,0,,",      # binary not 0/1
        "R010,2025,Cinder Flat,5,1,1,-3,0,,",     # negative count
        "R011,2025,Cinder Flat,5,1,1,2.5,0,,",    # non-integer count
        "R012,2025,Cinder Flat,inf,1,1,4,0,,",    # trait not finite
        "R013,2025,Cinder Flat,5,1,1,4,-0.5,,",   # negative continuous fitness
        "R014,2025,Cinder Flat,5,nan,1,4,0,,",    # the text nan is not a number
    ]
    report = check(lines)
    assert errors_of(report) == [
        (3, "field", "Lava Tube"),
        (4, "ring", ""),
        (5, "year", ""),
        (6, "year", "25"),
        (7, "elytra", "5.5.1"),
        (8, "survived", "2"),
        (9, "clutch", "-3"),
        (10, "clutch", "2.5"),
        (11, "elytra", "inf"),
        (12, "gain", "-0.5"),
        (13, "horn", "nan"),
    ]
    assert report.bad_rows == list(range(3, 14))
    assert list(report.valid["_row"]) == [2]
    reasons = {e.column: e.reason for e in report.errors}
    assert "Cinder Flat, Moss Gully" in reasons["field"]
    assert "0 or 1" in reasons["survived"]
    assert "2025" in reasons["year"] or "four digits" in reasons["year"]
    for e in report.errors:
        assert e.sentence().startswith(f"row {e.row}")


def test_one_bad_cell_does_not_skip_the_column_range_checks():
    report = check([
        "R001,2025,Cinder Flat,abc,1,1,4,0,,",
        "R002,2025,Cinder Flat,12.5,1,1,4,0,,",   # out of range 3-9: flagged
        "R003,2025,Cinder Flat,-1,1,1,4,0,,",     # out of range: flagged
    ])
    assert errors_of(report) == [(2, "elytra", "abc")]
    assert flags_of(report, "out_of_range") == [(3, "elytra", "12.5"), (4, "elytra", "-1")]


def test_several_errors_in_one_row_are_all_listed():
    report = check(["R001,2025,Nowhere,x,y,7,-1,0,,"])
    assert [e.column for e in report.errors] == ["field", "elytra", "horn", "survived", "clutch"]
    assert report.bad_rows == [2] and report.valid.empty


def test_decimal_comma_file():
    data = "ring;year;elytra;gain\nR001;2025;5,5;0,25\nR002;2025;6;1\nR003;2025;1.234;1\n".encode()
    sheet = read_sheet("b.csv", data)
    assert sheet.decimal == ","
    report = check_sheet(PROTOCOL, sheet)
    assert list(report.valid["elytra"]) == [5.5, 6.0]
    assert list(report.valid["gain"]) == [0.25, 1.0]
    assert errors_of(report) == [(4, "elytra", "1.234")]          # ambiguous in a decimal-comma file
    assert "ambiguous" in report.errors[0].reason and "thousands" in report.errors[0].reason


def test_decimal_comma_in_a_decimal_point_file_is_an_error():
    report = check(['R001,2025,"5,5"'], "ring,year,elytra")
    assert errors_of(report) == [(2, "elytra", "5,5")]


# -- soft flags on accepted rows -----------------------------------------------------------

def test_out_of_range_flag_names_range_and_unit():
    report = check(["R001,2025,Cinder Flat,9.5,40,1,4,0,,"])   # horn has no range: never flagged
    assert flags_of(report, "out_of_range") == [(2, "elytra", "9.5")]
    assert "3–9 mm" in report.flags[0].message


def test_missing_fitness_one_flag_per_blank_component():
    report = check([
        "R001,2025,Cinder Flat,5,1,1,,,,",
        "R002,2025,Cinder Flat,5,1,,,,,",
        "R003,2025,Cinder Flat,5,1,1,3,,,",
    ])
    # gain is blank in every row: not measured in this batch, so not flagged
    assert flags_of(report, "missing_fitness") == [(2, "clutch", ""), (3, "survived", ""), (3, "clutch", "")]


def test_duplicate_id_in_one_season_flags_each_row():
    report = check([GOOD[0], GOOD[1], GOOD[0].replace("5.5", "5.6"), GOOD[1].replace("2025", "2024")])
    dups = [(f.row, f.individual, f.season) for f in report.flags if f.kind == "duplicate_id"]
    assert dups == [(2, "R001", "2025"), (4, "R001", "2025")]
    assert "rows 2, 4" in report.flags[0].message


@pytest.mark.parametrize("mangled, reason", [
    ("2025-03-01", "date"),          # an ID turned into a date and read back from XLSX
    ("1-Mar", "date"),
    ("Mar-01", "date"),
    ("3/1/2025", "date"),
    ("2.31E+13", "scientific"),
    ("45822", "serial"),             # day 45822 = 2025-06-14 in the 1900 date system (ECMA-376 Part 1, dates and times; from memory)
    ("R0\u200b05", "ZERO WIDTH SPACE"),
    ("R0\u00a005", "NO-BREAK SPACE"),
])
def test_mangled_ids_are_flagged(mangled, reason):
    lines = [f"{mangled},2025,5"] + [f"R00{i},2025,5" for i in range(1, 4)]
    report = check(lines, "ring,year,elytra")
    found = [(f.row, f.value) for f in report.flags if f.kind == "mangled_id"]
    assert found == [(2, mangled)]
    assert reason in report.flags[0].message


def test_five_digit_ids_are_fine_when_all_ids_are_five_digits():
    report = check(["45822,2025,5", "45823,2025,5", "30001,2025,5"], "ring,year,elytra")
    assert flags_of(report, "mangled_id") == []


def test_lost_leading_zeros_are_flagged():
    report = check(["0041,2025,5", "0042,2025,5", "43,2025,5", "0044,2025,5"], "ring,year,elytra")
    assert flags_of(report, "mangled_id") == [(4, "ring", "43")]


def test_flags_only_on_accepted_rows():
    report = check(["R001,2025,Nowhere,12,1,1,4,0,,", "R001,2025,Cinder Flat,5,1,1,4,0,,"])
    assert report.bad_rows == [2] and report.flags == []


# -- xlsx end to end ------------------------------------------------------------------------

def test_xlsx_sheet_checks_like_csv(tmp_path):
    import openpyxl
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["ring", "year", "elytra", "clutch"])
    ws.append(["R001", 2025, 5.5, 3])
    ws.append(["R002", 2025, "n.a.", 2.0])
    path = tmp_path / "b.xlsx"
    wb.save(path)
    report = check_sheet(PROTOCOL, read_sheet("b.xlsx", path.read_bytes()))
    assert errors_of(report) == [(3, "elytra", "n.a.")]
    assert list(report.valid["clutch"]) == [3.0] and list(report.valid["year"]) == ["2025"]


# -- any sheet: accepted + refused = input ------------------------------------------------------

_CELLS = st.one_of(
    st.none(),
    st.sampled_from(["R1", "R2", "0007", "2025", "25", "Cinder Flat", "Moss Gully", "x", "NA", "-", "1", "0",
                     "2", "-1", "2.5", "5,5", "1.234", "inf", "nan", "1e400", "45822", "2.31E+13", "1-Mar"]),
    st.text(max_size=6),
)
_OPTIONAL = ["field", "elytra", "horn", "survived", "clutch", "gain", "dam", "notes"]


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.sampled_from(_OPTIONAL), unique=True, max_size=6),
    st.integers(min_value=0, max_value=12),
    st.data(),
    st.sampled_from([".", ","]),
)
def test_any_sheet_only_sheet_error_and_rows_add_up(optional, n_rows, data, decimal):
    columns = ["ring", "year", *optional]
    rows = [[data.draw(_CELLS) for _ in columns] for _ in range(n_rows)]
    frame = pd.DataFrame(rows, columns=columns, dtype=object)
    numbers = sorted(data.draw(st.sets(st.integers(2, 1000), min_size=n_rows, max_size=n_rows)))
    sheet = Sheet("h.csv", frame, numbers, "utf-8", ",", decimal)
    report = check_sheet(PROTOCOL, sheet)
    assert len(report.valid) + len(report.bad_rows) == n_rows
    assert set(report.bad_rows) | set(report.valid["_row"]) == set(numbers)
    assert set(report.bad_rows) == {e.row for e in report.errors}
    for col in ("elytra", "horn", "survived", "clutch", "gain"):
        if col in report.valid:
            values = report.valid[col].to_numpy(dtype=float)
            assert np.all(np.isnan(values) | np.isfinite(values))


@settings(max_examples=100, deadline=None)
@given(st.lists(st.sampled_from(["ring", "year", "wing", "total", "Notes", "elytra", "dam"]), unique=True, min_size=1))
def test_any_header_checks_or_refuses(columns):
    frame = pd.DataFrame([["R1"] * len(columns)], columns=columns, dtype=object)
    try:
        report = check_sheet(PROTOCOL, Sheet("h.csv", frame, [2], "utf-8", ","))
    except SheetError as err:
        assert str(err).startswith("h.csv: ")
        return
    assert len(report.valid) + len(report.bad_rows) == 1


def test_optional_column_twice_in_another_case_is_refused():
    assert "'Notes' and 'notes'" in refusal(["R1,2025,a,b"], "ring,year,Notes,notes")


_TOKENS = st.sampled_from(["ring", "year", "elytra", "clutch", "field", "R1", "0007", "2025", "NA", "5,5", "1.5",
                           "-1", "x", "Moss Gully", ",", ";", "\t", "\n", "\r\n", '"', " ", "é"])


@settings(max_examples=200, deadline=None)
@given(st.lists(_TOKENS, max_size=60).map("".join), st.sampled_from(["utf-8", "cp1252", "utf-16"]))
def test_any_text_file_read_and_checked_or_refused(text, codec):
    try:
        sheet = read_sheet("h.csv", ("ring,year,elytra,clutch\n" + text).encode(codec))
        report = check_sheet(PROTOCOL, sheet)
    except SheetError as err:
        assert str(err).startswith("h.csv") and "\n" not in str(err)
        return
    assert len(report.valid) + len(report.bad_rows) == len(sheet.frame)


@pytest.mark.parametrize("value, name", [
    ("\u22121.5", "MINUS SIGN"),                 # pasted from a word processor
    ("1\u00a0234", "NO-BREAK SPACE"),            # a spreadsheet's thousands gap
    ("5\u200b", "ZERO WIDTH SPACE"),
])
def test_look_alike_characters_in_numbers_are_named(value, name):
    report = check([f"R1,2025,{value}"], "ring,year,elytra")
    assert errors_of(report) == [(2, "elytra", value)]
    assert name in report.errors[0].reason


def test_measured_row_without_its_group_is_a_hard_error():
    # A measured individual must belong to an estimation cell (intake spec: cells are season x group).
    report = check([GOOD[0], "R020,2025,,5.5,1.2,1,4,0.5,,"])
    assert errors_of(report) == [(3, "field", "")]
    assert "fill it in" in report.errors[0].reason
    census = check(["R001,2025,1,4"], header="ring,year,survived,clutch")
    assert census.errors == [] and census.census
