"""The command palette, colour and notifications at 80x24 (Textual Pilot).

NO_COLOR is the convention of no-color.org (2017): when the variable is present, a program adds no ANSI
colour, whatever its value; bold, underline and reverse are not colour and stay.
"""

from __future__ import annotations

import unicodedata

from tests.test_tui_screens import filled, make_app, ready, wait_for  # noqa: F401


def emoji_in(text: str) -> list[str]:
    """Characters of ``text`` that terminals draw as emoji: the pictographic planes and the dingbat
    and symbol blocks (Unicode 15, blocks U+1F000–U+1FAFF, U+2600–U+27BF), plus the emoji variation selector."""
    return sorted({ch for ch in text if 0x1F000 <= ord(ch) <= 0x1FAFF or 0x2600 <= ord(ch) <= 0x27BF
                   or ord(ch) == 0xFE0F})


def painted_styles(app):
    """Every style the compositor would send to the terminal for the screen in view."""
    for strip in app.screen._compositor.render_strips():
        for segment in strip:
            if segment.style is not None:
                yield segment.style


async def test_the_palette_shows_no_emoji(filled):  # noqa: F811
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("ctrl+p")
        await pilot.pause(0.3)
        svg = app.export_screenshot()
        found = emoji_in(svg)
        assert not found, [unicodedata.name(ch, hex(ord(ch))) for ch in found]
        await pilot.press("s", "c", "r", "e", "e", "n")
        await pilot.pause(0.3)
        assert not emoji_in(app.export_screenshot())


async def test_no_color_paints_no_colour_at_all(filled, monkeypatch):  # noqa: F811
    monkeypatch.setenv("NO_COLOR", "1")
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        for key in ("3", "4", "1", "ctrl+p"):
            await pilot.press(key)
            await pilot.pause(0.2)
            coloured = {str(s) for s in painted_styles(app) if s.color is not None or s.bgcolor is not None}
            assert not coloured, (key, sorted(coloured)[:5])
            assert any(s.bold for s in painted_styles(app))     # emphasis without colour stays


async def test_notifications_leave_the_status_line_readable(filled):  # noqa: F811
    from fieldslope.tui.widgets.status import StatusLine
    from textual.widgets._toast import Toast

    app = make_app(filled.root)
    async with app.run_test(size=(80, 24), notifications=True) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("3")
        await pilot.pause()
        app.notify("A notification long enough to wrap onto a second line at eighty columns, as file paths do.",
                   timeout=30)
        await pilot.pause(0.5)
        toasts = list(app.screen.query(Toast).results())
        assert toasts
        status = app.screen.query_one(StatusLine).region
        footer_top = status.y + status.height
        for toast in toasts:
            assert not toast.region.overlaps(status), (toast.region, status)
            assert toast.region.y + toast.region.height <= status.y or toast.region.y >= footer_top


async def test_the_palette_has_one_screenshot_entry_and_it_names_the_study_folder(filled):  # noqa: F811
    from tests.test_tui_screens import screen_text

    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("ctrl+p")
        await pilot.pause()
        for ch in "screenshot":
            await pilot.press(ch)
        await pilot.pause(0.5)
        text = screen_text(app)
        assert "into the study's reports folder" in text
        assert "Save an SVG 'screenshot'" not in text       # Textual's own entry, which did not say where
