"""Open flags on values that a later batch replaced.

When a batch brings a new (non-blank) value for an individual, season and field, the open
flags that earlier batches raised on that field (out of range, outlier, differs from record,
missing fitness, unknown parent) no longer describe the current value. They are closed by an
append-only ``supersessions`` row naming the batch and record that replaced the value; the flag
and the old value stay on record, and ``flags(include_resolved=True)`` still lists them with
status ``superseded``. Flags on whole records (ID, season) and on quarantined rows are left alone.
"""

from __future__ import annotations

import sqlite3

import pandas as pd

from fieldslope.schemas.protocol import Protocol


def supersede(conn: sqlite3.Connection, protocol: Protocol, batch_id: int, valid: pd.DataFrame,
              record_ids: dict[int, int], created: str, before: int | None = None) -> int:
    """Close the open flags of batches before ``before`` (default: this batch) on values this batch's
    rows replaced; return how many were closed. A quarantined row that joins later passes ``before``
    past the latest batch, since its values are then the newest."""
    p = protocol
    open_flags = conn.execute(
        "SELECT f.id, f.individual, f.season, f.field FROM flags f WHERE f.batch_id < ? "
        "AND f.quarantine_id IS NULL AND f.field NOT IN ('', ?, ?) "
        "AND NOT EXISTS (SELECT 1 FROM resolutions r WHERE r.flag_id = f.id) "
        "AND NOT EXISTS (SELECT 1 FROM supersessions s WHERE s.flag_id = f.id)",
        (batch_id if before is None else before, p.id_col, p.season_col)).fetchall()
    if not open_flags or valid.empty:
        return 0
    keys = valid[p.id_col].astype(str) + "\x1f" + valid[p.season_col].astype(str)
    newest: dict[tuple[str, str], int] = {}      # (individual|season, field) -> record id of the new value
    flagged: dict[str, set[str]] = {}
    for _, ind, season, field in open_flags:
        flagged.setdefault(field, set()).add(f"{ind}\x1f{season}")
    for field, wanted in flagged.items():
        if field not in valid.columns:
            continue
        filled = keys.isin(wanted) & valid[field].notna() & valid[field].astype(str).str.strip().ne("")
        for key, row in zip(keys[filled], valid.loc[filled, "_row"]):
            newest[(key, field)] = record_ids.get(int(row))
    rows = []
    for flag_id, ind, season, field in open_flags:
        key = (f"{ind}\x1f{season}", field)
        if key in newest:
            rows.append((flag_id, batch_id, newest[key], created))
    conn.executemany("INSERT INTO supersessions(flag_id, batch_id, record_id, created) VALUES (?,?,?,?)", rows)
    return len(rows)
