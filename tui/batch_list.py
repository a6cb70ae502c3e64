"""The batches taken in, as the station manager reads them: outcome, rows, operator, time and file.

Shared by ``fieldslope batches`` and the Intake screen; no Textual here.
"""

from __future__ import annotations

from datetime import date, datetime

from fieldslope.schemas.store_types import BatchInfo


def local_time(received: str) -> datetime | None:
    """The stored UTC time as this computer's local time (None when the text is not a time)."""
    try:
        when = datetime.fromisoformat(received)
    except (TypeError, ValueError):
        return None
    return when.astimezone() if when.tzinfo else when


def when_text(received: str, short: bool = False) -> str:
    """Local date and time to the minute; with ``short`` the year is left out when it is this year."""
    when = local_time(received)
    if when is None:
        return str(received)
    return when.strftime("%m-%d %H:%M" if short and when.year == date.today().year else "%Y-%m-%d %H:%M")


def rows_text(b: BatchInfo) -> str:
    """How many rows the file had and what became of them, in words."""
    rows = plural(b.n_rows, "row")
    if b.outcome == "refused":
        return f"{rows}, none stored ({plural(b.n_errors, 'error')})" if b.n_errors else f"{rows}, none stored"
    if b.outcome == "partial":
        return f"{b.n_stored} of {rows} stored, {b.n_quarantined} quarantined"
    return f"{b.n_stored} of {rows} stored" if b.n_stored != b.n_rows else f"{rows} stored"


def plural(n: int, word: str, many: str | None = None) -> str:
    """``1 row``, ``2 rows``, ``1 batch``, ``3 batches``."""
    if n == 1:
        return f"1 {word}"
    return f"{n} {many or (word + 'es' if word.endswith(('s', 'sh', 'ch', 'x')) else word + 's')}"


def on_day(batches: list[BatchInfo], day: date) -> list[BatchInfo]:
    """The batches received on ``day`` (local calendar day)."""
    out = []
    for b in batches:
        when = local_time(b.received)
        if when is not None and when.date() == day:
            out.append(b)
    return out


def parse_day(text: str, today: date | None = None) -> date:
    """``today``, ``yesterday`` or a date written YYYY-MM-DD; ValueError with a plain sentence otherwise."""
    from datetime import timedelta

    today = today or date.today()
    word = text.strip().lower()
    if word == "today":
        return today
    if word == "yesterday":
        return today - timedelta(days=1)
    try:
        return date.fromisoformat(text.strip())
    except ValueError:
        raise ValueError(f"{text!r} is not a day; write it as YYYY-MM-DD, or today or yesterday") from None
