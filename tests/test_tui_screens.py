"""The dashboard driven by keys (Textual Pilot), at 80x24 and at a larger size.

Every number checked on screen is compared with the estimates table the
estimators produce for the same stored data (the estimators themselves are
checked against outside references in the analysis tests).
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest
from textual.worker import WorkerCancelled

from fieldslope.tui.app import FieldslopeApp
from fieldslope.tui.widgets.pictures import fmt

SIZES = [(80, 24), (120, 40)]


def screen_text(app) -> str:
    """What the terminal shows now, as plain text with runs of blanks and line ends made one space
    (so a sentence wrapped over two lines still reads as one)."""
    lines = [strip.text for strip in app.screen._compositor.render_strips()]
    return " ".join(" ".join(lines).split())


async def wait_for(app, pilot, cond, timeout: float = 20.0, what: str = "") -> None:
    start = time.monotonic()
    while time.monotonic() - start < timeout:
        await pilot.pause(0.05)
        if cond():
            try:
                await app.workers.wait_for_complete()
            except WorkerCancelled:   # an exclusive worker (the drop-folder rescan) replaced by a newer one
                await app.workers.wait_for_complete()
            await pilot.pause()
            return
    raise AssertionError(f"timed out waiting for {what or cond}; screen:\n{screen_text(app)}")


def make_app(study_dir: Path, **kw) -> FieldslopeApp:
    kw.setdefault("bootstrap", 0)
    kw.setdefault("poll_interval", 0.05)
    kw.setdefault("clock", lambda: "12:00:00")
    return FieldslopeApp(study_dir, **kw)


@pytest.fixture
def filled(study, write_batch, hopper_rows):
    """The study with two seasons at two sites stored."""
    for season, seed in (("2024", 1), ("2025", 2)):
        for k, site in enumerate(("Gull Flat", "Reed Bend")):
            path = write_batch(hopper_rows(season, site, n=40, seed=seed * 10 + k), f"{season}-{k}.csv")
            assert study.store.import_file(path, operator="test").outcome == "stored"
    return study


def ready(app) -> bool:
    return app.snapshot is not None and not app.updating


@pytest.mark.parametrize("size", SIZES)
async def test_start_screen_creates_a_study(tmp_path, protocol_file, size):
    app = make_app(None)
    async with app.run_test(size=size) as pilot:
        await pilot.pause()
        assert "No study is open" in screen_text(app)
        app.screen.query_one("#start-protocol").value = str(protocol_file)
        app.screen.query_one("#start-dir").value = str(tmp_path / "new-study")
        await pilot.press("ctrl+n")                     # keyboard only
        await wait_for(app, pilot, lambda: app.study_ready and app.snapshot is not None, what="the new study")
        assert (tmp_path / "new-study" / "protocol.toml").is_file()
        assert app.current_mode == "intake"           # a new study opens where its data come in
        await pilot.press("3")
        await pilot.pause()
        assert "No estimates yet" in screen_text(app)


async def test_start_screen_names_a_folder_without_study(tmp_path):
    app = make_app(None)
    async with app.run_test(size=(80, 24)) as pilot:
        app.screen.query_one("#start-dir").value = str(tmp_path)
        await pilot.click("#start-open-btn")
        await pilot.pause()
        assert "holds no protocol.toml" in screen_text(app)
        assert not app.study_ready


async def test_a_damaged_store_is_one_clear_message(tmp_path, protocol_file):
    from fieldslope.schemas.study import Study

    Study.create(tmp_path / "s", protocol_file).close()
    (tmp_path / "s" / "fieldslope.sqlite").write_bytes(b"this is not a database" * 100)
    app = make_app(tmp_path / "s")
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: bool(app.error), what="an error")
        assert "Traceback" not in screen_text(app)
        assert "!" in screen_text(app)                 # the status line shows the one sentence
        assert not app.study_ready
        await pilot.press("f1")                        # still usable: the key list opens
        await pilot.pause()
        assert "Keys" in screen_text(app)


async def test_a_store_damaged_by_a_crash_is_browsed_read_only(tmp_path, protocol_file):
    import subprocess
    import sys

    from fieldslope.schemas.study import Study

    with Study.create(tmp_path / "s", protocol_file) as study:
        study.store.import_bytes("b1.csv", b"tag,season,site,wing,tibia,survived,clutch\n"
                                           b"H01,2024,Gull Flat,4.5,1.5,1,3\nH02,2024,Gull Flat,4.6,1.6,0,0\n")
    # another process leaves a flag pointing to a missing batch and dies without closing
    code = ("import os, sqlite3, sys\nc = sqlite3.connect(sys.argv[1], isolation_level=None)\n"
            "c.execute('PRAGMA journal_mode = WAL')\n"
            "c.execute(\"INSERT INTO flags(kind, individual, season, message, batch_id, created) "
            "VALUES ('outlier', 'H09', '2024', 'x', 999, 't')\")\nos._exit(0)\n")
    subprocess.run([sys.executable, "-c", code, str(tmp_path / "s" / "fieldslope.sqlite")], check=True)
    app = make_app(tmp_path / "s")
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: app.study_ready and app.snapshot is not None, what="figures")
        assert app.readonly and "damaged" in app.write_refusal()
        assert "in use by another program" not in app.write_refusal()
        assert "read-only" in screen_text(app)
        await pilot.press("2")                         # browsing still works
        await pilot.pause()
        assert app.current_mode == "flags"


@pytest.mark.parametrize("size", SIZES)
async def test_selection_table_matches_the_estimates_and_switches(filled, size):
    app = make_app(filled.root)
    async with app.run_test(size=size) as pilot:
        await wait_for(app, pilot, lambda: ready(app), what="first figures")
        screen = app.screen
        assert app.current_mode == "selection"
        snap = app.snapshot
        c = screen.choices
        assert (c.season, c.site, c.fitness) == ("2025", "all", "total")

        def shown_beta(trait: str) -> str:
            row = screen.query_one("#sel-linear").get_row(trait)
            return str(row[4])

        def table_beta(season, site, fitness, trait) -> str:
            return fmt(snap.value(season, site, fitness, "gradient", trait)["estimate"])

        assert shown_beta("wing") == table_beta("2025", "all", "total", "wing")
        await pilot.press("s")                         # next season wraps to 2024
        await pilot.pause()
        assert c.season == "2024" and shown_beta("tibia") == table_beta("2024", "all", "total", "tibia")
        await pilot.press("S")                         # and back
        await pilot.pause()
        assert c.season == "2025"
        await pilot.press("s")
        await pilot.pause()
        await pilot.press("t")                         # pooled -> first site
        await pilot.pause()
        assert c.site == "Gull Flat" and shown_beta("wing") == table_beta("2024", "Gull Flat", "total", "wing")
        await pilot.press("w")                         # total -> survived
        await pilot.pause()
        assert c.fitness == "survived"
        assert shown_beta("wing") == table_beta("2024", "Gull Flat", "survived", "wing")
        text = screen_text(app)
        assert "Season 2024" in text and "Site Gull Flat" in text and "Fitness survived" in text
        # n and I in the summary line come from the table too
        opp = snap.value("2024", "Gull Flat", "survived", "opportunity", "")
        assert f"I {fmt(opp['estimate'])}" in text and f"n {int(opp['n'])}" in text
        await pilot.press("v")
        await pilot.pause()
        assert "w = 1 + β·x" in screen_text(app)
        await pilot.press("v")
        await pilot.pause()
        assert "Δw from mean" in screen_text(app)


async def test_intervals_arrive_in_a_second_pass(filled):
    app = make_app(filled.root, bootstrap=60, seed=5)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: app.snapshot is not None and app.snapshot.intervals, what="intervals")
        snap = app.snapshot
        row = snap.value("2025", "all", "total", "gradient", "wing")
        assert row["ci_low"] is not None and row["ci_low"] <= row["estimate"] <= row["ci_high"]
        shown = app.screen.query_one("#sel-linear").get_row("wing")
        assert str(shown[5]) == f"{fmt(row['ci_low'])}, {fmt(row['ci_high'])}"


async def test_status_line_counts_only_batches_that_stored_rows(filled, write_batch, hopper_rows):
    """A refused batch stores nothing but the record of its refusal, so the status line leaves it
    out of the batch count; a partly stored batch (valid rows taken, the rest kept aside) counts."""
    rows = hopper_rows("2026", "Reed Bend", n=30, seed=7)
    bad = [dict(r) for r in rows]
    bad[0]["wing"] = "long"                          # not a number: a hard error in one row
    refused = filled.store.import_file(write_batch(bad, "refused.csv"), operator="crew")
    assert refused.outcome == "refused"
    bad[1]["tag"] = "H9999"                          # another file: same error, valid rows taken in
    partial = filled.store.import_file(write_batch(bad, "partial.csv"), operator="crew", accept_valid=True)
    assert partial.outcome == "partial"
    assert [b.outcome for b in filled.store.batches()].count("refused") == 1
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app), what="first figures")
        assert app.snapshot.n_batches == 5                # four stored, one partly stored; not the refused one
        assert "5 batches" in screen_text(app) and "6 batches" not in screen_text(app)


@pytest.mark.parametrize("size", SIZES)
async def test_live_update_after_another_connection_imports(filled, write_batch, hopper_rows, size):
    app = make_app(filled.root)
    async with app.run_test(size=size) as pilot:
        await wait_for(app, pilot, lambda: ready(app), what="first figures")
        before = app.snapshot
        assert before.n_batches == 4 and "4 batches" in screen_text(app)
        # another connection (as another process would) takes in a third season
        path = write_batch(hopper_rows("2026", "Reed Bend", n=30, seed=7), "late.csv")
        assert filled.store.import_file(path, operator="crew").outcome == "stored"
        await wait_for(app, pilot, lambda: app.snapshot.n_batches == 5 and ready(app), what="the new batch")
        assert app.snapshot.generation > before.generation
        assert "5 batches" in screen_text(app)
        assert "2026" in app.snapshot.seasons()
        assert app.screen.choices.season == "2026"     # no season picked yet: the latest is followed
        await pilot.press("s")                         # a season picked by the user stays picked
        await pilot.pause()
        picked = app.screen.choices.season
        await pilot.press("ctrl+r")
        await wait_for(app, pilot, lambda: app.snapshot.generation > before.generation + 1 and ready(app))
        assert app.screen.choices.season == picked != "2026"


async def test_sensitivity_toggle_recomputes_without_open_outliers(study, write_batch, hopper_rows):
    rows = hopper_rows("2025", "Gull Flat", n=40, seed=21)
    rows[5]["tibia"] = "2.49"            # inside 1-2.5 mm but far out in its cell: a robust outlier
    study.store.import_file(write_batch(rows, "b.csv"), operator="test")
    assert any(f.kind == "outlier" for f in study.store.flags())
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        kept_in = app.snapshot.value("2025", "Gull Flat", "total", "gradient", "tibia")["estimate"]
        before = app.snapshot                    # the figures with the open outliers kept in
        await pilot.press("o")
        await wait_for(app, pilot, lambda: app.snapshot.sensitivity and ready(app), what="sensitivity")
        left_out = app.snapshot.value("2025", "Gull Flat", "total", "gradient", "tibia")["estimate"]
        assert left_out != kept_in
        text = screen_text(app)
        assert "outliers out" in text and "β with the open outliers kept in: wing" in text
        assert f"tibia {fmt(kept_in)}" in text
        assert str(app.screen.query_one("#sel-linear").get_row("tibia")[4]) == fmt(left_out)
        # S, β and γ with the open outliers kept in, side by side with the figures without them
        row = [str(v) for v in app.screen.query_one("#sel-linear").get_row("tibia")]
        s_in = before.value("2025", "Gull Flat", "total", "differential", "tibia")["estimate"]
        assert row[-2:] == [fmt(s_in), fmt(kept_in)]
        g_in = before.value("2025", "Gull Flat", "total", "quadratic", "tibia^2")["estimate"]
        g_row = [str(v) for v in app.screen.query_one("#sel-gamma").get_row("quadratic:tibia^2")]
        assert g_row[1] != g_row[-1] == fmt(g_in)
        assert "S (in)" in screen_text(app) and "γ (in)" in screen_text(app)
        await pilot.press("o")
        await wait_for(app, pilot, lambda: not app.snapshot.sensitivity and ready(app), what="back")
        assert "outliers out" not in screen_text(app)
        assert "S (in)" not in screen_text(app) and len(app.screen.query_one("#sel-linear").columns) == 8


@pytest.mark.parametrize("size", SIZES)
async def test_intake_takes_in_a_good_file_and_quarantines_a_bad_one(filled, hopper_rows, size, tmp_path):
    good = filled.intake_dir / "good.csv"
    rows = hopper_rows("2026", "Gull Flat", n=12, seed=3)
    header = list(rows[0])
    good.write_text("\n".join([",".join(header)] + [",".join(str(r[h]) for h in header) for r in rows]) + "\n")
    bad_rows = hopper_rows("2026", "Reed Bend", n=6, seed=4)
    bad_rows[2]["site"] = "Nowhere Marsh"                # a site the protocol does not allow
    bad = tmp_path / "outside" / "bad.csv"
    bad.parent.mkdir()
    bad.write_text("\n".join([",".join(header)] + [",".join(str(r[h]) for h in header) for r in bad_rows]) + "\n")
    app = make_app(filled.root)
    async with app.run_test(size=size) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("1")
        screen = app.screen
        await wait_for(app, pilot, lambda: any(f["state"] == "new" for f in screen.files), what="good.csv listed")
        await pilot.press("c")
        await wait_for(app, pilot, lambda: screen.checked is not None, what="the check")
        assert "no errors" in screen_text(app)
        sheet = screen.query_one("#intake-sheet")
        assert sheet.row_count == 12 and str(sheet.get_row_at(0)[0]) == rows[0]["tag"]   # the preview
        await pilot.press("i")
        await pilot.pause()
        assert "Rows stored as records: 12 of 12" in screen_text(app)
        await pilot.press("y")
        await wait_for(app, pilot, lambda: app.snapshot.n_batches == 5 and ready(app), what="good.csv stored")
        assert [b.outcome for b in filled.store.batches()][-1] == "stored"

        # a file outside the drop folder, by path
        await pilot.press("slash")
        await pilot.pause()
        screen.query_one("#intake-path").value = str(bad)
        await pilot.press("enter")
        await wait_for(app, pilot, lambda: screen.checked is not None and screen.current == bad, what="bad checked")
        text = screen_text(app)
        assert "1 with errors" in text and "Nowhere Marsh" in text
        await pilot.press("i")                          # refused whole: nothing is asked, nothing stored
        await pilot.pause()
        assert app.screen is screen and len(filled.store.batches()) == 5
        await pilot.press("a")
        await pilot.pause()
        text = screen_text(app)
        assert "Rows stored as records: 5 of 6" in text and "quarantine" in text
        await pilot.press("y")
        await wait_for(app, pilot, lambda: app.snapshot.n_batches == 6 and ready(app), what="bad.csv partly stored")
        last = filled.store.batches()[-1]
        assert (last.outcome, last.n_stored, last.n_quarantined) == ("partial", 5, 1)
        assert "now open flags on the Flags screen [2]" in screen_text(app)


@pytest.mark.parametrize("size", SIZES)
async def test_flags_resolve_with_a_reason_and_move_to_history(study, write_batch, hopper_rows, size):
    rows = hopper_rows("2025", "Gull Flat", n=30, seed=9)
    rows[4]["wing"] = "45.1"                             # outside 3-6 mm: flagged out of range
    study.store.import_file(write_batch(rows, "slip.csv"), operator="test")
    flag = next(f for f in study.store.flags() if f.kind == "out_of_range")
    app = make_app(study.root)
    async with app.run_test(size=size) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2")
        await pilot.pause()
        screen = app.screen
        assert screen.rows and screen.rows[0].id == flag.id
        text = screen_text(app)
        assert "45.1" in text and "where the value sits" in text
        await pilot.press("e")
        await pilot.pause()
        await pilot.press("ctrl+s")                      # no reason yet: refused, form stays
        await pilot.pause()
        assert "Reason is required" in screen_text(app)
        app.screen.query_one("#form-reason").value = "decimal slip, animal re-measured at 4.51"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: not any(f.id == flag.id and f.status == "open"
                                                   for f in app.snapshot.flags), what="the flag resolved")
        resolved = [f for f in study.store.flags(include_resolved=True) if f.id == flag.id][0]
        assert resolved.status == "exclude" and resolved.reason.startswith("decimal slip")
        assert all(r.id != flag.id for r in screen.rows)
        await pilot.press("h")
        await pilot.pause()
        assert any(r.id == flag.id for r in screen.rows)
        assert "History" in screen_text(app)


@pytest.mark.parametrize("size", SIZES)
async def test_response_uses_an_entered_heritability(filled, size):
    app = make_app(filled.root)
    async with app.run_test(size=size) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("4")
        await pilot.pause()
        assert "none (h)" in screen_text(app)
        await pilot.press("h")                           # the cursor is on the first trait, wing
        await pilot.pause()
        app.screen.query_one("#form-value").value = "0.4"
        app.screen.query_one("#form-source").value = "sister population, 2019 breeding design"
        form = app.screen                                # open until the store took the value
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: bool(app.snapshot.heritability) and ready(app) and app.screen is not form,
                       what="h² stored")
        snap = app.snapshot
        screen = app.screen
        row = screen.query_one("#resp-table").get_row("wing")
        r = snap.value("2025", "all", "total", "response", "wing")
        assert str(row[1]) == "mm"                       # the trait's unit, from the protocol
        assert str(row[2]) == fmt(0.4) and str(row[6]) == fmt(r["estimate"])
        assert "entered" in str(row[4])
        screen.query_one("#resp-k").value = "5"
        await pilot.pause()
        mean = snap.value("2025", "all", "total", "mean", "wing")["estimate"]
        # the projected mean: mean + k·R (Falconer & Mackay 1996, constant response per generation)
        assert fmt(mean + 5 * r["estimate"]) in screen_text(app)


@pytest.mark.parametrize("size", SIZES)
async def test_seasons_show_each_season_and_the_batch_trend(filled, size):
    app = make_app(filled.root)
    async with app.run_test(size=size) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("5")
        screen = app.screen
        await wait_for(app, pilot, lambda: bool(screen.trend_rows), what="the batch trend")
        text = screen_text(app)
        snap = app.snapshot
        assert "2024 Gull Flat" in text and "2025 Reed Bend" in text
        assert fmt(snap.value("2024", "Gull Flat", "total", "gradient", "wing")["estimate"]) in text
        mean = snap.value("all", "Gull Flat", "total", "gradient_mean", "wing")
        assert mean is not None and fmt(mean["estimate"]) in text
        # the trend lists only the batches that brought 2025 data (the third and fourth)
        assert {r["batch"] for r in screen.trend_rows} == {3, 4}
        # the trend: the latest batch's β equals the season's pooled β now
        last = [r for r in screen.trend_rows if r["site"] == "all" and r["trait"] == "wing"][-1]
        assert fmt(last["estimate"]) == fmt(snap.value("2025", "all", "total", "gradient", "wing")["estimate"])
        await pilot.press("v")
        await pilot.pause()
        assert "after each batch" in screen_text(app) and "needs about" in screen_text(app)
        # two batches changed the pooled β of 2025: the trend says why it has so few points
        from fieldslope.tui.screens.seasons import few_batches_sentence

        assert few_batches_sentence(2) in screen_text(app)
        await pilot.press("i")                           # the wanted interval width, typed
        for key in ("ctrl+u", "0", "full_stop", "1"):
            await pilot.press(key)
        await pilot.pause()
        from fieldslope.analysis.planning import individuals_for_gradient

        need = individuals_for_gradient(0.05, last["se"] ** 2 * (int(last["n"]) - 3), 1.0, 2)
        assert f"0.100 wide needs about {need} individuals" in screen_text(app)


async def test_help_lists_the_keys_of_the_current_screen(filled):
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2")
        await pilot.press("f1")
        await pilot.pause()
        text = screen_text(app)
        assert "Keys: Flags" in text and "Exclude" in text and "Correct" in text
        # the screen's own keys come first, then the global ones, Textual's generic ones last
        keys = str(app.screen.query_one("#help-keys").render())
        assert keys.index("Exclude") < keys.index("Outliers in/out") < keys.index("Focus Next")
        await pilot.press("escape")
        await pilot.press("3")
        await pilot.press("question_mark")
        await pilot.pause()
        text = screen_text(app)
        assert "Keys: Selection" in text and "Fitness" in text and "Keep" not in text


async def test_a_store_you_cannot_write_opens_read_only(filled, monkeypatch):
    import fieldslope.tui.loading

    monkeypatch.setattr(fieldslope.tui.loading, "writable", lambda path: False)
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: app.snapshot is not None and not app.updating, what="figures")
        assert app.readonly and "read-only" in screen_text(app)
        assert app.screen.query_one("#sel-linear").row_count == 2      # the figures are still shown
        await pilot.press("4")
        await pilot.press("h")                                         # entering h² is refused, with a reason
        await pilot.pause()
        assert "read-only" in screen_text(app) and not filled.store.heritability_entries().shape[0]


async def run_from_palette(pilot, text: str) -> None:
    """Open the command palette, type ``text`` and run the first match."""
    await pilot.press("ctrl+p")
    await pilot.pause()
    for ch in text:
        await pilot.press("space" if ch == " " else ch)
    await pilot.pause(0.3)
    await pilot.press("enter")
    await pilot.pause(0.3)


async def test_command_palette_offers_the_main_actions(filled):
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await run_from_palette(pilot, "show flags")
        assert app.current_mode == "flags"
        await run_from_palette(pilot, "by path")
        assert app.current_mode == "intake" and app.focused is app.screen.query_one("#intake-path")


async def test_intake_skips_files_still_being_written(filled):
    (filled.intake_dir / "day3.csv.part").write_text("tag,season\n")
    (filled.intake_dir / "~$day3.xlsx").write_bytes(b"lock")
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("1")
        await pilot.pause(0.5)
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.screen.files == [] and "drop folder is empty" in screen_text(app)


async def test_flags_correct_a_value(study, write_batch, hopper_rows):
    rows = hopper_rows("2025", "Reed Bend", n=30, seed=12)
    rows[7]["tibia"] = "17.4"                            # a slipped decimal point, outside 1-2.5 mm
    study.store.import_file(write_batch(rows, "slip.csv"), operator="test")
    tag = rows[7]["tag"]
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2")
        await pilot.pause()
        assert app.screen.rows[0].kind == "out_of_range"
        # kinds in plain words on screen, not the store's names
        assert "out of range 1" in screen_text(app) and "out_of_range" not in screen_text(app)
        await pilot.press("c")
        await pilot.pause()
        app.screen.query_one("#form-value").value = "1.74"
        app.screen.query_one("#form-reason").value = "sheet re-read: 1.74"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: not any(f.status == "open" and f.kind == "out_of_range"
                                                   for f in app.snapshot.flags), what="the correction")
        frame = app.snapshot.frame
        assert frame.loc[frame["tag"] == tag, "tibia"].item() == pytest.approx(1.74)


async def test_intake_names_an_unreadable_file_in_one_sentence(filled, tmp_path):
    junk = tmp_path / "photo.csv"
    junk.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 20)
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("1")
        await pilot.press("slash")
        app.screen.query_one("#intake-path").value = str(junk)
        await pilot.press("enter")
        await wait_for(app, pilot, lambda: app.screen.checked is not None or bool(app.error), what="the check")
        text = screen_text(app)
        assert "photo.csv" in text and "Traceback" not in text, (app.error, app.screen.checked)
        result = app.screen.checked
        assert result is not None and result.outcome == "refused" and result.message
        await pilot.press("i")
        await pilot.pause()
        assert len(filled.store.batches()) == 4       # nothing stored


async def test_flags_keep_a_whole_group_with_one_reason(study, write_batch, hopper_rows):
    rows = hopper_rows("2025", "Gull Flat", n=30, seed=13)
    for i in (2, 9, 17):
        rows[i]["wing"] = "6.4"                          # just over 6 mm: a new ruler reads long
    study.store.import_file(write_batch(rows, "long.csv"), operator="test")
    ids = {f.id for f in study.store.flags() if f.kind == "out_of_range"}
    assert len(ids) == 3
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("2")
        await pilot.pause()
        await pilot.press("K")
        await pilot.pause()
        assert "Keep all 3 out of range flags of batch 1 at Gull Flat" in screen_text(app)
        app.screen.query_one("#form-reason").value = "checked: large animals this week"
        await pilot.press("ctrl+s")
        await wait_for(app, pilot, lambda: not any(f.status == "open" and f.kind == "out_of_range"
                                                   for f in app.snapshot.flags), what="the group kept")
        kept = [f for f in study.store.flags(include_resolved=True) if f.id in ids]
        assert {f.status for f in kept} == {"keep"} and {f.reason for f in kept} == {"checked: large animals this week"}


async def test_canonical_axes_shown_are_eigenvectors_of_the_tables_gamma(filled):
    """Each axis m_i shown satisfies γ·m_i = λ_i·m_i with γ and λ from the table (checked with numpy)."""
    import re

    import numpy as np

    app = make_app(filled.root)
    async with app.run_test(size=(120, 40)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        snap, key = app.snapshot, dict(season="2025", site="all", fitness="total")
        g = np.array([[snap.value(**key, quantity="quadratic", term="wing^2")["estimate"],
                       snap.value(**key, quantity="correlational", term="wing:tibia")["estimate"]],
                      [snap.value(**key, quantity="correlational", term="wing:tibia")["estimate"],
                       snap.value(**key, quantity="quadratic", term="tibia^2")["estimate"]]])
        text = screen_text(app)
        for i in (1, 2):
            m = re.search(rf"m{i} = ([+-][0-9.]+)·wing ([+-][0-9.]+)·tibia", text)
            assert m, text
            v = np.array([float(m.group(1)), float(m.group(2))])
            lam = snap.value(**key, quantity="canonical", term=f"m{i}")["estimate"]
            assert np.allclose(g @ v, lam * v, atol=0.02)
            assert np.isclose(np.linalg.norm(v), 1, atol=0.02)


async def test_beta_on_screen_equals_an_ols_fit_by_statsmodels(filled):
    """End to end, store to screen: β of one cell is the OLS coefficient of relative fitness on the
    standardized traits (Lande & Arnold 1983, Evolution 37:1210-1226), here fitted with statsmodels."""
    import statsmodels.api as sm

    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("s", "t")                  # season 2024, site Gull Flat
        await pilot.pause()
        frame = app.snapshot.frame
        cell = frame[(frame["season"] == "2024") & (frame["site"] == "Gull Flat")]
        W = (cell["survived"] * cell["clutch"]).to_numpy(dtype=float)
        z = cell[["wing", "tibia"]].to_numpy(dtype=float)
        x = (z - z.mean(axis=0)) / z.std(axis=0, ddof=1)
        fit = sm.OLS(W / W.mean(), sm.add_constant(x)).fit()
        table = app.screen.query_one("#sel-linear")
        for j, trait in enumerate(("wing", "tibia")):
            assert str(table.get_row(trait)[4]) == fmt(fit.params[j + 1])


async def test_missing_fitness_counts_the_dead_as_measured(study, write_batch, hopper_rows):
    """A total is 0 for an individual that died, even without a clutch count; only truly unknown
    totals are missing (the estimators' rule in analysis.fitness.add_totals)."""
    rows = hopper_rows("2025", "Gull Flat", n=30, seed=31)
    dead = [r for r in rows if r["survived"] == 0][:3]
    alive = [r for r in rows if r["survived"] == 1][:2]
    for r in dead + alive:
        r["clutch"] = ""                                 # clutch not counted
    study.store.import_file(write_batch(rows, "b.csv"), operator="test")
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        assert app.snapshot.missing_fitness("2025", "Gull Flat", "total") == 2
        # a dead beetle has no clutch to lack: only the two live ones are missing it
        assert app.snapshot.missing_fitness("2025", "Gull Flat", "clutch") == 2
        assert "missing fitness 2" in screen_text(app)


async def test_a_store_that_vanishes_and_returns_is_reported_then_cleared(filled):
    db = filled.root / "fieldslope.sqlite"
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        hidden = db.with_name("hidden.sqlite")
        app._poller = None                          # as after a restart of the poll connection
        db.rename(hidden)
        await wait_for(app, pilot, lambda: bool(app.error), what="the error")
        assert "!" in screen_text(app) and "Traceback" not in screen_text(app)
        hidden.rename(db)
        await wait_for(app, pilot, lambda: not app.error, timeout=15, what="the error cleared")
        assert "4 batches" in screen_text(app)


async def test_a_store_held_by_another_program_makes_the_dashboard_read_only_until_free(filled):
    import sqlite3

    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app), what="figures")
        assert not app.locked
        other = sqlite3.connect(str(filled.db_path), isolation_level=None)
        other.execute("BEGIN IMMEDIATE")                       # another program is writing
        try:
            await wait_for(app, pilot, lambda: app.locked, what="the lock seen")
            assert "read-only: store in use elsewhere" in screen_text(app)
            await pilot.press("4")
            await pilot.press("h")                             # refused at once, with one sentence
            await pilot.pause()
            from fieldslope.tui.loading import LOCKED_SENTENCE

            assert [n.message for n in app._notifications][-1] == LOCKED_SENTENCE
            assert len(app.screen_stack) == 1                  # no form was opened
            await pilot.press("3")                             # browsing still works
            await wait_for(app, pilot, lambda: app.screen.query_one("#sel-linear").row_count == 2)
        finally:
            other.execute("ROLLBACK")
            other.close()
        await wait_for(app, pilot, lambda: not app.locked, what="the lock released")
        assert "store in use elsewhere" not in screen_text(app)


async def test_screens_say_why_they_are_empty_when_no_batch_has_fitness(study, write_batch, hopper_rows):
    rows = [{k: v for k, v in r.items() if k not in study.protocol.component_names}
            for r in hopper_rows("2026", "Gull Flat", n=12, seed=5)]      # measurements only, no fitness
    batch = write_batch(rows, "m.csv")
    assert study.store.import_file(batch, operator="test").outcome == "stored"
    app = make_app(study.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app), what="figures")
        assert "batches so far carry no fitness" in screen_text(app)
        await pilot.press("5")
        screen = app.screen
        await pilot.press("v")
        await pilot.pause()
        assert "No season has a β yet" in screen_text(app) and "Recomputing" not in screen_text(app)
        await pilot.press("1")
        await wait_for(app, pilot, lambda: bool(app.screen.files) or "empty" in screen_text(app), what="listing")
        from fieldslope.tui.screens.intake import EMPTY_SENTENCE

        assert EMPTY_SENTENCE in screen_text(app)
        (study.intake_dir / "late.csv").write_bytes(batch.read_bytes())
        await wait_for(app, pilot, lambda: bool(app.screen.files), timeout=10, what="the arrived file")
        await pilot.pause()
        assert EMPTY_SENTENCE not in screen_text(app) and "Pick a file" in screen_text(app)


def test_response_notes_are_cut_between_sentences_never_inside_one():
    from fieldslope.tui.screens.response import whole_sentences

    notes = ["First note here.", "Second note, a longer one.", "Third " + "x" * 60 + "."]
    assert whole_sentences(notes, 112) == " ".join(notes)
    assert whole_sentences(notes, 50) == "First note here. (2 more notes: press n to read them all.)"
    assert whole_sentences(notes, 100) == ("First note here. Second note, a longer one. "
                                           "(1 more note: press n to read them all.)")


@pytest.fixture
def with_pedigree(study, write_batch):
    """Two seasons at two sites; the 2025 hoppers are offspring of 2024 pairs (invented: breeding values
    passed on by the infinitesimal model, so the animal models have something to find)."""
    import numpy as np

    rng = np.random.default_rng(5)
    G = np.array([[0.06, 0.012], [0.012, 0.008]])   # additive (co)variances of wing and tibia, mm²
    E = np.array([[0.06, 0.004], [0.004, 0.012]])
    parents: dict[str, list] = {}
    for season in ("2024", "2025"):
        for site in ("Gull Flat", "Reed Bend"):
            n = 120
            a = rng.multivariate_normal([0, 0], G, size=n)
            dams = sires = [""] * n
            if season == "2025":
                ids, breeding = parents[site]
                d, s = rng.integers(0, 60, n), rng.integers(60, 120, n)   # females 0-59, males 60-119
                a = (breeding[d] + breeding[s]) / 2 + rng.multivariate_normal([0, 0], G / 2, size=n)
                dams, sires = [ids[i] for i in d], [ids[i] for i in s]
            z = np.array([4.5, 1.7]) + a + rng.multivariate_normal([0, 0], E, size=n)
            alive = (rng.random(n) < 1 / (1 + np.exp(-(0.3 + 2.0 * (z[:, 0] - 4.5))))).astype(int)
            clutch = rng.poisson(3 + 2 * np.maximum(z[:, 1] - 1.5, 0)) * alive
            ids = [f"{site[:2].upper()}{season[-2:]}-{i:04d}" for i in range(n)]
            rows = [{"tag": ids[i], "season": season, "site": site, "wing": f"{z[i, 0]:.2f}", "tibia": f"{z[i, 1]:.2f}",
                     "survived": int(alive[i]), "clutch": int(clutch[i]), "dam": dams[i], "sire": sires[i]}
                    for i in range(n)]
            parents[site] = (ids, a)
            path = write_batch(rows, f"{season}-{site}.csv")
            assert study.store.import_file(path, operator="test").outcome == "stored"
    return study


async def test_response_uses_the_pedigree_g_once_fitted_and_never_waits_for_it(with_pedigree, monkeypatch):
    """While the animal models are fitted (held back here) the screen answers keys and shows the phenotypic-G
    Gβ; once they are in, Gβ is the one `fieldslope estimate` prints (pedigree h² and genetic correlations in G)
    and the notes say which G was used."""
    import threading

    from fieldslope.tui import bridge

    fitted = bridge.pedigree_genetics
    release = threading.Event()

    def held(*args, **kwargs):
        release.wait(30)
        return fitted(*args, **kwargs)

    monkeypatch.setattr(bridge, "pedigree_genetics", held)
    app = make_app(with_pedigree.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("4")
        await pilot.pause(0.2)
        assert "fitting the animal models" in screen_text(app)
        phenotypic = app.snapshot.value("2025", "all", "total", "response_multi", "wing")["estimate"]
        assert fmt(phenotypic) in str(app.screen.query_one("#resp-table").get_row("wing")[8])
        await pilot.press("1")          # the screen is free while the worker waits
        await pilot.pause(0.2)
        assert app.current_mode == "intake"
        await pilot.press("4")
        release.set()
        await wait_for(app, pilot, lambda: "Pedigree: 480 individuals" in screen_text(app),
                       timeout=90, what="the pedigree fit")
        snap = app.snapshot
        cli = bridge.estimates_for_frame(snap.frame, snap.protocol, bootstrap=0, h2=snap.h2, genetics=fitted(
            snap.frame, snap.protocol))
        t = cli.table
        for trait in ("wing", "tibia"):
            want = t[(t.season == "2025") & (t.site == "all") & (t.fitness == "total")
                     & (t.quantity == "response_multi") & (t.term == trait)]["estimate"].iloc[0]
            assert str(app.screen.query_one("#resp-table").get_row(trait)[8]) == fmt(want), trait
            if trait == "wing":
                assert fmt(want) != fmt(phenotypic)   # the pedigree G is not the phenotypic one
        shown = screen_text(app)
        assert "animal model" in shown and "phenotypic correlations" not in shown
