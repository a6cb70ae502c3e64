"""Writing stored rows: the values of a batch's valid rows and the flags raised on them.

Both run inside a write transaction the caller holds (``Store`` opens it)."""

from __future__ import annotations

import sqlite3
from itertools import islice, repeat

import numpy as np
import pandas as pd

from fieldslope.schemas.batch_plan import Progress
from fieldslope.schemas.store_types import FieldCol
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import FlagNote
from fieldslope.schemas.store_types import show

CHUNK = 20_000   # rows per executemany call (progress is reported between chunks)


def insert_records(conn: sqlite3.Connection, protocol: Protocol, fields: dict[str, FieldCol], batch_id: int,
                   seq_batch: int, valid: pd.DataFrame, progress: Progress,
                   correction_id: int | None = None) -> dict[int, int]:
    """Insert the valid rows; return sheet row -> record id."""
    p = protocol
    names = [f for f in fields if f in valid.columns]
    cols = ["batch_id", "seq_batch", "row", "individual", "season", "correction_id",
            *(fields[f].col for f in names)]
    n = len(valid)
    sheet_rows = valid["_row"].to_numpy(dtype=np.int64).tolist()
    series = [repeat(batch_id, n), repeat(seq_batch, n), sheet_rows, texts(valid[p.id_col]),
              texts(valid[p.season_col]), repeat(correction_id, n)]
    for f in names:
        if fields[f].kind == "number":
            series.append(pd.to_numeric(valid[f], errors="coerce").to_numpy(dtype=float).tolist())
        else:
            series.append(texts(valid[f]))
    # rowids are allocated as max + 1 while this transaction holds the write lock
    base = conn.execute("SELECT coalesce(max(id), 0) FROM records").fetchone()[0]
    rows = zip(*series)
    sql = f"INSERT INTO records({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})"
    for start in range(0, n, CHUNK):
        conn.executemany(sql, islice(rows, CHUNK))
        progress(min(start + CHUNK, n), n, "storing")
    return dict(zip(sheet_rows, range(base + 1, base + n + 1)))


def insert_flags(conn: sqlite3.Connection, batch_id: int, flags: list[FlagNote], record_ids: dict[int, int],
                 created: str, quarantine_id: int | None = None) -> None:
    """Store flags raised on a batch's rows (``record_ids``: sheet row -> record id, where stored)."""
    conn.executemany(
        "INSERT INTO flags(kind, individual, season, field, value, message, batch_id, record_id, row, "
        "quarantine_id, created) VALUES (?,?,?,?,?,?,?,?,?,?,?)",
        [(f.kind, f.individual, f.season, f.field, f.value, f.message, batch_id, record_ids.get(f.row),
          f.row, quarantine_id, created) for f in flags])


def texts(series: pd.Series) -> list:
    """Text cells as str or None (a cell read from a workbook may hold a date or a number)."""
    values = series.to_numpy(dtype=object).tolist()
    if all(v is None or type(v) is str for v in values):
        return values
    return [v if v is None or isinstance(v, str) else (show(v) or None) for v in values]
