"""One individual's history: every value recorded, every flag, every resolution and every flag
a later batch superseded, in time order."""

from __future__ import annotations

import sqlite3

import pandas as pd

from fieldslope.common.names import flag_label
from fieldslope.schemas.effective import FieldCol
from fieldslope.schemas.store_checks import show

COLUMNS = ["time", "season", "field", "event", "value", "old", "batch", "file", "row", "operator", "detail", "login"]
_EVENT = {"keep": "kept", "exclude": "excluded", "set": "corrected"}


def history(conn: sqlite3.Connection, fields: dict[str, FieldCol], individual: str) -> pd.DataFrame:
    """One individual's events (columns ``COLUMNS``), oldest first."""
    names = list(fields)
    rows = conn.execute(
        "SELECT b.received, r.season, r.batch_id, b.file_name, r.row, b.operator, b.login, r.correction_id"
        + "".join(f", r.{fields[n].col}" for n in names)
        + " FROM records r JOIN batches b ON b.id = r.batch_id WHERE r.individual = ? ORDER BY r.seq_batch, r.id",
        (individual,)).fetchall()
    events: list[tuple] = []
    for rec in rows:
        when, season, batch, file, row, operator, login, correction = rec[:8]
        detail = "joined after a correction" if correction is not None else ""
        for name, value in zip(names, rec[8:]):
            if value is not None:
                events.append((when, 0, season, name, "recorded", show(value), "", batch, file, row, operator, detail,
                               login))
    for when, season, field, kind, value, message, batch, file, row in conn.execute(
            "SELECT f.created, f.season, f.field, f.kind, f.value, f.message, f.batch_id, b.file_name, f.row "
            "FROM flags f JOIN batches b ON b.id = f.batch_id WHERE f.individual = ? ORDER BY f.id", (individual,)):
        events.append((when, 1, season, field, f"flagged {flag_label(kind)}", value, "", batch, file, row, "", message,
                       ""))
    for when, season, field, action, old, new, operator, reason, flag_id, login in conn.execute(
            "SELECT r.created, f.season, f.field, r.action, r.old, r.new, r.operator, r.reason, f.id, r.login "
            "FROM resolutions r JOIN flags f ON f.id = r.flag_id WHERE f.individual = ? ORDER BY r.id",
            (individual,)):
        events.append((when, 2, season, field, _EVENT[action], new or "", old or "", None, "", None, operator,
                       f"flag {flag_id}: {reason}", login))
    for when, season, field, value, batch, file, flag_id, kind in conn.execute(
            "SELECT s.created, f.season, f.field, f.value, s.batch_id, b.file_name, f.id, f.kind "
            "FROM supersessions s JOIN flags f ON f.id = s.flag_id JOIN batches b ON b.id = s.batch_id "
            "WHERE f.individual = ? ORDER BY s.id", (individual,)):
        events.append((when, 3, season, field, "flag superseded", value, "", batch, file, None, "",
                       f"flag {flag_id} ({flag_label(kind)}): a later batch gave a new value", ""))
    frame = pd.DataFrame(events, columns=["time", "_order", *COLUMNS[1:]])
    frame = frame.sort_values(["time", "_order"], kind="stable").drop(columns="_order").reset_index(drop=True)
    frame["batch"] = frame["batch"].astype("Int64")
    frame["row"] = frame["row"].astype("Int64")
    return frame[COLUMNS]
