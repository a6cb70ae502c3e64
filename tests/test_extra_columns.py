"""Columns the protocol does not name: kept with the batch (the stored file, and as text beside each record)
and said once, never a reason to refuse it; a near miss of a protocol column the sheet lacks (``wnig`` for
``wing``) refuses it, naming both."""

from __future__ import annotations

from fieldslope.common.names import Outcome
from fieldslope.tui.cli import main

EXTRA = ("tag,season,site,wing,tibia,survived,clutch,comments,sex,date,observer\n"
         "H01,2024,Gull Flat,4.5,1.5,1,3,bent antenna,F,2024-06-02,Ana\n"
         "H02,2024,Gull Flat,4.6,1.6,0,0,,M,2024-06-02,Ana\n"
         "H03,2024,Gull Flat,4.1,1.3,1,4,moulting,F,2024-06-02,Ana\n")


def call(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def test_a_batch_with_extra_columns_is_stored_and_they_are_kept_with_it(study):
    result = study.store.import_bytes("extra.csv", EXTRA.encode(), operator="ana")
    assert result.outcome == Outcome.STORED and result.n_stored == 3
    (note,) = [n for n in result.notes if "not in the protocol" in n]
    assert "'comments', 'sex'" in note and "kept as text with each record" in note
    (batch,) = study.store.batches()
    assert batch.notes == result.notes                                  # said once, kept with the batch
    assert b"bent antenna" in study.store.batch_bytes(batch.id)        # the column's values are in the stored file
    frame = study.store.effective_frame()
    assert set(frame["tag"]) == {"H01", "H02", "H03"} and "sex" not in frame.columns   # not used in estimates
    # and beside each record: one individual's history shows them
    recorded = {(e.field, e.value) for e in study.store.history_events("H01") if e.event == "recorded"}
    assert {("comments", "bent antenna"), ("sex", "F"), ("observer", "Ana"), ("wing", "4.5")} <= recorded
    # a later batch with the same extra column uses the same field; a blank cell records nothing
    again = EXTRA.replace("H01,", "H04,").replace("H02,", "H05,").replace("H03,", "H06,").replace("2024", "2025")
    assert study.store.import_bytes("again.csv", again.encode(), operator="ana").outcome == Outcome.STORED
    assert ("sex", "M") in {(e.field, e.value) for e in study.store.history_events("H05")}
    assert "comments" not in {e.field for e in study.store.history_events("H05")}


def test_the_command_line_says_the_extra_columns_once_and_history_shows_them(tmp_path, protocol_file, capsys):
    study = str(tmp_path / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol_file))[0] == 0
    sheet = tmp_path / "extra.csv"
    sheet.write_text(EXTRA)
    code, out, err = call(capsys, "check", str(sheet), "--study", study)
    assert code == 0 and err == "" and out.count("not in the protocol") == 1 and "would store 3 of 3 rows" in out
    code, out, err = call(capsys, "import", str(sheet), "--study", study)
    assert code == 0 and out.count("not in the protocol") == 1 and "3 of 3 rows stored" in out
    code, out, _ = call(capsys, "history", "H03", "--study", study)
    assert code == 0 and "comments recorded: moulting" in out and "sex recorded: F" in out


def test_a_near_miss_of_a_missing_protocol_column_refuses_naming_both(study):
    sheet = "tag,season,site,wnig,tibia,survived,clutch\nH01,2024,Gull Flat,4.5,1.5,1,3\n"
    result = study.store.import_bytes("typo.csv", sheet.encode(), operator="ana")
    assert result.outcome == Outcome.REFUSED
    assert "'wnig'" in result.message and "near miss of 'wing'" in result.message
    assert "rename the column to 'wing'" in result.message
    assert study.store.effective_frame().empty


def test_a_near_miss_of_a_column_the_sheet_has_is_kept_and_named(study):
    sheet = "tag,season,site,wing,wnig,tibia,survived,clutch,observr\nH01,2024,Gull Flat,4.5,4.4,1.5,1,3,Ana\n"
    result = study.store.check_bytes("two.csv", sheet.encode())
    assert result.outcome == Outcome.STORED
    assert any("'wnig'" in n and "near miss of 'wing', which the sheet also has" in n for n in result.notes)
    assert any("'observr'" in n and "near miss of 'observer'" in n for n in result.notes)
