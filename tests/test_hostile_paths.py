"""Paths that are not plain batch files: links in the drop folder, pipes, devices and folders.

A symbolic link in the drop folder is never followed (someone could point it at any file this account can
read and have its bytes kept in the record); anything that is not a regular file gets one sentence, from the
drop-folder scan, ``fieldslope import PATH``, ``fieldslope check PATH`` and the dashboard's Intake screen.
"""

from __future__ import annotations

import os

import pytest

from fieldslope.common.errors import SheetError
from fieldslope.tui.cli import main
from tests.test_tui_screens import make_app, ready, screen_text, wait_for


@pytest.fixture
def outside(tmp_path, write_batch, hopper_rows):
    """A valid batch file outside the study."""
    return write_batch(hopper_rows("2024", "Gull Flat", n=6, seed=4), "elsewhere.csv")


@pytest.fixture
def odd_entries(study, outside):
    """A link to a valid batch, a pipe and a folder in the drop folder."""
    intake = study.intake_dir
    os.symlink(outside, intake / "linked.csv")
    os.mkfifo(intake / "pipe.csv")
    (intake / "sub.csv").mkdir()
    return intake


def test_the_drop_folder_lists_links_pipes_and_folders_with_a_sentence_and_takes_none_in(study, odd_entries):
    for _ in range(2):                                     # two looks, as a file must settle
        listed = {f.name: f for f in study.intake_files()}
    assert {n: f.status for n, f in listed.items()} == {"linked.csv": "not a file", "pipe.csv": "not a file",
                                                       "sub.csv": "not a file"}
    assert "symbolic link" in listed["linked.csv"].problem and "never followed" in listed["linked.csv"].problem
    assert "not a regular file" in listed["pipe.csv"].problem
    assert "is a folder" in listed["sub.csv"].problem
    assert study.import_intake(operator="t") == []
    assert study.store.batches() == []


def test_a_link_in_the_drop_folder_is_refused_but_a_link_given_elsewhere_is_read(study, odd_entries, tmp_path):
    with pytest.raises(SheetError, match="symbolic link"):
        study.store.import_file(odd_entries / "linked.csv", operator="t", follow_links=False)
    elsewhere = tmp_path / "my-link.csv"
    os.symlink(odd_entries / ".." / ".." / "batches" / "elsewhere.csv", elsewhere)
    assert study.store.import_file(elsewhere, operator="t").outcome == "stored"


@pytest.mark.parametrize("command", ["import", "check"])
@pytest.mark.parametrize("name, words", [("linked.csv", "symbolic link"), ("pipe.csv", "not a regular file"),
                                         ("sub.csv", "is a folder")])
def test_the_command_line_refuses_each_with_one_sentence(study, odd_entries, capsys, command, name, words):
    code = main([command, str(odd_entries / name), "--study", str(study.root)])
    err = capsys.readouterr().err
    assert code == 1
    assert words in err and len(err.strip().splitlines()) == 1 and "unexpected" not in err
    assert study.store.batches() == []


def test_a_device_is_refused_before_it_is_read(study, capsys):
    code = main(["import", os.devnull, "--study", str(study.root)])
    err = capsys.readouterr().err
    assert code == 1 and "not a regular file" in err
    assert study.store.batches() == []


def test_the_drop_folder_scan_hashes_a_large_file_in_chunks(study):
    import hashlib

    from tests.conftest import peak_memory

    big = study.intake_dir / "big.csv"
    with open(big, "wb") as fh:                     # 300 MB, sparse: costs no disk
        fh.write(b"tag,season\n")
        fh.truncate(300_000_000)
    listed, peak = peak_memory(lambda: [study.intake_files() for _ in range(2)][-1])
    assert [f.status for f in listed] == ["new"]
    assert peak < 16 * 2**20, peak
    digest = hashlib.sha256()
    with open(big, "rb") as fh:
        while chunk := fh.read(1 << 22):
            digest.update(chunk)
    assert study._digests[("big.csv", *study._sizes["big.csv"])] == digest.hexdigest()


async def test_the_intake_screen_names_what_is_not_a_file(study, odd_entries):
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("1")
        await wait_for(app, pilot, lambda: len(app.screen.files) == 3, what="the drop folder listing")
        assert [f["status"] for f in app.screen.files] == ["not a file"] * 3
        await pilot.press("c")                       # the first: linked.csv
        await pilot.pause()
        text = screen_text(app)
        assert "linked.csv: is a symbolic link" in text
        assert app.is_running


def test_the_dashboards_check_refuses_a_huge_file_without_reading_it_whole(study, huge_file):
    from fieldslope.tui.loading import check_file
    from tests.conftest import peak_memory

    (result, preview), peak = peak_memory(lambda: check_file(study.root, huge_file))
    assert result.outcome == "refused" and "over the 50 MB limit" in result.message and preview is None
    assert "damaged" not in result.message
    assert peak < 32 * 2**20, peak
    assert study.store.batches() == []


# -- init: a device as protocol, a path too long, no permission, a full disk ----------------------------

@pytest.mark.parametrize("source", ["/dev/zero", "huge"])
def test_init_reads_at_most_1_mb_of_a_device_or_huge_protocol(tmp_path, huge_file, capsys, source):
    import fieldslope.tui.cli_commands  # noqa: F401 - imported first, so only the reading is measured
    from tests.conftest import peak_memory

    protocol = huge_file if source == "huge" else source
    target = tmp_path / "new-study"
    code, peak = peak_memory(lambda: main(["init", str(target), "--protocol", str(protocol)]))
    err = capsys.readouterr().err
    assert code == 1 and "more than 1 MB (only that much was read)" in err and len(err.splitlines()) == 1
    assert peak < 8 * 2**20, peak
    assert not target.exists()


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir())


def test_init_with_a_path_too_long_says_so_and_makes_nothing(tmp_path, protocol_file, capsys):
    before = _leftovers(tmp_path)
    for target in (tmp_path / ("x" * 300), tmp_path.joinpath(*["y" * 200] * 25)):   # a name, then a path
        assert main(["init", str(target), "--protocol", str(protocol_file)]) == 1
        err = capsys.readouterr().err
        assert "the path is too long for this file system" in err and len(err.splitlines()) == 1
        assert len(err) < 400                               # the path itself is shortened in the sentence
    assert _leftovers(tmp_path) == before


@pytest.mark.parametrize("where", ["new folder", "existing folder"])
@pytest.mark.parametrize("fault", ["disk full while the store is made", "disk full while the protocol is written",
                                   "permission denied"])
def test_init_failing_midway_leaves_no_half_made_study(tmp_path, protocol_file, capsys, monkeypatch, where, fault):
    import errno
    import sqlite3

    from fieldslope.schemas import store_schema, study as study_mod

    target = tmp_path / "field" / "new-study"
    if where == "existing folder":
        target.mkdir(parents=True)
        (target / "notes.txt").write_text("kept")
    before = _leftovers(tmp_path)
    if fault == "disk full while the store is made":
        def full(path):
            open(path, "wb").close()                        # SQLite had begun the file when the disk filled
            exc = sqlite3.OperationalError("database or disk is full")
            exc.sqlite_errorname = "SQLITE_FULL"
            raise exc
        monkeypatch.setattr(store_schema, "create_file", full)
    elif fault == "disk full while the protocol is written":
        def fsync(fd):
            raise OSError(errno.ENOSPC, "No space left on device")
        monkeypatch.setattr(study_mod.os, "fsync", fsync)
    else:
        def denied(*args, **kwargs):
            raise PermissionError(errno.EACCES, "Permission denied")
        monkeypatch.setattr(study_mod.Store, "create", denied)
    code = main(["init", str(target), "--protocol", str(protocol_file)])
    err = capsys.readouterr().err
    assert code == 1 and len(err.splitlines()) == 1 and "unexpected" not in err
    assert ("disk is full" in err) if "full" in fault else ("permission denied" in err)
    assert "nothing was made" in err
    assert _leftovers(tmp_path) == before
    if where == "existing folder":
        assert _leftovers(target) == ["notes.txt"]
