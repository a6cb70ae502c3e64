"""The dashboard writes the report and its pictures, and saves screenshots, into the study's reports/
folder (in a worker), and says where."""

from __future__ import annotations

from tests.test_tui_screens import filled, make_app, ready, run_from_palette, wait_for  # noqa: F401


def notices(app) -> str:
    return " ".join(str(n.message) for n in app._notifications)


async def test_key_writes_the_report_and_figures_into_reports(filled):  # noqa: F811
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        binding = next(b for b in app.BINDINGS if getattr(b, "id", None) == "write_report")
        assert binding.description
        await pilot.press(binding.key)
        folder = filled.root / "reports"
        await wait_for(app, pilot, lambda: any(folder.glob("report-*.html")) and "Report written" in notices(app),
                       what="the report", timeout=180)   # twenty pictures: slow on a loaded machine
        page = next(folder.glob("report-*.html"))
        assert "<h2" in page.read_text(encoding="utf-8")
        figures = next(folder.glob("figures-*"))
        assert len(list(figures.glob("*.svg"))) == len(list(figures.glob("*.png"))) > 0
        assert str(page) in notices(app) and not app.error


async def test_palette_writes_the_report_and_screenshots_go_to_reports(filled, monkeypatch):  # noqa: F811
    monkeypatch.setenv("XDG_DOWNLOAD_DIR", "/nonexistent/downloads")
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await run_from_palette(pilot, "write the report")
        folder = filled.root / "reports"
        await wait_for(app, pilot, lambda: "Report written" in notices(app), what="the report", timeout=180)
        await run_from_palette(pilot, "save a screenshot")
        await wait_for(app, pilot, lambda: any(folder.glob("*.svg")), what="the screenshot", timeout=60)
        shot = next(folder.glob("*.svg"))
        assert shot.read_text(encoding="utf-8").lstrip().startswith("<svg")
        assert str(shot) in notices(app) and not app.error
