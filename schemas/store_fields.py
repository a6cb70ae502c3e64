"""Fields: each a column of ``records`` (``v1``, ``v2`` ...) named in the ``fields`` table; the protocol's,
the visit's (date, observer, notes) and the extra sheet columns kept with their records. No pandas here:
the listing commands use it."""

from __future__ import annotations

import sqlite3

from fieldslope.schemas.store_types import FieldCol

MAX_FIELDS = 250  # columns of records kept for fields (SQLite allows 2000 columns a table); extra sheet columns
                  # beyond it stay in the stored file only


def add_fields(conn: sqlite3.Connection, wanted: list[tuple[str, str]], limit: int | None = None
               ) -> dict[str, FieldCol]:
    """Make a ``records`` column for each (name, kind) not yet a field, inside the caller's write
    transaction; return every wanted field that has a column (all, unless ``limit`` fields are reached:
    extra sheet columns are kept up to ``MAX_FIELDS``)."""
    have = {r[0]: FieldCol(*r) for r in conn.execute("SELECT name, col, kind FROM fields")}
    n_cols = len(have)
    for name, kind in wanted:
        if name in have or (limit is not None and n_cols >= limit):
            continue
        n_cols += 1
        col = f"v{n_cols}"
        conn.execute(f"ALTER TABLE records ADD COLUMN {col}")
        conn.execute("INSERT INTO fields(name, col, kind) VALUES (?, ?, ?)", (name, col, kind))
        have[name] = FieldCol(name, col, kind)
    return {name: have[name] for name, _ in wanted if name in have}


def all_fields(conn: sqlite3.Connection) -> dict[str, FieldCol]:
    """Every field with a column in ``records``: the protocol's, the visit's and the extra sheet columns kept."""
    return {r[0]: FieldCol(*r) for r in conn.execute("SELECT name, col, kind FROM fields ORDER BY rowid")}
