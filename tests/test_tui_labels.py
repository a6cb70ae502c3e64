"""What the Selection and Response figures are labelled with (Textual Pilot, 80x24): units from the
protocol, the opportunity for selection explained in help, the two sample sizes named, and missing
fitness counted without the dead (a dead animal has no later fitness component to lack)."""

from __future__ import annotations

import pytest

from fieldslope.tui.screens.dialogs import HelpScreen

from tests.test_tui_screens import make_app, ready, screen_text, wait_for


@pytest.fixture
def one_season(study, write_batch, hopper_rows):
    """2024 at two sites; dead beetles' clutch left blank, one live beetle's clutch blank, one tibia blank."""
    for k, site in enumerate(("Gull Flat", "Reed Bend")):
        rows = hopper_rows("2024", site, n=40, seed=k + 1)
        for r in rows:
            r["clutch"] = r["clutch"] if r["survived"] else ""
        if k == 0:
            alive = [r for r in rows if r["survived"]]
            alive[0]["clutch"] = ""          # truly missing: it lived, nobody counted its clutch
            rows[5]["tibia"] = ""            # one beetle without tibia: not in the regressions
        path = write_batch(rows, f"2024-{k}.csv")
        assert study.store.import_file(path, operator="test").outcome == "stored"
    return study


async def selection(app, pilot):
    await wait_for(app, pilot, lambda: ready(app))
    await pilot.press("3")
    await wait_for(app, pilot, lambda: app.screen.query_one("#sel-linear").row_count == 2)


def cells(table, key: str) -> list[str]:
    return [str(c) for c in table.get_row(key)]


async def test_differential_response_and_multi_trait_response_carry_the_trait_unit(one_season):
    app = make_app(one_season.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await selection(app, pilot)
        lin = app.screen.query_one("#sel-linear")
        labels = [str(c.label) for c in lin.columns.values()]
        assert labels[:3] == ["trait", "unit", "S"]
        assert cells(lin, "wing")[1] == "mm"              # the protocol's unit of forewing length
        await pilot.press("4")
        await pilot.pause()
        table = app.screen.query_one("#resp-table")
        labels = [str(c.label) for c in table.columns.values()]
        assert labels[1] == "unit" and "Δz̄=Gβ" in labels
        assert cells(table, "tibia")[1] == "mm"


async def test_help_explains_the_opportunity_for_selection(one_season):
    app = make_app(one_season.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await selection(app, pilot)
        await pilot.press("f1")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        text = str(app.screen.query_one("#help-keys").render())
        assert "I: opportunity for selection: the variance of relative fitness" in text
        assert "|S/σ| ≤ √I" in text      # Arnold & Wade 1984, Evolution 38:709-719


async def test_header_n_and_row_n_are_both_named_when_they_differ(one_season):
    app = make_app(one_season.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await selection(app, pilot)
        c = app.screen.choices
        assert (c.site, c.fitness) == ("all", "total")
        rows_n = {cells(app.screen.query_one("#sel-linear"), t)[-1] for t in ("wing", "tibia")}
        assert rows_n == {"78"}     # 80 beetles, one without tibia, one live one without clutch
        summary = str(app.screen.query_one("#sel-summary").render())
        assert summary.startswith("n 79 with fitness, 78 with every trait (rows)"), summary


async def test_missing_fitness_does_not_count_the_dead(one_season):
    app = make_app(one_season.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await selection(app, pilot)
        await pilot.press("w", "w", "t")          # total -> survived -> clutch, pooled -> Gull Flat
        await pilot.pause()
        c = app.screen.choices
        assert (c.fitness, c.site) == ("clutch", "Gull Flat")
        assert "missing fitness 1 " in screen_text(app)     # the live beetle nobody counted; not the dead


async def test_every_screens_key_bar_keeps_help_and_the_screen_keys_at_80_columns(one_season):
    app = make_app(one_season.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await selection(app, pilot)
        for key in "12345":
            await pilot.press(key)
            await pilot.pause(0.2)
            bar = "".join(s.text for s in app.screen._compositor.render_strips()[-1:])
            assert "F1 Help" in bar and "1-5" in bar and "^p palette" in bar, (key, bar)
