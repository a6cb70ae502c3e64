"""Store gaps closed: unclean shutdowns, a locked store, superseded flags, excluded quarantined rows,
and the upgrade that brought the supersession table."""

from __future__ import annotations

import math
import os
import shutil
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from fieldslope.schemas import store_schema
from fieldslope.common.errors import StoreError
from fieldslope.schemas.store_types import RecordError
from fieldslope.schemas.study import Study

GOOD = (b"tag,season,site,wing,tibia,survived,clutch,dam,sire\n"
        b"H01,2024,Gull Flat,4.5,1.5,1,3,,\n"
        b"H02,2024,Gull Flat,4.6,1.6,0,0,,\n"
        b"H03,2024,Reed Bend,7.5,1.7,1,2,H01,X99\n"
        b"H04,2024,Reed Bend,4.4,1.4,1,5,,\n")


def crash_after(db: Path, sql: str) -> None:
    """A second process writes ``sql`` and dies without closing (as on a kill or power cut)."""
    code = ("import os, sqlite3, sys\n"
            "c = sqlite3.connect(sys.argv[1], isolation_level=None)\n"
            "c.execute('PRAGMA journal_mode = WAL')\n"
            "c.execute(sys.argv[2])\n"
            "os._exit(0)\n")
    subprocess.run([sys.executable, "-c", code, str(db), sql], check=True, timeout=60)


# -- 1. after an unclean shutdown --------------------------------------------------------------

def test_clean_close_leaves_no_wal_and_skips_the_check(study):
    study.store.import_bytes("b1.csv", GOOD)
    root = study.root
    study.close()
    assert not Path(f"{study.db_path}-wal").exists()
    with Study.open(root) as again:
        assert not again.store.checked_on_open and not again.store.damaged


def test_a_crashed_session_is_checked_and_a_whole_store_stays_writable(study):
    study.store.import_bytes("b1.csv", GOOD)
    root, db = study.root, study.db_path
    study.close()
    crash_after(db, "INSERT INTO heritability(trait, value, se, source, operator, created) "
                    "VALUES ('wing', 0.4, NULL, 'half-sib design', 'ana', 't')")
    assert Path(f"{db}-wal").stat().st_size > 0
    with Study.open(root) as again:
        assert again.store.checked_on_open and again.store.damaged == ""
        assert again.store.writable()
        assert again.store.heritability()["wing"][0] == 0.4      # the crashed session's commit survived
        again.store.set_heritability("tibia", 0.2, None, "parent-offspring regression")


def test_a_dangling_reference_after_a_crash_opens_read_only_with_one_sentence(study, capsys):
    study.store.import_bytes("b1.csv", GOOD)
    root, db = study.root, study.db_path
    study.close()
    # a flag pointing to a batch that is not there (foreign keys are off on a raw connection)
    crash_after(db, "INSERT INTO flags(kind, individual, season, message, batch_id, created) "
                    "VALUES ('outlier', 'H09', '2024', 'x', 999, 't')")
    with Study.open(root) as again:
        store = again.store
        assert store.checked_on_open and store.readonly
        assert "damaged" in store.damaged and "flags row" in store.damaged and "batches" in store.damaged
        assert "no backup" in store.damaged and "\n" not in store.damaged
        assert not store.writable()
        assert len(store.effective_frame()) == 4                  # still readable
        with pytest.raises(StoreError) as err:
            store.import_bytes("b2.csv", b"tag,season,wing\nH01,2024,4.7\n")
        assert str(err.value) == store.damaged
    from fieldslope.tui.cli import main
    assert main(["flags", "--study", str(root)]) == 0
    err_text = capsys.readouterr().err
    assert err_text.count("\n") == 1 and "damaged" in err_text


def test_a_damaged_page_names_the_last_good_backup(study, tmp_path):
    rows = "".join(f"K{i:04d},2024,Gull Flat,4.{i % 9},1.{i % 7},1,{i % 5},,\n" for i in range(3000))
    study.store.import_bytes("big.csv", (GOOD.decode().splitlines()[0] + "\n" + rows).encode())
    root, db = study.root, study.db_path
    backup = store_schema.backup(study.store._conn(), db.with_name(f"{db.name}.v2-20260101T000000.bak"))
    study.close()
    conn = sqlite3.connect(db)
    root_page = conn.execute("SELECT rootpage FROM sqlite_master WHERE name = 'records'").fetchone()[0]
    page_size = conn.execute("PRAGMA page_size").fetchone()[0]
    conn.close()
    with open(db, "r+b") as fh:                                   # scribble over the records table's root page
        fh.seek((root_page - 1) * page_size)
        fh.write(b"\xff" * 64)
    crash_after(db, "INSERT INTO heritability(trait, value, se, source, operator, created) "
                    "VALUES ('wing', 0.4, NULL, 's', 'ana', 't')")
    with Study.open(root) as again:
        assert again.store.readonly and "damaged" in again.store.damaged
        assert str(backup) in again.store.damaged
        with pytest.raises(StoreError, match="damaged"):
            again.store.effective_frame()
    assert Path(f"{db}.damaged").exists()                           # the next open checks again
    aside = tmp_path / "aside"
    aside.mkdir()
    for suffix in ("", "-wal", "-shm"):                              # restore as the sentence says
        if Path(f"{db}{suffix}").exists():
            os.replace(f"{db}{suffix}", aside / f"db{suffix}")
    shutil.copyfile(backup, db)
    with Study.open(root) as restored:
        assert restored.store.checked_on_open and not restored.store.damaged and restored.store.writable()
        assert len(restored.store.effective_frame()) == 3000
    assert not Path(f"{db}.damaged").exists()


# -- 2. a locked store ---------------------------------------------------------------------

HOLD = ("import sqlite3, sys\n"
        "c = sqlite3.connect(sys.argv[1], isolation_level=None)\n"
        "c.execute('BEGIN IMMEDIATE')\n"
        "print('held', flush=True)\n"
        "sys.stdin.read()\n"
        "c.execute('ROLLBACK')\n")


def test_another_process_holding_a_write_gives_the_busy_sentence(study, monkeypatch):
    monkeypatch.setattr(store_schema, "BUSY_TIMEOUT_S", 0.2)
    monkeypatch.setattr(store_schema, "RETRY_DELAYS", (0.05, 0.1))
    from fieldslope.schemas.store import Store

    store = Store(study.db_path, study.protocol)                  # its connection takes the short timeout
    holder = subprocess.Popen([sys.executable, "-c", HOLD, str(study.db_path)], stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        assert not store.writable()
        start = time.monotonic()
        with pytest.raises(StoreError) as err:
            store.import_bytes("b1.csv", GOOD)
        waited = time.monotonic() - start
        assert str(err.value) == store_schema.BUSY_SENTENCE
        assert "another fieldslope is taking in a batch; try again in a moment" in str(err.value)
        assert waited >= 3 * 0.2                                   # three tries, each up to the busy timeout
        assert store.batches() == []                               # reading still works, nothing stored
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)
    assert store.writable()
    assert store.import_bytes("b1.csv", GOOD).outcome == "stored"
    store.close()


def test_writable_is_false_for_a_read_only_study(study):
    study.close()
    with Study.open(study.root, readonly=True) as ro:
        assert not ro.store.writable()
    with Study.open(study.root) as rw:
        assert rw.store.writable()


# -- 3. flags on values a later batch replaced --------------------------------------------------

def test_a_later_value_supersedes_open_flags_on_the_old_one(study):
    store = study.store
    store.import_bytes("b1.csv", GOOD)
    wing = next(f for f in store.flags() if (f.kind, f.individual, f.field) == ("out_of_range", "H03", "wing"))
    store.import_bytes("b2.csv", b"tag,season,wing,tibia\nH03,2024,,1.65\n")     # a blank wing replaces nothing
    assert store.flag(wing.id).status == "open"
    store.import_bytes("b3.csv", b"tag,season,wing\nH03,2024,4.7\n")
    open_now = {(f.kind, f.individual, f.field, f.batch_id) for f in store.flags()}
    assert ("out_of_range", "H03", "wing", 1) not in open_now
    assert ("unknown_parent", "H03", "sire", 1) in open_now                    # sire was not given again
    assert ("differs_from_record", "H03", "wing", 3) in open_now               # the new batch's own flag
    old = store.flag(wing.id)
    assert (old.status, old.resolved_by, old.value) == ("superseded", "batch 3", "7.5")
    assert old.id in {f.id for f in store.flags(include_resolved=True)}
    assert store.effective_frame().set_index("tag").at["H03", "wing"] == 4.7
    assert math.isnan(store.effective_frame(as_of_batch=1).set_index("tag").at["H03", "wing"])
    hist = store.history("H03")
    assert {"7.5", "4.7"} <= set(hist.loc[hist.event == "recorded", "value"])   # both values stay on record
    gone = hist[hist.event == "flag superseded"]
    assert list(zip(gone.field, gone.value, gone.batch)) == [("wing", "7.5", 3)]
    assert f"flag {wing.id} (out of range)" in gone.detail.item()
    differs = next(f for f in store.flags() if f.kind == "differs_from_record" and f.batch_id == 3)
    store.import_bytes("b4.csv", b"tag,season,wing\nH03,2024,4.75\n")
    assert store.flag(differs.id).status == "superseded"
    conn = sqlite3.connect(study.db_path)
    try:
        assert conn.execute("SELECT flag_id, batch_id FROM supersessions ORDER BY id").fetchall() == [
            (wing.id, 3), (differs.id, 4)]
        with pytest.raises(sqlite3.DatabaseError, match="append-only"):
            conn.execute("DELETE FROM supersessions")
    finally:
        conn.close()


def test_a_resolved_flag_is_not_superseded_and_a_census_supersedes_missing_fitness(study):
    store = study.store
    store.import_bytes("b1.csv", b"tag,season,site,wing,survived\nH01,2024,Gull Flat,7.1,1\n"
                                 b"H02,2024,Gull Flat,4.6,\n")
    flags = {(f.kind, f.individual): f for f in store.flags()}
    store.resolve_flag(flags[("out_of_range", "H01")].id, "keep", reason="a big one, measured twice")
    store.import_bytes("b2.csv", b"tag,season,wing,survived\nH01,2024,7.2,1\nH02,2024,4.6,0\n")
    assert store.flag(flags[("out_of_range", "H01")].id).status == "keep"
    assert store.flag(flags[("missing_fitness", "H02")].id).status == "superseded"


def test_a_superseded_flag_cannot_be_resolved_and_a_joining_row_supersedes_too(study):
    store = study.store
    store.import_bytes("b1.csv", GOOD)
    wing = next(f for f in store.flags() if (f.kind, f.individual, f.field) == ("out_of_range", "H03", "wing"))
    store.import_bytes("b2.csv", b"tag,season,site,wing\nH03,2024,Far Away,4.7\n", accept_valid=True)
    assert store.flag(wing.id).status == "open"                               # the row is not on record yet
    q = next(f for f in store.flags() if f.kind == "quarantined")
    assert store.resolve_flag(q.id, "set", "Reed Bend", reason="site code on the card").joined
    assert (store.flag(wing.id).status, store.flag(wing.id).resolved_by) == ("superseded", "batch 2")
    assert store.effective_frame().set_index("tag").at["H03", "wing"] == 4.7
    with pytest.raises(RecordError, match="superseded: batch 2 gave a newer wing"):
        store.resolve_flag(wing.id, "set", "5.0", reason="late note")
    assert store.effective_frame().set_index("tag").at["H03", "wing"] == 4.7


# -- 4. excluding one cell of a quarantined row ---------------------------------------------------

def test_excluding_one_flag_of_a_quarantined_row_leaves_the_whole_row_out(study):
    store = study.store
    store.import_bytes("a.csv", b"tag,season,site,wing,clutch\nH01,2024,Gull Flat,4.5,2\n"
                                b"H02,2024,Far Away,4.4,-1\n", accept_valid=True)
    q = {f.field: f for f in store.flags() if f.kind == "quarantined"}
    res = store.resolve_flag(q["site"].id, "exclude", reason="card lost", operator="ana")
    assert "1 other flag" in res.message
    after = {f.field: f for f in store.flags(include_resolved=True) if f.kind == "quarantined"}
    assert {f.status for f in after.values()} == {"exclude"}
    assert {f.reason for f in after.values()} == {"card lost"}
    assert not [f for f in store.flags() if f.kind == "quarantined"]
    with pytest.raises(RecordError, match="left out of the record"):
        store.resolve_flag(q["clutch"].id, "set", "1", reason="nest card")
    assert "H02" not in set(store.effective_frame()["tag"])
    conn = sqlite3.connect(study.db_path)
    try:
        rows = conn.execute("SELECT flag_id, action, reason, operator FROM resolutions ORDER BY id").fetchall()
    finally:
        conn.close()
    assert rows == [(q["site"].id, "exclude", "card lost", "ana"), (q["clutch"].id, "exclude", "card lost", "ana")]


def test_a_partly_fixed_quarantined_row_never_joins_once_excluded(study):
    store = study.store
    store.import_bytes("a.csv", b"tag,season,site,wing,clutch\nH02,2024,Far Away,4.4,-1\n", accept_valid=True)
    q = {f.field: f for f in store.flags() if f.kind == "quarantined"}
    store.resolve_flag(q["site"].id, "set", "Reed Bend", reason="site code on the card")
    store.resolve_flag(q["clutch"].id, "exclude", reason="clutch not counted")
    assert store.flag(q["site"].id).status == "exclude"
    with pytest.raises(RecordError, match="left out"):
        store.resolve_flag(q["clutch"].id, "set", "1", reason="found it")
    assert store.effective_frame().empty


# -- the upgrade ------------------------------------------------------------------------------

def test_a_version_1_store_is_backed_up_and_upgraded_with_its_data(tmp_path, protocol_text):
    from fieldslope.schemas.protocol import parse_protocol
    from fieldslope.schemas.store import Store

    db = tmp_path / "v1.sqlite"
    conn = sqlite3.connect(db, isolation_level=None)
    for statement in store_schema._statements(store_schema.MIGRATIONS[0]):
        conn.execute(statement)
    conn.execute("PRAGMA user_version = 1")
    conn.execute("INSERT INTO heritability(trait, value, se, source, operator, created) "
                 "VALUES ('wing', 0.3, NULL, 's', 'ana', 't')")
    conn.close()
    store = Store(db, parse_protocol(protocol_text))
    try:
        assert store.heritability()["wing"][0] == 0.3
        store.import_bytes("b1.csv", GOOD)
        store.import_bytes("b2.csv", b"tag,season,wing\nH03,2024,4.7\n")
        assert any(f.status == "superseded" for f in store.flags(include_resolved=True))
    finally:
        store.close()
    assert len(list(tmp_path.glob("v1.sqlite.v1-*.bak"))) == 1
    assert os.path.getsize(db) > 0


def test_busy_is_read_from_the_sqlite_error_code_not_the_message(study, monkeypatch):
    from fieldslope.common.errors import BusyError

    holder = sqlite3.connect(study.db_path, isolation_level=None)
    other = sqlite3.connect(study.db_path, isolation_level=None, timeout=0)
    try:
        holder.execute("BEGIN IMMEDIATE")
        with pytest.raises(sqlite3.OperationalError) as busy:
            other.execute("BEGIN IMMEDIATE")
        assert busy.value.sqlite_errorname == "SQLITE_BUSY" and store_schema.is_busy(busy.value)
        with pytest.raises(sqlite3.OperationalError) as other_error:
            other.execute("SELECT * FROM no_such_table")
        assert not store_schema.is_busy(other_error.value)
        # the same text without SQLite's code (raised by hand) is not taken for a busy store
        assert not store_schema.is_busy(sqlite3.OperationalError("database is locked"))
        monkeypatch.setattr(store_schema, "RETRY_DELAYS", (0.01,))
        with pytest.raises(BusyError, match="busy"):                # a StoreError the dashboard can tell apart
            store_schema.retry_locked(lambda: other.execute("BEGIN IMMEDIATE"))
    finally:
        holder.execute("ROLLBACK")
        holder.close()
        other.close()
