"""Keys typed ahead land where they were meant.

Over SSH a user types ``h 0.4 Tab 0.1 Tab source`` faster than the dashboard handles each key.
Textual hands every key to the widget focused *when the key arrives*, while the key that opens a
dialog or moves the focus is acted on later, once it has travelled up to the app's bindings: so
the keys after ``h`` reach the table instead of the dialog, and the Tab moves the focus after the
next characters were already given to the first field.

The app therefore handles the keys it receives one at a time: a key is handed on only after the
one before it was dealt with (a widget consumed it, or a binding ran), and, when that key pushed
a screen or switched to another one, only after that screen has been built and has focused its
first field.
"""

from __future__ import annotations

from collections import deque

from textual import events
from textual.app import App
from textual.dom import DOMNode
from textual.screen import Screen

# A key or a screen that never reports back (its widget was removed meanwhile) must not hold
# the keyboard for long.
WAIT_AT_MOST = 1.0
CHECK_EVERY = 0.01


class TypeAheadApp(App):
    """An ``App`` that deals with the keys typed ahead in the order typed, each where it was meant."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._typed: deque[events.Key] = deque()
        self._key_in_hand: events.Key | None = None
        self._building: Screen | None = None

    # -- a screen being built ----------------------------------------------
    def push_screen(self, screen, *args, **kwargs):
        result = super().push_screen(screen, *args, **kwargs)
        self._wait_for_screen()
        return result

    def switch_mode(self, mode: str):
        result = super().switch_mode(mode)
        self._wait_for_screen()
        return result

    def _wait_for_screen(self) -> None:
        screen = self.screen
        self._building = screen
        self.set_timer(WAIT_AT_MOST, lambda: self._screen_built(screen))
        self._when_mounted(screen)

    def _when_mounted(self, screen: Screen) -> None:
        if self._building is not screen:
            return
        if not screen.is_mounted:
            self.set_timer(CHECK_EVERY, lambda: self._when_mounted(screen))
            return
        # after the screen has handled its resume (first field focused); then through the app's
        # queue, so the keys that arrived meanwhile are queued here first
        screen.call_after_refresh(self.call_later, self._screen_built, screen)

    async def _screen_built(self, screen: Screen) -> None:
        if self._building is screen:
            self._building = None
            self.call_later(self._hand_on)

    # -- keys, one at a time -------------------------------------------------
    async def on_event(self, event: events.Event) -> None:
        if not isinstance(event, events.Key):
            await super().on_event(event)
        elif not event.is_forwarded:              # typed: queue it behind the others
            self._typed.append(event)
            await self._hand_on()
        else:                                     # came back up to the app: the bindings run now
            await super().on_event(event)
            if event is self._key_in_hand:
                await self._key_done(event)

    async def _hand_on(self) -> None:
        while self._typed and self._key_in_hand is None and self._building is None:
            key = self._typed.popleft()
            target = self.focused or self.screen
            self._key_in_hand = key
            await super().on_event(key)           # priority bindings, else to the focused widget
            if not key.is_forwarded:              # dealt with here by a priority binding
                self._key_in_hand = None
                continue
            target.call_later(self._key_passed, key, target)
            self.set_timer(WAIT_AT_MOST, lambda key=key: self._key_done(key))

    def _key_passed(self, key: events.Key, node: DOMNode) -> None:
        """Runs in ``node``'s queue right after it handled ``key``: follow the key up, or finish."""
        if self._key_in_hand is not key:
            return
        parent = node.parent
        if parent is self:                        # the app's own handler finishes it
            return
        if key._stop_propagation or parent is None or not (node.is_parent_active and node.is_attached):
            self.call_later(self._key_done, key)  # consumed on the way up
            return
        parent.call_later(self._key_passed, key, parent)

    async def _key_done(self, key: events.Key) -> None:
        if self._key_in_hand is key:
            self._key_in_hand = None
            # through the app's queue: what the key asked for (``focus()`` queues the focus change there)
            # happens before the next key is handed on
            self.call_later(self._hand_on)
