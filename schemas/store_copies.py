"""Decisions that reach past one flag: copies of one ID, one value flagged twice, a row moved to its right ID.

- A ``duplicate_id`` flag sits on each copy (sheet row) of one ID in one season of a batch. Keeping a copy
  leaves the other copies out; excluding a copy leaves that row out, and once one copy is left its flag is
  settled as kept; correcting a copy moves the row to the right ID. Flags on the values of a copy that is
  left out or moved are closed with the same reason.
- Keeping or excluding an out-of-range value settles its outlier flag for the same stored value (and the
  other way round).
- Correcting a ``duplicate_id`` copy or a ``mangled_id``: the row is stored again under the ID given
  (checked like a new row, its record naming the correction) and the old row is left out.

Every flag closed here gets its own ``resolutions`` row naming the decision it follows from."""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from typing import Callable

import pandas as pd

from fieldslope.common.errors import SheetError
from fieldslope.common.names import ID_KINDS, Kind, flag_label
from fieldslope.schemas.batch_plan import BatchPlan, now
from fieldslope.schemas.effective import output_fields
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import Sheet
from fieldslope.schemas.store_quarantine import INSERT_RESOLUTION
from fieldslope.schemas.store_rows import insert_flags, insert_records
from fieldslope.schemas.store_supersede import supersede
from fieldslope.schemas.store_queries import flag_rows
from fieldslope.schemas.store_types import FieldCol, RecordError, StoredFlag, show

#: flags that ask one question of one value (is it plausible?): one answer settles both
SAME_VALUE_KINDS = (Kind.OUT_OF_RANGE, Kind.OUTLIER)

OPEN = ("f.quarantine_id IS NULL AND NOT EXISTS (SELECT 1 FROM resolutions r WHERE r.flag_id = f.id) "
        "AND NOT EXISTS (SELECT 1 FROM supersessions s WHERE s.flag_id = f.id)")


@dataclass(frozen=True)
class Copy:
    """One copy (sheet row) of a duplicated ID, with its stored values and its flag's status."""

    flag_id: int
    row: int | None
    status: str                   # open | keep | exclude | set (moved to another ID) | superseded
    values: tuple[tuple[str, str], ...]   # (field, value as stored, "" when blank), protocol order
    new_id: str = ""              # the ID a moved copy went to


def flag_row(conn: sqlite3.Connection, flag_id: int) -> StoredFlag | None:
    found = flag_rows(conn, "WHERE f.id = ?", (flag_id,))
    return found[0] if found else None


def copies(conn: sqlite3.Connection, protocol: Protocol, fields: dict[str, FieldCol], flag_id: int) -> list[Copy]:
    """Every copy of the duplicated ID behind ``flag_id``, in sheet-row order."""
    flag = flag_row(conn, flag_id)
    if flag is None:
        raise RecordError(f"there is no flag {flag_id}; list the flags with fieldslope flags --all.")
    if flag.kind != Kind.DUPLICATE_ID:
        raise RecordError(f"flag {flag_id} is not a duplicate ID flag; only those have copies.")
    names = [n for n in output_fields(protocol) if n in fields]
    out = []
    for fid, row, record_id, status, new in conn.execute(
            "SELECT f.id, f.row, f.record_id, coalesce(r.action, CASE WHEN s.id IS NULL THEN 'open' "
            "ELSE 'superseded' END), coalesce(r.new, '') FROM flags f "
            "LEFT JOIN resolutions r ON r.id = (SELECT max(id) FROM resolutions WHERE flag_id = f.id) "
            "LEFT JOIN supersessions s ON s.id = (SELECT max(id) FROM supersessions WHERE flag_id = f.id) "
            "WHERE f.kind = ? AND f.batch_id = ? AND f.individual = ? AND f.season = ? "
            "AND f.quarantine_id IS NULL ORDER BY f.row, f.id",
            (Kind.DUPLICATE_ID, flag.batch_id, flag.individual, flag.season)).fetchall():
        cells = conn.execute(f"SELECT {', '.join(fields[n].col for n in names) or 'NULL'} FROM records "
                             "WHERE id = ?", (record_id,)).fetchone() if names else ()
        values = tuple((n, show(v)) for n, v in zip(names, cells or [None] * len(names)))
        out.append(Copy(fid, row, status, values, new if status == "set" else ""))
    return out


def close_flags(conn: sqlite3.Connection, ids_and_values: list[tuple[int, str]], action: str, reason: str,
                people: tuple[str, str], after: int) -> None:
    """One ``resolutions`` row for each (flag id, flagged value)."""
    stamp = now()
    conn.executemany(INSERT_RESOLUTION, [(fid, action, old, None, reason, *people, stamp, after)
                                         for fid, old in ids_and_values])


def open_flags_of_records(conn: sqlite3.Connection, record_ids: list[int], but: int) -> list[tuple[int, str]]:
    if not record_ids:
        return []
    marks = ",".join("?" * len(record_ids))
    return conn.execute(f"SELECT f.id, f.value FROM flags f WHERE f.record_id IN ({marks}) AND f.id <> ? AND {OPEN} "
                        "ORDER BY f.id", (*record_ids, but)).fetchall()


def settle(conn: sqlite3.Connection, flag: StoredFlag, action: str, reason: str, people: tuple[str, str],
           after: int) -> str:
    """What a keep or exclude on ``flag`` settles besides it; returns the sentence saying so ("" if nothing)."""
    if flag.kind in SAME_VALUE_KINDS and flag.record_id is not None:
        same = conn.execute(
            f"SELECT f.id, f.value, f.kind FROM flags f WHERE f.record_id = ? AND f.field = ? AND f.id <> ? "
            f"AND f.kind IN ({','.join('?' * len(SAME_VALUE_KINDS))}) AND {OPEN} ORDER BY f.id",
            (flag.record_id, flag.field, flag.id, *SAME_VALUE_KINDS)).fetchall()
        close_flags(conn, [(fid, old) for fid, old, _ in same], action, f"{reason} (decided under flag {flag.id})",
                    people, after)
        return "; ".join(f"its {flag_label(kind)} flag {fid} {_verb(action)} with it" for fid, _, kind in same)
    if flag.kind != Kind.DUPLICATE_ID:
        return ""
    if action == "keep":
        others = _open_copies(conn, flag)
        close_flags(conn, [(fid, old) for fid, old, _, _ in others], "exclude",
                    f"{reason} (row {flag.row} kept under flag {flag.id})", people, after)
        values = open_flags_of_records(conn, [rid for _, _, _, rid in others if rid is not None], flag.id)
        close_flags(conn, values, "exclude", f"{reason} (copy left out under flag {flag.id})", people, after)
        rows = ", ".join(str(r) for _, _, r, _ in others)
        return f"the other {'copy' if len(others) == 1 else 'copies'} (row {rows}) left out" if others else ""
    values = open_flags_of_records(conn, [flag.record_id] if flag.record_id is not None else [], flag.id)
    close_flags(conn, values, "exclude", f"{reason} (copy left out under flag {flag.id})", people, after)
    return settle_last_copy(conn, flag, reason, people, after)


def settle_last_copy(conn: sqlite3.Connection, flag: StoredFlag, reason: str, people: tuple[str, str],
                     after: int) -> str:
    """When one copy is left undecided and no other copy is kept, it is the record: keep it."""
    others = _open_copies(conn, flag)
    kept = conn.execute(
        "SELECT 1 FROM flags f JOIN resolutions r ON r.id = (SELECT max(id) FROM resolutions WHERE flag_id = f.id) "
        "WHERE f.kind = ? AND f.batch_id = ? AND f.individual = ? AND f.season = ? AND r.action = 'keep'",
        (Kind.DUPLICATE_ID, flag.batch_id, flag.individual, flag.season)).fetchone()
    if len(others) != 1 or kept:
        return ""
    fid, old, row, _ = others[0]
    close_flags(conn, [(fid, old)], "keep", f"{reason} (the only copy left after flag {flag.id})", people, after)
    return f"row {row}, the only copy left, kept"


def _open_copies(conn: sqlite3.Connection, flag: StoredFlag) -> list[tuple[int, str, int, int | None]]:
    return conn.execute(
        f"SELECT f.id, f.value, f.row, f.record_id FROM flags f WHERE f.kind = ? AND f.batch_id = ? "
        f"AND f.individual = ? AND f.season = ? AND f.id <> ? AND {OPEN} ORDER BY f.row",
        (Kind.DUPLICATE_ID, flag.batch_id, flag.individual, flag.season, flag.id)).fetchall()


def moved(conn: sqlite3.Connection, record_id: int | None) -> str:
    """The ID the row behind ``record_id`` was moved to, or ""."""
    if record_id is None:
        return ""
    row = conn.execute(
        "SELECT r.new FROM resolutions r JOIN flags f ON f.id = r.flag_id WHERE f.record_id = ? AND r.action = 'set' "
        f"AND f.kind IN ({','.join('?' * len(ID_KINDS))}) ORDER BY r.id DESC LIMIT 1",
        (record_id, *ID_KINDS)).fetchone()
    return row[0] if row else ""


class RowMove:
    """Stores a row again under the ID it should have had (a duplicate copy or a mangled ID corrected)."""

    def __init__(self, protocol: Protocol, fields: dict[str, FieldCol], evaluate: Callable[..., object]):
        self.protocol, self.fields, self.evaluate = protocol, fields, evaluate

    def move(self, conn: sqlite3.Connection, flag: StoredFlag, value: str, reason: str, people: tuple[str, str],
             after: int) -> tuple[str, str]:
        """Move the flagged row to ID ``value``; return (new ID, sentence of what else was settled)."""
        p, new_id = self.protocol, str(value).strip()
        if flag.record_id is None:
            raise RecordError(f"flag {flag.id} has no stored row to move; resolve it with --keep or --exclude.")
        if new_id == flag.individual:
            raise RecordError(f"{new_id!r} is the ID row {flag.row} has now; to keep this row as it is, use keep.")
        names = [n for n in self.fields]
        cells = conn.execute(f"SELECT {', '.join(self.fields[n].col for n in names) or 'NULL'} FROM records "
                             "WHERE id = ?", (flag.record_id,)).fetchone()
        file_name = conn.execute("SELECT file_name FROM batches WHERE id = ?", (flag.batch_id,)).fetchone()[0]
        columns = [p.id_col, p.season_col, *names]
        raw = [new_id, flag.season, *[show(v) or None for v in (cells or [])]]
        frame = pd.DataFrame([raw], columns=columns, dtype=object)
        frame = frame.loc[:, [c in (p.id_col, p.season_col) or frame[c].notna().any() for c in columns]]
        try:
            from fieldslope.schemas.validate import check_sheet
            report = check_sheet(p, Sheet(file_name, frame, [flag.row or 0], "utf-8", ",", "."))
        except SheetError as exc:
            raise RecordError(f"row {flag.row} cannot be checked under ID {new_id!r} ({exc}); nothing was changed.") \
                from None
        outcome = self.evaluate(conn, BatchPlan(file_name, b"", None, report), accept_valid=False)
        if outcome.errors:
            raise RecordError(f"row {flag.row} cannot move to ID {new_id!r}: {outcome.errors[0].sentence()}; "
                              "nothing was changed.")
        still = [f for f in outcome.flags if f.kind == Kind.MANGLED_ID]
        if still:
            raise RecordError(f"{still[0].message.split(';')[0]}; give the ID as written on the paper sheet. "
                              "Nothing was changed.")
        res_id = conn.execute(INSERT_RESOLUTION, (flag.id, "set", flag.individual, new_id, reason, *people, now(),
                                                  after)).lastrowid
        record_ids = insert_records(conn, p, self.fields, flag.batch_id, after, outcome.valid, lambda *a: None,
                                    correction_id=res_id)
        supersede(conn, p, flag.batch_id, outcome.valid, record_ids, now(), before=after + 1)
        insert_flags(conn, flag.batch_id, outcome.flags, record_ids, now())
        rest = open_flags_of_records(conn, [flag.record_id], flag.id)
        close_flags(conn, rest, "exclude", f"{reason} (row {flag.row} moved to ID {new_id} under flag {flag.id}; "
                    "its values are checked again under that ID)", people, after)
        also = settle_last_copy(conn, flag, reason, people, after) if flag.kind == Kind.DUPLICATE_ID else ""
        return new_id, also


def _verb(action: str) -> str:
    return {"keep": "kept", "exclude": "left out", "set": "corrected"}[action]
