"""Untrusted text shown literally in the dashboard: never markup, never an action, no control codes.

Textual parses a plain ``str`` as content markup in many places (``Static``, ``DataTable`` cells and
column labels, notifications): ``[/]`` in an ID raises a markup error and ``[@click=app.quit]`` becomes
a clickable action. Everything that comes from data, file names or people reaches the screen through
one of these:

- :func:`literal` (and :func:`assemble` for mixed parts) for ``Static`` content and dialog text;
- :class:`LiteralTable` for tables: every ``str`` cell, row label and column label is plain text;
- ``FieldslopeApp.notify`` (tui/app.py) shows every notification as plain text.

All three pass the text through :func:`fieldslope.tui.safe_text.escape_controls` first.
"""

from __future__ import annotations

from rich.text import Text
from textual.content import Content
from textual.widgets import DataTable

from fieldslope.tui.safe_text import escape_controls


def literal(value: object, style: str = "", keep_newlines: bool = False) -> Content:
    """``value`` as plain Content (no markup), control characters shown escaped, with an optional style."""
    text = escape_controls(value, keep_newlines=keep_newlines)
    return Content.styled(text, style) if style else Content(text)


def assemble(*parts: object) -> Content:
    """Like ``Content.assemble`` but every ``str`` part (or the text of a ``(text, style)`` pair) is literal.

    Content parts (already built by our code) pass through unchanged.
    """
    out: list[Content] = []
    for part in parts:
        if isinstance(part, Content):
            out.append(part)
        elif isinstance(part, tuple):
            out.append(literal(part[0], part[1] if len(part) > 1 else "", keep_newlines=True))
        else:
            out.append(literal(part, keep_newlines=True))
    return Content("").join(out)


def _cell(value: object) -> object:
    if isinstance(value, str):
        return Text(escape_controls(value), end="")
    return value


class LiteralTable(DataTable):
    """A DataTable whose ``str`` cells and labels are shown as plain text (no markup, controls escaped)."""

    def add_column(self, label, *args, **kwargs):
        return super().add_column(_cell(label), *args, **kwargs)

    def add_row(self, *cells, **kwargs):
        if isinstance(kwargs.get("label"), str):
            kwargs["label"] = _cell(kwargs["label"])
        return super().add_row(*(_cell(c) for c in cells), **kwargs)

    def update_cell(self, row_key, column_key, value, **kwargs):
        return super().update_cell(row_key, column_key, _cell(value), **kwargs)

    def update_cell_at(self, coordinate, value, **kwargs):
        return super().update_cell_at(coordinate, _cell(value), **kwargs)
