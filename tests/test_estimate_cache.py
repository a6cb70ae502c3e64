"""Estimates kept between runs (``tui.estimate_cache``): read back exactly, made anew by any new batch,
resolution or h² entry, and a folder that cannot be written is said, never fatal."""

from __future__ import annotations

import pandas as pd
import pytest

from fieldslope.schemas.study import Study
from fieldslope.tui import estimate_cache as ec
from fieldslope.tui.bridge import estimates_for_frame
from fieldslope.tui.cli import main


@pytest.fixture
def hoppers(tmp_path, protocol_file, write_batch, hopper_rows, capsys):
    """A study with one season at two sites (invented data) and one open out-of-range flag."""
    study = str(tmp_path / "st")
    assert main(["init", study, "--protocol", str(protocol_file)]) == 0
    rows = hopper_rows("2024", "Gull Flat", 50, seed=3) + hopper_rows("2024", "Reed Bend", 50, seed=4)
    rows[5]["wing"] = "9.9"
    assert main(["import", str(write_batch(rows, "first.csv")), "--study", study]) == 0
    capsys.readouterr()
    return study


def counted(study, options: dict, calls: list):
    def compute():
        calls.append(1)
        return estimates_for_frame(study.store.effective_frame(), study.protocol, bootstrap=50, seed=7)
    return ec.cached(study, options, compute)


def test_kept_estimates_are_read_back_exactly(hoppers):
    calls: list = []
    with Study.open(hoppers) as study:
        first = counted(study, {"bootstrap": 50}, calls)
        again = counted(study, {"bootstrap": 50}, calls)
    assert len(calls) == 1                       # the second came from the file
    pd.testing.assert_frame_equal(again.table, first.table)      # dtypes, NaN, missing n, last bits
    assert again.notes == first.notes
    assert first.table["ci_low"].notna().any() and first.table["p_value"].notna().any()


@pytest.mark.parametrize("change", ["batch", "resolution", "heritability"])
def test_a_new_batch_resolution_or_h2_makes_them_anew(hoppers, write_batch, hopper_rows, change, capsys):
    calls: list = []
    with Study.open(hoppers) as study:
        before = counted(study, {"bootstrap": 50}, calls)
    if change == "batch":
        assert main(["import", str(write_batch(hopper_rows("2024", "Gull Flat", 20, seed=9, start=500), "more.csv")),
                     "--study", hoppers]) == 0
    elif change == "resolution":
        with Study.open(hoppers) as study:
            flag = study.store.flags()[0].id
        assert main(["resolve", str(flag), "--set", "4.4", "--reason", "misread", "--study", hoppers]) == 0
    else:
        with Study.open(hoppers) as study:
            study.store.set_heritability("wing", 0.4, 0.1, "an earlier study", "ana")
    capsys.readouterr()
    with Study.open(hoppers) as study:
        after = counted(study, {"bootstrap": 50}, calls)
        fresh = estimates_for_frame(study.store.effective_frame(), study.protocol, bootstrap=50, seed=7)
    assert len(calls) == 2
    pd.testing.assert_frame_equal(after.table, fresh.table)
    if change != "heritability":    # (h² enters only the response rows, which this call leaves without h²)
        assert not after.table["estimate"].equals(before.table["estimate"])


def test_other_options_are_other_results(hoppers):
    calls: list = []
    with Study.open(hoppers) as study:
        counted(study, {"bootstrap": 50}, calls)
        counted(study, {"bootstrap": 50, "fitness": "survived"}, calls)
    assert len(calls) == 2


def test_a_damaged_file_is_computed_again(hoppers):
    calls: list = []
    with Study.open(hoppers) as study:
        first = counted(study, {"bootstrap": 50}, calls)
        for path in (study.root / ec.CACHE_DIR).glob("estimates-*.json"):
            path.write_text('{"format": 1, "value": {"columns": {"season": ["x"]}}}')
        again = counted(study, {"bootstrap": 50}, calls)
    assert len(calls) == 2
    pd.testing.assert_frame_equal(again.table, first.table)


def test_a_folder_that_cannot_be_written_is_said(hoppers):
    heard: list[str] = []
    with Study.open(hoppers) as study:
        (study.root / ec.CACHE_DIR).write_text("a file where the folder would be")
        est = ec.cached(study, {"x": 1}, lambda: estimates_for_frame(
            study.store.effective_frame(), study.protocol, bootstrap=0), say=heard.append)
    assert len(est.table) > 10
    assert len(heard) == 1 and "could not be kept" in heard[0]


def test_estimate_command_reads_back_the_same_table(hoppers, capsys):
    args = ["estimate", "--format", "csv", "--bootstrap", "40", "--skip-pedigree", "--study", hoppers]
    assert main(args) == 0
    first = capsys.readouterr().out
    with Study.open(hoppers) as study:
        assert len(list((study.root / ec.CACHE_DIR).glob("estimates-*.json"))) == 1
    assert main(args) == 0
    assert capsys.readouterr().out == first
