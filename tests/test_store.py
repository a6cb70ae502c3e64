"""The record store: batches stored whole or refused whole, flags, corrections, effective data."""

from __future__ import annotations

import math
import sqlite3

import numpy as np
import pandas as pd
import pytest

from fieldslope.common.errors import StoreError
from fieldslope.schemas.store_types import RecordError

HEADER = "tag,season,site,wing,tibia,survived,clutch,dam,sire"
GOOD = (HEADER + "\n"
        "H01,2024,Gull Flat,4.5,1.5,1,3,,\n"
        "H02,2024,Gull Flat,4.6,1.6,0,0,,\n"
        "H03,2024,Reed Bend,7.5,1.7,1,2,H01,X99\n"
        "H04,2024,Reed Bend,4.4,1.4,1,5,,\n").encode()
BAD_ROW = b"tag,season,wing\nH01,2024,4.9\nH02,2024,abc\n"


def tables(store) -> dict[str, list]:
    conn = sqlite3.connect(store.path)
    try:
        return {t: conn.execute(f"SELECT * FROM {t} ORDER BY rowid").fetchall()
                for t in ("batches", "records", "quarantine", "flags", "resolutions", "heritability")}
    finally:
        conn.close()


def test_import_stores_values_and_flags(study):
    res = study.store.import_bytes("b1.csv", GOOD, operator="ana")
    assert res.outcome == "stored" and res.n_stored == 4 and res.batch_id == 1
    kinds = {(f.kind, f.individual, f.field) for f in study.store.flags()}
    assert ("out_of_range", "H03", "wing") in kinds
    assert ("unknown_parent", "H03", "sire") in kinds       # X99 is on record nowhere
    assert not any(f.field == "dam" for f in study.store.flags())  # H01 is in the batch
    frame = study.store.effective_frame()
    assert list(frame.columns) == ["tag", "season", "site", "wing", "tibia", "survived", "clutch", "dam", "sire"]
    assert list(frame["tag"]) == ["H01", "H02", "H03", "H04"]
    assert frame["wing"].dtype == float and frame["clutch"].dtype == float
    # the open out-of-range value is left out by default
    assert math.isnan(frame.loc[frame.tag == "H03", "wing"].item())
    assert frame.loc[frame.tag == "H01", "wing"].item() == 4.5
    batch = study.store.batches()[0]
    assert batch.operator == "ana" and batch.outcome == "stored" and study.store.batch_bytes(1) == GOOD


def test_same_bytes_twice_is_a_no_op_naming_the_batch(study):
    study.store.import_bytes("b1.csv", GOOD)
    before = tables(study.store)
    again = study.store.import_bytes("renamed.csv", GOOD)
    assert again.outcome == "duplicate" and again.batch_id == 1 and "batch 1" in again.message
    assert tables(study.store) == before


def test_refused_batch_stores_only_its_refusal(study):
    study.store.import_bytes("b1.csv", GOOD)
    before = tables(study.store)
    res = study.store.import_bytes("b2.csv", BAD_ROW)
    assert res.outcome == "refused" and not res.ok
    assert [(e.row, e.column, e.value) for e in res.errors] == [(3, "wing", "abc")]
    after = tables(study.store)
    assert after["batches"][:-1] == before["batches"] and len(after["batches"]) == len(before["batches"]) + 1
    refusal = study.store.batches()[-1]
    assert refusal.outcome == "refused" and refusal.n_errors == 1 and refusal.n_stored == 0
    assert study.store.batch_bytes(refusal.id) == BAD_ROW
    assert {t: v for t, v in after.items() if t != "batches"} == {t: v for t, v in before.items() if t != "batches"}
    # a refused batch does not block a later import of the same bytes
    assert study.store.import_bytes("b2.csv", BAD_ROW, accept_valid=True).outcome == "partial"


def test_unreadable_file_is_refused_with_its_reason(study):
    res = study.store.import_bytes("notes.csv", b"hello\nworld\n")
    assert res.outcome == "refused" and "tag" in res.message
    assert study.store.batches()[0].outcome == "refused"


def test_check_bytes_writes_nothing(study):
    study.store.import_bytes("b1.csv", GOOD)
    before = tables(study.store)
    res = study.store.check_bytes("b2.csv", b"tag,season,wing\nH01,2024,4.9\n")
    assert res.outcome == "stored" and res.checked_only
    assert [f.kind for f in res.flags] == ["differs_from_record"]
    assert tables(study.store) == before


@pytest.mark.parametrize("table", ["batches", "records", "flags", "resolutions", "quarantine", "heritability"])
def test_triggers_refuse_update_and_delete(study, table):
    study.store.import_bytes("b1.csv", GOOD)
    study.store.import_bytes("b2.csv", BAD_ROW, accept_valid=True)
    flag = study.store.flags()[0]
    study.store.resolve_flag(flag.id, "keep", reason="checked")
    study.store.set_heritability("wing", 0.4, 0.1, "common-garden estimate")
    conn = sqlite3.connect(study.store.path)
    try:
        for sql in (f"UPDATE {table} SET id = id + 1000", f"DELETE FROM {table}"):
            with pytest.raises(sqlite3.IntegrityError, match="append-only"):
                conn.execute(sql)
    finally:
        conn.close()


def test_correction_is_audited_and_changes_the_effective_value(study):
    study.store.import_bytes("b1.csv", GOOD)
    flag = next(f for f in study.store.flags() if f.kind == "out_of_range")
    with pytest.raises(RecordError, match="reason"):
        study.store.resolve_flag(flag.id, "set", "5.5", reason="  ")
    res = study.store.resolve_flag(flag.id, "set", "5.5", reason="typed 7 for 5 on the sheet", operator="bo")
    assert (res.old, res.new) == ("7.5", "5.5")
    frame = study.store.effective_frame()
    assert frame.loc[frame.tag == "H03", "wing"].item() == 5.5
    hist = study.store.history("H03")
    row = hist[hist.event == "corrected"].iloc[0]
    assert (row.old, row.value, row.operator) == ("7.5", "5.5", "bo") and "typed 7 for 5" in row.detail
    assert ("recorded", "7.5") in set(zip(hist.event, hist.value))     # the raw value stays on record
    assert study.store.flag(flag.id).status == "set"


def test_a_correction_closes_the_other_open_flags_on_that_value(study, write_batch):
    rows = [dict(tag=f"H{i:02d}", season=2024, site="Gull Flat", wing=w, tibia=1.5, survived=1, clutch=2)
            for i, w in enumerate([4.50, 4.52, 4.48, 4.51, 4.49, 4.53, 4.47, 45.1])]
    study.store.import_file(write_batch(rows))
    on_slip = {f.kind: f for f in study.store.flags() if f.individual == "H07"}
    assert set(on_slip) == {"out_of_range", "outlier"}
    study.store.resolve_flag(on_slip["out_of_range"].id, "set", "4.51", reason="decimal slip", operator="bo")
    assert not [f for f in study.store.flags() if f.individual == "H07"]
    sibling = study.store.flag(on_slip["outlier"].id)
    assert sibling.status == "set" and f"flag {on_slip['out_of_range'].id}" in sibling.reason
    frame = study.store.effective_frame(without_open_outliers=True).set_index("tag")
    assert frame.at["H07", "wing"] == 4.51
    hist = study.store.history("H07")
    assert ("recorded", "45.1") in set(zip(hist.event, hist.value))     # the raw value stays on record


def test_exclude_keep_and_outlier_sensitivity(study, write_batch):
    rows = [dict(tag=f"H{i:02d}", season=2024, site="Gull Flat", wing=w, tibia=1.5, survived=1, clutch=2)
            for i, w in enumerate([4.50, 4.52, 4.48, 4.51, 4.49, 4.53, 4.47, 5.9])]
    study.store.import_file(write_batch(rows))
    out = [f for f in study.store.flags() if f.kind == "outlier"]
    assert [(f.individual, f.field) for f in out] == [("H07", "wing")]
    assert study.store.effective_frame().set_index("tag").at["H07", "wing"] == 5.9
    assert math.isnan(study.store.effective_frame(without_open_outliers=True).set_index("tag").at["H07", "wing"])
    study.store.resolve_flag(out[0].id, "keep", reason="re-measured, it is right")
    assert study.store.effective_frame(without_open_outliers=True).set_index("tag").at["H07", "wing"] == 5.9
    study.store.resolve_flag(out[0].id, "exclude", reason="damaged wing", again=True)
    frame = study.store.effective_frame().set_index("tag")
    assert math.isnan(frame.at["H07", "wing"]) and frame.at["H07", "tibia"] == 1.5
    assert study.store.flag(out[0].id).status == "exclude"


def test_outlier_flag_matches_the_modified_z_score(study, write_batch):
    # Iglewicz & Hoaglin (1993), "How to Detect and Handle Outliers": M = 0.6745 (x - median) / MAD;
    # the MAD from scipy.stats.median_abs_deviation (scale=1) is the independent reference.
    from scipy.stats import median_abs_deviation

    values = [4.2, 4.4, 4.5, 4.5, 4.6, 4.7, 4.8, 5.2, 6.0]   # M(6.0) = 0.6745 * 1.4 / 0.2 = 4.72
    rows = [dict(tag=f"Z{i}", season=2024, site="Reed Bend", wing=v) for i, v in enumerate(values)]
    study.store.import_file(write_batch(rows))
    x = np.array(values)
    m = 0.6745 * (x - np.median(x)) / median_abs_deviation(x, scale=1.0)
    expected = {f"Z{i}" for i in np.flatnonzero(np.abs(m) > 4.0)}
    got = {f.individual for f in study.store.flags() if f.kind == "outlier"}
    assert got == expected == {"Z8"}


def test_census_completes_records_and_refuses_unknown_ids(study):
    study.store.import_bytes("m.csv", b"tag,season,site,wing,tibia\nH01,2024,Gull Flat,4.5,1.5\n"
                                      b"H02,2024,Gull Flat,4.6,1.6\n")
    res = study.store.import_bytes("c.csv", b"tag,season,survived\nH01,2024,1\nH02,2024,0\nH09,2024,1\n")
    assert res.outcome == "refused"
    assert [(e.row, e.column, e.value) for e in res.errors] == [(4, "tag", "H09")]
    assert "not on record in season 2024" in res.errors[0].reason
    res = study.store.import_bytes("c.csv", b"tag,season,survived\nH01,2024,1\nH02,2024,0\n")
    assert res.outcome == "stored"
    frame = study.store.effective_frame().set_index("tag")
    assert frame.at["H01", "survived"] == 1 and frame.at["H02", "survived"] == 0
    assert frame.at["H01", "wing"] == 4.5 and frame.at["H01", "site"] == "Gull Flat"


def test_differs_from_record_latest_value_wins_and_exclusion_restores_nothing(study):
    study.store.import_bytes("b1.csv", GOOD)
    res = study.store.import_bytes("b2.csv", b"tag,season,tibia\nH01,2024,1.55\nH02,2024,1.6\n")
    assert [(f.individual, f.field, f.value) for f in res.flags] == [("H01", "tibia", "1.55")]
    frame = study.store.effective_frame().set_index("tag")
    assert frame.at["H01", "tibia"] == 1.55
    flag = next(f for f in study.store.flags() if f.kind == "differs_from_record")
    study.store.resolve_flag(flag.id, "exclude", reason="the first measure was the careful one")
    assert math.isnan(study.store.effective_frame().set_index("tag").at["H01", "tibia"])
    # as of batch 1 the first value is there
    assert study.store.effective_frame(as_of_batch=1).set_index("tag").at["H01", "tibia"] == 1.5


def test_visit_notes_are_kept_but_not_compared(study):
    study.store.import_bytes("a.csv", b"tag,season,site,wing,date,observer\nH01,2024,Gull Flat,4.5,2024-05-02,ana\n")
    res = study.store.import_bytes("b.csv", b"tag,season,survived,date,observer\nH01,2024,1,2024-08-20,bo\n")
    assert res.outcome == "stored" and res.flags == ()
    hist = study.store.history("H01")
    assert {"2024-05-02", "2024-08-20", "ana", "bo"} <= set(hist.value)


def test_duplicate_row_exclusion_leaves_out_that_row_only(study):
    study.store.import_bytes("d.csv", b"tag,season,site,wing\nH01,2024,Gull Flat,4.5\nH01,2024,Gull Flat,4.9\n"
                                      b"H02,2024,Gull Flat,4.4\n")
    dups = [f for f in study.store.flags() if f.kind == "duplicate_id"]
    assert [f.row for f in dups] == [2, 3]
    assert study.store.effective_frame().set_index("tag").at["H01", "wing"] == 4.9   # later row wins
    study.store.resolve_flag(dups[1].id, "exclude", reason="second row is a copying slip")
    assert study.store.effective_frame().set_index("tag").at["H01", "wing"] == 4.5


def test_quarantine_then_fix_joins_the_record(study):
    study.store.import_bytes("b1.csv", GOOD)
    res = study.store.import_bytes("b2.csv", BAD_ROW, accept_valid=True)
    assert res.outcome == "partial" and (res.n_stored, res.n_quarantined) == (1, 1)
    q = next(f for f in study.store.flags() if f.kind == "quarantined")
    assert (q.individual, q.field, q.value, q.row) == ("H02", "wing", "abc", 3) and q.quarantined
    with pytest.raises(RecordError, match="cannot be kept"):
        study.store.resolve_flag(q.id, "keep", reason="looks fine")
    with pytest.raises(RecordError, match="still not usable"):
        study.store.resolve_flag(q.id, "set", "4,x", reason="sheet")
    assert study.store.effective_frame().set_index("tag").at["H02", "wing"] == 4.6
    fix = study.store.resolve_flag(q.id, "set", "4.65", reason="read from the paper sheet")
    assert fix.joined
    assert study.store.effective_frame().set_index("tag").at["H02", "wing"] == 4.65
    hist = study.store.history("H02")
    assert "joined after a correction" in set(hist.detail)
    assert ("corrected", "4.65", "abc") in set(zip(hist.event, hist.value, hist.old))
    with pytest.raises(RecordError, match="already joined"):
        study.store.resolve_flag(q.id, "set", "4.7", reason="again")


def test_row_with_two_errors_joins_only_when_both_are_fixed(study):
    study.store.import_bytes("a.csv", b"tag,season,site,wing,clutch\nH01,2024,Gull Flat,4.5,2\n"
                                      b"H02,2024,Far Away,4.4,-1\n", accept_valid=True)
    q = {f.field: f for f in study.store.flags() if f.kind == "quarantined"}
    assert set(q) == {"site", "clutch"}
    first = study.store.resolve_flag(q["site"].id, "set", "Reed Bend", reason="site code on the card")
    assert not first.joined and len(first.remaining) == 1 and "clutch" in first.remaining[0]
    assert "H02" not in set(study.store.effective_frame()["tag"])
    second = study.store.resolve_flag(q["clutch"].id, "set", "1", reason="nest card")
    assert second.joined
    row = study.store.effective_frame().set_index("tag").loc["H02"]
    assert (row["site"], row["wing"], row["clutch"]) == ("Reed Bend", 4.4, 1.0)


def test_census_row_with_a_wrong_id_is_fixed_by_setting_the_id(study):
    study.store.import_bytes("m.csv", b"tag,season,site,wing\nH01,2024,Gull Flat,4.5\nH02,2024,Gull Flat,4.6\n")
    res = study.store.import_bytes("c.csv", b"tag,season,survived\nH01,2024,1\nH2,2024,0\n", accept_valid=True)
    assert res.outcome == "partial" and res.n_stored == 1
    q = next(f for f in study.store.flags() if f.kind == "quarantined")
    assert (q.field, q.value) == ("tag", "H2")
    with pytest.raises(RecordError, match="not on record"):
        study.store.resolve_flag(q.id, "set", "H3", reason="guess")
    assert study.store.resolve_flag(q.id, "set", "H02", reason="leading zero lost on the sheet").joined
    assert study.store.effective_frame().set_index("tag").at["H02", "survived"] == 0.0


def test_set_checks_the_value_against_the_protocol(study):
    study.store.import_bytes("b1.csv", GOOD)
    study.store.import_bytes("c.csv", b"tag,season,survived,clutch\nH01,2024,1,\nH02,2024,0,0\n")
    miss = next(f for f in study.store.flags() if f.kind == "missing_fitness")
    with pytest.raises(RecordError, match="whole number"):
        study.store.resolve_flag(miss.id, "set", "2.5", reason="count")
    study.store.resolve_flag(miss.id, "set", "4", reason="count from the nest card")
    assert study.store.effective_frame().set_index("tag").at["H01", "clutch"] == 4.0
    with pytest.raises(RecordError, match="no flag 999"):
        study.store.resolve_flag(999, "keep", reason="x")


def test_heritability_entries_latest_wins(study):
    study.store.set_heritability("wing", 0.3, 0.1, "2023 parent-offspring", operator="ana")
    study.store.set_heritability("wing", 0.35, None, "pooled 2022-2023", operator="ana")
    assert study.store.heritability() == {"wing": (0.35, None, "pooled 2022-2023")}
    assert len(study.store.heritability_entries()) == 2
    first, latest = study.store.heritability_records()
    assert (first.trait, first.value, first.se, first.source, first.operator) == ("wing", 0.3, 0.1, "2023 parent-offspring", "ana")
    assert (latest.value, latest.se, latest.source) == (0.35, None, "pooled 2022-2023") and latest.id > first.id
    with pytest.raises(RecordError):
        study.store.set_heritability("mass", 0.3, 0.1, "x")
    with pytest.raises(RecordError):
        study.store.set_heritability("wing", 1.3, 0.1, "x")


def test_data_version_changes_on_own_and_other_writes(study):
    from fieldslope.schemas.store import Store

    v0 = study.store.data_version()
    study.store.import_bytes("b1.csv", GOOD)
    v1 = study.store.data_version()
    assert v1 != v0
    other = Store(study.db_path, study.protocol)
    try:
        other.set_heritability("wing", 0.3, 0.1, "x")
    finally:
        other.close()
    assert study.store.data_version() != v1


def test_effective_frame_matches_an_independent_pandas_computation(study, write_batch):
    rng = np.random.default_rng(7)
    n = 60
    first = pd.DataFrame({"tag": [f"R{i:03d}" for i in range(n)], "season": "2025",
                          "site": rng.choice(["Gull Flat", "Reed Bend"], n),
                          "wing": rng.uniform(4, 5, n).round(2), "tibia": rng.uniform(1.2, 1.8, n).round(2)})
    second = first.sample(20, random_state=1)[["tag", "season"]].assign(
        wing=rng.uniform(4, 5, 20).round(2), survived=rng.integers(0, 2, 20))
    study.store.import_file(write_batch(first.to_dict("records"), "a.csv"))
    study.store.import_file(write_batch(second.to_dict("records"), "b.csv"))
    expected = first.set_index("tag").copy()
    expected.loc[second.tag, "wing"] = second.set_index("tag")["wing"]
    expected["survived"] = np.nan
    expected.loc[second.tag, "survived"] = second.set_index("tag")["survived"].astype(float)
    got = study.store.effective_frame().set_index("tag")
    for flag in study.store.flags():
        assert flag.kind in ("differs_from_record", "missing_fitness", "outlier")
    assert np.allclose(got.loc[expected.index, "wing"], expected["wing"])
    assert np.allclose(got.loc[expected.index, "tibia"], expected["tibia"])
    assert np.array_equal(got.loc[expected.index, "survived"].fillna(-1), expected["survived"].fillna(-1))
    assert (got.loc[expected.index, "site"] == expected["site"]).all()


def test_readonly_store_refuses_writes(study):
    from fieldslope.schemas.study import Study

    study.store.import_bytes("b1.csv", GOOD)
    ro = Study.open(study.root, readonly=True)
    try:
        assert len(ro.store.effective_frame()) == 4
        with pytest.raises(StoreError, match="read-only"):
            ro.store.import_bytes("x.csv", b"tag,season\nH9,2024\n")
    finally:
        ro.close()


def test_migration_backs_up_and_checks_first(tmp_path, monkeypatch):
    from fieldslope.schemas import store_schema

    db = tmp_path / "old.sqlite"
    store_schema.create_file(db)
    conn = sqlite3.connect(db)
    conn.execute("INSERT INTO heritability(trait, value, se, source, operator, created) "
                 "VALUES ('wing', 0.3, NULL, 's', 'ana', 't')")
    conn.commit()
    conn.close()
    now = store_schema.SCHEMA_VERSION
    monkeypatch.setattr(store_schema, "SCHEMA_VERSION", now + 1)
    monkeypatch.setitem(store_schema.MIGRATIONS, now, "CREATE TABLE notes_next(id INTEGER PRIMARY KEY, text TEXT);")
    conn = store_schema.connect(db)
    store_schema.migrate(conn, db)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == now + 1
    conn.close()
    backups = list(tmp_path.glob(f"old.sqlite.v{now}-*.bak"))
    assert len(backups) == 1
    copy = sqlite3.connect(backups[0])
    assert copy.execute("SELECT trait FROM heritability").fetchall() == [("wing",)]
    assert copy.execute("PRAGMA user_version").fetchone()[0] == now
    copy.close()


def test_newer_schema_is_refused_clearly(tmp_path):
    from fieldslope.schemas import store_schema

    db = tmp_path / "new.sqlite"
    store_schema.create_file(db)
    conn = sqlite3.connect(db)
    conn.execute("PRAGMA user_version = 99")
    conn.close()
    with pytest.raises(StoreError, match="newer fieldslope"):
        store_schema.migrate(store_schema.connect(db), db)


def test_database_file_is_group_writable(study):
    assert study.db_path.stat().st_mode & 0o777 == 0o660


def test_garbage_database_gives_one_sentence(tmp_path, protocol_text):
    from fieldslope.schemas.protocol import parse_protocol
    from fieldslope.schemas.store import Store

    db = tmp_path / "junk.sqlite"
    db.write_bytes(b"this is not a database at all" * 100)
    with pytest.raises(StoreError, match="damaged or not a fieldslope database"):
        Store(db, parse_protocol(protocol_text))


def test_a_long_write_lock_is_waited_for_then_reported_in_one_sentence(study, monkeypatch):
    import threading
    import time

    from fieldslope.schemas import store_schema

    monkeypatch.setattr(store_schema, "BUSY_TIMEOUT_S", 0.05)
    monkeypatch.setattr(store_schema, "RETRY_DELAYS", (0.05, 0.1, 0.2))
    holder = sqlite3.connect(study.db_path, isolation_level=None, check_same_thread=False)
    holder.execute("BEGIN IMMEDIATE")
    threading.Timer(0.2, lambda: holder.execute("COMMIT")).start()
    from fieldslope.schemas.store import Store

    other = Store(study.db_path, study.protocol)        # a fresh connection with the short timeout
    try:
        assert other.import_bytes("b1.csv", GOOD).outcome == "stored"   # waited, then wrote
        holder.execute("BEGIN IMMEDIATE")
        start = time.monotonic()
        with pytest.raises(StoreError, match="busy") as err:
            other.set_heritability("wing", 0.3, 0.1, "x")
        assert "locked" not in str(err.value) and time.monotonic() - start < 5
    finally:
        holder.execute("ROLLBACK")
        holder.close()
        other.close()


def test_protocol_gaining_a_trait_adds_a_column_and_keeps_the_data(study):
    from fieldslope.schemas.protocol import parse_protocol
    from fieldslope.schemas.store import Store

    study.store.import_bytes("b1.csv", GOOD)
    study.close()
    text = (study.root / "protocol.toml").read_text()
    wider = parse_protocol(text.replace("[fitness.survived]", "[traits.antenna]\nunit = \"mm\"\n\n[fitness.survived]"))
    store = Store(study.db_path, wider)
    try:
        frame = store.effective_frame()
        assert "antenna" in frame.columns and frame["antenna"].isna().all()
        assert frame.set_index("tag").at["H01", "wing"] == 4.5
        store.import_bytes("b3.csv", b"tag,season,antenna\nH01,2024,2.5\n")
        assert store.effective_frame().set_index("tag").at["H01", "antenna"] == 2.5
    finally:
        store.close()


def test_migration_backup_keeps_the_store_private_mode(tmp_path, monkeypatch):
    """A store kept at 0600 (owner only) never leaves a world- or group-readable copy beside it."""
    import os
    import stat

    from fieldslope.schemas import store_schema

    db = tmp_path / "private.sqlite"
    store_schema.create_file(db)
    os.chmod(db, 0o600)
    old_umask = os.umask(0o022)          # the usual umask would give a new file 0644
    try:
        now = store_schema.SCHEMA_VERSION
        monkeypatch.setattr(store_schema, "SCHEMA_VERSION", now + 1)
        monkeypatch.setitem(store_schema.MIGRATIONS, now, "CREATE TABLE notes_next(id INTEGER PRIMARY KEY);")
        conn = store_schema.connect(db)
        store_schema.migrate(conn, db)
        conn.close()
    finally:
        os.umask(old_umask)
    (backup,) = tmp_path.glob("private.sqlite.v*.bak")
    assert stat.S_IMODE(backup.stat().st_mode) == 0o600
    leftovers = [p for p in tmp_path.iterdir() if p.name.startswith("private.sqlite.v") and p != backup]
    assert all(stat.S_IMODE(p.stat().st_mode) & 0o077 == 0 for p in leftovers)
