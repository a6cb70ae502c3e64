"""Decisions on flags that reach past one flag: copies of a duplicated ID, one value flagged twice, a census
row waiting for its ID, and deciding a flag a second time (always on request, never silently).

The checks are against the store's own promises (the flag messages and DEVELOPERS.md "Store"): what a
message says can be done is what the store does, and every flag a decision closes has its own audit row.
"""

from __future__ import annotations

import math

import pytest

from fieldslope.common.errors import RecordError
from fieldslope.tui.cli import main

DUPLICATE = (b"tag,season,site,wing\nH01,2024,Gull Flat,4.5\nH01,2024,Gull Flat,4.9\n"
             b"H02,2024,Gull Flat,4.4\n")


def by_kind(store, kind, *, resolved=False):
    return [f for f in store.flags(include_resolved=resolved) if f.kind == kind]


def wing(store, tag, **kw):
    return store.effective_frame(**kw).set_index("tag").at[tag, "wing"]


# -- duplicate IDs: the message's promises ----------------------------------------------------------
def test_duplicate_message_names_each_way_the_store_offers(study):
    study.store.import_bytes("d.csv", DUPLICATE)
    first, second = by_kind(study.store, "duplicate_id")
    assert "rows 2, 3" in first.message
    for promise in ("keep the right row", "other copies are then left out", "exclude a wrong copy",
                    "correct its ID"):
        assert promise in first.message


def test_keeping_one_copy_leaves_the_other_copies_out(study):
    study.store.import_bytes("d.csv", DUPLICATE)
    first, second = by_kind(study.store, "duplicate_id")
    assert wing(study.store, "H01") == 4.9                 # both copies in: the later row wins
    res = study.store.resolve_flag(first.id, "keep", reason="row 2 matches the paper sheet", operator="ana")
    assert "row 3" in res.message and "left out" in res.message
    assert wing(study.store, "H01") == 4.5                 # the kept copy is the record
    other = study.store.flag(second.id)
    assert (other.status, other.resolved_by) == ("exclude", "ana")
    assert other.reason == f"row 2 matches the paper sheet (row 2 kept under flag {first.id})"
    assert by_kind(study.store, "duplicate_id") == []


def test_excluding_one_of_two_copies_keeps_the_other(study):
    study.store.import_bytes("d.csv", DUPLICATE)
    first, second = by_kind(study.store, "duplicate_id")
    res = study.store.resolve_flag(second.id, "exclude", reason="copied twice")
    assert "row 2, the only copy left, kept" in res.message
    assert study.store.flag(first.id).status == "keep"
    assert wing(study.store, "H01") == 4.5


def test_correcting_a_copy_moves_the_row_to_the_right_id(study):
    study.store.import_bytes("d.csv", DUPLICATE)
    first, second = by_kind(study.store, "duplicate_id")
    res = study.store.resolve_flag(second.id, "set", "H03", reason="tag H03 on the card, misread")
    assert (res.old, res.new) == ("H01", "H03")
    frame = study.store.effective_frame().set_index("tag")
    assert frame.at["H01", "wing"] == 4.5 and frame.at["H03", "wing"] == 4.9
    assert frame.at["H03", "site"] == "Gull Flat"
    assert study.store.flag(first.id).status == "keep"      # no other copy left
    assert study.store.flag(second.id).new_value == "H03"
    events = study.store.history("H03")
    assert ("4.9", f"moved here from ID H01 (flag {second.id})") in set(zip(events.value, events.detail))
    # a moved row is decided under its new ID, not through the old flag again
    with pytest.raises(RecordError, match="moved to ID H03"):
        study.store.resolve_flag(second.id, "keep", reason="undo", again=True)


def test_correcting_a_copy_to_the_id_it_has_is_refused(study):
    study.store.import_bytes("d.csv", DUPLICATE)
    _, second = by_kind(study.store, "duplicate_id")
    with pytest.raises(RecordError, match="is the ID row 3 has now"):
        study.store.resolve_flag(second.id, "set", "H01", reason="same")
    assert study.store.flag(second.id).is_open


def test_copies_lists_each_row_with_its_values(study):
    study.store.import_bytes("d.csv", DUPLICATE)
    first, second = by_kind(study.store, "duplicate_id")
    copies = study.store.copies(second.id)
    assert [(c.flag_id, c.row, c.status) for c in copies] == [(first.id, 2, "open"), (second.id, 3, "open")]
    assert [dict(c.values)["wing"] for c in copies] == ["4.5", "4.9"]
    with pytest.raises(RecordError, match="there is no flag 999"):
        study.store.copies(999)


# -- one value, two flags -----------------------------------------------------------------------------
def _slipped(study, write_batch, hopper_rows):
    """Forty plausible wings and one of 9.5 mm: out of the 3-6 mm range and a robust outlier in its cell."""
    rows = hopper_rows("2024", "Gull Flat", n=40)
    rows[7]["wing"] = "9.5"
    study.store.import_file(write_batch(rows))
    oor = next(f for f in by_kind(study.store, "out_of_range") if f.field == "wing")
    out = next(f for f in by_kind(study.store, "outlier") if f.field == "wing")
    assert oor.individual == out.individual and oor.value == "9.5"
    return oor, out


def test_keeping_an_out_of_range_value_settles_its_outlier_flag(study, write_batch, hopper_rows):
    oor, out = _slipped(study, write_batch, hopper_rows)
    res = study.store.resolve_flag(oor.id, "keep", reason="a giant, measured twice", operator="ana")
    assert f"outlier flag {out.id} kept with it" in res.message
    settled = study.store.flag(out.id)
    assert (settled.status, settled.resolved_by) == ("keep", "ana")
    assert settled.reason == f"a giant, measured twice (decided under flag {oor.id})"
    # the value counts, also in the sensitivity frame that leaves open outliers out
    assert wing(study.store, oor.individual, without_open_outliers=True) == 9.5


def test_excluding_an_outlier_settles_its_out_of_range_flag(study, write_batch, hopper_rows):
    oor, out = _slipped(study, write_batch, hopper_rows)
    study.store.resolve_flag(out.id, "exclude", reason="caliper slipped")
    assert study.store.flag(oor.id).status == "exclude"
    assert math.isnan(wing(study.store, oor.individual))
    assert [f for f in study.store.flags() if f.individual == oor.individual] == []


# -- deciding again -----------------------------------------------------------------------------------
def test_deciding_a_decided_flag_again_needs_again(study, write_batch, hopper_rows):
    oor, _ = _slipped(study, write_batch, hopper_rows)
    study.store.resolve_flag(oor.id, "keep", reason="measured twice", operator="ana")
    with pytest.raises(RecordError, match=r"already decided \(kept by ana .*: measured twice\).*--again"):
        study.store.resolve_flag(oor.id, "exclude", reason="changed my mind")
    assert study.store.flag(oor.id).status == "keep"
    study.store.resolve_flag(oor.id, "exclude", reason="caliper was off that day", again=True)
    assert study.store.flag(oor.id).status == "exclude"
    assert math.isnan(wing(study.store, oor.individual))
    decisions = [(e.event, e.detail) for e in study.store.history_events(oor.individual)]
    assert any("measured twice" in str(d) for _, d in decisions)
    assert any("caliper was off that day" in str(d) for _, d in decisions)


def test_cli_resolve_refuses_a_second_decision_without_again(tmp_path, protocol_file, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "d.csv").write_bytes(DUPLICATE)
    assert main(["init", "st", "--protocol", str(protocol_file)]) == 0
    assert main(["import", "d.csv", "--study", "st"]) == 0
    assert main(["resolve", "1", "--keep", "--reason", "row 2 is right", "--study", "st"]) == 0
    capsys.readouterr()
    code = main(["resolve", "1", "--exclude", "--reason", "no, row 3", "--study", "st"])
    out, err = capsys.readouterr()
    assert code != 0 and "already decided" in err and "--again" in err and "Traceback" not in err
    code = main(["resolve", "1", "--exclude", "--reason", "no, row 3", "--again", "--study", "st"])
    out, err = capsys.readouterr()
    assert code == 0 and "flag 1" in out


# -- a census row waiting for its ID ------------------------------------------------------------------
def test_census_row_for_an_unknown_id_joins_when_the_measurement_row_arrives(study):
    study.store.import_bytes("m.csv", b"tag,season,site,wing\nH01,2024,Gull Flat,4.5\n")
    res = study.store.import_bytes("c.csv", b"tag,season,survived\nH01,2024,1\nH09,2024,0\nH10,2024,7\n",
                                   accept_valid=True)
    assert res.n_quarantined == 2
    q = next(f for f in by_kind(study.store, "quarantined") if f.individual == "H09")
    res = study.store.import_bytes("late.csv", b"tag,season,site,wing\nH09,2024,Reed Bend,4.2\n"
                                               b"H10,2024,Reed Bend,4.4\n", operator="bo")
    assert "census row 3 of batch 2 joined the record by itself" in res.message.lower()
    frame = study.store.effective_frame().set_index("tag")
    assert (frame.at["H09", "wing"], frame.at["H09", "survived"]) == (4.2, 0.0)
    # H10's census row has another error (survived 7 is not 0 or 1): it still waits for a decision
    assert "row 4" not in res.message and math.isnan(frame.at["H10", "survived"])
    assert [f.individual for f in by_kind(study.store, "quarantined")] == ["H10"]
    closed = study.store.flag(q.id)
    assert (closed.status, closed.resolved_by) == ("keep", "bo")
    assert "joined by itself" in closed.reason and "batch 3" in closed.reason


def test_census_row_joins_when_the_mangled_id_of_its_measurement_row_is_corrected(study):
    study.store.import_bytes("m.csv", "tag,season,site,wing\nH01,2024,Gull Flat,4.5\nH09\u200b,2024,Reed Bend,4.2\n"
                             .encode())
    mangled = by_kind(study.store, "mangled_id")[0]
    study.store.import_bytes("c.csv", b"tag,season,survived\nH01,2024,1\nH09,2024,0\n", accept_valid=True)
    q = by_kind(study.store, "quarantined")[0]
    res = study.store.resolve_flag(mangled.id, "set", "H09", reason="invisible character from a pasted list")
    assert res.joined and "joined the record by itself" in res.message
    frame = study.store.effective_frame().set_index("tag")
    assert "H09\u200b" not in frame.index
    assert (frame.at["H09", "wing"], frame.at["H09", "survived"]) == (4.2, 0.0)
    assert study.store.flag(q.id).status == "keep"


def test_a_lookalike_id_is_corrected_by_moving_its_row_and_its_census_row_follows(study):
    study.store.import_bytes("a.csv", b"tag,season,site,wing\nGF24-0001,2024,Gull Flat,4.5\n")
    study.store.import_bytes("b.csv", b"tag,season,site,wing\nGF24-0001,2025,Gull Flat,4.4\n"
                                      b"GF24-O002,2025,Gull Flat,4.6\nGF24-0002,2024,Gull Flat,4.2\n")
    alike = next(f for f in study.store.flags() if f.kind == "lookalike_id")
    assert alike.individual == "GF24-O002" and "correct the ID (the row moves to it)" in alike.message
    study.store.import_bytes("c.csv", b"tag,season,survived\nGF24-0001,2025,1\nGF24-0002,2025,0\n",
                             accept_valid=True)
    res = study.store.resolve_flag(alike.id, "set", "GF24-0002", reason="letter O typed for zero")
    assert res.joined and "moved from ID GF24-O002 to GF24-0002" in res.message
    frame = study.store.effective_frame().set_index(["tag", "season"])
    assert (frame.at[("GF24-0002", "2025"), "wing"], frame.at[("GF24-0002", "2025"), "survived"]) == (4.6, 0.0)
    assert ("GF24-O002", "2025") not in frame.index
