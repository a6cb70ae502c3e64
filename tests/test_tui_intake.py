"""Intake: a file opened by path while the drop folder is empty, and the batches already taken in."""

from __future__ import annotations

from tests.test_tui_screens import filled, make_app, ready, screen_text, wait_for  # noqa: F401 (fixture)


async def check_by_path(app, pilot, path) -> None:
    """Once the figures are in: Intake, open ``path`` by its path (/), and wait for its check."""
    await wait_for(app, pilot, lambda: ready(app))
    await pilot.press("1", "slash")
    app.screen.query_one("#intake-path").value = str(path)
    await pilot.press("enter")
    await wait_for(app, pilot, lambda: app.screen.checked is not None, what="the check")


async def test_a_file_opened_by_path_keeps_its_result_when_the_empty_folder_is_looked_at_again(
        filled, write_batch, hopper_rows):
    path = write_batch(hopper_rows("2025", "Reed Bend", n=5, seed=7, start=500), "by-path.csv")
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await check_by_path(app, pilot, path)
        for _ in range(2):                          # the drop folder is looked at again (every 1.5 s)
            app.screen.action_rescan()
            await app.workers.wait_for_complete()
            await pilot.pause()
        text = screen_text(app)
        assert "by-path.csv: 5 rows, no errors, 0 flags" in text
        assert "The drop folder is empty: copy batch files into it, or press / to open a file by path." in text


async def test_intake_lists_the_batches_taken_in(filled):
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("1")
        await pilot.pause()
        await pilot.press("b")
        await pilot.pause()
        table = app.screen.query_one("#intake-batches")
        rows = [[str(c) for c in table.get_row_at(i)] for i in range(table.row_count)]
        # newest first; each as the store recorded it (fixture: four files of 40 rows, operator "test")
        assert [r[0] for r in rows] == ["4", "3", "2", "1"]
        assert all(r[2:5] == ["stored", "40/40", "test"] for r in rows)
        assert [r[5] for r in rows] == ["2025-1.csv", "2025-0.csv", "2024-1.csv", "2024-0.csv"]
        assert "2024-0.csv" in screen_text(app)


async def test_a_file_taken_in_before_names_its_batch_once(filled, tmp_path):
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await check_by_path(app, pilot, tmp_path / "batches" / "2024-1.csv")
        assert "2024-1.csv: already taken in as batch 2; nothing to do." in screen_text(app)


async def test_the_status_line_counts_one_batch_in_the_singular(study, write_batch, hopper_rows):
    rows = hopper_rows("2024", "Gull Flat", n=12, seed=3)
    rows[4]["wing"] = "45"                               # one value outside 3-6 mm
    assert study.store.import_file(write_batch(rows), operator="test").outcome == "stored"
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        assert "│ 1 batch │ 2 flags │" in screen_text(app)   # the slip is out of range and an outlier
