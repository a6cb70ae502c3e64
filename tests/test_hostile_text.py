"""Text from data, file names and people is shown literally: never markup, an action or a control code.

The hostile strings below are the kinds an attack on the first version used: markup that crashed the
dashboard (``[/]``), an action link (``[@click=app.quit]``), terminal control sequences (clear screen,
recolour, OSC 52 which writes the clipboard), a C1 control, DEL and a right-to-left override.
"""

from __future__ import annotations

import csv
import json

import pytest

from fieldslope.tui.cli import main
from fieldslope.tui.safe_text import escape_controls, has_raw_controls

from test_tui_screens import make_app, ready, screen_text, wait_for

HOSTILE = ["[/]", "[@click=app.quit]Q", "\x1b[2J\x1b[31mRED", "\x1b]52;c;aGVsbG8=\x07", "\u202eevil",
           "A\x85B", "x\x7fy", "[b]bold[/b]", "two\nlines"]

PROTOCOL = """\
[study]
name = "Saltbush hoppers"
id = "tag"
season = "season"
groups = ["site"]

[traits.wing]
unit = "mm"
min = 3.0
max = 6.0

[traits.tibia]
unit = "mm"
min = 1.0
max = 2.5

[fitness.survived]
kind = "binary"
"""


def hostile_sheet(path, n: int = 30) -> None:
    """Invented hoppers; the first rows have hostile IDs (flagged: wing out of range), hostile sites, and an
    observer column holding ``[/]``."""
    import numpy as np

    rng = np.random.default_rng(5)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["tag", "season", "site", "wing", "tibia", "survived", "observer"])
        for i in range(n):
            tag = HOSTILE[i] if i < len(HOSTILE) else f"H{i:02d}"
            site = HOSTILE[(i + 3) % len(HOSTILE)] if i % 2 else "Gull [/] Flat"
            wing = "45.1" if i < len(HOSTILE) else f"{rng.normal(4.5, 0.4):.2f}"
            w.writerow([tag, "2024", site, wing, f"{rng.normal(1.7, 0.1):.2f}", int(rng.random() < 0.5),
                        "A. Smith [/]"])


@pytest.fixture
def hostile_study(tmp_path):
    from fieldslope.schemas.study import Study

    proto = tmp_path / "proto.toml"
    proto.write_text(PROTOCOL, encoding="utf-8")
    study = Study.create(tmp_path / "study", proto)
    sheet = tmp_path / "hostile.csv"
    hostile_sheet(sheet)
    assert study.store.import_file(sheet, operator="\x1b[2Jcrew [/]").outcome == "stored"
    yield study
    study.close()


def test_escape_controls_shows_every_control_visibly_and_keeps_the_rest():
    assert escape_controls("a\x1b[2Jb") == "a\\x1b[2Jb"
    assert escape_controls("\x00\t\n\r\x7f") == "\\x00\\x09\\x0a\\x0d\\x7f"
    assert escape_controls("\x85\x9b") == "\\x85\\x9b"                       # C1, including CSI
    assert escape_controls("\u202eabc\u2066\u200f") == "\\u202eabc\\u2066\\u200f"  # bidi overrides
    assert escape_controls("line\nbreak", keep_newlines=True) == "line\nbreak"
    assert escape_controls("[/] é ü 測 \\x1b") == "[/] é ü 測 \\x1b"          # text and backslashes as they are
    assert escape_controls(None) == "" and escape_controls(float("nan")) == "" and escape_controls(3) == "3"
    for text in HOSTILE:
        assert not has_raw_controls(escape_controls(text), allow_newlines=False)


def _run(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_terminal_output_escapes_controls_and_csv_json_keep_the_stored_value(hostile_study, capsys):
    root = str(hostile_study.root)
    flag = next(f for f in hostile_study.store.flags() if f.individual == "\x1b[2J\x1b[31mRED")
    code, out, err = _run(capsys, "--study", root, "resolve", str(flag.id), "--keep", "--reason",
                          "\x1b]52;c;aGk=\x07 checked [/]", "--operator", "\u202eop")
    assert code == 0 and not has_raw_controls(out + err)
    for args in (("flags",), ("flags", "--all"), ("history", "\x1b[2J\x1b[31mRED"),
                 ("estimate", "--bootstrap", "0")):
        code, out, err = _run(capsys, "--study", root, *args)
        assert code == 0, err
        assert not has_raw_controls(out + err), (args, out)
    code, out, _ = _run(capsys, "--study", root, "flags", "--all")
    assert "\\x1b[2J\\x1b[31mRED" in out and "\\x1b]52;c;aGk=\\x07 checked [/]" in out
    assert "\\u202eop" in out
    code, out, _ = _run(capsys, "--study", root, "history", "\x1b[2J\x1b[31mRED")
    assert out.startswith("\\x1b[2J\\x1b[31mRED: ")
    code, out, _ = _run(capsys, "--study", root, "history", "two\nlines")
    assert code == 0 and out.startswith("two\\x0alines: ")
    # a site name in the estimates table, and in JSON/CSV exactly as stored
    code, out, _ = _run(capsys, "--study", root, "estimate", "--bootstrap", "0", "--format", "table")
    assert "site \\x1b]52;c;aGVsbG8=\\x07" in out or "Gull [/] Flat" in out
    code, out, _ = _run(capsys, "--study", root, "estimate", "--bootstrap", "0", "--format", "json")
    sites = {row["site"] for row in json.loads(out)}
    assert "Gull [/] Flat" in sites
    # an unknown ID named in the one-line error, escaped; a file name with a newline stays one line
    code, _, err = _run(capsys, "--study", root, "history", "\x1b[2Jnobody")
    assert code == 1 and "\\x1b[2Jnobody" in err and not has_raw_controls(err)
    code, _, err = _run(capsys, "--study", root, "import", "no\nsuch\x1b[2J.csv")
    assert code == 1 and len(err.strip().splitlines()) == 1 and not has_raw_controls(err), err


def _no_raw_controls_on_screen(app) -> None:
    for strip in app.screen._compositor.render_strips():
        assert not has_raw_controls(strip.text, allow_newlines=False), repr(strip.text)


async def test_hostile_ids_and_cells_leave_every_screen_running(hostile_study):
    """An ID ``[/]`` on a flagged row crashed Flags; a cell ``A. Smith [/]`` crashed the Intake check; a
    file named ``[@click=app.quit]q.csv`` showed as ``q.csv`` and quit on a click."""
    name = "[@click=app.quit]q.csv"
    hostile_sheet(hostile_study.intake_dir / name, n=12)
    app = make_app(hostile_study.root)
    async with app.run_test(size=(100, 30)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2")
        await pilot.pause()
        screen = app.screen
        assert screen.rows
        text = screen_text(app)
        assert "[/]" in text and "\\x1b[2J" in text
        _no_raw_controls_on_screen(app)
        for _ in range(len(HOSTILE) * 2):             # the detail panel of every hostile row
            await pilot.press("down")
        await pilot.pause()
        _no_raw_controls_on_screen(app)
        await pilot.press("e")                        # the form names the ID literally
        await pilot.pause()
        assert "Exclude:" in screen_text(app)
        _no_raw_controls_on_screen(app)
        await pilot.press("escape")
        await pilot.press("1")
        await wait_for(app, pilot, lambda: any(f["name"] == name and f["state"] == "new" for f in app.screen.files),
                       what="listed")
        intake = app.screen
        assert name in screen_text(app)
        table = intake.query_one("#intake-files")
        row = [f["name"] for f in intake.files].index(name)
        region = table.region
        await pilot.click(table, offset=(3, row + 1))   # clicking the name does not quit the app
        await pilot.pause()
        assert app.is_running and region.width > 0
        table.move_cursor(row=row)
        await pilot.press("c")
        await wait_for(app, pilot, lambda: intake.checked is not None, what="the check")
        assert "A. Smith [/]" in [str(c) for c in intake.query_one("#intake-sheet").get_row_at(0)]
        await pilot.click("#intake-tabs Tab#--content-tab-intake-preview")
        await pilot.pause()
        assert "A. Smith [/]" in screen_text(app)
        _no_raw_controls_on_screen(app)
        for key in ("3", "4", "5"):
            await pilot.press(key)
            await pilot.pause()
            for _ in range(3):
                await pilot.press("t")                # every site in the choices line
                await pilot.pause()
                _no_raw_controls_on_screen(app)
        app.notify("[/] \x1b[2J[@click=app.quit]x")   # notifications are plain text too
        await pilot.pause()
        assert app.is_running


def test_site_names_with_superscript_or_other_script_digits_sort_without_a_crash():
    """A site named '¹' or 'Plot ²' (digits to str.isdigit, not decimals to int) sorts as text; numbers in
    names still sort by value ('2' before '10'), in any script's decimal digits."""
    from fieldslope.analysis.cells import natural_key

    names = ["Plot 10", "¹", "Plot 2", "Plot ²", "Plot ٣"]
    assert sorted(names, key=natural_key) == ["Plot 2", "Plot ٣", "Plot 10", "Plot ²", "¹"]
