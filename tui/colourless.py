"""The line filter used when NO_COLOR is set: every colour removed, emphasis kept.

The convention (no-color.org, 2017) asks for no ANSI colour at all whenever NO_COLOR is present.
Textual's own filter for it turns colours grey, which still sends colour codes; this one sends none.
Bold, underline and reverse stay, so a cursor row or a selected tab still stands out.
"""

from __future__ import annotations

from rich.segment import Segment
from textual.color import Color
from textual.filter import LineFilter


class Colourless(LineFilter):
    """Remove foreground and background colours from every segment."""

    def apply(self, segments: list[Segment], background: Color) -> list[Segment]:
        return [Segment(text, None if style is None else style.without_color, control)
                for text, style, control in segments]
