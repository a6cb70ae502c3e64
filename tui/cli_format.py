"""Plain-text output of the command line, 80 columns wide.

Everything printed for a terminal goes through :func:`fieldslope.tui.safe_text.escape_controls`:
:func:`cut` and :func:`wrap` escape the text they are given, :func:`say` prints one escaped line.
"""

from __future__ import annotations

import math
import sys
import textwrap
from collections import Counter
from typing import TYPE_CHECKING, Iterable, Sequence, TextIO

from fieldslope.common.names import ID_KINDS, flag_label
from fieldslope.common.words import plural
from fieldslope.schemas.operator import by_text
from fieldslope.tui.safe_text import escape_controls

if TYPE_CHECKING:  # pragma: no cover
    from fieldslope.schemas.store_history import Event

WIDTH = 80
MAX_LISTED = 50
MAX_FLAGS_LISTED = 20


def say(text: object, file: TextIO | None = None) -> None:
    """Print one message line for a terminal: control characters in it (a file name's newline too) escaped."""
    print(escape_controls(text), file=file or sys.stdout)


def missing(value) -> bool:
    """None, NaN or pandas' NA (without importing pandas: ``flags`` and ``history`` start faster)."""
    if value is None:
        return True
    try:
        return bool(value != value)
    except TypeError:  # pandas' NA has no truth value
        return True


def cut(text: object, width: int) -> str:
    """``text`` escaped for the terminal (see :mod:`fieldslope.tui.safe_text`), cut to ``width`` with "…"."""
    text = escape_controls(text)
    return text if len(text) <= width else text[: width - 1] + "…"


def wrap(text: str, indent: str = "    ") -> str:
    return textwrap.fill(escape_controls(text), WIDTH, initial_indent=indent, subsequent_indent=indent, break_on_hyphens=False)


def number(value, width: int) -> str:
    if missing(value) or (isinstance(value, float) and not math.isfinite(value)):
        return " " * width
    text = f"{value:.4g}"
    return f"{text:>{width}}"


def p_text(value) -> str:
    if missing(value):
        return ""
    return "<0.001" if value < 0.001 else f"{value:.3f}"


def error_lines(errors: Iterable, limit: int = MAX_LISTED) -> list[str]:
    errors = list(errors)
    lines = [escape_controls(e.sentence()) for e in errors[:limit]]
    if len(errors) > limit:
        lines.append(f"… and {plural(len(errors) - limit, 'more error', 'more errors')} (the first {limit} are shown)")
    return lines


def flag_summary(flags: Iterable, stored: bool = True, refused: bool = False) -> str:
    """The flags a batch opened (or, for a check, would open), counted by kind in the dashboard's words;
    ``refused``: a check of a batch refused for its errors, whose valid rows would open these."""
    counts = Counter(f.kind for f in flags)
    if not counts:
        return "no flags" if stored else "no flags would be opened"
    parts = ", ".join(f"{n} {flag_label(kind)}" for kind, n in sorted(counts.items()))
    if refused:
        return f"its valid rows would also open flags: {parts} (nothing is stored by a check)"
    if not stored:
        return f"flags it would open: {parts} (nothing is stored by a check)"
    return f"flags: {parts} (list them with fieldslope flags)"


def flag_lines(flags: Sequence, limit: int = MAX_FLAGS_LISTED) -> list[str]:
    """Each flag a check would open, row by row (the first ``limit``), wrapped at 80 columns."""
    flags = sorted(flags, key=lambda f: f.row)
    lines = [wrap(f"row {f.row}: {f.message}", indent="  ") for f in flags[:limit]]
    if len(flags) > limit:
        lines.append(f"  … and {plural(len(flags) - limit, 'more flag')} (the first {limit} are shown)")
    return lines


def print_flags(flags, out: TextIO | None = None) -> None:
    out = out or sys.stdout
    if not flags:
        print("no open flags", file=out)
        return
    for f in flags:
        what = f"{f.field} = {f.value}" if f.field and f.value else (f.field or f.value or "record")
        status = f.status if f.status == "open" else f"{f.status} by {f.resolved_by}"
        head = f"#{f.id:<5} {flag_label(f.kind):<14} {f.individual} {f.season} {what}"
        print(cut(head, WIDTH - 25) + f"  [{cut(status, 21)}]", file=out)   # "superseded by batch 12"
        print(wrap(f"{f.message} ({f.file_name}, row {f.row})"), file=out)
        if f.status != "open" and f.reason:
            change = (f"{'moved to ID' if f.kind in ID_KINDS else 'set to'} {f.new_value}; "
                      if f.status == "set" else "")
            login = f"; login {f.resolved_login}" if f.resolved_login and f.resolved_login != f.resolved_by else ""
            print(wrap(f"{change}why: {f.reason} ({f.resolved_at}{login})"), file=out)


def print_batches(batches, day=None, out: TextIO | None = None) -> None:
    """One line per batch (number, local time, outcome, rows, operator), its file on the next line."""
    from fieldslope.tui.batch_list import plural, rows_text, when_text

    out = out or sys.stdout
    where = f" received on {day.isoformat()}" if day is not None else ""
    if not batches:
        print(f"no batches{where}" + ("" if day is not None else "; take files in with fieldslope import FILE"),
              file=out)
        return
    counts = Counter(b.outcome for b in batches)
    parts = ", ".join(f"{n} {o}" for o, n in sorted(counts.items()))
    print(f"{plural(len(batches), 'batch')}{where} ({parts}); times are local", file=out)
    for b in batches:
        print(f"#{b.id:<4} {when_text(b.received)}  {b.outcome:<8} {rows_text(b)}  by {escape_controls(b.operator)}",
              file=out)
        login = f" (login {b.login})" if b.login and b.login != b.operator else ""
        print(f"      {escape_controls(b.file_name + login)}", file=out)
        for note in b.notes:      # how the file was read: further worksheets left out, a guessed encoding
            print(wrap(f"note: {note}", indent="      "), file=out)


def print_history(events: Sequence[Event], individual: str, out: TextIO | None = None) -> None:
    """Every event on one line with its value whole (wrapped, never cut); where it came from (file, row,
    batch, operator) on an indented line whenever that changes."""
    out = out or sys.stdout
    print(f"{escape_controls(individual)}: {plural(len(events), 'event')} (times in UTC)", file=out)
    source = None
    for r in events:
        when = str(r.time).replace("T", " ")[:16]
        value = escape_controls(r.value)
        if r.event == "corrected":
            value = f"{escape_controls(r.old) or 'blank'} → {value}"
        field = escape_controls(r.field) or "record"
        print(_hanging(f"{when}  {escape_controls(r.season)}  {field} {escape_controls(r.event)}"
                       + (f": {value}" if value else "")), file=out)
        here = _source(r)
        if here and here != source:
            print(wrap(here), file=out)
        source = here or source
        if r.detail:
            print(wrap(str(r.detail)), file=out)


def _source(r) -> str:
    parts = []
    if r.file:
        parts.append(escape_controls(r.file) + ("" if missing(r.row) else f", row {int(r.row)}"))
    if not missing(r.batch):
        parts.append(f"batch {int(r.batch)}")
    if r.operator:
        parts.append(f"by {escape_controls(by_text(r.operator, getattr(r, 'login', '')))}")
    return ", ".join(parts)


def _hanging(text: str) -> str:
    """Wrap an already escaped line at 80 columns, continuation lines indented, no word cut."""
    return textwrap.fill(text, WIDTH, subsequent_indent="    ", break_long_words=False, break_on_hyphens=False)


class Progress:
    """A one-line progress display on stderr, shown only when stderr is a terminal."""

    def __init__(self, label: str, stream: TextIO | None = None):
        self.label, self.stream = label, stream or sys.stderr
        self.live = hasattr(self.stream, "isatty") and self.stream.isatty()
        self._last = -1

    def __call__(self, done: int, total: int, stage: str = "") -> None:
        if not self.live or total <= 0:
            return
        pct = int(100 * done / total)
        if pct == self._last:
            return
        self._last = pct
        self.stream.write("\r" + cut(f"{self.label}: {stage} {pct}%", WIDTH - 1).ljust(WIDTH - 1))
        self.stream.flush()

    def done(self) -> None:
        if self.live and self._last >= 0:
            self.stream.write("\r" + " " * (WIDTH - 1) + "\r")
            self.stream.flush()
