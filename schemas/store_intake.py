"""Taking a batch in: check it against the record, then store it whole, store its valid rows and
quarantine the rest, or store only the record of its refusal.

``Intake`` works on a connection inside the transaction ``Store`` holds; ``Evaluation`` is what
the checks found (the same for a dry run and for the real import)."""

from __future__ import annotations

import json
import sqlite3
from dataclasses import replace

import pandas as pd

from fieldslope.common.words import plural
from fieldslope.common.names import Outcome
from fieldslope.schemas import effective as eff
from fieldslope.schemas import store_checks as checks
from fieldslope.schemas.batch_plan import BatchPlan, Progress, now
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.store_queries import earlier_batch
from fieldslope.schemas.store_fields import MAX_FIELDS, add_fields
from fieldslope.schemas.store_quarantine import quarantine_rows
from fieldslope.schemas.store_rows import insert_flags, insert_records
from fieldslope.schemas.store_supersede import supersede
from fieldslope.schemas.store_types import ImportResult
from fieldslope.schemas.records import OPTIONAL_TEXT    # visit notes: stored, never compared with the record


def duplicate_message(name: str, batch_id: int, received: str) -> str:
    return f"{name}: these exact bytes were already taken in as batch {batch_id} on {received}; nothing was done."


class Evaluation:
    """What the checks found for one batch: its outcome, errors, flags, valid rows and rows to quarantine."""

    def __init__(self, plan: BatchPlan, outcome: str, errors=(), flags=(), valid=None, bad_rows=(),
                 message: str = "", duplicate_of: int | None = None):
        self.plan, self.outcome, self.errors, self.flags = plan, outcome, list(errors), list(flags)
        self.valid = valid if valid is not None else pd.DataFrame()
        self.bad_rows, self.message, self.duplicate_of = list(bad_rows), message, duplicate_of

    def result(self, batch_id: int | None, checked_only: bool = False) -> ImportResult:
        report = self.plan.report
        stored = self.outcome in (Outcome.STORED, Outcome.PARTIAL)
        return ImportResult(
            file_name=self.plan.name, outcome=self.outcome,
            batch_id=self.duplicate_of if self.outcome == Outcome.DUPLICATE else batch_id,
            n_rows=report.n_rows if report else 0, n_stored=len(self.valid) if stored else 0,
            n_quarantined=len(self.bad_rows) if self.outcome == Outcome.PARTIAL else 0,
            errors=tuple(self.errors), flags=tuple(self.flags), message=self.message, checked_only=checked_only,
            notes=self.plan.notes)


class Intake:
    """Checks and stores batches for one protocol and the store's field columns."""

    def __init__(self, protocol: Protocol, fields: dict[str, eff.FieldCol]):
        self.protocol, self.fields = protocol, fields

    def evaluate(self, conn: sqlite3.Connection, plan: BatchPlan, accept_valid: bool,
                 recheck: bool = False) -> Evaluation:
        """Every check of the batch against the record (nothing is written)."""
        dup = plan.sha and not recheck and earlier_batch(conn, plan.sha)
        if dup:
            return Evaluation(plan, Outcome.DUPLICATE, duplicate_of=dup[0], message=duplicate_message(plan.name, *dup))
        if plan.report is None:
            return Evaluation(plan, Outcome.REFUSED, message=plan.refusal)
        p, report = self.protocol, plan.report
        valid = report.valid
        seasons = sorted({str(v) for v in pd.unique(valid[p.season_col].to_numpy(dtype=object))})
        record = eff.latest(conn, p, self.fields, seasons=seasons) if seasons else pd.DataFrame()
        errors = list(report.errors)
        if report.census:
            extra = checks.census_unknown(p, valid, record)
            if extra:
                errors = sorted(errors + extra, key=lambda e: e.row)
                valid = valid[~valid["_row"].isin({e.row for e in extra})]
        bad_rows = sorted({e.row for e in errors})
        n = report.n_rows
        bad = set(bad_rows)
        # the soft problems of the valid rows: stored as flags, or for a refused batch said by a check
        flags = [f for f in report.flags if f.row not in bad]
        compared = [f for f in self.fields if f in valid.columns and f not in OPTIONAL_TEXT]  # not visit notes
        flags += checks.differs_from_record(p, valid, record, compared)
        flags += checks.new_outliers(p, valid, record)
        known = None
        if any(c in valid.columns and valid[c].notna().any() for c in p.parent_cols):
            known = {r[0] for r in conn.execute("SELECT DISTINCT individual FROM records")}
            flags += checks.unknown_parents(p, valid, known)
        if not report.census:
            if known is None:
                known = {r[0] for r in conn.execute("SELECT DISTINCT individual FROM records")}
            flags += checks.lookalike_ids(p, valid, known)
        flags.sort(key=lambda f: f.row)
        if errors and not accept_valid:
            msg = (f"{plan.name}: {len(bad_rows)} of {plural(n, 'row')} {'has' if len(bad_rows) == 1 else 'have'} "
                   "errors, so nothing was stored; fix them and "
                   "import again, or import with --accept-valid to store the valid rows and quarantine the others.")
            return Evaluation(plan, Outcome.REFUSED, errors=errors, flags=flags, message=msg)
        outcome = Outcome.PARTIAL if errors else Outcome.STORED
        stored = len(valid)
        msg = f"{plan.name}: {stored} of {plural(n, 'row')} stored" + (
            f", {len(bad_rows)} quarantined (fix them with fieldslope resolve)" if bad_rows else "") + "."
        return Evaluation(plan, outcome, errors=errors, flags=flags, valid=valid, bad_rows=bad_rows, message=msg)

    def store(self, conn: sqlite3.Connection, plan: BatchPlan, people: tuple[str, str], accept_valid: bool,
              progress: Progress) -> ImportResult:
        """Check the batch again inside the write transaction and store what the outcome allows; ``people`` is
        (operator, login), kept with the batch beside the reader's notes."""
        out = self.evaluate(conn, plan, accept_valid)
        if out.outcome == Outcome.DUPLICATE:
            return out.result(out.duplicate_of)
        sheet = plan.report.sheet if plan.report else None
        errors_json = json.dumps([e.__dict__ for e in out.errors])
        fields, notes = self.fields, plan.notes
        if out.outcome != Outcome.REFUSED and plan.report.kept:     # extra columns: text beside each record
            extra = add_fields(conn, [(c, "text") for c in plan.report.kept], limit=MAX_FIELDS)
            fields = {**self.fields, **extra}
            left = [c for c in plan.report.kept if c not in extra]
            if left:
                notes += (f"{plural(len(left), 'column')} ({', '.join(map(repr, left[:10]))}) stay in the stored "
                          f"file only: the study keeps at most {MAX_FIELDS} columns with its records.",)
        cur = conn.execute(
            "INSERT INTO batches(file_name, sha256, raw, encoding, delimiter, operator, login, notes, received, "
            "outcome, n_rows, n_stored, n_quarantined, errors, message) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (plan.name, plan.sha, plan.data, sheet.encoding if sheet else "", sheet.delimiter if sheet else "",
             *people, "\n".join(notes), now(), out.outcome, plan.report.n_rows if plan.report else 0,
             len(out.valid) if out.outcome != Outcome.REFUSED else 0,
             len(out.bad_rows) if out.outcome == Outcome.PARTIAL else 0, errors_json, out.message))
        batch_id = cur.lastrowid
        if out.outcome == Outcome.REFUSED:     # nothing stored, so no flags to speak of
            return replace(out.result(batch_id), flags=())
        record_ids = insert_records(conn, self.protocol, fields, batch_id, batch_id, out.valid, progress)
        created = now()
        insert_flags(conn, batch_id, out.flags, record_ids, created)
        supersede(conn, self.protocol, batch_id, out.valid, record_ids, created)
        if out.bad_rows:
            quarantine_rows(conn, self.protocol, batch_id, plan.report, out.errors, out.bad_rows, created)
        progress(1, 1, "stored")
        return replace(out.result(batch_id), notes=notes)
