"""``fieldslope summary`` and ``fieldslope changes``: their numbers are the estimates table's, text from
data reaches the terminal escaped, and the last run is remembered per user and study."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from fieldslope.tui.cli import main

ESC_ID = "\x1b[2J\x1b]52;c;ZXZpbA==\x07H\u202eX"      # clears the screen, writes the clipboard, reverses text


def call(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def hoppers(tmp_path, protocol_file, write_batch, hopper_rows, capsys, monkeypatch):
    """A study with two seasons at two sites (invented data); the user state folder is the test's own."""
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))
    study = str(tmp_path / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    rows = (hopper_rows("2023", "Gull Flat", 60, seed=1) + hopper_rows("2023", "Reed Bend", 60, seed=2)
            + hopper_rows("2024", "Gull Flat", 60, seed=3) + hopper_rows("2024", "Reed Bend", 60, seed=4))
    rows[5]["wing"] = "9.9"                                 # out of range: an open flag
    assert call(capsys, "import", str(write_batch(rows, "first.csv")), "--study", study,
                "--operator", "ana\x1b[31m")[0] == 0
    return study


def estimates(capsys, study, *extra) -> list[dict]:
    code, out, err = call(capsys, "estimate", "--format", "json", "--study", study, *extra)
    assert code == 0, err
    return json.loads(out)


def test_summary_gradients_are_the_estimates_tables(hoppers, capsys):
    code, out, err = call(capsys, "summary", "--format", "json", "--bootstrap", "200", "--study", hoppers)
    assert code == 0, err
    info = json.loads(out)
    latest = info["latest"]
    assert (latest["season"], latest["site"], latest["fitness"]) == ("2024", "all", "total")
    table = [r for r in estimates(capsys, hoppers, "--bootstrap", "200", "--season", "2024", "--site", "all",
                                  "--fitness", "total") if r["quantity"] == "gradient"]
    assert [r["term"] for r in table] == [r["trait"] for r in latest["rows"]] == ["wing", "tibia"]
    for mine, theirs in zip(latest["rows"], table):
        for key in ("estimate", "se", "ci_low", "ci_high", "p_value", "n"):
            assert mine[key] == theirs[key], key
        assert mine["excludes_zero"] == (theirs["ci_low"] > 0 or theirs["ci_high"] < 0)

    # The pooled β by an outside computation: relative fitness and standardized traits within each
    # cell (estimation.md; Lande & Arnold 1983, Evolution 37:1210-1226), one OLS fit with statsmodels.
    import statsmodels.api as sm

    code, out, _ = call(capsys, "estimate", "--format", "json", "--bootstrap", "0", "--study", hoppers)
    from fieldslope.schemas.study import Study

    with Study.open(hoppers, readonly=True) as st:
        frame = st.store.effective_frame()
    frame = frame[(frame["season"] == "2024")].copy()
    frame["total"] = frame["survived"] * frame["clutch"]
    frame = frame.dropna(subset=["wing", "tibia", "total"])
    parts = []
    for _, cell in frame.groupby("site"):
        x = (cell[["wing", "tibia"]] - cell[["wing", "tibia"]].mean()) / cell[["wing", "tibia"]].std(ddof=1)
        parts.append(pd.DataFrame({"w": cell["total"] / cell["total"].mean(), "wing": x["wing"], "tibia": x["tibia"]}))
    data = pd.concat(parts)
    fit = sm.OLS(data["w"], sm.add_constant(data[["wing", "tibia"]])).fit()
    for row in latest["rows"]:
        assert row["estimate"] == pytest.approx(fit.params[row["trait"]], rel=1e-9)
        assert row["se"] == pytest.approx(fit.bse[row["trait"]], rel=1e-9)

    # cells and flags
    cells = {(c["season"], c["site"]): c for c in info["cells"]}
    assert set(cells) == {(s, site) for s in ("2023", "2024") for site in ("Gull Flat", "Reed Bend")}
    assert cells[("2023", "Gull Flat")]["n"] == 60
    assert cells[("2023", "Gull Flat")]["open_flags"] >= 1 and info["open_flags"]["out_of_range"] == 1
    assert cells[("2023", "Gull Flat")]["measured"]["survived"] == 60


def test_summary_text_fits_80_columns_and_shows_data_literally(hoppers, capsys):
    code, out, err = call(capsys, "summary", "--bootstrap", "50", "--study", hoppers)
    assert code == 0, err
    assert max(len(line) for line in out.splitlines()) <= 80
    assert "\x1b" not in out and "ana\\x1b[31m" in out
    assert "season 2024, pooled over sites" in out and "wing" in out and "out of range 1" in out
    code, out, err = call(capsys, "summary", "--fitness", "nope", "--study", hoppers)
    assert code == 1 and "no fitness measure 'nope'" in err and len(err.strip().splitlines()) == 1


def test_changes_since_a_batch_lists_batches_flags_corrections_and_moved_estimates(
        hoppers, capsys, write_batch, hopper_rows):
    before = estimates(capsys, hoppers, "--bootstrap", "0")
    # a second batch: more individuals of 2024 at Gull Flat, with a hostile ID and a mangled reason
    more = hopper_rows("2024", "Gull Flat", 80, seed=9, start=500)
    more[0]["tag"] = "X" + ESC_ID
    more[1]["wing"] = "2.0"                                  # out of range
    assert call(capsys, "import", str(write_batch(more, "second.csv")), "--study", hoppers,
                "--operator", "bo")[0] == 0
    code, out, _ = call(capsys, "flags", "--study", hoppers)
    first_flag = next(int(line.split()[0].lstrip("#")) for line in out.splitlines() if line.startswith("#"))
    assert call(capsys, "resolve", str(first_flag), "--set", "4.9", "--reason", "typo \x1b[5m", "--study", hoppers,
                "--operator", "cy")[0] == 0
    after = estimates(capsys, hoppers, "--bootstrap", "0")

    code, out, err = call(capsys, "changes", "--since", "1", "--format", "json", "--study", hoppers)
    assert code == 0, err
    info = json.loads(out)
    assert [b["file"] for b in info["batches"]] == ["second.csv"] and info["batches"][0]["operator"] == "bo"
    assert any(f["individual"] == "X" + ESC_ID for f in info["flags_opened"]) or \
        any(f["kind"] == "out_of_range" for f in info["flags_opened"])
    # the correction answers every open flag on that value (out of range and outlier): each is listed
    assert info["corrections"][0]["id"] == first_flag
    assert {(c["value"], c["new_value"], c["by"]) for c in info["corrections"]} == {("9.9", "4.9", "cy")}
    # moved: exactly the rows of the two estimates tables whose change exceeds the earlier se
    key = ("season", "site", "fitness", "quantity", "term")
    old = {tuple(r[k] for k in key): r for r in before}
    expected = set()
    for r in after:
        o = old.get(tuple(r[k] for k in key))
        if o and o["se"] and r["estimate"] is not None and o["estimate"] is not None \
                and abs(r["estimate"] - o["estimate"]) > o["se"]:
            expected.add(tuple(r[k] for k in key))
    got = {tuple(m[k] for k in key) for m in info["moved"]}
    assert got == expected and expected
    for m in info["moved"]:
        k = tuple(m[k] for k in key)
        assert m["then"] == old[k]["estimate"]
        assert m["now"] == next(r["estimate"] for r in after if tuple(r[q] for q in key) == k)

    code, out, err = call(capsys, "changes", "--since", "batch 1", "--study", hoppers)
    assert code == 0, err
    assert "\x1b" not in out and "\u202e" not in out and "typo \\x1b[5m" in out
    assert "9.9 → 4.9 by cy" in out and "second.csv" in out
    assert max(len(line) for line in out.splitlines()) <= 80


def test_changes_remembers_the_last_run_per_study(hoppers, capsys, write_batch, hopper_rows, tmp_path):
    code, out, _ = call(capsys, "changes", "--study", hoppers)
    assert code == 0 and "the beginning of the study" in out and "first.csv" in out
    code, out, _ = call(capsys, "changes", "--study", hoppers)
    assert "your last run" in out and "nothing new" in out
    assert call(capsys, "import", str(write_batch(hopper_rows("2025", "Reed Bend", 30, seed=5), "third.csv")),
                "--study", hoppers)[0] == 0
    code, out, _ = call(capsys, "changes", "--study", hoppers)
    assert "third.csv" in out and "first.csv" not in out
    state = json.loads(next((tmp_path / "state").rglob("changes_seen.json")).read_text())
    assert list(state.values())[0]["batch"] == 2


@pytest.mark.parametrize("when, kind", [("12", "batch"), ("#3", "batch"), ("batch 7", "batch"),
                                        ("2025-06-01", "time"), ("2025-06-01 08:30", "time"), ("08:30", "time"),
                                        ("2025-06-01T08:30:00+02:00", "time")])
def test_since_accepts_a_date_a_time_or_a_batch(when, kind):
    from fieldslope.tui.changes import parse_when

    got_kind, value = parse_when(when)
    assert got_kind == kind
    if kind == "time":
        assert value.tzinfo is not None


def test_since_nonsense_is_one_line(hoppers, capsys):
    code, _, err = call(capsys, "changes", "--since", "last tuesday", "--study", hoppers)
    assert code == 1 and "neither a date" in err and len(err.strip().splitlines()) == 1
    code, _, err = call(capsys, "changes", "--since", "99", "--study", hoppers)
    assert code == 1 and "no batch 99" in err
