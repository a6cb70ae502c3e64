"""The ``fieldslope`` command line end to end: exit status, one-line errors, the audit trail."""

from __future__ import annotations

import csv
import io
import json
import os
import subprocess
import sys
import types
from pathlib import Path

import numpy as np
import pytest

from fieldslope.tui.cli import main

REPO = Path(__file__).resolve().parents[1]
COLUMNS = ["season", "site", "fitness", "quantity", "term", "estimate", "se", "ci_low", "ci_high", "p_value", "n"]

MEASURED = """tag,season,site,wing,tibia,survived,clutch
H01,2024,Gull Flat,4.5,1.5,1,3
H02,2024,Gull Flat,4.6,1.6,0,0
H03,2024,Gull Flat,4.1,1.3,1,4
H04,2024,Gull Flat,4.3,1.2,1,2
H05,2024,Gull Flat,5.0,1.8,0,0
H06,2024,Gull Flat,4.8,1.7,1,1
H07,2024,Reed Bend,4.4,1.4,1,5
H08,2024,Reed Bend,4.9,1.5,0,0
H09,2024,Reed Bend,4.7,1.9,1,6
H10,2024,Reed Bend,4.2,1.6,1,1
H11,2024,Reed Bend,4.6,1.4,0,0
H12,2024,Reed Bend,4.5,1.5,1,2
"""
LATE = "tag,season,site,wing,tibia,survived,clutch\nH13,2024,Gull Flat,4x4,1.5,1,2\nH14,2024,Gull Flat,4.7,1.6,0,0\n"


def run(*args: str, cwd: Path, env: dict | None = None) -> subprocess.CompletedProcess:
    full_env = {**os.environ, "PYTHONPATH": str(REPO), **(env or {})}
    return subprocess.run([sys.executable, "-m", "fieldslope.tui.cli", *args], cwd=cwd, env=full_env,
                          capture_output=True, text=True, timeout=120)


def run_code(code: str, cwd: Path) -> subprocess.CompletedProcess:
    """Python code in a fresh interpreter (what a command imports is seen in its ``sys.modules``)."""
    return subprocess.run([sys.executable, "-c", code], cwd=cwd, env={**os.environ, "PYTHONPATH": str(REPO)},
                          capture_output=True, text=True, timeout=120)


def call(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def folder(tmp_path, protocol_file):
    (tmp_path / "measured.csv").write_text(MEASURED)
    (tmp_path / "late.csv").write_text(LATE)
    return tmp_path


def one_line(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


def test_end_to_end_in_subprocesses(folder, protocol_file):
    r = run("init", "st", "--protocol", str(protocol_file), cwd=folder)
    assert r.returncode == 0 and (folder / "st" / "protocol.toml").exists()
    r = run("init", "st", "--protocol", str(protocol_file), cwd=folder)
    assert r.returncode == 1 and "already holds a study" in one_line(r.stderr)

    r = run("check", "late.csv", "--study", "st", cwd=folder)
    assert r.returncode == 1
    assert "row 2, column wing: '4x4' is not a number" in r.stdout
    assert "an import would store nothing" in one_line(r.stderr)

    r = run("--study", "st", "import", "measured.csv", "--operator", "ana", cwd=folder)
    assert r.returncode == 0 and "12 of 12 rows stored" in r.stdout
    r = run("import", "measured.csv", "--study", "st", cwd=folder)
    assert r.returncode == 0 and "already taken in as batch 1" in r.stdout

    r = run("import", "late.csv", "--study", "st", cwd=folder)
    assert r.returncode == 1
    r = run("import", "late.csv", "--study", "st", "--accept-valid", cwd=folder)
    assert r.returncode == 0 and "1 quarantined" in r.stdout and "1 quarantined" in r.stdout

    r = run("flags", "--study", "st", cwd=folder)
    assert r.returncode == 0 and "quarantined" in r.stdout
    flag_id = next(line.split()[0].lstrip("#") for line in r.stdout.splitlines() if "quarantined" in line)

    r = run("resolve", flag_id, "--set", "4.4", "--study", "st", cwd=folder)
    assert r.returncode == 2 and "--reason" in one_line(r.stderr)
    r = run("resolve", flag_id, "--set", "4.4", "--reason", "paper sheet", "--study", "st", cwd=folder)
    assert r.returncode == 0 and "joined the record" in r.stdout

    r = run("history", "H13", "--study", "st", cwd=folder)
    assert r.returncode == 0 and "4x4 → 4.4" in r.stdout and "paper sheet" in r.stdout

    r = run("estimate", "--format", "csv", "--bootstrap", "0", "--study", "st", cwd=folder)
    assert r.returncode == 0, r.stderr
    rows = list(csv.reader(io.StringIO(r.stdout)))
    assert rows[0] == COLUMNS and len(rows) > 10


def test_correction_changes_the_estimates(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    assert call(capsys, "import", str(folder / "measured.csv"), "--study", study)[0] == 0

    def differential() -> float:
        code, out, _ = call(capsys, "estimate", "--format", "json", "--bootstrap", "0", "--study", study,
                            "--site", "Gull Flat", "--fitness", "survived")
        assert code == 0
        rows = json.loads(out)
        assert all(list(r) == COLUMNS for r in rows)
        assert {r["site"] for r in rows} == {"Gull Flat"} and {r["fitness"] for r in rows} == {"survived"}
        return next(r["estimate"] for r in rows if r["quantity"] == "differential" and r["term"] == "wing")

    # For 0/1 fitness S is the survivors' mean minus everyone's mean (Lande & Arnold 1983, Evolution
    # 37:1210-1226; estimation.md), computed here by hand from the sheet.
    wing = np.array([4.5, 4.6, 4.1, 4.3, 5.0, 4.8])
    alive = np.array([1, 0, 1, 1, 0, 1], bool)
    assert differential() == pytest.approx(wing[alive].mean() - wing.mean(), rel=1e-9)

    # import a re-measurement of H03 (flagged as differing), then correct it
    (folder / "again.csv").write_text("tag,season,wing\nH03,2024,4.15\n")
    assert call(capsys, "import", str(folder / "again.csv"), "--study", study)[0] == 0
    code, out, _ = call(capsys, "flags", "--study", study)
    flag_id = next(line.split()[0].lstrip("#") for line in out.splitlines() if "differs" in line)
    code, out, _ = call(capsys, "resolve", flag_id, "--set", "4.9", "--reason", "misread caliper",
                        "--study", study)
    assert code == 0 and "from 4.15 to 4.9" in out
    wing[2] = 4.9
    assert differential() == pytest.approx(wing[alive].mean() - wing.mean(), rel=1e-9)

    code, out, _ = call(capsys, "history", "H03", "--study", study)
    assert "4.15 → 4.9" in out and "misread caliper" in out
    code, out, _ = call(capsys, "flags", "--all", "--study", study)
    assert "[set by" in out


def test_estimate_table_fits_80_columns_and_json_has_nulls(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    assert call(capsys, "import", str(folder / "measured.csv"), "--study", study)[0] == 0
    code, out, err = call(capsys, "estimate", "--bootstrap", "0", "--study", study)
    assert code == 0 and "estimate" in out and "gradient (w per sd)" in out, err
    assert max(len(line) for line in out.splitlines()) <= 80
    code, out, _ = call(capsys, "estimate", "--format", "json", "--bootstrap", "0", "--study", study)
    rows = json.loads(out)
    assert any(r["ci_low"] is None for r in rows)           # no bootstrap: intervals are null
    target = folder / "out.csv"
    code, out, err = call(capsys, "estimate", "--format", "csv", "--bootstrap", "0", "--study", study,
                          "--season", "2024", "--output", str(target))
    assert code == 0 and out == "" and target.read_text().splitlines()[0] == ",".join(COLUMNS)
    code, _, err = call(capsys, "estimate", "--season", "1999", "--study", study)
    assert code == 1 and "no season '1999'" in one_line(err)


@pytest.mark.parametrize("args", [
    ["bogus"],
    ["resolve", "3", "--keep", "--exclude", "--reason", "x"],
    ["resolve", "three", "--keep", "--reason", "x"],
    ["estimate", "--format", "xml"],
    ["estimate", "--bootstrap", "-1"],
    ["estimate", "--seed", "-1"],         # numpy's generators take no negative seed
    ["import", "a.csv", "--operator", "  "],   # a blank name would record nobody
    ["resolve", "3", "--keep", "--reason", "x", "--operator", ""],
    ["summary", "--seed", "-1"],
    ["report", "--output", "r.html", "--seed", "-1"],
    ["import"],
])
def test_usage_errors_exit_2_with_one_line(capsys, args):
    code, _, err = call(capsys, *args)
    assert code == 2
    assert one_line(err).startswith("fieldslope: ")


def test_missing_study_is_one_line(tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("FIELDSLOPE_STUDY", raising=False)
    code, _, err = call(capsys, "flags", "--study", str(tmp_path / "none"))
    assert code == 1 and "no study folder here" in one_line(err)


def test_env_variable_picks_the_study(folder, protocol_file, capsys, monkeypatch):
    call(capsys, "init", str(folder / "st"), "--protocol", str(protocol_file))
    monkeypatch.setenv("FIELDSLOPE_STUDY", str(folder / "st"))
    code, out, _ = call(capsys, "import", str(folder / "measured.csv"))
    assert code == 0 and "12 of 12" in out


def test_debug_shows_a_traceback(tmp_path):
    r = run("--debug", "flags", "--study", str(tmp_path / "none"), cwd=tmp_path)
    assert r.returncode == 1 and "Traceback" in r.stderr
    r = run("flags", "--study", str(tmp_path / "none"), cwd=tmp_path)
    assert "Traceback" not in r.stderr


def test_subcommands_do_not_import_textual(folder, protocol_file):
    code = ("import sys; from fieldslope.tui.cli import main; "
            f"main(['init', 'st', '--protocol', {str(protocol_file)!r}]); "
            "main(['import', 'measured.csv', '--study', 'st']); "
            "main(['estimate', '--bootstrap', '0', '--format', 'csv', '--study', 'st']); "
            "sys.exit(1 if any(m == 'textual' or m.startswith('textual.') for m in sys.modules) else 0)")
    r = run_code(code, folder)
    assert r.returncode == 0, r.stderr


def test_listing_commands_do_not_import_pandas_or_numpy(folder, protocol_file):
    """flags, history, batches and --help only read the store: they start without pandas and numpy
    (importing them is most of a short command's time; figures: benchmarks/bench_startup.py)."""
    assert run("init", "st", "--protocol", str(protocol_file), cwd=folder).returncode == 0
    assert run("import", "measured.csv", "late.csv", "--study", "st", cwd=folder).returncode == 1  # late.csv refused
    code = ("import contextlib, io, json, sys; from fieldslope.tui.cli import main\n"
            "out = io.StringIO()\n"
            "with contextlib.redirect_stdout(out):\n"
            "    codes = [main(['flags', '--all', '--study', 'st']), main(['history', 'H01', '--study', 'st']),\n"
            "             main(['batches', '--day', 'today', '--study', 'st'])]\n"
            "    with contextlib.suppress(SystemExit):\n"
            "        main(['--help'])\n"
            "print(json.dumps({'codes': codes, 'text': out.getvalue(),\n"
            "                  'heavy': sorted(m for m in ('pandas', 'numpy', 'scipy', 'pandera') if m in sys.modules)}))")
    r = run_code(code, folder)
    assert r.returncode == 0, r.stderr
    got = json.loads(r.stdout)
    assert got["codes"] == [0, 0, 0] and got["heavy"] == []
    text = got["text"]
    assert "H01: 5 events" in text and "measured.csv" in text and "late.csv" in text and "usage:" in text


def test_demo_and_dashboard_are_wired(folder, protocol_file, capsys, monkeypatch):
    seen = {}
    monkeypatch.setitem(sys.modules, "fieldslope.tui.demo", types.SimpleNamespace(
        run_demo=lambda study_dir, headless, **kw: seen.setdefault("demo", (study_dir, headless)) and 0))
    monkeypatch.setitem(sys.modules, "fieldslope.tui.app", types.SimpleNamespace(
        run_app=lambda study_dir: seen.setdefault("app", study_dir)))
    assert call(capsys, "demo", "--headless", "--study", str(folder / "d"))[0] == 0
    assert seen["demo"] == (folder / "d", True)
    call(capsys, "init", str(folder / "st"), "--protocol", str(protocol_file))
    assert call(capsys, "--study", str(folder / "st"))[0] == 0
    assert seen["app"] == folder / "st"
    # no study in the folder: the dashboard still opens, on its start screen (create / open / demo)
    del seen["app"]
    assert call(capsys, "--study", str(folder / "empty"))[0] == 0
    assert seen["app"] == folder / "empty"


def test_a_missing_file_does_not_stop_the_others(folder, protocol_file, capsys):
    study = str(folder / "st")
    call(capsys, "init", study, "--protocol", str(protocol_file))
    code, out, err = call(capsys, "import", str(folder / "nope.csv"), str(folder / "measured.csv"), "--study", study)
    assert code == 1 and "no such file" in one_line(err) and "12 of 12 rows stored" in out


def test_progress_shows_only_on_a_terminal():
    from fieldslope.tui.cli_format import Progress

    class Tty(io.StringIO):
        def isatty(self):
            return True

    tty, pipe = Tty(), io.StringIO()
    for stream in (tty, pipe):
        p = Progress("importing a.csv", stream)
        p(1, 4, "storing")
        p(4, 4, "storing")
        p.done()
    assert "importing a.csv: storing 25%" in tty.getvalue() and "100%" in tty.getvalue()
    assert all(len(part) <= 80 for part in tty.getvalue().split("\r"))
    assert pipe.getvalue() == ""


def test_progress_without_a_stream_writes_to_stderr_when_it_is_a_terminal(monkeypatch):
    from fieldslope.tui.cli_format import Progress

    class Tty(io.StringIO):
        def isatty(self):
            return True

    tty = Tty()
    monkeypatch.setattr(sys, "stderr", tty)
    p = Progress("estimating")
    p(1, 2, "bootstrap, season 2031")
    p.done()
    assert "estimating: bootstrap, season 2031 50%" in tty.getvalue()


def test_check_of_a_file_already_taken_in_runs_the_checks_and_names_the_batch(folder, protocol_file, capsys):
    study = str(folder / "st")
    call(capsys, "init", study, "--protocol", str(protocol_file))
    fresh = call(capsys, "check", str(folder / "measured.csv"), "--study", study)
    assert call(capsys, "import", str(folder / "measured.csv"), "--study", study)[0] == 0
    code, out, err = call(capsys, "check", str(folder / "measured.csv"), "--study", study)
    assert code == fresh[0] == 0 and err == ""
    lines = out.strip().splitlines()
    assert lines[1:] == fresh[1].strip().splitlines()               # the same dry run as before the import
    assert "would store 12 of 12 rows" in out and "nothing was done" not in out
    assert "already taken in as batch 1" in lines[0]
    # a batch with a row error: the check still refuses it (exit 1), as it would a fresh file
    assert call(capsys, "import", str(folder / "late.csv"), "--accept-valid", "--study", study)[0] == 0
    code, out, err = call(capsys, "check", str(folder / "late.csv"), "--study", study)
    assert code == 1 and "already taken in as batch 2" in out and "would store nothing" in one_line(err)
    assert call(capsys, "check", str(folder / "late.csv"), "--accept-valid", "--study", study)[0] == 0


def test_flags_all_shows_a_superseded_flag_with_its_batch(folder, protocol_file, capsys):
    study = str(folder / "st")
    call(capsys, "init", study, "--protocol", str(protocol_file))
    call(capsys, "import", str(folder / "measured.csv"), "--study", study)
    (folder / "again.csv").write_text("tag,season,wing\nH03,2024,4.15\n")
    (folder / "third.csv").write_text("tag,season,wing\nH03,2024,4.12\n")
    call(capsys, "import", str(folder / "again.csv"), "--study", study)
    assert "differs" in call(capsys, "flags", "--study", study)[1]
    call(capsys, "import", str(folder / "third.csv"), "--study", study)
    code, out, _ = call(capsys, "flags", "--all", "--study", study)
    first = next(line for line in out.splitlines() if "differs" in line and "4.15" in line)
    assert code == 0 and first.endswith("[superseded by batch 3]") and len(first) <= 80
    assert "a later batch gave a new value" in out
    open_now = call(capsys, "flags", "--study", study)[1]
    heads = [line for line in open_now.splitlines() if line.startswith("#")]
    assert len(heads) == 1 and "wing = 4.12" in heads[0]


def test_batches_lists_the_days_intake(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    assert call(capsys, "import", str(folder / "measured.csv"), "--study", study, "--operator", "ana")[0] == 0
    assert call(capsys, "import", str(folder / "late.csv"), "--study", study, "--operator", "bo")[0] == 1
    assert call(capsys, "import", str(folder / "late.csv"), "--study", study, "--operator", "bo",
                "--accept-valid")[0] == 0
    code, out, err = call(capsys, "batches", "--study", study)
    assert code == 0 and err == ""
    lines = out.splitlines()
    assert lines[0] == "3 batches (1 partial, 1 refused, 1 stored); times are local"
    assert lines[1].startswith("#1 ") and "stored   12 rows stored  by ana" in lines[1]
    from fieldslope.schemas.operator import login_name
    assert lines[2].strip() == ("measured.csv" if login_name() == "ana" else f"measured.csv (login {login_name()})")
    assert "refused  2 rows, none stored (1 error)  by bo" in lines[3]
    assert "partial  1 of 2 rows stored, 1 quarantined  by bo" in lines[5]
    assert all(len(line) <= 80 for line in lines)
    code, out, _ = call(capsys, "batches", "--day", "today", "--study", study)
    assert code == 0 and out.startswith("3 batches received on ")
    code, out, _ = call(capsys, "batches", "--day", "2001-02-03", "--study", study)
    assert code == 0 and out == "no batches received on 2001-02-03\n"
    code, _, err = call(capsys, "batches", "--day", "Tuesday", "--study", study)
    assert code == 2 and "'Tuesday' is not a day; write it as YYYY-MM-DD" in one_line(err)


def test_batches_shows_file_and_operator_names_literally(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    (folder / "odd\x1b[2J.csv").write_text(MEASURED)
    assert call(capsys, "import", str(folder / "odd\x1b[2J.csv"), "--study", study, "--operator", "a\x07b")[0] == 0
    code, out, _ = call(capsys, "batches", "--study", study)
    assert code == 0 and "\x1b" not in out and "\x07" not in out
    assert "odd\\x1b[2J.csv" in out and "by a\\x07b" in out


def test_history_shows_every_value_whole(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    dam = "GF-2023-mother-of-the-long-line-0001"
    (folder / "long.csv").write_text("tag,season,site,wing,tibia,survived,clutch,dam\n"
                                     f"H01,2024,Gull Flat,4.523456789,1.5,1,3,{dam}\n")
    assert call(capsys, "import", str(folder / "long.csv"), "--study", study, "--operator", "ana")[0] == 0
    code, out, _ = call(capsys, "history", "H01", "--study", study)
    assert code == 0 and "…" not in out
    assert f"dam recorded: {dam}" in out and "wing recorded: 4.523456789" in out
    assert "long.csv, row 2, batch 1, by ana" in out
    assert all(len(line) <= 80 for line in out.splitlines())


def test_one_name_per_flag_kind_and_counted_nouns(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    (folder / "slip.csv").write_text("tag,season,site,wing,tibia,survived,clutch\nH01,2024,Gull Flat,45,1.5,1,3\n")
    code, out, _ = call(capsys, "check", str(folder / "slip.csv"), "--study", study)
    assert code == 0 and "would store 1 of 1 row." in out
    # a check stores nothing, so it does not send the user to the flags list
    assert "flags it would open: 1 out of range (nothing is stored by a check)" in out
    assert "fieldslope flags" not in out
    code, out, _ = call(capsys, "import", str(folder / "slip.csv"), "--study", study)
    assert "1 of 1 row stored." in out and "flags: 1 out of range (list them with fieldslope flags)" in out
    out = call(capsys, "flags", "--study", study)[1]
    assert " out of range " in out and "out_of_range" not in out
    out = call(capsys, "history", "H01", "--study", study)[1]
    assert "wing flagged out of range: 45" in out and "out_of_range" not in out
    assert "H01: 6 events" in out


def test_init_names_the_study_folder_in_its_hint_when_it_is_not_the_default(folder, protocol_file, capsys,
                                                                              monkeypatch):
    monkeypatch.delenv("FIELDSLOPE_STUDY", raising=False)
    code, out, _ = call(capsys, "init", str(folder / "st"), "--protocol", str(protocol_file))
    assert code == 0 and f"fieldslope import FILE --study {folder / 'st'}" in out
    monkeypatch.setenv("FIELDSLOPE_STUDY", str(folder / "st2"))
    code, out, _ = call(capsys, "init", str(folder / "st2"), "--protocol", str(protocol_file))
    assert code == 0 and out.rstrip().endswith("fieldslope import FILE") and "--study" not in out


def test_a_binary_cell_that_is_not_0_or_1_is_not_asked_for_a_decimal_point(folder, protocol_file, capsys):
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    (folder / "yes.csv").write_text("tag,season,site,wing,tibia,survived,clutch\nH01,2024,Gull Flat,4.5,1.5,yes,two\n")
    code, out, _ = call(capsys, "check", str(folder / "yes.csv"), "--study", study)
    assert code == 1 and "decimal point" not in out
    assert "row 2, column survived: 'yes' is not 0 or 1 (binary fitness); write 0 or 1, or leave the cell blank" in out
    assert "row 2, column clutch: 'two' is not a count; write a whole number (0, 1, 2, …), or leave" in out


def test_estimate_random_effects_option_and_tau2_written_one_way(folder, protocol_file, capsys):
    """--random-effects hk gives the Hartung-Knapp interval of the mean across seasons (Hartung & Knapp 2001,
    Stat. Med. 20:3875-3889; the estimator itself is checked against statsmodels in test_analysis_derived),
    the same numbers as the library call; dl (the default) the DerSimonian-Laird normal one. tau^2 is written
    with 3 significant digits in the table, as in the dashboard and the report (tui.number_text)."""
    from fieldslope.schemas.study import Study
    from fieldslope.tui.bridge import estimates_for_frame
    from fieldslope.tui.number_text import tau2_text

    rng = np.random.default_rng(5)
    lines = ["tag,season,site,wing,tibia,survived,clutch"]
    for s, slope in ((2021, 1.5), (2022, -0.5), (2023, 2.5), (2024, 0.3)):
        for i in range(40):
            wing, tibia = rng.uniform(3.5, 5.5), rng.uniform(1.2, 2.2)
            eggs = max(0, round(3 + slope * (wing - 4.5) + rng.normal(0, 1)))
            lines.append(f"S{s}_{i},{s},Gull Flat,{wing:.2f},{tibia:.2f},1,{eggs}")
    (folder / "seasons.csv").write_text("\n".join(lines) + "\n")
    study = str(folder / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    assert call(capsys, "import", str(folder / "seasons.csv"), "--study", study)[0] == 0
    got = {}
    for method in ("dl", "hk"):
        code, out, err = call(capsys, "estimate", "--format", "json", "--bootstrap", "50", "--skip-pedigree",
                              "--random-effects", method, "--fitness", "clutch", "--study", study)
        assert code == 0, err
        got[method] = {(r["quantity"], r["term"]): r for r in json.loads(out) if r["season"] == "all"}
    with Study.open(Path(study)) as st:
        frame, protocol = st.store.effective_frame(), st.protocol
    ref = estimates_for_frame(frame, protocol, bootstrap=50, random_effects="hk").table
    ref = ref[(ref.season == "all") & (ref.fitness == "clutch") & (ref.quantity == "gradient_mean_re") & (ref.term == "wing")].iloc[0]
    hk, dl = got["hk"][("gradient_mean_re", "wing")], got["dl"][("gradient_mean_re", "wing")]
    assert got["hk"][("gradient_tau2", "wing")]["estimate"] > 0
    assert (hk["ci_low"], hk["ci_high"]) == pytest.approx((ref.ci_low, ref.ci_high), rel=1e-12)
    assert hk["estimate"] == pytest.approx(dl["estimate"], rel=1e-12) and hk["ci_low"] != pytest.approx(dl["ci_low"])
    code, out, _ = call(capsys, "estimate", "--bootstrap", "0", "--skip-pedigree", "--study", study, "--site", "Gull Flat",
                        "--fitness", "clutch", "--quantity", "gradient_tau2", "--term", "wing")
    tau = [line for line in out.splitlines() if line.startswith("  wing ")]
    assert "gradient_tau2 (w² per sd²)" in out
    assert len(tau) == 1 and tau[0].split()[1] == tau2_text(got["dl"][("gradient_tau2", "wing")]["estimate"])
    assert tau2_text(0.000123456) == "0.000123" and tau2_text(12.3456) == "12.3" and tau2_text(None) == ""


def test_bootstrap_0_leaves_the_animal_models_out_unless_asked(folder, protocol_file, capsys, monkeypatch):
    """--bootstrap 0 is the quick look (point estimates): the slow pedigree fit only with --pedigree."""
    from fieldslope.tui import bridge

    study = str(folder / "st")
    assert main(["init", study, "--protocol", str(protocol_file)]) == 0
    assert main(["import", str(folder / "measured.csv"), "--study", study]) == 0
    capsys.readouterr()
    fits = []
    real = bridge.pedigree_genetics
    monkeypatch.setattr(bridge, "pedigree_genetics", lambda *a, **k: fits.append(1) or real(*a, **k))
    code, out, err = call(capsys, "estimate", "--bootstrap", "0", "--format", "csv", "--study", study)
    assert code == 0 and fits == [] and "add --pedigree" in one_line(err)
    code, out, err = call(capsys, "estimate", "--bootstrap", "0", "--pedigree", "--format", "csv", "--study", study)
    assert code == 0 and fits == [1] and err == ""
    code, _, err = call(capsys, "estimate", "--bootstrap", "0", "--skip-pedigree", "--study", study)
    assert code == 0 and fits == [1] and err == ""
    assert call(capsys, "estimate", "--pedigree", "--skip-pedigree", "--study", study)[0] == 2
