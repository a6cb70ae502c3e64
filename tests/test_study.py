"""The study folder: create, open, where it is found, and the intake drop folder."""

from __future__ import annotations

import os

import pytest

from fieldslope.common.errors import FieldslopeError, ProtocolError
from fieldslope.schemas.study import DB_FILE, Study, resolve_study_dir


def test_create_makes_the_folder(tmp_path, protocol_file, protocol_text):
    s = Study.create(tmp_path / "st", protocol_file)
    try:
        assert (tmp_path / "st" / "protocol.toml").read_text() == protocol_text
        assert s.intake_dir.is_dir() and (tmp_path / "st" / DB_FILE).is_file()
        assert s.protocol.trait_names == ("wing", "tibia")
    finally:
        s.close()


def test_new_study_folder_is_group_writable(tmp_path, protocol_file):
    s = Study.create(tmp_path / "shared", protocol_file)
    try:
        assert (tmp_path / "shared").stat().st_mode & 0o7777 == 0o2770
        assert s.intake_dir.stat().st_mode & 0o7777 == 0o2770
        assert s.db_path.stat().st_mode & 0o777 == 0o660
        s.store.import_bytes("a.csv", b"tag,season\nA,2024\n")
        for suffix in ("-wal", "-shm"):     # SQLite gives them the database file's mode
            assert (tmp_path / "shared" / (DB_FILE + suffix)).stat().st_mode & 0o777 == 0o660
    finally:
        s.close()


def test_create_refuses_an_existing_study(study, protocol_file):
    with pytest.raises(FieldslopeError, match="already holds a study"):
        Study.create(study.root, protocol_file)


def test_create_checks_the_protocol_before_touching_the_folder(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[study]\nid = 3\n")
    with pytest.raises(ProtocolError):
        Study.create(tmp_path / "st", bad)
    assert not (tmp_path / "st").exists()


def test_open_missing_or_not_a_study(tmp_path):
    with pytest.raises(FieldslopeError, match="no study folder here"):
        Study.open(tmp_path / "nothing")
    (tmp_path / "plain").mkdir()
    with pytest.raises(FieldslopeError, match="not a fieldslope study"):
        Study.open(tmp_path / "plain")


def test_open_sees_what_create_stored(study):
    study.store.import_bytes("a.csv", b"tag,season,site,wing\nH1,2024,Gull Flat,4.4\n")
    again = Study.open(study.root)
    try:
        assert list(again.store.effective_frame()["tag"]) == ["H1"]
    finally:
        again.close()


def test_resolve_study_dir_order(tmp_path, monkeypatch):
    monkeypatch.setenv("FIELDSLOPE_STUDY", str(tmp_path / "env"))
    assert resolve_study_dir(tmp_path / "arg") == tmp_path / "arg"
    assert resolve_study_dir(None) == tmp_path / "env"
    monkeypatch.delenv("FIELDSLOPE_STUDY")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    got = resolve_study_dir(None)
    assert got.name == "study" and "fieldslope" in str(got)


def test_intake_files_status(study):
    good = b"tag,season,site,wing\nH1,2024,Gull Flat,4.4\n"
    bad = b"tag,season,site,wing\nH2,2024,Gull Flat,x\n"
    (study.intake_dir / "a.csv").write_bytes(good)
    (study.intake_dir / "b.csv").write_bytes(bad)
    (study.intake_dir / "c.csv.part").write_bytes(b"tag,season\n")
    (study.intake_dir / "~$d.xlsx").write_bytes(b"lock")
    assert {f.name: f.status for f in study.intake_files()} == {"a.csv": "arriving", "b.csv": "arriving"}
    assert {f.name: f.status for f in study.intake_files()} == {"a.csv": "new", "b.csv": "new"}
    results = study.import_intake()
    assert sorted(r.outcome for r in results) == ["refused", "stored"]
    status = {f.name: f.status for f in study.intake_files()}
    assert status == {"a.csv": "taken in", "b.csv": "refused"}
    # a file still growing is not taken
    with open(study.intake_dir / "e.csv", "wb") as fh:
        fh.write(b"tag,season\n")
        fh.flush()
        assert study.intake_files()[-1].status == "arriving"
        fh.write(b"H3,2024\n")
    stat = os.stat(study.intake_dir / "e.csv")
    os.utime(study.intake_dir / "e.csv", ns=(stat.st_atime_ns, stat.st_mtime_ns + 1_000_000))
    assert {f.name: f.status for f in study.intake_files()}["e.csv"] == "arriving"
    assert {f.name: f.status for f in study.intake_files()}["e.csv"] == "new"


def test_readonly_open_works_in_a_folder_with_awkward_characters(tmp_path, protocol_file):
    s = Study.create(tmp_path / "a study #1?", protocol_file)
    s.store.import_bytes("a.csv", b"tag,season,site,wing\nH1,2024,Gull Flat,4.4\n")
    s.close()
    ro = Study.open(tmp_path / "a study #1?", readonly=True)
    try:
        assert list(ro.store.effective_frame()["tag"]) == ["H1"]
        v = ro.store.data_version()
        writer = Study.open(tmp_path / "a study #1?")
        writer.store.import_bytes("b.csv", b"tag,season,site,wing\nH2,2024,Gull Flat,4.5\n")
        writer.close()
        assert ro.store.data_version() != v
    finally:
        ro.close()
