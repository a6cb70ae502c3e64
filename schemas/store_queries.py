"""Reading the record: batches, flags with their latest resolution, the last batch number.

Each function takes a connection inside a read (or write) transaction the caller holds."""

from __future__ import annotations

import json
import sqlite3

from fieldslope.schemas.records import RowError
from fieldslope.schemas.store_types import BatchInfo, RecordError, StoredFlag


def batches(conn: sqlite3.Connection) -> list[BatchInfo]:
    """Every batch taken in or refused, oldest first."""
    rows = conn.execute(
        "SELECT id, file_name, sha256, operator, received, outcome, n_rows, n_stored, n_quarantined, "
        "json_array_length(errors), message, encoding, delimiter, login, notes FROM batches ORDER BY id").fetchall()
    return [BatchInfo(*r[:-1], notes=tuple(r[-1].splitlines())) for r in rows]


def batch_bytes(conn: sqlite3.Connection, batch_id: int) -> bytes:
    row = conn.execute("SELECT raw FROM batches WHERE id = ?", (batch_id,)).fetchone()
    if row is None:
        raise RecordError(f"there is no batch {batch_id}; list them with fieldslope history or the dashboard.")
    return bytes(row[0])


def batch_errors(conn: sqlite3.Connection, batch_id: int) -> list[RowError]:
    row = conn.execute("SELECT errors FROM batches WHERE id = ?", (batch_id,)).fetchone()
    return [RowError(**e) for e in json.loads(row[0])] if row else []


def last_batch_id(conn: sqlite3.Connection) -> int:
    return conn.execute("SELECT coalesce(max(id), 0) FROM batches").fetchone()[0]


# every table a change of the record adds rows to (all append-only: rows are never updated or deleted)
STATE_TABLES = ("batches", "records", "flags", "resolutions", "quarantine", "supersessions", "heritability")


def record_state(conn: sqlite3.Connection) -> tuple[int, ...]:
    """The last row id of each of ``STATE_TABLES``: the tables are append-only, so equal tuples mean the
    same record (what anything computed from the record, such as the estimates, depends on)."""
    return tuple(conn.execute("SELECT " + ", ".join(f"(SELECT coalesce(max(id), 0) FROM {t})"
                                                    for t in STATE_TABLES)).fetchone())


def earlier_batch(conn: sqlite3.Connection, sha: str) -> tuple[int, str] | None:
    """(id, received) of a batch already taken in with these exact bytes, or None."""
    return conn.execute("SELECT id, received FROM batches WHERE sha256 = ? AND outcome <> 'refused'",
                        (sha,)).fetchone()


def flag_rows(conn: sqlite3.Connection, where: str, args: tuple) -> list[StoredFlag]:
    """Flags matching ``where`` (SQL over ``flags f``, ``resolutions r``, ``supersessions s``), oldest first."""
    # a resolution decides the status; without one, a later batch's value makes the flag superseded
    sql = ("SELECT f.id, f.kind, f.individual, f.season, f.field, f.value, f.message, f.batch_id, "
           "b.file_name, f.row, f.created, "
           "coalesce(r.action, CASE WHEN s.id IS NULL THEN 'open' ELSE 'superseded' END), "
           "coalesce(r.operator, 'batch ' || s.batch_id, ''), coalesce(r.created, s.created, ''), "
           "coalesce(r.reason, 'a later batch gave a new value', ''), coalesce(r.new, ''), "
           "f.quarantine_id IS NOT NULL, coalesce(r.login, ''), f.record_id FROM flags f JOIN batches b ON b.id = f.batch_id "
           "LEFT JOIN resolutions r ON r.id = (SELECT max(id) FROM resolutions WHERE flag_id = f.id) "
           "LEFT JOIN supersessions s ON s.id = (SELECT max(id) FROM supersessions WHERE flag_id = f.id) "
           f"{where} ORDER BY f.id")
    return [StoredFlag(*r[:16], quarantined=bool(r[16]), resolved_login=r[17], record_id=r[18])
            for r in conn.execute(sql, args).fetchall()]
