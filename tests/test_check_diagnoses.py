"""``fieldslope check`` says the soft problems beside the hard errors, and the likely causes of odd columns:
two trait columns swapped, a column in another unit, a unit typed into the cell.

Unit factors: 1 g = 1000 mg and 1 cm = 10 mm (SI prefixes), 1 in = 25.4 mm (the international yard and
pound agreement of 1959); what counts as "most" values (80 %) is common practice here, not a published rule."""

from __future__ import annotations

from fieldslope.schemas.diagnose import column_causes, unit_in_cell
from fieldslope.schemas.protocol import parse_protocol
from fieldslope.schemas.readers import read_sheet
from fieldslope.schemas.validate import check_sheet
from fieldslope.tui.cli import main

# An invented pond snail at an invented spring (test data only).
SNAIL = parse_protocol("""\
[study]
id = "tag"
season = "season"
groups = []
[traits.shell]
unit = "mm"
min = 8.0
max = 20.0
[traits.mass]
unit = "mg"
min = 40.0
max = 400.0
[fitness.survived]
kind = "binary"
""")

SHELLS = [9.1, 12.4, 15.0, 11.2, 13.8, 10.5, 17.3, 14.1]
MASSES = [61.0, 150.5, 220.0, 98.2, 180.7, 75.3, 310.9, 166.4]


def snail_sheet(shell, mass, header="tag,season,shell,mass,survived"):
    lines = [header] + [f"S{i:03d},2025,{a},{b},1" for i, (a, b) in enumerate(zip(shell, mass))]
    return check_sheet(SNAIL, read_sheet("snails.csv", "\n".join(lines).encode()))


def call(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


# -- a unit typed into the cell -------------------------------------------------------------------

def test_a_unit_in_the_cell_says_remove_the_unit():
    reason = unit_in_cell("68.2 mg", "mass", "mg")
    assert "remove the unit" in reason and "68.2" in reason
    assert "remove the unit" in unit_in_cell("68.2mg", "mass", "mg")
    assert "remove the unit" in unit_in_cell("12,5 mm", "shell", "mm")
    # another unit: write the value in the protocol's unit, and by what factor (1 g = 1000 mg)
    other = unit_in_cell("0.068 g", "mass", "mg")
    assert "recorded in mg" in other and "multiply by 1000" in other
    assert unit_in_cell("68.2", "mass", "mg") is None and unit_in_cell("lost", "mass", "mg") is None


def test_the_check_of_a_sheet_names_the_unit_not_a_space():
    report = snail_sheet(SHELLS[:3], ["61.0 mg", "150.5", "220"])
    (error,) = report.errors
    assert error.column == "mass" and "remove the unit" in error.reason and "SPACE" not in error.reason


# -- two columns swapped, another unit ----------------------------------------------------------------

def test_two_swapped_trait_columns_are_named_as_swapped():
    report = snail_sheet(MASSES, SHELLS)
    causes = [n for n in report.notes if n.startswith("likely cause")]
    assert len(causes) == 1
    assert "shell and mass look swapped" in causes[0] and "8 of 8 shell values fit the range of mass" in causes[0]


def test_a_column_in_grams_for_milligrams_is_named():
    import numpy as np

    grams = np.array(MASSES) / 1000             # 1 g = 1000 mg
    (cause,) = column_causes(SNAIL.traits, {"shell": np.array(SHELLS), "mass": grams})
    assert "mass looks written in g, not mg" in cause and "multiplied by 1000" in cause


def test_a_column_in_centimetres_or_inches_is_named():
    import numpy as np

    cm = np.array(SHELLS) / 10                  # 1 cm = 10 mm
    (cause,) = column_causes(SNAIL.traits, {"shell": cm, "mass": np.array(MASSES)})
    assert "written in cm, not mm" in cause
    inches = np.array(SHELLS) / 25.4            # 1 in = 25.4 mm
    (cause,) = column_causes(SNAIL.traits, {"shell": inches, "mass": np.array(MASSES)})
    assert "written in in, not mm" in cause and "multiplied by 25.4" in cause


def test_values_that_fit_their_range_have_no_cause():
    assert snail_sheet(SHELLS, MASSES).notes == ()
    # one slip among many is a flag, not a column-wide cause
    assert snail_sheet([*SHELLS[:-1], 141.0], MASSES).notes == ()


# -- the command line: soft problems beside the errors, nothing pointing to stored flags -----------------

def test_check_lists_soft_problems_beside_errors_and_never_points_to_stored_flags(tmp_path, protocol_file, capsys):
    study = str(tmp_path / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    sheet = tmp_path / "mixed.csv"
    sheet.write_text("tag,season,site,wing,tibia,survived,clutch\n"
                     "H01,2024,Gull Flat,4.5 mm,1.5,1,3\n"       # a hard error: a unit in the cell
                     "H02,2024,Gull Flat,45,1.6,0,0\n"          # out of range (a slip of the decimal point)
                     "H03,2024,Gull Flat,4.1,1.3,1,4\n"
                     "H03,2024,Gull Flat,4.2,1.3,1,4\n")        # the same ID twice
    code, out, err = call(capsys, "check", str(sheet), "--study", study)
    assert code == 1 and "an import would store nothing" in err
    assert "row 2, column wing: '4.5 mm' is not a number: it holds the unit 'mm'; remove the unit" in out
    assert "its valid rows would also open flags: 2 duplicate ID, 1 out of range" in out
    assert "row 3: wing = 45 mm is outside the plausible range" in out
    assert "row 4: ID H03 appears more than once" in out
    assert "fieldslope flags" not in out + err and "fieldslope resolve" not in out + err
    code, out, err = call(capsys, "check", str(sheet), "--accept-valid", "--study", study)
    assert code == 0 and "fieldslope flags" not in out + err and "fieldslope resolve" not in out + err
    assert "row 3: wing = 45 mm is outside" in out


def test_check_lists_the_outliers_the_record_would_raise(tmp_path, protocol_file, capsys, write_batch,
                                                          hopper_rows):
    study = str(tmp_path / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    rows = hopper_rows("2024", "Gull Flat", n=30)
    for i, r in enumerate(rows):
        r["wing"] = f"{4.4 + (i % 5) * 0.05:.2f}"      # a tight cell: 5.95 stands far out, yet in range
    assert call(capsys, "import", str(write_batch(rows, "first.csv")), "--study", study)[0] == 0
    odd = [{**rows[0], "tag": "GU24-0900", "wing": "5.95"}]
    code, out, _ = call(capsys, "check", str(write_batch(odd, "late.csv")), "--study", study)
    assert code == 0 and "would store 1 of 1 row" in out
    assert "1 outlier" in out and "row 2: wing 5.95 is a robust outlier in its cell" in out


def test_the_likely_cause_is_kept_with_the_imported_batch(tmp_path, protocol_file, capsys):
    study = str(tmp_path / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    sheet = tmp_path / "swapped.csv"
    sheet.write_text("tag,season,site,tibia,wing,survived,clutch\n"
                     + "".join(f"H{i:02d},2024,Gull Flat,{4.2 + i / 20:.2f},{1.4 + i / 50:.2f},1,2\n"
                               for i in range(6)))
    code, out, _ = call(capsys, "import", str(sheet), "--study", study)
    assert code == 0 and "note: likely cause: columns wing and tibia look swapped" in out.replace("\n", " ")
    out = call(capsys, "batches", "--study", study)[1]
    assert "likely cause: columns wing and tibia look swapped" in out.replace("\n", " ").replace("      ", "")
