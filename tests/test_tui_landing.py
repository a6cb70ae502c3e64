"""Where the dashboard opens, and the notes of the view inside it (Textual Pilot, 80x24)."""

from __future__ import annotations

import pytest

from tests.test_tui_screens import make_app, ready, screen_text, wait_for


@pytest.fixture
def census_then_measures(study, write_batch, hopper_rows):
    """2024 with fitness at two sites; 2025 measured at both sites but with no census yet."""
    for k, site in enumerate(("Gull Flat", "Reed Bend")):
        census = hopper_rows("2024", site, n=40, seed=k + 1)
        for r in census:                 # a dead beetle has no clutch to count: left blank, as crews do
            r["clutch"] = r["clutch"] if r["survived"] else ""
        path = write_batch(census, f"2024-{k}.csv")
        assert study.store.import_file(path, operator="test").outcome == "stored"
        rows = [{key: r[key] for key in ("tag", "season", "site", "wing", "tibia")}
                for r in hopper_rows("2025", site, n=40, seed=k + 7)]
        path = write_batch(rows, f"2025-{k}.csv")
        assert study.store.import_file(path, operator="test").outcome == "stored"
    return study


async def test_a_new_study_opens_on_intake(study):
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        assert app.current_mode == "intake"


async def test_opens_on_the_latest_season_with_estimates_and_says_why_a_later_one_has_none(census_then_measures):
    app = make_app(census_then_measures.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        assert app.current_mode == "selection"          # a study with data opens on Selection
        await wait_for(app, pilot, lambda: app.screen.query_one("#sel-linear").row_count == 2)
        assert app.screen.choices.season == "2024"
        text = screen_text(app)
        assert "Season 2025 has no estimates yet: none of its 80 individuals has total recorded" in text
        await pilot.press("4")            # the Response screen says it too
        await pilot.pause()
        assert "Season 2025 has no estimates yet" in screen_text(app)


async def test_n_lists_every_note_of_the_view_in_a_scrollable_dialog(census_then_measures):
    from fieldslope.tui.screens.notes import NotesScreen

    app = make_app(census_then_measures.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("3")
        await wait_for(app, pilot, lambda: app.screen.query_one("#sel-linear").row_count == 2)
        snap, c = app.snapshot, app.screen.choices
        await pilot.press("w", "w", "t")          # total -> survived -> clutch, pooled -> Gull Flat
        await pilot.pause()
        assert (c.fitness, c.site) == ("clutch", "Gull Flat")
        cell = snap.notes_for(c.season, c.site, c.fitness)
        assert cell                                # the estimators had something to say about this cell
        await pilot.press("n")
        await pilot.pause()
        dialog = app.screen
        assert isinstance(dialog, NotesScreen)
        for note in cell:
            assert note in dialog.notes
        assert "Season 2025 has no estimates yet" in dialog.notes[0]
        await pilot.press("escape")
        await pilot.press("4")
        await pilot.pause()
        await pilot.press("n")                     # the Response screen: its h² notes and the pedigree line
        await pilot.pause()
        assert isinstance(app.screen, NotesScreen)
        assert any("heritability" in n.lower() for n in app.screen.notes), app.screen.notes
        await pilot.press("n")                     # n closes it again
        await pilot.pause()
        assert not isinstance(app.screen, NotesScreen)
