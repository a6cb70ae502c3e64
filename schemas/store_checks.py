"""Checks that need the record: census rows for unknown IDs, values that differ from the
record, robust outliers within a cell, unknown parents.

Pure functions on pandas frames; the store supplies the current record (one row per
individual and season, columns = protocol fields) and the batch's valid rows.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from schemas.protocol import Protocol
from schemas.records import FlagNote, RowError


def show(value) -> str:
    """A value as a person reads it (numbers without a trailing .0)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, float):
        return f"{value:.12g}"
    return str(value)


def census_unknown(protocol: Protocol, valid: pd.DataFrame, record: pd.DataFrame) -> list[RowError]:
    """A census row (fitness only) for an ID not on record in its season is a hard error."""
    if valid.empty:
        return []
    keys = pd.MultiIndex.from_arrays([valid[protocol.id_col].astype(str), valid[protocol.season_col].astype(str)])
    known = keys.isin(record.index) if len(record) else np.zeros(len(valid), dtype=bool)
    out = []
    for (ind, season), row, ok in zip(keys, valid["_row"], known):
        if not ok:
            out.append(RowError(int(row), protocol.id_col, ind,
                                f"is not on record in season {season}; a fitness census only completes "
                                "individuals already recorded: import their measurements first or correct the ID"))
    return out


def differs_from_record(protocol: Protocol, valid: pd.DataFrame, record: pd.DataFrame,
                        fields: list[str]) -> list[FlagNote]:
    """Flag each value that differs from the value already on record for that individual and season."""
    if valid.empty or record.empty:
        return []
    idx = pd.MultiIndex.from_arrays([valid[protocol.id_col].astype(str), valid[protocol.season_col].astype(str)])
    present = idx.isin(record.index)
    if not present.any():
        return []
    sub = valid[present]
    sub_idx = idx[present]
    out = []
    for field in fields:
        if field not in sub.columns or field not in record.columns:
            continue
        new = sub[field].to_numpy(dtype=object)
        old = record[field].reindex(sub_idx).to_numpy(dtype=object)
        for i in np.flatnonzero(_differ(new, old)):
            ind, season = sub_idx[i]
            out.append(FlagNote(int(sub["_row"].iloc[i]), ind, season, field, "differs_from_record", show(new[i]),
                                f"{field} {show(new[i])} differs from {show(old[i])} already on record for "
                                f"{ind} in {season}; keep the new value, exclude it, or set the right one"))
    return out


def _differ(new: np.ndarray, old: np.ndarray) -> np.ndarray:
    out = np.zeros(len(new), dtype=bool)
    for i, (a, b) in enumerate(zip(new, old)):
        if _blank(a) or _blank(b):
            continue
        if isinstance(a, (int, float)) and isinstance(b, (int, float)):
            out[i] = not math.isclose(float(a), float(b), rel_tol=1e-9, abs_tol=1e-12)
        else:
            out[i] = str(a) != str(b)
    return out


def _blank(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA


def new_outliers(protocol: Protocol, valid: pd.DataFrame, record: pd.DataFrame) -> list[FlagNote]:
    """Robust outliers (median/MAD z beyond ``protocol.outlier_z``) among the batch's trait values,
    with z computed over each cell (season and groups) of the record updated by this batch."""
    from schemas.outliers import robust_z

    traits = [t for t in protocol.trait_names if t in valid.columns]
    if valid.empty or not traits:
        return []
    key_cols = [protocol.id_col, protocol.season_col]
    batch = valid.assign(**{c: valid[c].astype(str) for c in key_cols})
    batch_last = batch.groupby(key_cols, sort=False).last()
    merged = batch_last.combine_first(record) if len(record) else batch_last
    merged = merged.reset_index()
    for g in protocol.groups:
        if g not in merged.columns:
            merged[g] = None
    cells = [protocol.season_col, *protocol.groups]
    merged["_cell"] = merged[cells].astype(str).agg("\x1f".join, axis=1) if cells else ""
    cell_of = merged.set_index(key_cols)["_cell"]
    batch["_cell"] = cell_of.reindex(pd.MultiIndex.from_frame(batch[key_cols])).to_numpy()
    out = []
    limit = protocol.outlier_z
    for trait in traits:
        values = pd.to_numeric(merged[trait], errors="coerce")
        z = pd.Series(np.nan, index=merged.index)
        for _, pos in merged.groupby("_cell", sort=False).indices.items():
            z.iloc[pos] = np.asarray(robust_z(values.iloc[pos].to_numpy(dtype=float)), dtype=float)
        zi = pd.Series(z.to_numpy(), index=pd.MultiIndex.from_frame(merged[key_cols]))
        bz = zi.reindex(pd.MultiIndex.from_frame(batch[key_cols])).to_numpy()
        bv = pd.to_numeric(batch[trait], errors="coerce").to_numpy(dtype=float)
        hit = np.flatnonzero(np.isfinite(bz) & (np.abs(bz) > limit) & np.isfinite(bv))
        for i in hit:
            ind, season = batch[protocol.id_col].iloc[i], batch[protocol.season_col].iloc[i]
            out.append(FlagNote(int(batch["_row"].iloc[i]), ind, season, trait, "outlier", show(bv[i]),
                                f"{trait} {show(bv[i])} is a robust outlier in its cell (z = {bz[i]:.1f}, "
                                f"limit {limit:g}); re-measure if the animal is at hand, else keep or exclude it"))
    return out


def unknown_parents(protocol: Protocol, valid: pd.DataFrame, known_ids: set[str]) -> list[FlagNote]:
    """A parent column naming an individual not on record in any season (nor in this batch)."""
    cols = [c for c in protocol.parent_cols if c in valid.columns]
    if valid.empty or not cols:
        return []
    known = set(known_ids) | set(valid[protocol.id_col].astype(str))
    out = []
    for col in cols:
        vals = valid[col]
        mask = vals.notna() & ~vals.astype(str).isin(known)
        for i in np.flatnonzero(mask.to_numpy()):
            parent = str(vals.iloc[i])
            ind, season = str(valid[protocol.id_col].iloc[i]), str(valid[protocol.season_col].iloc[i])
            out.append(FlagNote(int(valid["_row"].iloc[i]), ind, season, col, "unknown_parent", parent,
                                f"{col} {parent!r} of {ind} is not on record in any season; check the ID "
                                "(heritability uses only parents on record)"))
    return out
