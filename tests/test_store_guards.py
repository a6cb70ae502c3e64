"""Faults that threaten the record itself: rows replaced behind the triggers' back, guards removed, a store
file emptied or cut short, a write-ahead log deleted, an oversized refused file."""

from __future__ import annotations

import sqlite3

import pytest

from fieldslope.common.errors import StoreError
from fieldslope.schemas.study import Study


@pytest.fixture
def stored(study, write_batch, hopper_rows):
    rows = hopper_rows("2024", "Gull Flat", n=12)
    rows[1]["wing"] = "45.1"                      # out of range: one flag on record
    assert study.store.import_file(write_batch(rows, "a.csv"), operator="t").outcome == "stored"
    assert study.store.flags()
    return study


@pytest.mark.parametrize("sql", [
    "REPLACE INTO records(id, batch_id, seq_batch, row, individual, season) VALUES (1, 1, 1, 2, 'X', '2024')",
    "INSERT OR REPLACE INTO batches(id, file_name, sha256, raw, operator, received, outcome) "
    "VALUES (1, 'x', 'y', x'00', 'o', 't', 'stored')",
    "INSERT OR REPLACE INTO fields(name, col, kind) VALUES ('wing', 'v9', 'text')",
    "REPLACE INTO flags(id, kind, individual, season, message, batch_id, created) VALUES (1,'k','i','s','m',1,'t')",
])
def test_replace_cannot_overwrite_raw_or_audit_rows_from_another_program(stored, sql):
    before = stored.store.effective_frame()
    conn = sqlite3.connect(stored.store.path, isolation_level=None)   # plain sqlite3: no pragmas of ours
    try:
        with pytest.raises(sqlite3.IntegrityError, match="append-only"):
            conn.execute(sql)
    finally:
        conn.close()
    assert stored.store.effective_frame().equals(before)


def test_a_missing_guard_is_noticed_when_the_store_opens(stored):
    root = stored.root
    stored.close()
    conn = sqlite3.connect(root / "fieldslope.sqlite", isolation_level=None)
    conn.execute("DROP TRIGGER records_no_delete")
    conn.close()
    again = Study.open(root)
    try:
        assert "records_no_delete" in again.store.damaged and again.store.readonly
        with pytest.raises(StoreError, match="append-only guards are missing"):
            again.store.resolve_flag(1, "keep", reason="r", operator="o")
    finally:
        again.close()


@pytest.mark.parametrize("cut", [0, 4096 + 100])
def test_an_empty_or_cut_short_store_is_damaged_never_made_anew(stored, cut):
    root = stored.root
    stored.close()
    db = root / "fieldslope.sqlite"
    size = db.stat().st_size
    assert size > 3 * 4096
    with open(db, "r+b") as fh:
        fh.truncate(cut)
    with pytest.raises(StoreError, match="damaged") as caught:
        Study.open(root)
    assert ("empty" if cut == 0 else "cut short") in str(caught.value)
    assert db.stat().st_size == cut                     # nothing was built over it


def test_a_deleted_write_ahead_log_is_named_not_called_a_full_disk(stored, tmp_path):
    from fieldslope.schemas import store_health

    db = stored.store.path
    wal = db.with_name(db.name + "-wal")
    if wal.exists():
        wal.unlink()
    sentence = store_health.write_failure_sentence(db, full=False)
    assert "write-ahead log" in sentence and "deleted" in sentence and "full" not in sentence


def test_a_huge_file_is_refused_from_its_size_and_only_its_head_is_kept(study, huge_file):
    import hashlib

    from tests.conftest import peak_memory

    big = huge_file
    result, peak = peak_memory(lambda: study.store.import_file(big, operator="t"))
    assert result.outcome == "refused" and "over the 50 MB limit" in result.message
    assert peak < 32 * 2**20, peak                 # read in chunks, never whole
    batch = study.store.batches()[-1]
    assert batch.outcome == "refused"
    raw = study.store.batch_bytes(result.batch_id)
    assert len(raw) == 4096 and raw.startswith(b"tag,season,site\n")
    sha = study.store._read(lambda c: c.execute("SELECT sha256 FROM batches WHERE id = ?",
                                                (result.batch_id,)).fetchone()[0])
    assert sha != hashlib.sha256(raw).hexdigest() and len(sha) == 64
    assert "damaged" not in result.message
    checked = study.store.check_file(big)
    assert checked.outcome == "refused" and len(study.store.batches()) == 1


def test_a_pipe_is_refused_with_a_sentence_not_read(study, tmp_path):
    import os

    from fieldslope.common.errors import SheetError

    pipe = tmp_path / "batch.csv"
    os.mkfifo(pipe)
    with pytest.raises(SheetError, match="not a regular file"):
        study.store.import_file(pipe)
