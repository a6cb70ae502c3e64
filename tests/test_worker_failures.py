"""No silent failure: a worker that fails on any screen becomes one visible sentence, and a form whose
values the store refuses stays open with what was typed and says what is wrong."""

from __future__ import annotations

import pytest

from test_tui_screens import make_app, ready, screen_text, wait_for


def _notifications(app) -> list[str]:
    return [n.message for n in app._notifications]


async def test_a_refused_correction_keeps_the_form_open_with_the_typed_value(study, write_batch, hopper_rows):
    rows = hopper_rows("2025", "Reed Bend", n=20, seed=4)
    rows[2]["site"] = "Nowhere Marsh"                    # not an allowed site: the row is quarantined
    result = study.store.import_file(write_batch(rows, "q.csv"), operator="test", accept_valid=True)
    assert result.n_quarantined == 1
    flag = next(f for f in study.store.flags() if f.kind == "quarantined" or f.field == "site")
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2")
        await pilot.pause()
        screen = app.screen
        screen.query_one("#flags-table").move_cursor(row=[r.id for r in screen.rows].index(flag.id))
        await pilot.press("c")
        await pilot.pause()
        form = app.screen
        form.query_one("#form-value").value = "Birch Sadle"       # a typo: still not an allowed site
        form.query_one("#form-reason").value = "site written out in full"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: not form.busy, what="the store's answer")
        assert app.screen is form                                # still open …
        assert form.query_one("#form-value").value == "Birch Sadle"  # … with what was typed
        said = str(form.query_one("#form-message").render())
        assert "Birch Sadle" in said, said                       # … and says what is wrong
        assert any(f.id == flag.id and f.status == "open" for f in study.store.flags())
        form.query_one("#form-value").value = "Reed Bend"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: app.screen is screen, what="the form closed")
        resolved = next(f for f in study.store.flags(include_resolved=True) if f.id == flag.id)
        assert resolved.status == "set" and resolved.new_value == "Reed Bend"


async def test_an_h2_that_is_not_a_number_keeps_the_form_open(study, write_batch, hopper_rows):
    study.store.import_file(write_batch(hopper_rows("2025", "Reed Bend", n=20, seed=4), "a.csv"), operator="t")
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("4")
        await pilot.pause()
        await pilot.press("h")
        await pilot.pause()
        form = app.screen
        form.query_one("#form-value").value = "0,35 maybe"
        form.query_one("#form-source").value = "a study of a related population"
        await pilot.press("ctrl+s")
        await pilot.pause()
        assert app.screen is form and "must be numbers" in str(form.query_one("#form-message").render())
        assert form.query_one("#form-value").value == "0,35 maybe"


@pytest.mark.parametrize("key, target, group", [
    ("1", "list_intake", "intake-list"),
    ("5", "batch_trend", "seasons-trend"),
])
async def test_a_screen_worker_that_fails_is_one_visible_sentence(study, write_batch, hopper_rows, monkeypatch,
                                                                   key, target, group):
    from fieldslope.tui import loading

    study.store.import_file(write_batch(hopper_rows("2025", "Reed Bend", n=30, seed=4), "a.csv"), operator="t")

    def broken(*args, **kwargs):
        raise RuntimeError("disk went away")

    monkeypatch.setattr(loading, target, broken)
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press(key)
        await wait_for(app, pilot, lambda: any("disk went away" in m for m in _notifications(app)),
                       what=f"the {group} failure shown")
        sentence = next(m for m in _notifications(app) if "disk went away" in m)
        assert sentence.endswith("Please report it.") and "\n" not in sentence
        assert app.is_running


async def test_creating_a_study_that_fails_says_why_on_the_start_screen(tmp_path):
    app = make_app(None)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        app.screen.query_one("#start-protocol").value = str(tmp_path / "no-such-protocol.toml")
        app.screen.query_one("#start-dir").value = str(tmp_path / "new-study")
        await pilot.press("ctrl+n")
        await wait_for(app, pilot, lambda: "no-such-protocol.toml" in str(
            app.screen.query_one("#start-message").render()), what="the sentence")
        assert not (tmp_path / "new-study" / "protocol.toml").exists()
        assert "Traceback" not in screen_text(app)
