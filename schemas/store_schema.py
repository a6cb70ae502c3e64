"""The record store's tables, its versioned schema and the way a connection is opened.

Raw rows (batches, records, quarantine) and audit rows (flags, resolutions,
heritability entries) are append-only: triggers abort any UPDATE or DELETE.
Measured values live in ``records``, one row per sheet row, one SQL column per
protocol field (the ``fields`` table maps field names to column names), so the
effective data is one query and one pandas group-by.
"""

from __future__ import annotations

import os
import sqlite3
import stat
import time
from pathlib import Path
from typing import Callable

from fieldslope.common.errors import BusyError, StoreError

SCHEMA_VERSION = 4
BUSY_TIMEOUT_S = 5.0
RETRY_DELAYS = (0.05, 0.1, 0.2, 0.4, 0.8, 1.0, 1.0)   # then give up (about 45 s with the busy timeouts)
BUSY_SENTENCE = ("the record store is busy: another fieldslope is taking in a batch; try again in a moment "
                 "(nothing of this change was stored).")

_APPEND_ONLY = ("batches", "records", "quarantine", "flags", "resolutions", "heritability", "fields")


def _append_only(tables) -> str:
    return "".join(
        f"""
CREATE TRIGGER {t}_no_update BEFORE UPDATE ON {t}
BEGIN SELECT RAISE(ABORT, 'fieldslope records are append-only: {t} rows cannot be changed'); END;
CREATE TRIGGER {t}_no_delete BEFORE DELETE ON {t}
BEGIN SELECT RAISE(ABORT, 'fieldslope records are append-only: {t} rows cannot be deleted'); END;
"""
        for t in tables)


_V1 = """
CREATE TABLE batches(
    id INTEGER PRIMARY KEY,
    file_name TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    raw BLOB NOT NULL,
    encoding TEXT NOT NULL DEFAULT '',
    delimiter TEXT NOT NULL DEFAULT '',
    operator TEXT NOT NULL,
    received TEXT NOT NULL,
    outcome TEXT NOT NULL CHECK (outcome IN ('stored', 'partial', 'refused')),
    n_rows INTEGER NOT NULL DEFAULT 0,
    n_stored INTEGER NOT NULL DEFAULT 0,
    n_quarantined INTEGER NOT NULL DEFAULT 0,
    errors TEXT NOT NULL DEFAULT '[]',
    message TEXT NOT NULL DEFAULT ''
);
CREATE UNIQUE INDEX batches_taken_once ON batches(sha256) WHERE outcome <> 'refused';

CREATE TABLE fields(
    name TEXT PRIMARY KEY,
    col TEXT NOT NULL UNIQUE,
    kind TEXT NOT NULL CHECK (kind IN ('number', 'text'))
);

CREATE TABLE resolutions(
    id INTEGER PRIMARY KEY,
    flag_id INTEGER NOT NULL REFERENCES flags(id),
    action TEXT NOT NULL CHECK (action IN ('keep', 'exclude', 'set')),
    old TEXT,
    new TEXT,
    reason TEXT NOT NULL CHECK (length(trim(reason)) > 0),
    operator TEXT NOT NULL,
    created TEXT NOT NULL,
    after_batch INTEGER NOT NULL
);

CREATE TABLE records(
    id INTEGER PRIMARY KEY,
    batch_id INTEGER NOT NULL REFERENCES batches(id),
    seq_batch INTEGER NOT NULL,
    row INTEGER NOT NULL,
    individual TEXT NOT NULL,
    season TEXT NOT NULL,
    correction_id INTEGER REFERENCES resolutions(id)
);
CREATE INDEX records_individual ON records(individual, season);
CREATE INDEX records_joined ON records(batch_id, row) WHERE correction_id IS NOT NULL;

CREATE TABLE quarantine(
    id INTEGER PRIMARY KEY,
    batch_id INTEGER NOT NULL REFERENCES batches(id),
    row INTEGER NOT NULL,
    individual TEXT NOT NULL DEFAULT '',
    season TEXT NOT NULL DEFAULT '',
    cells TEXT NOT NULL,
    errors TEXT NOT NULL
);

CREATE TABLE flags(
    id INTEGER PRIMARY KEY,
    kind TEXT NOT NULL,
    individual TEXT NOT NULL,
    season TEXT NOT NULL,
    field TEXT NOT NULL DEFAULT '',
    value TEXT NOT NULL DEFAULT '',
    message TEXT NOT NULL,
    batch_id INTEGER NOT NULL REFERENCES batches(id),
    record_id INTEGER REFERENCES records(id),
    row INTEGER,
    quarantine_id INTEGER REFERENCES quarantine(id),
    created TEXT NOT NULL
);
CREATE INDEX flags_individual ON flags(individual, season);
CREATE INDEX resolutions_flag ON resolutions(flag_id);

CREATE TABLE heritability(
    id INTEGER PRIMARY KEY,
    trait TEXT NOT NULL,
    value REAL NOT NULL,
    se REAL,
    source TEXT NOT NULL,
    operator TEXT NOT NULL,
    created TEXT NOT NULL
);
""" + _append_only(_APPEND_ONLY)

# v2: an open flag on a value that a later batch replaced is closed by a supersession row (the flag
# itself and the old value stay on record); the status shown is "superseded".
_V2 = """
CREATE TABLE supersessions(
    id INTEGER PRIMARY KEY,
    flag_id INTEGER NOT NULL REFERENCES flags(id),
    batch_id INTEGER NOT NULL REFERENCES batches(id),
    record_id INTEGER REFERENCES records(id),
    created TEXT NOT NULL
);
CREATE INDEX supersessions_flag ON supersessions(flag_id);
""" + _append_only(("supersessions",))

# v3: INSERT OR REPLACE / REPLACE INTO would delete the row it replaces without running the delete trigger
# (SQLite runs delete triggers for REPLACE only with recursive_triggers on, which another program's
# connection does not set), so a BEFORE INSERT trigger refuses an insert that would replace a row.
_KEYS = {"batches": "id = NEW.id OR (sha256 = NEW.sha256 AND outcome <> 'refused' AND NEW.outcome <> 'refused')",
         "fields": "name = NEW.name OR col = NEW.col"}


def _no_replace(tables) -> str:
    return "".join(
        f"""
CREATE TRIGGER {t}_no_replace BEFORE INSERT ON {t} WHEN EXISTS (SELECT 1 FROM {t} WHERE {_KEYS.get(t, "id = NEW.id")})
BEGIN SELECT RAISE(ABORT, 'fieldslope records are append-only: {t} rows cannot be replaced'); END;
"""
        for t in tables)


_GUARDED = (*_APPEND_ONLY, "supersessions")
_V3 = _no_replace(_GUARDED)

# v4: beside the name typed as operator, the account's login name (batches, resolutions, entered h²); and the
# reader's notes on a batch file (further worksheets left out, a guessed encoding), one per line.
_V4 = """
ALTER TABLE batches ADD COLUMN login TEXT NOT NULL DEFAULT '';
ALTER TABLE batches ADD COLUMN notes TEXT NOT NULL DEFAULT '';
ALTER TABLE resolutions ADD COLUMN login TEXT NOT NULL DEFAULT '';
ALTER TABLE heritability ADD COLUMN login TEXT NOT NULL DEFAULT '';
"""

# MIGRATIONS[v] brings a database from version v to v + 1.
MIGRATIONS: dict[int, str] = {0: _V1, 1: _V2, 2: _V3, 3: _V4}


def expected_triggers() -> set[str]:
    """The names of the triggers that keep raw and audit rows append-only (checked on every open)."""
    return {f"{t}_{what}" for t in _GUARDED for what in ("no_update", "no_delete", "no_replace")}


def missing_triggers(conn: sqlite3.Connection) -> list[str]:
    have = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'")}
    return sorted(expected_triggers() - have)


def connect(path: Path, readonly: bool = False) -> sqlite3.Connection:
    """A connection with the house settings: autocommit, WAL, FULL sync, foreign keys, busy timeout."""
    if readonly:
        conn = _connect_readonly(path)
    else:
        conn = sqlite3.connect(str(path), timeout=BUSY_TIMEOUT_S, isolation_level=None,
                               check_same_thread=False)
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
    conn.execute("PRAGMA foreign_keys = ON")
    conn.execute("PRAGMA recursive_triggers = ON")   # a REPLACE runs the delete triggers too
    if not readonly:
        mode = conn.execute("PRAGMA journal_mode").fetchone()[0]
        if mode != "wal":
            retry_locked(lambda: conn.execute("PRAGMA journal_mode = WAL"))
    conn.execute("PRAGMA synchronous = FULL")
    return conn


def _connect_readonly(path: Path) -> sqlite3.Connection:
    """A read-only connection; in a folder this account cannot write, an immutable one.

    SQLite reads a WAL database through its ``-shm`` file, which it must create when no other program has the
    store open; in a folder that is read-only for this account that fails (SQLITE_READONLY_DIRECTORY or
    CANTOPEN), so the store is opened ``immutable`` instead (no locks, no ``-shm``): the record as the file
    holds it. That is refused when a non-empty ``-wal`` holds changes not yet in the file (they would be
    left out without a word)."""
    uri = Path(path).resolve().as_uri()
    conn = sqlite3.connect(f"{uri}?mode=ro", uri=True, timeout=BUSY_TIMEOUT_S, isolation_level=None,
                           check_same_thread=False)
    try:
        conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return conn
    except sqlite3.OperationalError as exc:
        code = getattr(exc, "sqlite_errorname", "") or ""
        if code not in ("SQLITE_READONLY_DIRECTORY", "SQLITE_CANTOPEN", "SQLITE_READONLY_CANTINIT"):
            raise
        conn.close()
    wal = Path(f"{path}-wal")
    if wal.exists() and wal.stat().st_size > 0:
        raise StoreError(f"{path}: the store's folder is read-only for this account and its write-ahead log "
                         f"({wal.name}) holds changes not yet in the store file; ask someone who may write the "
                         "folder to open the study once (that folds them in), then browse it again.")
    conn = sqlite3.connect(f"{uri}?mode=ro&immutable=1", uri=True, isolation_level=None, check_same_thread=False)
    conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
    return conn


def create_file(path: Path) -> None:
    """Create an empty database file, group-writable (0660), and bring it to the current schema."""
    fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o660)
    os.close(fd)
    os.chmod(path, 0o660)
    conn = connect(path)
    try:
        migrate(conn, path)
    finally:
        conn.close()


def migrate(conn: sqlite3.Connection, path: Path) -> None:
    """Bring the schema to SCHEMA_VERSION; back up a non-empty database first."""
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    if version > SCHEMA_VERSION:
        raise StoreError(f"{path}: this study was written by a newer fieldslope (schema {version}); "
                         "update fieldslope to open it.")
    if version == SCHEMA_VERSION:
        return
    has_tables = conn.execute("SELECT count(*) FROM sqlite_master WHERE type = 'table'").fetchone()[0]
    if has_tables:
        backup(conn, path.with_name(f"{path.name}.v{version}-{time.strftime('%Y%m%dT%H%M%S')}.bak"), path)
    while version < SCHEMA_VERSION:
        step = MIGRATIONS[version]
        conn.execute("BEGIN IMMEDIATE")
        try:
            for statement in _statements(step):
                conn.execute(statement)
            conn.execute(f"PRAGMA user_version = {version + 1}")
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        version += 1


def _statements(script: str) -> list[str]:
    """Split a DDL script into complete statements (trigger bodies contain ';')."""
    out, buf = [], ""
    for line in script.splitlines(keepends=True):
        buf += line
        if sqlite3.complete_statement(buf):
            if buf.strip():
                out.append(buf.strip())
            buf = ""
    if buf.strip():
        out.append(buf.strip())
    return out


def backup(conn: sqlite3.Connection, target: Path, source: Path | None = None) -> Path:
    """Copy a live database with the backup API, fsync the copy and check it before relying on it.

    The copy gets the store's own file mode (``source``, else the database ``conn`` has open), made before
    anything is written into it: a store kept at 0600 never leaves a world-readable copy beside it.
    """
    mode = _file_mode(source or _main_file(conn))
    fd = os.open(target, os.O_CREAT | os.O_WRONLY, mode)
    try:
        os.fchmod(fd, mode)           # the umask may have taken bits away; the store's mode is what counts
    finally:
        os.close(fd)
    dest = sqlite3.connect(str(target))
    try:
        conn.backup(dest)
        ok = dest.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        dest.close()
    fd = os.open(target, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
    if ok != "ok":
        raise StoreError(f"{target}: the backup taken before upgrading the store failed its check ({ok}); "
                         "the study was left as it was.")
    return target


def _main_file(conn: sqlite3.Connection) -> Path | None:
    for _, name, file in conn.execute("PRAGMA database_list"):
        if name == "main" and file:
            return Path(file)
    return None


def _file_mode(path: Path | None) -> int:
    """The permission bits of ``path`` (0600 when it cannot be read: never wider than the owner)."""
    try:
        return stat.S_IMODE(os.stat(path).st_mode) if path is not None else 0o600
    except OSError:
        return 0o600


def is_busy(exc: sqlite3.Error) -> bool:
    """Another connection holds the lock: SQLite's error code is SQLITE_BUSY or SQLITE_LOCKED (or an
    extended code of either), read from ``sqlite_errorname`` rather than the message text."""
    return (getattr(exc, "sqlite_errorname", None) or "").startswith(("SQLITE_BUSY", "SQLITE_LOCKED"))


def retry_locked(op: Callable):
    """Run ``op``; while the store is busy (after SQLite's own busy timeout) wait and retry along
    RETRY_DELAYS, then give one clear BusyError: the raw message never reaches the user."""
    for delay in (*RETRY_DELAYS, None):
        try:
            return op()
        except sqlite3.OperationalError as exc:
            if not is_busy(exc):
                raise
            if delay is None:
                raise BusyError(BUSY_SENTENCE) from None
            time.sleep(delay)
    return None  # pragma: no cover
