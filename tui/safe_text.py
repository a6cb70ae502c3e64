"""Untrusted text (IDs, sites, file names, operator names, reasons, cell text) made safe to show.

Two rules, one function each:

- :func:`escape_controls` is for the terminal (command line output, and the dashboard's cells, lists
  and messages): C0 controls (newline and tab too, unless ``keep_newlines``), DEL, C1 controls and the
  bidirectional controls that reorder what follows are written visibly as ``\\x1b``, ``\\x7f``,
  ``\\u202e`` …, so data can neither move the cursor, clear or recolour the screen, write the
  clipboard (OSC 52), split a message over lines, nor reverse the text after it. Everything else,
  backslashes included, is left as it is.
- The dashboard never parses such text as markup: :mod:`fieldslope.tui.widgets.literal` builds
  Textual ``Content`` from the escaped plain string.

CSV and JSON output keep the exact stored value (JSON escapes it, CSV stays formula-safe); only
output meant for a terminal goes through here. This module imports nothing from Textual, so the
command line stays quick to start.
"""

from __future__ import annotations

import math

# Bidirectional formatting characters (Unicode Standard Annex #9): embeddings, overrides, isolates and
# the marks; plus the line and paragraph separators, which some terminals treat as line breaks.
_BIDI = (0x061C, 0x200E, 0x200F, *range(0x202A, 0x202F), *range(0x2066, 0x206A), 0x2028, 0x2029)


def _visible(code: int) -> str:
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


_TABLE: dict[int, str] = {c: _visible(c) for c in (*range(0x00, 0x20), 0x7F, *range(0x80, 0xA0), *_BIDI)}
_TABLE_KEEP_NEWLINES = {c: v for c, v in _TABLE.items() if c != 0x0A}


def escape_controls(value: object, keep_newlines: bool = False) -> str:
    """``value`` as text with every control and bidirectional-override character shown as an escape.

    ``None`` and NaN give "". ``keep_newlines`` leaves ``\\n`` as a line break (for whole messages whose
    data parts were escaped already); a lone ``\\r`` is still shown as ``\\x0d``.
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    text = value if isinstance(value, str) else str(value)
    return text.translate(_TABLE_KEEP_NEWLINES if keep_newlines else _TABLE)


def has_raw_controls(text: str, allow_newlines: bool = True) -> bool:
    """True when ``text`` holds a character :func:`escape_controls` would have escaped (tests use it)."""
    table = _TABLE_KEEP_NEWLINES if allow_newlines else _TABLE
    return any(ord(ch) in table for ch in text)
