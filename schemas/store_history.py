"""One individual's history: every value recorded, every flag, every resolution and every flag
a later batch superseded, in time order."""

from __future__ import annotations

import sqlite3
from typing import TYPE_CHECKING, NamedTuple

from fieldslope.common.names import ID_KINDS_SQL, flag_label
from fieldslope.schemas.store_types import FieldCol, show

if TYPE_CHECKING:  # pragma: no cover   (the command line's history starts without pandas)
    import pandas as pd

COLUMNS = ["time", "season", "field", "event", "value", "old", "batch", "file", "row", "operator", "detail", "login"]
_EVENT = {"keep": "kept", "exclude": "excluded", "set": "corrected"}


class Event(NamedTuple):
    """One line of an individual's history (the fields are ``COLUMNS``)."""

    time: str
    season: str
    field: str
    event: str
    value: str
    old: str
    batch: int | None
    file: str
    row: int | None
    operator: str
    detail: str
    login: str


def events(conn: sqlite3.Connection, fields: dict[str, FieldCol], individual: str) -> list[Event]:
    """One individual's events, oldest first (at equal times: values, flags, resolutions, supersessions)."""
    names = list(fields)
    rows = conn.execute(
        "SELECT b.received, r.season, r.batch_id, b.file_name, r.row, b.operator, b.login, r.correction_id, "
        # a row moved here from another ID (a duplicate or mangled ID corrected): that ID and the flag
        f"CASE WHEN f.kind IN ({ID_KINDS_SQL}) THEN 'moved here from ID ' || c.old || ' (flag ' "
        "|| c.flag_id || ')' END"
        + "".join(f", r.{fields[n].col}" for n in names)
        + " FROM records r JOIN batches b ON b.id = r.batch_id LEFT JOIN resolutions c ON c.id = r.correction_id "
          "LEFT JOIN flags f ON f.id = c.flag_id WHERE r.individual = ? ORDER BY r.seq_batch, r.id",
        (individual,)).fetchall()
    found: list[tuple] = []
    for rec in rows:
        when, season, batch, file, row, operator, login, correction, moved = rec[:9]
        detail = moved or ("joined after a correction" if correction is not None else "")
        for name, value in zip(names, rec[9:]):
            if value is not None:
                found.append((when, 0, season, name, "recorded", show(value), "", batch, file, row, operator, detail,
                              login))
    for when, season, field, kind, value, message, batch, file, row in conn.execute(
            "SELECT f.created, f.season, f.field, f.kind, f.value, f.message, f.batch_id, b.file_name, f.row "
            "FROM flags f JOIN batches b ON b.id = f.batch_id WHERE f.individual = ? ORDER BY f.id", (individual,)):
        found.append((when, 1, season, field, f"flagged {flag_label(kind)}", value, "", batch, file, row, "", message,
                      ""))
    for when, season, field, action, old, new, operator, reason, flag_id, login in conn.execute(
            "SELECT r.created, f.season, f.field, r.action, r.old, r.new, r.operator, r.reason, f.id, r.login "
            "FROM resolutions r JOIN flags f ON f.id = r.flag_id WHERE f.individual = ? ORDER BY r.id",
            (individual,)):
        found.append((when, 2, season, field, _EVENT[action], new or "", old or "", None, "", None, operator,
                      f"flag {flag_id}: {reason}", login))
    for when, season, field, value, batch, file, flag_id, kind in conn.execute(
            "SELECT s.created, f.season, f.field, f.value, s.batch_id, b.file_name, f.id, f.kind "
            "FROM supersessions s JOIN flags f ON f.id = s.flag_id JOIN batches b ON b.id = s.batch_id "
            "WHERE f.individual = ? ORDER BY s.id", (individual,)):
        found.append((when, 3, season, field, "flag superseded", value, "", batch, file, None, "",
                      f"flag {flag_id} ({flag_label(kind)}): a later batch gave a new value", ""))
    found.sort(key=lambda e: (e[0], e[1]))      # stable: the order read within equal keys is kept
    return [Event(e[0], *e[2:]) for e in found]


def history(conn: sqlite3.Connection, fields: dict[str, FieldCol], individual: str) -> pd.DataFrame:
    """One individual's events as a table (columns ``COLUMNS``), oldest first."""
    import pandas as pd

    frame = pd.DataFrame(events(conn, fields, individual), columns=COLUMNS)
    frame["batch"] = frame["batch"].astype("Int64")
    frame["row"] = frame["row"].astype("Int64")
    return frame[COLUMNS]
