"""The record store: one SQLite file holding every batch, value, flag and correction.

Nothing is overwritten or deleted (triggers refuse it); a correction or an exclusion
is a new row saying who, when, old, new and why. Every write is one ``BEGIN
IMMEDIATE`` transaction, so a batch is wholly stored or not at all, also after a
crash. Errors reach the caller as one :class:`~schemas.errors.StoreError` sentence.
"""

from __future__ import annotations

import contextlib
import getpass
import hashlib
import json
import math
import sqlite3
import threading
from dataclasses import replace
from itertools import islice, repeat
from pathlib import Path

import numpy as np
import pandas as pd

from fieldslope.schemas import effective as eff
from fieldslope.schemas import store_checks as checks
from fieldslope.schemas import store_health as health
from fieldslope.schemas import store_schema as schema
from fieldslope.common.errors import SheetError, StoreError
from fieldslope.common.names import Outcome
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import CheckReport, FlagNote, RowError
from fieldslope.schemas.batch_plan import BatchPlan, Progress, now
from fieldslope.schemas.store_quarantine import QuarantineFix
from fieldslope.schemas.store_supersede import supersede
from fieldslope.schemas.store_types import (BatchInfo, HeritabilityEntry, ImportResult, RecordError, Resolution,
                                            StoredFlag)

OPTIONAL_TEXT = ("date", "observer", "notes")
_CHUNK = 20_000


def default_operator() -> str:
    try:
        return getpass.getuser()
    except Exception:  # no login name (containers): still say something true
        return "unknown"


class Store:
    """The study's record. Safe to share between threads (one connection per thread)."""

    def __init__(self, path: str | Path, protocol: Protocol, readonly: bool = False):
        self.path = Path(path)
        self.protocol = protocol
        self.readonly = readonly
        self._local = threading.local()
        self._lock = threading.Lock()
        self._conns: list[sqlite3.Connection] = []
        self._writes = 0
        self.damaged = ""              # one sentence when the open-time check found the store damaged
        self.checked_on_open = False   # the last session left a -wal behind, so the store was checked
        if not self.path.exists():
            raise StoreError(f"{self.path}: no record store here; create the study with fieldslope init.")
        unclean = health.needs_check(self.path)
        with self._errors():
            conn = self._conn()
            if unclean:
                conn = self._check_on_open(conn)
            if self.damaged:
                self.fields = self._load_fields(conn)
                return
            if self.readonly:
                version = conn.execute("PRAGMA user_version").fetchone()[0]
                if version != schema.SCHEMA_VERSION:
                    raise StoreError(f"{self.path}: the store needs an upgrade; open it once without read-only.")
            else:
                schema.migrate(conn, self.path)
                self._ensure_fields(conn)
            self.fields = self._load_fields(conn)

    def _check_on_open(self, conn: sqlite3.Connection) -> sqlite3.Connection:
        """After an unclean shutdown: quick_check and foreign_key_check; if damaged, go read-only."""
        self.checked_on_open = True
        found = health.problems(conn)
        if not found:
            if not self.readonly:
                health.remember(self.path, None)
            return conn
        self.damaged = health.damaged_sentence(self.path, found)
        health.remember(self.path, self.damaged)
        self.close()
        self.readonly = True
        return self._conn()

    @classmethod
    def create(cls, path: str | Path, protocol: Protocol) -> "Store":
        path = Path(path)
        if path.exists():
            raise StoreError(f"{path}: a record store already exists; open it instead of creating one.")
        schema.create_file(path)
        return cls(path, protocol)

    # -- connections and errors ------------------------------------------------
    def _conn(self) -> sqlite3.Connection:
        conn = getattr(self._local, "conn", None)
        if conn is None:
            conn = schema.connect(self.path, readonly=self.readonly)
            self._local.conn = conn
            with self._lock:
                self._conns.append(conn)
        return conn

    def _drop_conn(self) -> None:
        conn = getattr(self._local, "conn", None)
        self._local.conn = None
        if conn is not None:
            with contextlib.suppress(sqlite3.Error):
                conn.close()
            with self._lock:
                if conn in self._conns:
                    self._conns.remove(conn)

    def close(self) -> None:
        with self._lock:
            conns, self._conns = self._conns, []
        for conn in conns:
            with contextlib.suppress(sqlite3.Error):
                conn.close()
        self._local = threading.local()

    @contextlib.contextmanager
    def _errors(self):
        """Turn SQLite failures into one clear sentence; keep the store usable afterwards."""
        try:
            yield
        except sqlite3.OperationalError as exc:
            text = str(exc).lower()
            if "full" in text or "disk i/o" in text:
                self._drop_conn()
                raise StoreError(f"the disk is full or cannot be written ({self.path.parent}); nothing of this "
                                 "change was stored: free some space and try again.") from None
            if "locked" in text or "busy" in text:
                raise StoreError(schema.BUSY_SENTENCE) from None
            if "readonly" in text or "read-only" in text:
                raise StoreError(f"{self.path}: the record store is read-only for this account; ask for group "
                                 "write access (mode 0660 on the file and its folder).") from None
            raise StoreError(f"{self.path}: the record store failed ({exc}); run fieldslope again, and if it "
                             "persists restore the study from a backup.") from None
        except sqlite3.DatabaseError as exc:
            raise StoreError(self.damaged or health.damaged_sentence(self.path, [str(exc)], opened=False)) from None

    def _read(self, fn):
        """Run ``fn(conn)`` in one short read transaction (a consistent snapshot)."""
        def attempt():
            conn = self._conn()
            conn.execute("BEGIN")
            try:
                return fn(conn)
            finally:
                conn.execute("ROLLBACK")
        with self._errors():
            return schema.retry_locked(attempt)

    def _write(self, fn):
        """Run ``fn(conn)`` in one ``BEGIN IMMEDIATE`` transaction, retrying while another writer holds it."""
        if self.damaged:
            raise StoreError(self.damaged)
        if self.readonly:
            raise StoreError("this study was opened read-only; open it without read-only to change it.")

        def attempt():
            conn = self._conn()
            conn.execute("BEGIN IMMEDIATE")
            try:
                out = fn(conn)
                conn.execute("COMMIT")
            except BaseException:
                with contextlib.suppress(sqlite3.Error):
                    conn.execute("ROLLBACK")
                raise
            return out
        with self._errors():
            out = schema.retry_locked(attempt)
        self._writes += 1
        return out

    def data_version(self) -> int:
        """Changes whenever the record changes (other processes' commits and this store's own)."""
        with self._errors():
            return self._conn().execute("PRAGMA data_version").fetchone()[0] + self._writes

    def writable(self) -> bool:
        """Can this store write now? A cheap probe (BEGIN IMMEDIATE; ROLLBACK with a 0.1 s wait) for the
        dashboard's read-only sign: False when opened read-only, damaged, busy or not writable."""
        if self.readonly or self.damaged:
            return False
        try:
            conn = self._conn()
            conn.execute("PRAGMA busy_timeout = 100")
            try:
                conn.execute("BEGIN IMMEDIATE")
                conn.execute("ROLLBACK")
            finally:
                conn.execute(f"PRAGMA busy_timeout = {int(schema.BUSY_TIMEOUT_S * 1000)}")
        except sqlite3.Error:
            return False
        return True

    def integrity_ok(self) -> bool:
        with self._errors():
            return self._conn().execute("PRAGMA integrity_check").fetchone()[0] == "ok"

    # -- fields ------------------------------------------------------------------
    def _wanted_fields(self) -> list[tuple[str, str]]:
        p = self.protocol
        out = [(g, "text") for g in p.groups]
        out += [(t, "number") for t in p.trait_names] + [(c, "number") for c in p.component_names]
        out += [(c, "text") for c in p.parent_cols]
        out += [(c, "text") for c in OPTIONAL_TEXT if c not in {n for n, _ in out}]
        return out

    def _ensure_fields(self, conn: sqlite3.Connection) -> None:
        have = {r[0] for r in conn.execute("SELECT name FROM fields")}
        missing = [(n, k) for n, k in self._wanted_fields() if n not in have]
        if not missing:
            return

        def add(c):
            have_now = {r[0] for r in c.execute("SELECT name FROM fields")}
            n_cols = c.execute("SELECT count(*) FROM fields").fetchone()[0]
            for name, kind in missing:
                if name in have_now:
                    continue
                n_cols += 1
                col = f"v{n_cols}"
                c.execute(f"ALTER TABLE records ADD COLUMN {col}")
                c.execute("INSERT INTO fields(name, col, kind) VALUES (?, ?, ?)", (name, col, kind))
        self._write(add)

    def _load_fields(self, conn: sqlite3.Connection) -> dict[str, eff.FieldCol]:
        rows = {r[0]: eff.FieldCol(*r) for r in conn.execute("SELECT name, col, kind FROM fields")}
        return {n: rows[n] for n, _ in self._wanted_fields() if n in rows}

    # -- import -------------------------------------------------------------------
    def import_file(self, path: str | Path, operator: str | None = None, accept_valid: bool = False,
                    progress: Progress | None = None) -> ImportResult:
        path = Path(path)
        return self.import_bytes(path.name, _read_file(path), operator=operator, accept_valid=accept_valid,
                                 progress=progress)

    def import_bytes(self, name: str, data: bytes, operator: str | None = None, accept_valid: bool = False,
                     progress: Progress | None = None) -> ImportResult:
        """Check and store one batch; a refused batch stores only the record of its refusal."""
        progress = progress or (lambda done, total, stage: None)
        earlier = self._taken_in(hashlib.sha256(data).hexdigest())
        if earlier is not None:     # quick answer without reading the sheet (checked again when writing)
            plan = BatchPlan(name, data, None, None)
            return _Outcome(plan, Outcome.DUPLICATE, duplicate_of=earlier[0],
                            message=_duplicate_message(name, *earlier)).result(earlier[0])
        plan = BatchPlan.make(self.protocol, name, data, progress)
        operator = operator or default_operator()
        return self._write(lambda conn: self._store(conn, plan, operator, accept_valid, progress))

    def _taken_in(self, sha: str) -> tuple[int, str] | None:
        return self._read(lambda conn: _earlier_batch(conn, sha))

    def check_bytes(self, name: str, data: bytes, accept_valid: bool = False, recheck: bool = False) -> ImportResult:
        """Run every check an import would run, without writing anything. Bytes already taken in give
        outcome ``duplicate``; with ``recheck`` they are checked against the record all the same (a dry
        run), and ``earlier`` names the batch that took them in."""
        plan = BatchPlan.make(self.protocol, name, data, lambda *a: None)

        def evaluate(conn):
            dup = _earlier_batch(conn, plan.sha) if recheck else None
            out = self._evaluate(conn, plan, accept_valid, recheck=recheck)
            return out, dup
        out, dup = self._read(evaluate)
        result = out.result(None, checked_only=True)
        if dup:
            result = replace(result, earlier=f"{name}: these exact bytes were already taken in as batch {dup[0]} "
                                             f"on {dup[1]}; importing them again would do nothing.")
        return result

    def check_file(self, path: str | Path, accept_valid: bool = False, recheck: bool = False) -> ImportResult:
        path = Path(path)
        return self.check_bytes(path.name, _read_file(path), accept_valid=accept_valid, recheck=recheck)

    def _evaluate(self, conn: sqlite3.Connection, plan: "BatchPlan", accept_valid: bool,
                  recheck: bool = False) -> "_Outcome":
        dup = plan.sha and not recheck and _earlier_batch(conn, plan.sha)
        if dup:
            return _Outcome(plan, Outcome.DUPLICATE, duplicate_of=dup[0], message=_duplicate_message(plan.name, *dup))
        if plan.report is None:
            return _Outcome(plan, Outcome.REFUSED, message=plan.refusal)
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
        if errors and not accept_valid:
            msg = (f"{plan.name}: {len(bad_rows)} of {n} rows have errors, so nothing was stored; fix them and "
                   "import again, or import with --accept-valid to store the valid rows and quarantine the others.")
            return _Outcome(plan, Outcome.REFUSED, errors=errors, message=msg)
        bad = set(bad_rows)
        flags = [f for f in report.flags if f.row not in bad]
        compared = [f for f in self.fields if f in valid.columns and f not in OPTIONAL_TEXT]  # not visit notes
        flags += checks.differs_from_record(p, valid, record, compared)
        flags += checks.new_outliers(p, valid, record)
        if any(c in valid.columns and valid[c].notna().any() for c in p.parent_cols):
            known = {r[0] for r in conn.execute("SELECT DISTINCT individual FROM records")}
            flags += checks.unknown_parents(p, valid, known)
        flags.sort(key=lambda f: f.row)
        outcome = Outcome.PARTIAL if errors else Outcome.STORED
        stored = len(valid)
        msg = f"{plan.name}: {stored} of {n} rows stored" + (
            f", {len(bad_rows)} quarantined (fix them with fieldslope resolve)" if bad_rows else "") + "."
        return _Outcome(plan, outcome, errors=errors, flags=flags, valid=valid, bad_rows=bad_rows, message=msg)

    def _store(self, conn, plan: "BatchPlan", operator: str, accept_valid: bool, progress: Progress) -> ImportResult:
        out = self._evaluate(conn, plan, accept_valid)
        if out.outcome == Outcome.DUPLICATE:
            return out.result(out.duplicate_of)
        sheet = plan.report.sheet if plan.report else None
        errors_json = json.dumps([e.__dict__ for e in out.errors])
        cur = conn.execute(
            "INSERT INTO batches(file_name, sha256, raw, encoding, delimiter, operator, received, outcome, n_rows, "
            "n_stored, n_quarantined, errors, message) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (plan.name, plan.sha, plan.data, sheet.encoding if sheet else "", sheet.delimiter if sheet else "",
             operator, now(), out.outcome, plan.report.n_rows if plan.report else 0,
             len(out.valid) if out.outcome != Outcome.REFUSED else 0,
             len(out.bad_rows) if out.outcome == Outcome.PARTIAL else 0, errors_json, out.message))
        batch_id = cur.lastrowid
        if out.outcome == Outcome.REFUSED:
            return out.result(batch_id)
        record_ids = self._insert_records(conn, batch_id, batch_id, out.valid, progress)
        created = now()
        self._insert_flags(conn, batch_id, out.flags, record_ids, created)
        supersede(conn, self.protocol, batch_id, out.valid, record_ids, created)
        if out.bad_rows:
            QuarantineFix(self).quarantine_rows(conn, batch_id, plan.report, out.errors, out.bad_rows, created)
        progress(1, 1, "stored")
        return out.result(batch_id)

    def _insert_records(self, conn, batch_id: int, seq_batch: int, valid: pd.DataFrame, progress: Progress,
                        correction_id: int | None = None) -> dict[int, int]:
        """Insert the valid rows; return sheet row -> record id."""
        p = self.protocol
        names = [f for f in self.fields if f in valid.columns]
        cols = ["batch_id", "seq_batch", "row", "individual", "season", "correction_id",
                *(self.fields[f].col for f in names)]
        n = len(valid)
        sheet_rows = valid["_row"].to_numpy(dtype=np.int64).tolist()
        series = [repeat(batch_id, n), repeat(seq_batch, n), sheet_rows, _texts(valid[p.id_col]),
                  _texts(valid[p.season_col]), repeat(correction_id, n)]
        for f in names:
            if self.fields[f].kind == "number":
                series.append(pd.to_numeric(valid[f], errors="coerce").to_numpy(dtype=float).tolist())
            else:
                series.append(_texts(valid[f]))
        # rowids are allocated as max + 1 while this transaction holds the write lock
        base = conn.execute("SELECT coalesce(max(id), 0) FROM records").fetchone()[0]
        rows = zip(*series)
        sql = f"INSERT INTO records({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})"
        for start in range(0, n, _CHUNK):
            conn.executemany(sql, islice(rows, _CHUNK))
            progress(min(start + _CHUNK, n), n, "storing")
        return dict(zip(sheet_rows, range(base + 1, base + n + 1)))

    @staticmethod
    def _insert_flags(conn, batch_id: int, flags: list[FlagNote], record_ids: dict[int, int], created: str,
                      quarantine_id: int | None = None) -> None:
        conn.executemany(
            "INSERT INTO flags(kind, individual, season, field, value, message, batch_id, record_id, row, "
            "quarantine_id, created) VALUES (?,?,?,?,?,?,?,?,?,?,?)",
            [(f.kind, f.individual, f.season, f.field, f.value, f.message, batch_id, record_ids.get(f.row),
              f.row, quarantine_id, created) for f in flags])

    # -- reading the record ---------------------------------------------------------
    def batches(self) -> list[BatchInfo]:
        rows = self._read(lambda c: c.execute(
            "SELECT id, file_name, sha256, operator, received, outcome, n_rows, n_stored, n_quarantined, "
            "json_array_length(errors), message, encoding, delimiter FROM batches ORDER BY id").fetchall())
        return [BatchInfo(*r) for r in rows]

    def batch_bytes(self, batch_id: int) -> bytes:
        row = self._read(lambda c: c.execute("SELECT raw FROM batches WHERE id = ?", (batch_id,)).fetchone())
        if row is None:
            raise RecordError(f"there is no batch {batch_id}; list them with fieldslope history or the dashboard.")
        return bytes(row[0])

    def batch_errors(self, batch_id: int) -> list[RowError]:
        row = self._read(lambda c: c.execute("SELECT errors FROM batches WHERE id = ?", (batch_id,)).fetchone())
        return [RowError(**e) for e in json.loads(row[0])] if row else []

    def last_batch_id(self, conn: sqlite3.Connection | None = None) -> int:
        q = lambda c: c.execute("SELECT coalesce(max(id), 0) FROM batches").fetchone()[0]  # noqa: E731
        return q(conn) if conn is not None else self._read(q)

    def effective_frame(self, without_open_outliers: bool = False, as_of_batch: int | None = None) -> pd.DataFrame:
        """Per individual and season the current value of every field (see DEVELOPERS.md)."""
        return self._read(lambda c: eff.effective(c, self.protocol, self.fields,
                                                  without_open_outliers=without_open_outliers, as_of=as_of_batch))

    def flags(self, include_resolved: bool = False) -> list[StoredFlag]:
        """Open flags (all with ``include_resolved``), oldest first, each with its latest resolution."""
        return self._flag_rows("" if include_resolved else "WHERE r.id IS NULL AND s.id IS NULL", ())

    def flag(self, flag_id: int) -> StoredFlag:
        for f in self._flag_rows("WHERE f.id = ?", (int(flag_id),)):
            return f
        raise RecordError(f"there is no flag {flag_id}; list the flags with fieldslope flags --all.")

    def _flag_rows(self, where: str, args: tuple) -> list[StoredFlag]:
        # a resolution decides the status; without one, a later batch's value makes the flag superseded
        sql = ("SELECT f.id, f.kind, f.individual, f.season, f.field, f.value, f.message, f.batch_id, "
               "b.file_name, f.row, f.created, "
               "coalesce(r.action, CASE WHEN s.id IS NULL THEN 'open' ELSE 'superseded' END), "
               "coalesce(r.operator, 'batch ' || s.batch_id, ''), coalesce(r.created, s.created, ''), "
               "coalesce(r.reason, 'a later batch gave a new value', ''), coalesce(r.new, ''), "
               "f.quarantine_id IS NOT NULL FROM flags f JOIN batches b ON b.id = f.batch_id "
               "LEFT JOIN resolutions r ON r.id = (SELECT max(id) FROM resolutions WHERE flag_id = f.id) "
               "LEFT JOIN supersessions s ON s.id = (SELECT max(id) FROM supersessions WHERE flag_id = f.id) "
               f"{where} ORDER BY f.id")
        rows = self._read(lambda c: c.execute(sql, args).fetchall())
        return [StoredFlag(*r[:16], quarantined=bool(r[16])) for r in rows]

    # -- resolving flags --------------------------------------------------------------
    def resolve_flag(self, flag_id: int, action: str, value: str | None = None, reason: str = "",
                     operator: str | None = None) -> Resolution:
        """Keep, exclude or set (correct) the value behind a flag; the old value stays on record."""
        if action not in ("keep", "exclude", "set"):
            raise RecordError(f"unknown action {action!r}; use keep, exclude or set.")
        if not reason or not reason.strip():
            raise RecordError("a reason is required for every resolution; say why in a few words (--reason).")
        if action == "set" and (value is None or not str(value).strip()):
            raise RecordError("--set needs the right value; give it after --set.")
        operator = operator or default_operator()
        return self._write(lambda c: self._resolve(c, int(flag_id), action, value, reason.strip(), operator))

    def _resolve(self, conn, flag_id, action, value, reason, operator) -> Resolution:
        row = conn.execute("SELECT kind, individual, season, field, value, quarantine_id, record_id FROM flags "
                           "WHERE id = ?", (flag_id,)).fetchone()
        if row is None:
            raise RecordError(f"there is no flag {flag_id}; list the flags with fieldslope flags --all.")
        kind, ind, season, field, flagged, quarantine_id, _ = row
        later = conn.execute("SELECT batch_id FROM supersessions WHERE flag_id = ? ORDER BY id DESC LIMIT 1",
                             (flag_id,)).fetchone()
        if later and not conn.execute("SELECT 1 FROM resolutions WHERE flag_id = ?", (flag_id,)).fetchone():
            raise RecordError(f"flag {flag_id} is superseded: batch {later[0]} gave a newer {field or 'value'} for "
                              f"{ind} in {season}, so there is nothing to resolve; see fieldslope history {ind}.")
        if quarantine_id is not None:
            return QuarantineFix(self).resolve(conn, flag_id, quarantine_id, field, flagged, action, value,
                                               reason, operator)
        after = self.last_batch_id(conn)
        if action != "set":
            conn.execute("INSERT INTO resolutions(flag_id, action, old, new, reason, operator, created, after_batch) "
                         "VALUES (?,?,?,?,?,?,?,?)", (flag_id, action, flagged, None, reason, operator, now(), after))
            verb = "kept" if action == "keep" else "left out of the estimates"
            return Resolution(flag_id, action, old=flagged, message=f"flag {flag_id}: {ind} {season} "
                              f"{field or 'record'} {verb}.")
        if field in ("", self.protocol.id_col, self.protocol.season_col) or field not in self.fields:
            raise RecordError(f"flag {flag_id} concerns the whole record of {ind} in {season}; resolve it with "
                              "--keep or --exclude.")
        new = self.typed_text(field, str(value))
        current = eff.latest(conn, self.protocol, self.fields, seasons=[season])
        old = ""
        if (ind, season) in current.index:
            old = checks.show(current.at[(ind, season), field])
        # The corrected value answers every other open flag on the same value (e.g. out of range and
        # outlier on one slip): each gets its own audit row naming this correction.
        siblings = [r[0] for r in conn.execute(
            "SELECT f.id FROM flags f WHERE f.individual = ? AND f.season = ? AND f.field = ? AND f.id <> ? "
            "AND f.quarantine_id IS NULL "
            "AND NOT EXISTS (SELECT 1 FROM resolutions r WHERE r.flag_id = f.id) "
            "AND NOT EXISTS (SELECT 1 FROM supersessions s WHERE s.flag_id = f.id)",
            (ind, season, field, flag_id))]
        stamp = now()
        conn.executemany(
            "INSERT INTO resolutions(flag_id, action, old, new, reason, operator, created, after_batch) "
            "VALUES (?,?,?,?,?,?,?,?)",
            [(flag_id, "set", old, new, reason, operator, stamp, after)]
            + [(sid, "set", old, new, f"{reason} (corrected under flag {flag_id})", operator, stamp, after)
               for sid in siblings])
        return Resolution(flag_id, "set", old=old, new=new,
                          message=f"flag {flag_id}: {ind} {season} {field} set from {old or 'blank'} to {new}.")

    def typed_text(self, field: str, text: str) -> str:
        """Check a value typed for ``field``; return it as stored, or raise RecordError saying why."""
        p, text = self.protocol, text.strip()
        if self.fields[field].kind == "text":
            allowed = p.allowed.get(field)
            if allowed and text not in allowed:
                raise RecordError(f"{text!r} is not an allowed {field}; use one of {', '.join(allowed)}.")
            return text
        try:
            number = eff.parse_number(text)
        except ValueError:
            raise RecordError(f"{text!r} is not a number; give {field} as a number such as 12.5.") from None
        if not math.isfinite(number):
            raise RecordError(f"{text!r} is not a finite number; give {field} as a number such as 12.5.")
        spec = p.fitness.get(field)
        if spec is not None and spec.kind == "binary" and number not in (0.0, 1.0):
            raise RecordError(f"{field} is binary; give 0 or 1, not {text!r}.")
        if spec is not None and spec.kind == "count" and (number < 0 or number != int(number)):
            raise RecordError(f"{field} is a count; give a whole number of 0 or more, not {text!r}.")
        return checks.show(number)

    # -- history -----------------------------------------------------------------------
    def history(self, individual: str) -> pd.DataFrame:
        """One individual's values, flags and changes in time order."""
        from fieldslope.schemas.store_history import history
        return self._read(lambda c: history(c, self, str(individual)))

    # -- heritability ------------------------------------------------------------------
    def set_heritability(self, trait: str, value: float, se: float | None, source: str,
                         operator: str | None = None) -> None:
        if trait not in self.protocol.traits:
            raise RecordError(f"{trait!r} is not a trait of this protocol; use one of "
                              f"{', '.join(self.protocol.trait_names)}.")
        if not isinstance(value, (int, float)) or not math.isfinite(value) or not 0 <= value <= 1:
            raise RecordError(f"heritability of {trait} must be a number from 0 to 1, not {value!r}.")
        if se is not None and (not math.isfinite(se) or se < 0):
            raise RecordError(f"the standard error of h² for {trait} must be 0 or more, not {se!r}.")
        if not source or not source.strip():
            raise RecordError("say where the heritability comes from (a study, a breeding design, an estimate).")
        operator = operator or default_operator()
        self._write(lambda c: c.execute(
            "INSERT INTO heritability(trait, value, se, source, operator, created) VALUES (?,?,?,?,?,?)",
            (trait, float(value), None if se is None else float(se), source.strip(), operator, now())))

    def heritability_entries(self) -> pd.DataFrame:
        rows = self._read(lambda c: c.execute(
            "SELECT id, trait, value, se, source, operator, created FROM heritability ORDER BY id").fetchall())
        return pd.DataFrame(rows, columns=["id", "trait", "value", "se", "source", "operator", "created"])

    def heritability_records(self) -> tuple[HeritabilityEntry, ...]:
        """Every entered h² in the order entered, as typed records (``heritability_entries`` as a table)."""
        frame = self.heritability_entries()
        return tuple(HeritabilityEntry(int(i), str(t), float(v), None if pd.isna(s) else float(s), str(src), str(op),
                                       str(c))
                     for i, t, v, s, src, op, c in frame.itertuples(index=False, name=None))

    def heritability(self) -> dict[str, tuple[float, float | None, str]]:
        """The latest entry per trait: trait -> (h², se or None, source), as estimate_table's ``h2``."""
        frame = self.heritability_entries()
        return {t: (float(v), None if pd.isna(s) else float(s), str(src))
                for t, v, s, src in zip(frame["trait"], frame["value"], frame["se"], frame["source"])}


def _earlier_batch(conn, sha: str) -> tuple[int, str] | None:
    return conn.execute("SELECT id, received FROM batches WHERE sha256 = ? AND outcome <> 'refused'",
                        (sha,)).fetchone()


def _duplicate_message(name: str, batch_id: int, received: str) -> str:
    return f"{name}: these exact bytes were already taken in as batch {batch_id} on {received}; nothing was done."


def _texts(series: pd.Series) -> list:
    """Text cells as str or None (a cell read from a workbook may hold a date or a number)."""
    values = series.to_numpy(dtype=object).tolist()
    if all(v is None or type(v) is str for v in values):
        return values
    return [v if v is None or isinstance(v, str) else (checks.show(v) or None) for v in values]


def _read_file(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise SheetError(f"{path}: no such file; check the name and folder.") from None
    except IsADirectoryError:
        raise SheetError(f"{path}: is a folder, not a batch file.") from None
    except OSError as exc:
        raise SheetError(f"{path}: cannot be read ({exc.strerror}).") from None


class _Outcome:
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
            errors=tuple(self.errors), flags=tuple(self.flags), message=self.message, checked_only=checked_only)
