"""The record store: one SQLite file holding every batch, value, flag and correction.

Nothing is overwritten or deleted (triggers refuse it); a correction or an exclusion
is a new row saying who, when, old, new and why. Every write is one ``BEGIN
IMMEDIATE`` transaction, so a batch is wholly stored or not at all, also after a
crash. Errors reach the caller as one :class:`~fieldslope.common.errors.StoreError` sentence.

``Store`` is the transaction facade: it owns the connections (one per thread), opens each
read or write transaction and turns SQLite failures into sentences. The work is done by
parts that receive the connection: ``store_intake.Intake`` (taking a batch in),
``store_resolve.FlagResolver`` with ``store_quarantine.QuarantineFix`` (resolving flags),
``store_queries`` (batches and flags), ``store_heritability`` (entered h²),
``store_history`` (one individual's events) and ``effective`` (the current values).
"""

from __future__ import annotations

import contextlib
import hashlib
import sqlite3
import threading
from dataclasses import replace
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING

from fieldslope.common.errors import BusyError, RecordError, StoreError
from fieldslope.common.names import Outcome
from fieldslope.schemas import store_health as health
from fieldslope.schemas import store_heritability as h2
from fieldslope.schemas import store_history
from fieldslope.schemas import store_queries as queries
from fieldslope.schemas import store_schema as schema
from fieldslope.schemas.batch_plan import BatchPlan, Progress
from fieldslope.schemas.operator import who
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.batch_file import read_batch_file
from fieldslope.schemas.store_fields import add_fields, all_fields
from fieldslope.schemas.records import OPTIONAL_TEXT, RowError
from fieldslope.schemas.store_types import (BatchInfo, FieldCol, HeritabilityEntry, ImportResult, Resolution,
                                            StoredFlag)

# The parts that need pandas (intake, resolving, the effective frame) are imported where they are used,
# so that ``flags``, ``history`` and ``batches`` start without pandas and numpy.
if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from fieldslope.schemas.store_copies import Copy
    from fieldslope.schemas.store_intake import Intake
    from fieldslope.schemas.store_resolve import FlagResolver


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
        broken = health.file_problems(self.path)
        if broken:                      # never build a new store over an empty or cut-short one
            raise StoreError(health.damaged_sentence(self.path, broken, opened=False))
        with self._errors():
            conn = self._conn()
            if unclean:
                conn = self._check_on_open(conn)
            if self.damaged:
                self._set_fields(self._load_fields(conn))
                return
            if self.readonly:
                version = conn.execute("PRAGMA user_version").fetchone()[0]
                if version != schema.SCHEMA_VERSION:
                    raise StoreError(f"{self.path}: the store needs an upgrade; open it once without read-only.")
            else:
                schema.migrate(conn, self.path)
                self._ensure_fields(conn)
            self._set_fields(self._load_fields(conn))
            gone = schema.missing_triggers(conn)
            if gone:                    # someone changed the store outside fieldslope: write nothing more
                self.damaged = health.damaged_sentence(self.path, [
                    f"its append-only guards are missing ({', '.join(gone[:3])}{' …' if len(gone) > 3 else ''})"])
                health.remember(self.path, self.damaged)
                self.close()
                self.readonly = True

    def _set_fields(self, fields: dict[str, FieldCol]) -> None:
        """The field columns (the parts that work with them are made on first use)."""
        self.fields = fields
        self.__dict__.pop("intake", None)
        self.__dict__.pop("resolver", None)

    @cached_property
    def intake(self) -> Intake:
        from fieldslope.schemas.store_intake import Intake

        return Intake(self.protocol, self.fields)

    @cached_property
    def resolver(self) -> FlagResolver:
        from fieldslope.schemas.store_quarantine import QuarantineFix
        from fieldslope.schemas.store_resolve import FlagResolver

        return FlagResolver(self.protocol, self.fields, QuarantineFix(self.protocol, self.fields, self.intake.evaluate))

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
            code = getattr(exc, "sqlite_errorname", None) or ""     # SQLite's own error code, not the text
            if self.damaged:
                raise StoreError(self.damaged) from None
            if code == "SQLITE_FULL" or code.startswith("SQLITE_IOERR"):
                self._drop_conn()
                raise StoreError(health.write_failure_sentence(self.path, full=code == "SQLITE_FULL")) from None
            if schema.is_busy(exc):
                raise BusyError(schema.BUSY_SENTENCE) from None
            if code.startswith("SQLITE_READONLY"):
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
        except sqlite3.Error:      # busy, read-only or damaged: all mean "not now"
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
        if missing:
            self._write(lambda c: add_fields(c, missing))

    def _load_fields(self, conn: sqlite3.Connection) -> dict[str, FieldCol]:
        rows = {r[0]: FieldCol(*r) for r in conn.execute("SELECT name, col, kind FROM fields")}
        return {n: rows[n] for n, _ in self._wanted_fields() if n in rows}

    # -- taking batches in (store_intake) -------------------------------------------
    def import_file(self, path: str | Path, operator: str | None = None, accept_valid: bool = False,
                    progress: Progress | None = None, follow_links: bool = True) -> ImportResult:
        """Read (see ``batch_file.read_batch_file``), check and store one batch file."""
        data = read_batch_file(Path(path), follow_links=follow_links)
        if isinstance(data, BatchPlan):     # over the size cap: only the record of its refusal is stored
            people = who(operator)
            return self._write(lambda conn: self.intake.store(conn, data, people, accept_valid,
                                                              progress or (lambda *a: None)))
        return self.import_bytes(Path(path).name, data, operator=operator, accept_valid=accept_valid,
                                 progress=progress)

    def import_bytes(self, name: str, data: bytes, operator: str | None = None, accept_valid: bool = False,
                     progress: Progress | None = None) -> ImportResult:
        """Check and store one batch; a refused batch stores only the record of its refusal."""
        from fieldslope.schemas.store_intake import Evaluation, duplicate_message

        progress = progress or (lambda done, total, stage: None)
        import hashlib     # here, not at the top: only a batch needs it (start-up of the listing commands)

        sha = hashlib.sha256(data).hexdigest()
        earlier = self._read(lambda conn: queries.earlier_batch(conn, sha))
        if earlier is not None:     # quick answer without reading the sheet (checked again when writing)
            plan = BatchPlan(name, data, None, None)
            return Evaluation(plan, Outcome.DUPLICATE, duplicate_of=earlier[0],
                              message=duplicate_message(name, *earlier)).result(earlier[0])
        people = who(operator)
        plan = BatchPlan.make(self.protocol, name, data, progress)
        return self._write(lambda conn: self._rejoin_after(conn, self.intake.store(conn, plan, people, accept_valid,
                                                                                   progress), people))

    def _rejoin_after(self, conn: sqlite3.Connection, result: ImportResult, people: tuple[str, str]) -> ImportResult:
        """Census rows kept aside for an ID this batch brought join by themselves (same transaction)."""
        if result.outcome not in (Outcome.STORED, Outcome.PARTIAL) or result.checked_only:
            return result
        joined = self.resolver.quarantine.rejoin(conn, people, result.batch_id,
                                                 f"batch {result.batch_id} ({result.file_name}) put its ID on record")
        if not joined:
            return result
        return replace(result, message=result.message + " " + "; ".join(joined)[:1].upper() + "; ".join(joined)[1:] + ".")

    def check_bytes(self, name: str, data: bytes, accept_valid: bool = False, recheck: bool = False) -> ImportResult:
        """Run every check an import would run, without writing anything. Bytes already taken in give
        outcome ``duplicate``; with ``recheck`` they are checked against the record all the same (a dry
        run), and ``earlier`` names the batch that took them in."""
        plan = BatchPlan.make(self.protocol, name, data, lambda *a: None)

        def evaluate(conn):
            dup = queries.earlier_batch(conn, plan.sha) if recheck else None
            return self.intake.evaluate(conn, plan, accept_valid, recheck=recheck), dup
        out, dup = self._read(evaluate)
        result = out.result(None, checked_only=True)
        if dup:
            result = replace(result, earlier=f"{name}: these exact bytes were already taken in as batch {dup[0]} "
                                             f"on {dup[1]}; importing them again would do nothing.")
        return result

    def check_file(self, path: str | Path, accept_valid: bool = False, recheck: bool = False,
                   follow_links: bool = True) -> ImportResult:
        from fieldslope.schemas.store_intake import Evaluation

        data = read_batch_file(Path(path), follow_links=follow_links)
        if isinstance(data, BatchPlan):
            return Evaluation(data, Outcome.REFUSED, message=data.refusal).result(None, checked_only=True)
        return self.check_bytes(Path(path).name, data, accept_valid=accept_valid, recheck=recheck)

    # -- reading the record (store_queries, effective) --------------------------------
    def batches(self) -> list[BatchInfo]:
        return self._read(queries.batches)

    def batch_bytes(self, batch_id: int) -> bytes:
        return self._read(lambda c: queries.batch_bytes(c, batch_id))

    def batch_errors(self, batch_id: int) -> list[RowError]:
        return self._read(lambda c: queries.batch_errors(c, batch_id))

    def last_batch_id(self) -> int:
        return self._read(queries.last_batch_id)

    def record_state(self) -> tuple[int, ...]:
        """Changes whenever a batch, a resolution or an h² is added (``store_queries.record_state``); unlike
        ``data_version`` the same in every process and connection, so it can key results kept on disk."""
        return self._read(queries.record_state)

    def effective_frame(self, without_open_outliers: bool = False, as_of_batch: int | None = None) -> pd.DataFrame:
        """Per individual and season the current value of every field (see DEVELOPERS.md)."""
        from fieldslope.schemas import effective as eff

        return self._read(lambda c: eff.effective(c, self.protocol, self.fields,
                                                  without_open_outliers=without_open_outliers, as_of=as_of_batch))

    def flags(self, include_resolved: bool = False) -> list[StoredFlag]:
        """Open flags (all with ``include_resolved``), oldest first, each with its latest resolution."""
        where = "" if include_resolved else "WHERE r.id IS NULL AND s.id IS NULL"
        return self._read(lambda c: queries.flag_rows(c, where, ()))

    def flag(self, flag_id: int) -> StoredFlag:
        for f in self._read(lambda c: queries.flag_rows(c, "WHERE f.id = ?", (int(flag_id),))):
            return f
        raise RecordError(f"there is no flag {flag_id}; list the flags with fieldslope flags --all.")

    def history(self, individual: str) -> pd.DataFrame:
        """One individual's values, flags and changes in time order, as a table."""
        return self._read(lambda c: store_history.history(c, all_fields(c), str(individual)))

    def history_events(self, individual: str) -> list[store_history.Event]:
        """The same as plain records (no pandas)."""
        return self._read(lambda c: store_history.events(c, all_fields(c), str(individual)))

    # -- resolving flags (store_resolve, store_quarantine) -------------------------------
    def resolve_flag(self, flag_id: int, action: str, value: str | None = None, reason: str = "",
                     operator: str | None = None, again: bool = False) -> Resolution:
        """Keep, exclude or set (correct) the value behind a flag; the old value stays on record. A flag
        decided before is refused (one sentence) unless ``again``."""
        from fieldslope.schemas.store_resolve import checked_request

        reason = checked_request(action, value, reason)
        people = who(operator)
        return self._write(lambda c: self.resolver.resolve(c, int(flag_id), action, value, reason, people, again))

    def copies(self, flag_id: int) -> list[Copy]:
        """The copies (sheet rows) of the duplicated ID behind a duplicate ID flag, with their values."""
        from fieldslope.schemas.store_copies import copies

        return self._read(lambda c: copies(c, self.protocol, self.fields, int(flag_id)))

    def typed_text(self, field: str, text: str) -> str:
        """Check a value typed for ``field``; return it as stored, or raise RecordError saying why."""
        return self.resolver.typed_text(field, text)

    # -- heritability (store_heritability) -----------------------------------------------
    def set_heritability(self, trait: str, value: float, se: float | None, source: str,
                         operator: str | None = None) -> None:
        source = h2.checked_entry(self.protocol, trait, value, se, source)
        people = who(operator)
        self._write(lambda c: h2.add(c, trait, value, se, source, people))

    def heritability_entries(self) -> pd.DataFrame:
        """Every entered h² in the order entered, as a table (columns ``store_heritability.COLUMNS``)."""
        import pandas as pd

        return pd.DataFrame(self._read(h2.rows), columns=h2.COLUMNS)

    def heritability_records(self) -> tuple[HeritabilityEntry, ...]:
        """Every entered h² in the order entered, as typed records."""
        return h2.entries(self._read(h2.rows))

    def heritability(self) -> dict[str, tuple[float, float | None, str]]:
        """The latest entry per trait: trait -> (h², se or None, source), as estimate_table's ``h2``."""
        return h2.latest(self._read(h2.rows))


