"""Keys typed in a burst (SSH type-ahead: no pause between keys) land where they were meant.

``burst`` hands every key event to the app at once, as a terminal read of several keys does;
``pilot.press`` would wait for the app to settle after each key and hide the defect.
"""

from __future__ import annotations

from textual import events

from tests.test_tui_screens import filled, make_app, ready, screen_text, wait_for  # noqa: F401 (fixture)

NAMED = {".": "full_stop", " ": "space", "-": "minus", "/": "slash", "?": "question_mark", ",": "comma"}
SPECIAL = {"tab": "\t", "enter": "\r", "escape": "\x1b"}


def burst(app, *parts: str) -> None:
    """Send keys without waiting: a key name (``tab``, ``escape``, ``enter``) or text typed letter by letter."""
    for part in parts:
        keys = [(part, SPECIAL[part])] if part in SPECIAL else [(NAMED.get(c, c), c) for c in part]
        for key, char in keys:
            event = events.Key(key, char)
            event.set_sender(app)
            app._driver.send_message(event)


def field_values(app) -> dict[str, str]:
    return {w.id: w.value for w in app.screen.query("Input")}


async def test_heritability_dialog_takes_typed_ahead_keys_in_their_fields(filled):
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        await pilot.press("4")
        await wait_for(app, pilot, lambda: "Response" in screen_text(app), what="the Response screen")
        burst(app, "h", "0.4", "tab", "0.1", "tab", "src")
        await wait_for(app, pilot, lambda: field_values(app).get("form-source") == "src", what="all keys")
        assert field_values(app) == {"form-value": "0.4", "form-se": "0.1", "form-source": "src"}


async def test_seasons_escape_leaves_the_width_field(filled):
    app = make_app(filled.root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        burst(app, "5", "i", "0.3", "escape", "3")
        await wait_for(app, pilot, lambda: app.current_mode == "selection", what="the Selection screen")
        await app.workers.wait_for_complete()
        await pilot.pause()
        await pilot.press("5")
        await pilot.pause()
        assert app.screen.query_one("#sea-width").value == "0.3"   # the 3 after Esc switched screens
