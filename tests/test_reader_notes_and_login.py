"""Nothing about a batch is dropped without a word, and the record says who did what.

- The reader's notes (further worksheets left out, a guessed encoding) are shown with the check and the batch:
  ``fieldslope check``, ``import`` and ``batches``, the Intake screen's check result and its batch list.
- Beside any operator name typed, the account's login name is kept (batches, resolutions, entered h²) and
  shown by ``batches``, ``history`` and ``flags --all``; a blank operator is never recorded.
"""

from __future__ import annotations

import openpyxl
import pytest

from fieldslope.common.errors import RecordError
from fieldslope.schemas import operator as op
from fieldslope.tui.cli import main
from tests.test_tui_intake import check_by_path
from tests.test_tui_screens import make_app, screen_text, wait_for

OTHER_SHEETS = "only the first worksheet ('Day 1') was read; the workbook also has 'Day 2'"
WINDOWS_TEXT = "not UTF-8: read as Windows text (cp1252)"


@pytest.fixture
def two_sheets(write_batch, hopper_rows, tmp_path):
    rows = hopper_rows("2024", "Gull Flat", n=8, seed=11)
    wb = openpyxl.Workbook()
    first = wb.active
    first.title = "Day 1"
    first.append(list(rows[0]))
    for r in rows:
        first.append(list(r.values()))
    wb.create_sheet("Day 2").append(["tag", "season"])
    path = tmp_path / "batches" / "two-days.xlsx"
    path.parent.mkdir(exist_ok=True)
    wb.save(path)
    return path


@pytest.fixture
def windows_csv(write_batch, hopper_rows):
    rows = hopper_rows("2024", "Reed Bend", n=6, seed=12)
    text = "tag,season,site,wing,tibia,survived,clutch,observer\n" + "".join(
        f"{r['tag']},{r['season']},{r['site']},{r['wing']},{r['tibia']},{r['survived']},{r['clutch']},Müller\n"
        for r in rows)
    return write_batch(text.encode("cp1252"), "windows.csv")


def _run(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, " ".join(out.split()), err


@pytest.mark.parametrize("fixture, words", [("two_sheets", OTHER_SHEETS), ("windows_csv", WINDOWS_TEXT)])
def test_check_import_and_batches_show_the_readers_notes(study, capsys, request, fixture, words):
    path = request.getfixturevalue(fixture)
    where = ["--study", str(study.root)]
    code, out, _ = _run(capsys, "check", str(path), *where)
    assert code == 0 and f"note: {words}" in out
    code, out, _ = _run(capsys, "import", str(path), *where, "--operator", "ana")
    assert code == 0 and f"note: {words}" in out
    (batch,) = study.store.batches()
    assert any(words in n for n in batch.notes)                  # kept with the batch, not only printed
    code, out, _ = _run(capsys, "batches", *where)
    assert code == 0 and f"note: {words}" in out


async def test_the_intake_screen_shows_the_notes_with_the_check_and_the_batch(study, two_sheets):
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await check_by_path(app, pilot, two_sheets)
        assert app.screen.problems[0] == f"Note: {app.screen.checked.notes[0]}"
        assert "Note: only the first worksheet ('Day 1') was read" in screen_text(app)
        await pilot.press("i")
        await pilot.pause()
        await pilot.press("y")                                       # confirm
        await wait_for(app, pilot, lambda: len(app.snapshot.batches) == 1, what="the batch")
        await pilot.press("b")
        await wait_for(app, pilot, lambda: "Note: only the first" in screen_text(app), what="the batch's note")


def test_the_login_name_is_kept_beside_the_name_typed_and_shown(study, write_batch, hopper_rows, capsys):
    login = op.login_name()
    rows = hopper_rows("2024", "Gull Flat", n=12, seed=13)
    rows[3]["wing"] = "45.1"                                         # out of range: one flag to resolve
    path = write_batch(rows, "day.csv")
    where = ["--study", str(study.root)]
    assert main(["import", str(path), *where, "--operator", "Ana Ruiz"]) == 0
    flag = next(f for f in study.store.flags() if f.field == "wing")
    assert main(["resolve", str(flag.id), "--keep", "--reason", "checked on the slip", "--operator", "Bo",
                 *where]) == 0
    study.store.set_heritability("wing", 0.3, None, "a breeding design", operator="Cy")
    capsys.readouterr()
    (batch,) = study.store.batches()
    assert (batch.operator, batch.login) == ("Ana Ruiz", login)
    assert study.store.flag(flag.id).resolved_login == login
    assert study.store.heritability_records()[0].login == login
    _, out, _ = _run(capsys, "batches", *where)
    assert f"day.csv (login {login})" in out
    _, out, _ = _run(capsys, "history", rows[3]["tag"], *where)
    assert f"by Ana Ruiz (login {login})" in out and f"by Bo (login {login})" in out
    _, out, _ = _run(capsys, "flags", "--all", *where)
    assert f"login {login}" in out


def test_without_a_typed_name_the_login_name_is_the_operator(study, write_batch, hopper_rows):
    study.store.import_file(write_batch(hopper_rows("2024", "Gull Flat", n=5, seed=14)))
    (batch,) = study.store.batches()
    assert batch.operator == batch.login == op.login_name() and batch.by == batch.operator


@pytest.mark.parametrize("blank", ["", "   ", "\t"])
def test_a_blank_operator_is_refused_by_the_store_and_nothing_is_stored(study, write_batch, hopper_rows, blank):
    with pytest.raises(RecordError, match="operator name is blank"):
        study.store.import_file(write_batch(hopper_rows("2024", "Gull Flat", n=5, seed=15)), operator=blank)
    assert study.store.batches() == []


def test_the_login_name_is_never_blank(monkeypatch):
    import os
    import pwd

    for var in ("LOGNAME", "USER", "LNAME", "USERNAME"):
        monkeypatch.setenv(var, "   ")                               # set, but to blanks
    assert op.login_name() == pwd.getpwuid(os.getuid()).pw_name
    monkeypatch.setattr(op.getpass, "getuser", lambda: (_ for _ in ()).throw(OSError("no login")))
    monkeypatch.setattr(pwd, "getpwuid", lambda uid: (_ for _ in ()).throw(KeyError(uid)))
    assert op.login_name() == f"uid {os.getuid()}"


async def test_the_dashboard_never_records_a_blank_operator(study, write_batch, hopper_rows, monkeypatch):
    import os
    import pwd

    for var in ("LOGNAME", "USER", "LNAME", "USERNAME"):
        monkeypatch.setenv(var, "  ")
    path = write_batch(hopper_rows("2024", "Reed Bend", n=5, seed=16), "blank-login.csv")
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await check_by_path(app, pilot, path)
        await pilot.press("i")
        await pilot.pause()
        await pilot.press("y")
        await wait_for(app, pilot, lambda: len(app.snapshot.batches) == 1, what="the batch")
    (batch,) = study.store.batches()
    assert batch.operator.strip() and batch.operator == pwd.getpwuid(os.getuid()).pw_name
