"""Is the record store whole? A cheap look on every open, a real check after an unclean shutdown.

SQLite removes the ``-wal`` file when the last connection closes cleanly, so a non-empty
``-wal`` at open time means the last session was killed, lost power, or is still running
(another fieldslope has the study open). Only then is ``PRAGMA quick_check`` and
``PRAGMA foreign_key_check`` run; a clean open costs two ``stat`` calls. A store found damaged
gets a ``.damaged`` note beside it (the -wal is gone once that session closes), so every later
open checks again until the store is whole (restored from a backup), and the note is removed.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path


def wal_left_over(path: Path) -> bool:
    """True when the database's ``-wal`` file exists and is not empty."""
    try:
        return Path(f"{path}-wal").stat().st_size > 0
    except OSError:
        return False


def damage_note(path: Path) -> Path:
    return path.with_name(f"{path.name}.damaged")


def needs_check(path: Path) -> bool:
    return wal_left_over(path) or damage_note(path).exists()


def remember(path: Path, sentence: str | None) -> None:
    """Leave (sentence) or clear (None) the damage note; best effort, the check itself is what counts."""
    note = damage_note(path)
    try:
        if sentence is None:
            note.unlink(missing_ok=True)
        else:
            note.write_text(sentence + "\n", encoding="utf-8")
    except OSError:
        pass


def file_problems(path: Path) -> list[str]:
    """What is wrong with the database file itself, from its size and 100-byte header (no SQLite needed).

    SQLite would open a zero-length file as a new, empty database (and fieldslope would then build an
    empty store over the lost one); a file cut short keeps a header that claims more pages than it has.
    """
    try:
        size = path.stat().st_size
        with open(path, "rb") as fh:
            head = fh.read(100)
    except OSError as exc:
        return [f"it cannot be read ({exc.strerror})"]
    if size == 0:
        return ["the file is empty (0 bytes)"]
    if len(head) < 100 or not head.startswith(b"SQLite format 3\x00"):
        return [f"the file ({size} bytes) does not start like an SQLite database"]
    page_size = int.from_bytes(head[16:18], "big")
    page_size = 65536 if page_size == 1 else page_size
    pages = int.from_bytes(head[28:32], "big")
    counter_valid = head[24:28] == head[92:96]      # the page count is only meaningful when these match
    if counter_valid and pages and size < pages * page_size:
        return [f"the file is cut short ({size} bytes, its header says {pages * page_size})"]
    return []


def problems(conn: sqlite3.Connection, limit: int = 3) -> list[str]:
    """What ``quick_check`` and ``foreign_key_check`` find wrong (empty when the store is whole)."""
    try:
        found = [r[0] for r in conn.execute(f"PRAGMA quick_check({int(limit)})") if r[0] != "ok"]
        if not found:
            found = [f"{table} row {rowid} points to a missing {parent} row"
                     for table, rowid, parent, _ in conn.execute("PRAGMA foreign_key_check").fetchmany(limit)]
    except sqlite3.DatabaseError as exc:
        found = [str(exc)]
    return found


def write_failure_sentence(path: Path, full: bool) -> str:
    """Why a write failed with SQLite's 'disk is full' or 'disk I/O error', said as what happened."""
    if not full and not Path(f"{path}-wal").exists():
        return (f"{path.name}-wal, the store's write-ahead log, was deleted while fieldslope had the study "
                f"open, so nothing of this change was stored; close every fieldslope using {path.parent}, "
                "open it again, and check with fieldslope batches that the last batches are there.")
    return (f"the disk is full or cannot be written ({path.parent}); nothing of this change was stored: free "
            "some space and try again.")


def last_backup(path: Path) -> Path | None:
    """The newest backup beside the database (written with the backup API and checked before an upgrade)."""
    found = [p for p in path.parent.glob(f"{path.name}.*.bak") if p.is_file()]
    return max(found, key=lambda p: p.stat().st_mtime) if found else None


def damaged_sentence(path: Path, found: list[str], opened: bool = True) -> str:
    """One sentence: the store is damaged, what was found, where the last good backup is, what to do."""
    what = "; ".join(found[:2]) if found else "it cannot be read"
    backup = last_backup(path)
    if backup is not None:
        fix = (f"the last good backup is {backup}: close every fieldslope, move {path.name} and its -wal and "
               f"-shm files aside together, copy the backup to {path.name}, then import the batch files taken "
               f"in since")
    else:
        fix = (f"there is no backup beside it: close every fieldslope, keep a copy of {path.name} with its -wal "
               f"and -shm files, and rebuild it with sqlite3's .recover command or re-import the batch files "
               f"into a new study")
    kept = "it was opened read-only so nothing more is changed, and " if opened else ""
    return f"{path}: the record store is damaged or not a fieldslope database ({what}); {kept}{fix}."
