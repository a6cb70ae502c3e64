"""Screenshots of the main screens at 80x24, compared with accepted ones (pytest-textual-snapshot).

Kept deterministic: a fixed clock text, fixed study folders, point estimates
only (bootstrap 0), and screenshots taken only after every worker has
finished. Update after a deliberate change with
``pytest tests/test_tui_snapshots.py --snapshot-update`` and look at the SVGs.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

import pytest

from fieldslope.tui.app import FieldslopeApp

# a fixed folder (not $TMPDIR): the Intake screen shows the drop folder's path
BASE = Path("/tmp/fieldslope-snapshots") if os.name == "posix" else Path(tempfile.gettempdir()) / "fieldslope-snapshots"


@pytest.fixture
def snap_study(request, protocol_file, write_batch, hopper_rows):
    """A study in a fixed folder (named after the test): two seasons at two sites, one slip flagged."""
    from fieldslope.schemas.study import Study

    root = BASE / request.node.name.replace("[", "-").replace("]", "")
    shutil.rmtree(root, ignore_errors=True)
    root.parent.mkdir(parents=True, exist_ok=True)
    with Study.create(root, protocol_file) as study:
        for season, seed in (("2024", 1), ("2025", 2)):
            for k, site in enumerate(("Gull Flat", "Reed Bend")):
                rows = hopper_rows(season, site, n=40, seed=seed * 10 + k)
                if season == "2025" and k == 0:
                    rows[3]["tibia"] = "21.0"            # a decimal slip, flagged out of range
                study.store.import_file(write_batch(rows, f"{season}-{k}.csv"), operator="test")
    yield root
    shutil.rmtree(root, ignore_errors=True)


def app_for(root: Path | None, **kw) -> FieldslopeApp:
    kw.setdefault("bootstrap", 0)
    app = FieldslopeApp(root, clock=lambda: "12:00:00", poll_interval=0.05, seed=11, **kw)
    # no sliding tab underline: on a loaded machine a screenshot could catch it mid-way
    app.animation_level = "none"
    return app


def settled(*keys: str):
    """run_before: wait for the figures, press keys, wait for workers again."""

    async def run(pilot) -> None:
        app = pilot.app
        for _ in range(400):
            await pilot.pause(0.05)
            snap = app.snapshot
            if snap is not None and not app.updating:
                break
        await app.workers.wait_for_complete()
        for key in keys:
            await pilot.press(key)
            await pilot.pause(0.1)
            await app.workers.wait_for_complete()
        await pilot.pause(0.2)
        await app.workers.wait_for_complete()
        await pilot.pause()

    return run


async def _steady_cursor(pilot) -> None:
    # a blinking cursor is off half the time: on a loaded machine the screenshot could catch either phase
    for field in pilot.app.screen.query("Input"):
        field.cursor_blink = False
    await pilot.pause()


def test_start_screen(snap_compare):
    assert snap_compare(app_for(None), terminal_size=(80, 24), run_before=_steady_cursor)


def test_selection_table(snap_compare, snap_study):
    # point estimates only: bootstrap figures follow the estimators' resampling scheme, which may be
    # tuned; the intervals on screen are checked against the table in test_tui_screens.py
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled())


def test_selection_fitness_picture(snap_compare, snap_study):
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled("v"))


def test_selection_surface(snap_compare, snap_study):
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled("v", "v"))


def test_flags(snap_compare, snap_study):
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled("2"))


def test_response(snap_compare, snap_study):
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled("4"))


def test_seasons(snap_compare, snap_study):
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled("5"))


def test_help(snap_compare, snap_study):
    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=settled("3", "f1"))


@pytest.mark.skipif(os.name != "posix", reason="the screenshot holds the POSIX path of the drop folder")
def test_intake_after_a_check(snap_compare, snap_study, hopper_rows):
    rows = hopper_rows("2026", "Reed Bend", n=8, seed=5)
    rows[2]["site"] = "Nowhere Marsh"                    # one row with a site the protocol does not allow
    header = list(rows[0])
    (snap_study / "intake" / "day1.csv").write_text(
        "\n".join([",".join(header)] + [",".join(str(r[h]) for h in header) for r in rows]) + "\n")

    async def run(pilot) -> None:
        await settled("1")(pilot)
        screen = pilot.app.screen
        for _ in range(200):                             # the drop folder settles after two looks
            if screen.files and screen.files[0]["state"] == "new":
                break
            await pilot.pause(0.05)
        await pilot.press("c")
        for _ in range(200):
            if screen.checked is not None:
                break
            await pilot.pause(0.05)
        await settled()(pilot)

    assert snap_compare(app_for(snap_study), terminal_size=(80, 24), run_before=run)
