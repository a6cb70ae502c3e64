"""Counting work done for a ``progress(done, total, label)`` callback (the dashboard's status line)."""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["Progress", "ProgressCallback"]

#: ``progress(done, total, label)``: called by long computations after each piece of work.
ProgressCallback = Callable[[int, int, str], None]


class Progress:
    """A running count of ``total`` steps, reported to ``callback`` (if any) after each ``tick``."""

    def __init__(self, total: int, callback: ProgressCallback | None = None) -> None:
        self.total = total
        self.done = 0
        self.callback = callback

    def tick(self, k: int, label: str) -> None:
        """Count ``k`` more steps done, now working on ``label``, and tell the callback."""
        self.done += k
        if self.callback is not None:
            self.callback(self.done, self.total, label)
