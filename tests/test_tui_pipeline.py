"""The dashboard's reactive state and its refresh pipeline (Textual Pilot, 80x24).

The status line and the screens follow the app's reactive attributes (nobody calls them); progress
messages replace each other (the latest percentage wins); the intervals arrive in stages, and the
first stage's numbers are those of a run with that many resamples (the estimators themselves are
checked against outside references in the analysis tests).
"""

from __future__ import annotations

from contextlib import asynccontextmanager

import numpy as np
import pytest

from fieldslope.common.names import Q
from fieldslope.tui.app import FieldslopeApp
from fieldslope.tui.messages import IntervalsProgress
from fieldslope.tui.pipeline import interval_stages
from fieldslope.tui.widgets.pictures import fmt

from test_tui_screens import wait_for


@pytest.fixture
def two_sites(study, write_batch, hopper_rows):
    for k, site in enumerate(("Gull Flat", "Reed Bend")):
        path = write_batch(hopper_rows("2024", site, n=40, seed=k + 1), f"2024-{k}.csv")
        assert study.store.import_file(path, operator="test").outcome == "stored"
    return study


def make_app(root, **kw) -> FieldslopeApp:
    kw.setdefault("bootstrap", 0)
    kw.setdefault("poll_interval", 0.05)
    kw.setdefault("clock", lambda: "12:00:00")
    return FieldslopeApp(root, **kw)


@asynccontextmanager
async def shown(root, **kw):
    """The dashboard on ``root`` at 80x24, once its first figures are on screen: (app, pilot)."""
    app = make_app(root, **kw)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: app.snapshot is not None and not app.updating, what="figures")
        yield app, pilot


def status_text(app) -> str:
    from fieldslope.tui.widgets.status import StatusLine

    return str(app.screen.query_one(StatusLine).render())


async def test_status_line_follows_the_reactive_state(two_sites):
    async with shown(two_sites.root) as (app, pilot):
        assert "2 batches" in status_text(app)
        app.pipeline.stop.set()            # no more polls: only what the test sets changes the state
        await app.workers.wait_for_complete()
        app.note = "a note from the field"
        await pilot.pause()
        assert "a note from the field" in status_text(app)
        app.locked = True
        await pilot.pause()
        assert "read-only: store in use elsewhere" in status_text(app)
        app.locked = False
        app.readonly = True
        await pilot.pause()
        assert "read-only" in status_text(app) and "in use elsewhere" not in status_text(app)
        app.error = "The store is gone [bold]really[/]."        # shown literally, never as markup
        await pilot.pause()
        assert status_text(app).startswith("! The store is gone [bold]really[/].")
        app.error = ""
        await pilot.pause()
        assert "2 batches" in status_text(app)


async def test_progress_messages_replace_each_other_and_the_latest_percentage_is_shown(two_sites):
    async with shown(two_sites.root) as (app, pilot):
        seen: list[str] = []
        app.watch(app, "progress", lambda new: seen.append(new), init=False)
        gen = app.pipeline.generation
        for done in (10, 20, 70):                       # posted in a burst, as a fast worker does
            app.post_message(IntervalsProgress(done, 100, gen))
        await pilot.pause()
        assert seen == ["intervals 70%"]                # the two older ones were superseded in the queue
        assert "intervals 70%" in status_text(app)
        app.post_message(IntervalsProgress(5, 100, gen - 1))   # from an older snapshot: ignored
        await pilot.pause()
        assert "intervals 70%" in status_text(app)


async def test_a_screen_redraws_when_the_snapshot_changes(two_sites):
    async with shown(two_sites.root) as (app, pilot):
        await pilot.press("3")
        await wait_for(app, pilot, lambda: app.screen.query_one("#sel-linear").row_count == 2)
        snap = app.snapshot
        t = snap.table.copy()
        c = app.screen.choices                          # the season, site and fitness in view
        row = ((t["season"] == c.season) & (t["site"] == c.site) & (t["fitness"] == c.fitness)
               & (t["quantity"] == Q.GRADIENT))
        assert row.sum() == 2
        t.loc[row, "estimate"] = [0.4321, -0.8765]      # not numbers any estimator gave
        traits = list(t.loc[row, "term"])
        app.snapshot = snap.with_(table=t, generation=snap.generation + 1)
        await pilot.pause()

        def beta_shown() -> list[str]:
            table = app.screen.query_one("#sel-linear")
            return [str(table.get_row(trait)[4]) for trait in traits]

        assert beta_shown() == [fmt(0.4321), fmt(-0.8765)]     # the screen redrew itself; nobody called it
        await pilot.press("2")                          # a screen out of view catches up when shown again
        t.loc[row, "estimate"] = [0.1234, -0.5678]
        app.snapshot = snap.with_(table=t.copy(), generation=snap.generation + 2)
        await pilot.pause()
        await pilot.press("3")
        await pilot.pause()
        assert beta_shown() == [fmt(0.1234), fmt(-0.5678)]


def test_interval_stages():
    assert interval_stages(0) == ()
    assert interval_stages(500) == (500,)
    assert interval_stages(2000) == (200, 2000)


async def test_intervals_arrive_in_stages_with_the_numbers_of_each_stage(two_sites):
    from fieldslope.tui.bridge import estimates_for_frame

    app = make_app(two_sites.root, bootstrap=1000, seed=7)
    shown: list = []
    async with app.run_test(size=(80, 24)) as pilot:
        app.watch(app, "snapshot", lambda s: shown.append(s), init=False)
        await wait_for(app, pilot, lambda: app.snapshot is not None and app.snapshot.resamples == 1000,
                       timeout=60, what="the intervals")
        assert [s.resamples for s in shown] == [0, 200, 1000]
        assert not app.progress and not app.updating and "intervals" not in status_text(app)
    key = ["season", "site", "fitness", "quantity", "term"]
    for snap in shown[1:]:       # each stage: the numbers of a run with that many resamples and permutations
        ref = estimates_for_frame(snap.frame, snap.protocol, bootstrap=snap.resamples, seed=7, h2=snap.h2).table
        both = snap.table.merge(ref, on=key, suffixes=("", "_ref"), validate="one_to_one")
        assert len(both) == len(ref) == len(snap.table)
        for col in ("estimate", "ci_low", "ci_high", "p_value"):
            a, b = both[col].to_numpy(float), both[f"{col}_ref"].to_numpy(float)
            assert np.array_equal(np.isnan(a), np.isnan(b)) and np.allclose(a, b, rtol=0, atol=0, equal_nan=True), col
    assert np.isfinite(shown[1].table["ci_low"]).any()


async def test_each_screens_status_line_names_that_screen(two_sites):
    # every screen's status line follows the app's state, but names its own screen, not the one in view
    async with shown(two_sites.root) as (app, pilot):
        for key in "12345":
            await pilot.press(key)
        await pilot.press("1")
        await pilot.pause()
        app.note = "a note typed while Intake is in view"
        await pilot.pause()
        for key, title in (("2", "Flags"), ("4", "Response"), ("1", "Intake"), ("5", "Seasons"),
                           ("3", "Selection")):
            await pilot.press(key)
            await pilot.pause()
            assert status_text(app).startswith(title), (key, status_text(app))
