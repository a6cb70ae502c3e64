"""The Flags screen's decisions driven by keys (Textual Pilot, 80x24): the duplicate-ID dialog (which copy
it acts on, the copies side by side, keep / exclude / move to the right ID), the resolved view's decision
column, and deciding a flag again only after a confirm step."""

from __future__ import annotations

import pytest
from textual.widgets import DataTable

from tests.test_tui_screens import make_app, ready, screen_text, wait_for

# H01 entered twice with different forewing lengths, among plausible rows (invented)
DUPLICATE = ("tag,season,site,wing,tibia\nH01,2024,Gull Flat,4.5,1.5\nH01,2024,Gull Flat,4.9,1.5\n"
             + "".join(f"H{i:02d},2024,Gull Flat,{4.2 + 0.05 * i:.2f},1.6\n" for i in range(2, 12)))


@pytest.fixture
def duplicated(study, write_batch):
    study.store.import_file(write_batch(DUPLICATE, "dup.csv"), operator="test")
    first, second = [f for f in study.store.flags() if f.kind == "duplicate_id"]
    assert (first.row, second.row) == (2, 3)
    return study, first, second


async def _open_flags_on(app, pilot, flag_id: int) -> None:
    await wait_for(app, pilot, lambda: ready(app))
    await pilot.press("2")
    await pilot.pause()
    position = [f.id for f in app.screen.rows].index(flag_id)
    app.screen.query_one("#flags-table", DataTable).move_cursor(row=position)
    await pilot.pause()


async def _dialog(app, pilot, key: str) -> str:
    await pilot.press(key)
    await wait_for(app, pilot, lambda: "reading the copies" not in screen_text(app) and "row 2" in screen_text(app),
                   what="the copies")
    return screen_text(app)


async def test_the_duplicate_dialog_shows_the_copies_and_keeps_the_one_it_names(duplicated):
    study, first, second = duplicated
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await _open_flags_on(app, pilot, second.id)
        assert "row 2" in screen_text(app) and "row 3" in screen_text(app)   # the copies tell apart in the list
        text = await _dialog(app, pilot, "k")
        assert "Keep sheet row 3: ID H01 in 2024" in text
        assert "row 2 row 3 (this)" in text                                # side by side, this copy marked
        assert "≠ wing 4.5 4.9" in text and "tibia 1.5 1.5" in text        # where they differ, marked
        assert "the other copy (row 2) is left out of the estimates" in app.screen.text   # (wrapped on screen)
        app.screen.query_one("#form-reason").value = "second card is the re-measure"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: not any(f.kind == "duplicate_id" and f.is_open for f in app.snapshot.flags),
                       what="both copies decided")
    assert study.store.flag(second.id).status == "keep"
    assert study.store.flag(first.id).status == "exclude"
    assert study.store.effective_frame().set_index("tag").at["H01", "wing"] == 4.9


async def test_the_duplicate_dialog_moves_a_copy_to_its_right_id(duplicated):
    study, first, second = duplicated
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await _open_flags_on(app, pilot, second.id)
        text = await _dialog(app, pilot, "c")
        assert "Right ID for row 3" in text and "the row moves to that ID" in app.screen.text
        app.screen.query_one("#form-value").value = "H12"
        app.screen.query_one("#form-reason").value = "tag H12 on the card"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: not any(f.kind == "duplicate_id" and f.is_open for f in app.snapshot.flags),
                       what="the move")
        frame = app.snapshot.frame.set_index("tag")
        assert frame.at["H12", "wing"] == 4.9 and frame.at["H01", "wing"] == 4.5
        await pilot.press("h")                                             # the resolved view
        await pilot.pause()
        table = app.screen.query_one("#flags-table", DataTable)
        assert [str(c.label) for c in table.columns.values()][-1] == "decision"
        text = screen_text(app)
        assert "moved to H12" in text and "kept" in text


async def test_a_decided_flag_is_decided_again_only_after_a_confirm_step(duplicated):
    study, first, second = duplicated
    study.store.resolve_flag(first.id, "keep", reason="first card", operator="ana")
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2", "h")
        await pilot.pause()
        position = [f.id for f in app.screen.rows].index(first.id)
        app.screen.query_one("#flags-table", DataTable).move_cursor(row=position)
        await pilot.pause()
        assert "kept" in screen_text(app) and "left out" in screen_text(app)   # the decision column
        await pilot.press("e")
        await pilot.pause()
        assert f"Decide flag {first.id} again?" in screen_text(app) and "first card" in screen_text(app)
        await pilot.press("n")                                             # no: nothing changes
        await pilot.pause()
        assert study.store.flag(first.id).status == "keep"
        await pilot.press("e")
        await pilot.pause()
        await pilot.press("y")
        await wait_for(app, pilot, lambda: "row 2" in screen_text(app) and "Reason" in screen_text(app),
                       what="the form")
        app.screen.query_one("#form-reason").value = "both cards were wrong"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: any(f.id == first.id and f.status == "exclude" for f in app.snapshot.flags),
                       what="the second decision")
    events = [e.detail for e in study.store.history_events("H01")]
    assert any("first card" in str(d) for d in events) and any("both cards were wrong" in str(d) for d in events)
