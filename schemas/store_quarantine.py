"""Quarantined rows: rows with hard errors kept (under --accept-valid) with their raw cells,
visible as flags of kind ``quarantined`` and fixable one cell at a time. When every error
of a row is fixed, the row joins the record; the corrections stay audited.

Excluding any flag of a quarantined row leaves the whole row out: it never joins, and every
other flag of that row is closed with the same reason (one ``exclude`` resolution row each).
A row left out stays out; a corrected row comes back as part of a new batch."""

from __future__ import annotations

import json
import re
import sqlite3
from typing import Callable

import pandas as pd

from fieldslope.common.errors import SheetError
from fieldslope.common.names import Kind
from fieldslope.schemas.batch_plan import BatchPlan, now
from fieldslope.schemas.store_types import FieldCol
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import CheckReport, FlagNote, RowError, Sheet
from fieldslope.schemas.store_queries import last_batch_id
from fieldslope.schemas.store_rows import insert_flags, insert_records
from fieldslope.schemas.store_supersede import supersede
from fieldslope.schemas.store_types import RecordError, Resolution
from fieldslope.schemas.store_checks import UNKNOWN_ID_REASON

#: the one audit row of a decision on a flag (keep, exclude or set), shared by every resolver
INSERT_RESOLUTION = ("INSERT INTO resolutions(flag_id, action, old, new, reason, operator, login, created, "
                     "after_batch) VALUES (?,?,?,?,?,?,?,?,?)")

_POINT_NUMBER = re.compile(r"^[+-]?\d*\.\d+$")

#: ``evaluate(conn, plan, accept_valid)``: the intake's checks of a batch against the record
#: (``store_intake.Intake.evaluate``), giving ``errors``, ``flags`` and the ``valid`` rows.
Evaluate = Callable[..., object]


def quarantine_rows(conn: sqlite3.Connection, protocol: Protocol, batch_id: int, report: CheckReport,
                    errors: list[RowError], bad_rows: list[int], created: str) -> None:
    """Keep each bad row's raw cells aside, with one ``quarantined`` flag per error."""
    sheet, p = report.sheet, protocol
    columns = [str(c) for c in sheet.frame.columns]
    cells = sheet.frame.to_numpy(dtype=object)
    pos_of = {r: i for i, r in enumerate(sheet.row_numbers)}
    by_row: dict[int, list[RowError]] = {}
    for e in errors:
        by_row.setdefault(e.row, []).append(e)
    for r in bad_rows:
        raw = [None if v is None or (isinstance(v, float) and v != v) else str(v) for v in cells[pos_of[r]]]
        row_cells = dict(zip(columns, raw))
        ind = row_cells.get(p.id_col) or ""
        season = row_cells.get(p.season_col) or ""
        payload = json.dumps({"columns": columns, "cells": raw, "decimal": sheet.decimal, "file": sheet.name})
        qid = conn.execute("INSERT INTO quarantine(batch_id, row, individual, season, cells, errors) "
                           "VALUES (?,?,?,?,?,?)",
                           (batch_id, r, ind, season, payload,
                            json.dumps([e.__dict__ for e in by_row[r]]))).lastrowid
        notes = [FlagNote(r, ind, season, e.column, Kind.QUARANTINED, e.value,
                          f"row {r} was quarantined: {e.sentence()}; set the right value "
                          "(fieldslope resolve FLAG --set VALUE) or leave the row out (--exclude)")
                 for e in by_row[r]]
        insert_flags(conn, batch_id, notes, {}, created, quarantine_id=qid)


class QuarantineFix:
    """Resolves the flags of quarantined rows: a corrected row joins the record once it is valid."""

    def __init__(self, protocol: Protocol, fields: dict[str, FieldCol], evaluate: Evaluate):
        self.protocol, self.fields, self.evaluate = protocol, fields, evaluate

    def resolve(self, conn: sqlite3.Connection, flag_id: int, qid: int, field: str, flagged: str, action: str,
                value: str | None, reason: str, people: tuple[str, str]) -> Resolution:
        """Exclude the row, or set one of its cells (the row joins the record when no error is left)."""
        batch_id, row, payload, _ = conn.execute(
            "SELECT batch_id, row, cells, errors FROM quarantine WHERE id = ?", (qid,)).fetchone()
        self.refuse_if_closed(conn, qid, action)
        after = last_batch_id(conn)
        if action == "exclude":
            others = conn.execute("SELECT id, value FROM flags WHERE quarantine_id = ? AND id <> ? ORDER BY id",
                                  (qid, flag_id)).fetchall()
            when = now()
            conn.executemany(INSERT_RESOLUTION, [(fid, "exclude", old, None, reason, *people, when, after)
                                                  for fid, old in [(flag_id, flagged), *others]])
            also = f"; its {len(others)} other flag(s) closed with the same reason" if others else ""
            return Resolution(flag_id, "exclude", old=flagged,
                              message=f"flag {flag_id}: row {row} of batch {batch_id} stays out of the record{also}.")
        return self._set(conn, flag_id, qid, batch_id, row, json.loads(payload), field, flagged, value, reason,
                         people, after)

    @staticmethod
    def refuse_if_closed(conn: sqlite3.Connection, qid: int, action: str) -> None:
        """Raise ``RecordError`` when the row joined the record or was left out already, or for ``keep``."""
        batch_id, row = conn.execute("SELECT batch_id, row FROM quarantine WHERE id = ?", (qid,)).fetchone()
        joined = conn.execute("SELECT 1 FROM records WHERE batch_id = ? AND row = ? AND correction_id IS NOT NULL",
                              (batch_id, row)).fetchone()
        if joined:
            raise RecordError(f"row {row} of batch {batch_id} has already joined the record; correct its values "
                              "through their own flags.")
        left_out = conn.execute(
            "SELECT f.id, r.reason FROM resolutions r JOIN flags f ON f.id = r.flag_id "
            "WHERE f.quarantine_id = ? AND r.action = 'exclude' ORDER BY r.id LIMIT 1", (qid,)).fetchone()
        if left_out:
            raise RecordError(f"row {row} of batch {batch_id} was left out of the record (flag {left_out[0]}: "
                              f"{left_out[1]}); it cannot join now: take the corrected row in with a new batch.")
        if action == "keep":
            raise RecordError("a quarantined cell cannot be kept as it is; give the right value with --set or "
                              "leave the row out with --exclude.")

    def _set(self, conn: sqlite3.Connection, flag_id: int, qid: int, batch_id: int, row: int, data: dict,
             field: str, flagged: str, value: str | None, reason: str, people: tuple[str, str],
             after: int) -> Resolution:
        """Set one cell of the kept-aside row, check the row again, and let it join once it is valid."""
        fixes = dict(conn.execute(
            "SELECT f.field, r.new FROM resolutions r JOIN flags f ON f.id = r.flag_id "
            "WHERE f.quarantine_id = ? AND r.action = 'set' ORDER BY r.id", (qid,)).fetchall())
        typed = str(value).strip()
        if data["decimal"] == "," and _POINT_NUMBER.match(typed):
            typed = typed.replace(".", ",")
        fixes[field] = typed
        try:
            plan = BatchPlan(data["file"], b"", None, self._check(_fixed_sheet(data, fixes, row)))
        except SheetError as exc:
            raise RecordError(f"row {row} cannot be checked with that value ({exc}); nothing was changed.") from None
        outcome = self.evaluate(conn, plan, accept_valid=False)
        still = [e for e in outcome.errors if e.column == field]
        if still:
            raise RecordError(f"{value!r} for {field} is still not usable: {still[0].reason}; nothing was changed.")
        res_id = conn.execute(INSERT_RESOLUTION, (flag_id, "set", flagged, str(value).strip(), reason, *people,
                                                   now(), after)).lastrowid
        if outcome.errors:
            left = tuple(e.sentence() for e in outcome.errors)
            return Resolution(flag_id, "set", old=flagged, new=str(value).strip(), remaining=left,
                              message=f"flag {flag_id}: {field} fixed; row {row} still has "
                                      f"{len(left)} error(s): {'; '.join(left)}.")
        record_ids = insert_records(conn, self.protocol, self.fields, batch_id, after, outcome.valid,
                                    lambda *a: None, correction_id=res_id)
        supersede(conn, self.protocol, batch_id, outcome.valid, record_ids, now(), before=after + 1)
        insert_flags(conn, batch_id, outcome.flags, record_ids, now())
        also = self.rejoin(conn, people, after, f"row {row} of batch {batch_id} joined (flag {flag_id})")
        return Resolution(flag_id, "set", old=flagged, new=str(value).strip(), joined=True,
                          message=f"flag {flag_id}: {field} set to {str(value).strip()}; row {row} of batch "
                                  f"{batch_id} is now valid and joined the record"
                                  + "".join(f"; {s}" for s in also) + ".")

    def rejoin(self, conn: sqlite3.Connection, people: tuple[str, str], after: int, cause: str) -> list[str]:
        """Census rows kept aside only because their ID was not on record join by themselves once it is (its
        measurement row arrived, or a mangled ID was corrected): each of the row's flags gets a ``keep``
        row naming ``cause``. Returns one sentence per row that joined."""
        p = self.protocol
        candidates = conn.execute(
            "SELECT q.id, q.batch_id, q.row, q.cells, q.errors FROM quarantine q "
            "WHERE EXISTS (SELECT 1 FROM records r WHERE r.individual = q.individual AND r.season = q.season) "
            "AND NOT EXISTS (SELECT 1 FROM records r WHERE r.batch_id = q.batch_id AND r.row = q.row "
            "AND r.correction_id IS NOT NULL) "
            "AND NOT EXISTS (SELECT 1 FROM flags f JOIN resolutions x ON x.flag_id = f.id "
            "WHERE f.quarantine_id = q.id AND x.action = 'exclude') ORDER BY q.id").fetchall()
        said = []
        for qid, batch_id, row, payload, errors in candidates:
            if not any(e["column"] == p.id_col and e["reason"].startswith(UNKNOWN_ID_REASON)
                       for e in json.loads(errors)):
                continue
            fixes = dict(conn.execute(
                "SELECT f.field, r.new FROM resolutions r JOIN flags f ON f.id = r.flag_id "
                "WHERE f.quarantine_id = ? AND r.action = 'set' ORDER BY r.id", (qid,)).fetchall())
            data = json.loads(payload)
            try:
                plan = BatchPlan(data["file"], b"", None, self._check(_fixed_sheet(data, fixes, row)))
            except SheetError:
                continue
            outcome = self.evaluate(conn, plan, accept_valid=False)
            if outcome.errors:
                continue
            flags = conn.execute("SELECT f.id, f.value FROM flags f WHERE f.quarantine_id = ? AND NOT EXISTS "
                                 "(SELECT 1 FROM resolutions r WHERE r.flag_id = f.id) ORDER BY f.id",
                                 (qid,)).fetchall()
            stamp, why = now(), f"joined by itself: {cause}"
            res_ids = [conn.execute(INSERT_RESOLUTION, (fid, "keep", old, None, why, *people, stamp, after)).lastrowid
                       for fid, old in flags]
            if not res_ids:
                continue
            record_ids = insert_records(conn, p, self.fields, batch_id, after, outcome.valid, lambda *a: None,
                                        correction_id=res_ids[0])
            supersede(conn, p, batch_id, outcome.valid, record_ids, stamp, before=after + 1)
            insert_flags(conn, batch_id, outcome.flags, record_ids, stamp)
            said.append(f"census row {row} of batch {batch_id} joined the record by itself")
        return said

    def _check(self, sheet: Sheet) -> CheckReport:
        from fieldslope.schemas.validate import check_sheet
        return check_sheet(self.protocol, sheet)


def _fixed_sheet(data: dict, fixes: dict[str, str], row: int) -> Sheet:
    """The kept-aside row as a one-row sheet (its own sheet row number) with the cells set so far."""
    columns, cells = list(data["columns"]), list(data["cells"])
    for col, new in fixes.items():
        if col not in columns:
            columns.append(col)
            cells.append(None)
        cells[columns.index(col)] = new
    return Sheet(data["file"], pd.DataFrame([cells], columns=columns, dtype=object), [row], "utf-8", ",",
                 data["decimal"])
