"""The effective data: per individual and season, the current value of every field.

Current = the latest non-blank value by batch order, with corrections (resolutions
with action ``set``) taking their place in that order; then excluded values (and open
out-of-range ones, and on request open outliers) left out. One SQL query for the
records, one for corrections, one for flags, then a pandas group-by.
"""

from __future__ import annotations

import sqlite3

import numpy as np
import pandas as pd

from fieldslope.common.names import ID_KINDS, ID_KINDS_SQL, Kind
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.store_types import FieldCol


def output_fields(protocol: Protocol) -> list[str]:
    """Fields of the effective frame, after ID and season, in the DEVELOPERS.md order."""
    return [*protocol.groups, *protocol.trait_names, *protocol.component_names, *protocol.parent_cols]


def _objects(values) -> np.ndarray:
    out = np.empty(len(values), dtype=object)
    out[:] = values
    return out


def _numbers(values) -> np.ndarray:
    try:
        return np.array(values, dtype=float)     # None becomes NaN
    except (TypeError, ValueError):              # a stray text in a number column: NaN, not a crash
        return pd.to_numeric(pd.Series(_objects(values)), errors="coerce").to_numpy(dtype=float)


def parse_number(text: str) -> float:
    return float(str(text).strip().replace(",", "."))


def latest(conn: sqlite3.Connection, protocol: Protocol, fields: dict[str, FieldCol], *,
           as_of: int | None = None, seasons: list[str] | None = None,
           sources: bool = False, skip: frozenset[int] = frozenset()) -> pd.DataFrame:
    """Latest values (with corrections) indexed by (ID, season); with ``sources`` also a
    ``_src:<field>`` column per field: the record id the value came from, or minus the flag id
    of the correction that set it. Records in ``skip`` (excluded rows) do not count."""
    names = list(fields)
    where, args = [], []
    if as_of is not None:
        where.append("seq_batch <= ?")
        args.append(as_of)
    if seasons is not None:
        where.append(f"season IN ({','.join('?' * len(seasons))})")
        args.extend(seasons)
    sql = ("SELECT individual, season, seq_batch, id"
           + "".join(f", {fields[n].col}" for n in names) + " FROM records"
           + (" WHERE " + " AND ".join(where) if where else "") + " ORDER BY id")
    # seq_batch never decreases with id (a row joining from quarantine takes the latest batch number),
    # so rowid order is batch order and SQLite needs no sort.
    rows = conn.execute(sql, args).fetchall()
    columns = list(zip(*rows)) if rows else [()] * (4 + len(names))
    data = {"individual": _objects(columns[0]), "season": _objects(columns[1]),
            "_key": np.array(columns[2], dtype=float), "_src": np.array(columns[3], dtype=float)}
    for n, col in zip(names, columns[4:]):
        data[n] = _numbers(col) if fields[n].kind == "number" else _objects(col)
    frame = pd.DataFrame(data)
    if skip:
        frame = frame[~frame["_src"].isin(list(skip))]
    corr = _corrections(conn, fields, as_of, seasons)
    if len(corr):
        frame = pd.concat([frame, corr], ignore_index=True)
        frame = frame.sort_values("_key", kind="stable")
    if sources:
        for n in names:
            frame[f"_src:{n}"] = frame["_src"].where(frame[n].notna())
    frame = frame.drop(columns=["_key", "_src"])
    keys = ["individual", "season"]
    several = frame.duplicated(keys, keep=False).to_numpy()
    last = frame[~several].set_index(keys)      # most individuals have one record: no group-by needed
    if several.any():
        last = pd.concat([last, frame[several].groupby(keys, sort=False).last()])
    last.index = last.index.set_names([protocol.id_col, protocol.season_col])
    for n in names:
        if fields[n].kind == "number" and last[n].dtype != float:
            last[n] = pd.to_numeric(last[n], errors="coerce").astype(float)
    return last


def _corrections(conn, fields, as_of, seasons) -> pd.DataFrame:
    sql = ("SELECT f.individual, f.season, f.field, r.new, r.after_batch, f.id FROM resolutions r "
           "JOIN flags f ON f.id = r.flag_id WHERE r.action = 'set' AND f.quarantine_id IS NULL "
           f"AND f.field <> '' AND f.kind NOT IN ({ID_KINDS_SQL})")
    args: list = []
    if as_of is not None:
        sql += " AND r.after_batch <= ?"
        args.append(as_of)
    rows = conn.execute(sql + " ORDER BY r.after_batch, r.id", args).fetchall()
    out = []
    for ind, season, field, new, after, flag_id in rows:
        if field not in fields or (seasons is not None and season not in seasons):
            continue
        value = parse_number(new) if fields[field].kind == "number" else new
        out.append({"individual": ind, "season": season, "_key": after + 0.5, "_src": -flag_id, field: value})
    return pd.DataFrame(out)


def flag_states(conn: sqlite3.Connection, as_of: int | None = None, leaving_out: bool = False) -> pd.DataFrame:
    """Flags on stored values with their current status (open, keep, exclude, set); with
    ``leaving_out`` only those that may leave a value out (excluded, or open outlier / out of range)."""
    cond = "" if as_of is None else f" WHERE after_batch <= {int(as_of)}"
    sql = ("SELECT f.id, f.kind, f.individual, f.season, f.field, f.record_id, r.action FROM flags f "
           f"LEFT JOIN (SELECT flag_id, max(id) AS last FROM resolutions{cond} GROUP BY flag_id) m "
           "ON m.flag_id = f.id LEFT JOIN resolutions r ON r.id = m.last WHERE f.quarantine_id IS NULL"
           + ("" if as_of is None else f" AND f.batch_id <= {int(as_of)}")
           + (" AND (r.action = 'exclude' OR (r.action IS NULL AND f.kind IN ('out_of_range', 'outlier')) "
              f"OR (r.action = 'set' AND f.kind IN ({ID_KINDS_SQL})))"
              if leaving_out else ""))
    frame = pd.DataFrame(conn.execute(sql).fetchall(),
                         columns=["id", "kind", "individual", "season", "field", "record_id", "status"])
    frame["status"] = frame["status"].fillna("open")
    return frame


def effective(conn: sqlite3.Connection, protocol: Protocol, fields: dict[str, FieldCol], *,
              without_open_outliers: bool = False, as_of: int | None = None) -> pd.DataFrame:
    """The effective frame: columns ID, season, groups, traits, fitness components, parents."""
    states = flag_states(conn, as_of, leaving_out=True)
    leave_out = states["status"].eq("exclude") | (states["status"].eq("open") & states["kind"].eq(Kind.OUT_OF_RANGE))
    # a row whose ID was corrected is stored again under the right ID: the old row is left out
    leave_out |= states["status"].eq("set") & states["kind"].isin(ID_KINDS)
    if without_open_outliers:
        leave_out |= states["status"].eq("open") & states["kind"].eq(Kind.OUTLIER)
    drop = states[leave_out]
    record_level = drop["field"].isin(["", protocol.id_col, protocol.season_col])
    value_level = drop[~record_level & drop["field"].isin(output_fields(protocol))]

    skip = frozenset(int(r) for r in drop[record_level]["record_id"].dropna())
    cols = output_fields(protocol)
    wanted = {n: fields[n] for n in cols if n in fields}
    last = latest(conn, protocol, wanted, as_of=as_of, sources=not value_level.empty, skip=skip)
    if not value_level.empty:
        _leave_out(last, value_level)
        last = last.drop(columns=[c for c in last.columns if c.startswith("_src:")])
    out = last.reindex(columns=cols).reset_index()
    for c in protocol.trait_names + protocol.component_names:
        out[c] = out[c].astype(float)
    out = out.sort_values([protocol.season_col, protocol.id_col], kind="stable").reset_index(drop=True)
    return out[[protocol.id_col, protocol.season_col, *cols]]


def _leave_out(last: pd.DataFrame, value_level: pd.DataFrame) -> None:
    """Blank each value whose flag leaves it out, if the current value is the one flagged
    (from the flagged record, or set by a correction of that flag)."""
    for field, group in value_level.groupby("field"):
        src_col = f"_src:{field}"
        idx = pd.MultiIndex.from_arrays([group["individual"], group["season"]])
        pos = last.index.get_indexer(idx)
        ok = pos >= 0
        pos, group = pos[ok], group[ok]
        if not len(pos):
            continue
        src = last[src_col].to_numpy()[pos]
        hit = (src == group["record_id"].to_numpy(dtype=float)) | (src == -group["id"].to_numpy(dtype=float))
        rows = pos[hit]
        if len(rows):
            col = last.columns.get_loc(field)
            last.iloc[rows, col] = np.nan if last[field].dtype.kind == "f" else None
