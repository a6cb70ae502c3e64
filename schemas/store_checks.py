"""Checks that need the record: census rows for unknown IDs, values that differ from the
record, robust outliers within a cell, unknown parents, new IDs that read like one on record.

Pure functions on pandas frames; the store supplies the current record (one row per
individual and season, columns = protocol fields) and the batch's valid rows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fieldslope.common.names import Kind
from fieldslope.schemas.id_checks import how_they_differ, id_key, id_keys, lookalikes
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import FlagNote, RowError
from fieldslope.schemas.store_types import show


#: how the census check's error begins (a quarantined row with it may join by itself later)
UNKNOWN_ID_REASON = "is not on record in season"


def census_unknown(protocol: Protocol, valid: pd.DataFrame, record: pd.DataFrame) -> list[RowError]:
    """A census row (fitness only) for an ID not on record in its season is a hard error."""
    if valid.empty:
        return []
    keys = pd.MultiIndex.from_arrays([valid[protocol.id_col].astype(str), valid[protocol.season_col].astype(str)])
    known = keys.isin(record.index) if len(record) else np.zeros(len(valid), dtype=bool)
    out = []
    missing = [ind for (ind, _), ok in zip(keys, known) if not ok]
    alike = lookalikes(set(record.index.get_level_values(0).astype(str)), missing) if missing and len(record) else {}
    for (ind, season), row, ok in zip(keys, valid["_row"], known):
        if not ok:
            twin = alike.get(ind)
            hint = (f" ({twin!r} is, differing only in {how_they_differ(ind, twin)}: if that is meant, correct "
                    "the ID)") if twin else ""
            out.append(RowError(int(row), protocol.id_col, ind,
                                f"{UNKNOWN_ID_REASON} {season}{hint}; a fitness census only completes "
                                "individuals already recorded: import their measurements first or correct the ID"))
    return out


def differs_from_record(protocol: Protocol, valid: pd.DataFrame, record: pd.DataFrame,
                        fields: list[str]) -> list[FlagNote]:
    """Flag each value that differs from the value already on record for that individual and season."""
    if valid.empty or record.empty:
        return []
    idx = pd.MultiIndex.from_arrays([valid[protocol.id_col].astype(str), valid[protocol.season_col].astype(str)])
    pos = record.index.get_indexer(idx)
    present = pos >= 0
    if not present.any():
        return []
    sub, pos = valid[present], pos[present]
    rows, ids, seasons = sub["_row"].to_numpy(), idx[present].get_level_values(0), idx[present].get_level_values(1)
    out = []
    for field in fields:
        if field not in sub.columns or field not in record.columns:
            continue
        new = sub[field].to_numpy(dtype=object)
        old = record[field].to_numpy(dtype=object)[pos]
        for i in np.flatnonzero(_differ(new, old)):
            out.append(FlagNote(int(rows[i]), ids[i], seasons[i], field, Kind.DIFFERS_FROM_RECORD, show(new[i]),
                                f"{field} {show(new[i])} differs from {show(old[i])} already on record for "
                                f"{ids[i]} in {seasons[i]}; keep the new value, exclude it, or set the right one"))
    return out


def _differ(new: np.ndarray, old: np.ndarray) -> np.ndarray:
    """Both filled in and different (numbers compared with a relative tolerance of 1e-9)."""
    a = pd.to_numeric(pd.Series(new), errors="coerce").to_numpy(dtype=float)
    b = pd.to_numeric(pd.Series(old), errors="coerce").to_numpy(dtype=float)
    numeric = np.isfinite(a) & np.isfinite(b)
    out = numeric & ~np.isclose(a, b, rtol=1e-9, atol=1e-12)
    blank_new = pd.isna(pd.Series(new)).to_numpy()
    blank_old = pd.isna(pd.Series(old)).to_numpy()
    text = ~numeric & ~blank_new & ~blank_old
    if text.any():
        out[text] = np.array([str(x) != str(y) for x, y in zip(new[text], old[text])], dtype=bool)
    return out


def new_outliers(protocol: Protocol, valid: pd.DataFrame, record: pd.DataFrame) -> list[FlagNote]:
    """Robust outliers (median/MAD z beyond ``protocol.outlier_z``) among the batch's trait values,
    with z computed over each cell (season and groups) of the record updated by this batch."""
    from fieldslope.schemas.outliers import robust_z

    traits = [t for t in protocol.trait_names if t in valid.columns]
    if valid.empty or not traits:
        return []
    key_cols = [protocol.id_col, protocol.season_col]
    keep = [c for c in (*protocol.groups, *traits) if c in valid.columns]
    batch_keys = pd.MultiIndex.from_arrays([valid[c].astype(str) for c in key_cols], names=key_cols)
    batch_last = valid[keep].set_axis(batch_keys).groupby(level=[0, 1], sort=False).last()
    merged = batch_last.combine_first(record[[c for c in (*protocol.groups, *traits) if c in record.columns]]) \
        if len(record) else batch_last
    cells = [merged.index.get_level_values(1).to_numpy(dtype=object)]
    cells += [merged[g].astype(object).to_numpy() if g in merged.columns else np.full(len(merged), None)
              for g in protocol.groups]
    code = np.zeros(len(merged), dtype=np.int64)
    for values in cells:             # one integer per cell: mixed-radix combination of the columns' codes
        codes, uniques = pd.factorize(values, use_na_sentinel=False)
        code = code * (len(uniques) + 1) + codes
    groups = pd.Series(np.arange(len(merged))).groupby(code).indices
    where = merged.index.get_indexer(batch_keys)
    rows = valid["_row"].to_numpy()
    out = []
    limit = protocol.outlier_z
    for trait in traits:
        values = pd.to_numeric(merged[trait], errors="coerce").to_numpy(dtype=float)
        z = np.full(len(merged), np.nan)
        for pos in groups.values():
            z[pos] = np.asarray(robust_z(values[pos]), dtype=float)
        bz = z[where]
        bv = pd.to_numeric(valid[trait], errors="coerce").to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            hit = np.flatnonzero(np.isfinite(bz) & (np.abs(bz) > limit) & np.isfinite(bv))
        for i in hit:
            ind, season = batch_keys[i]
            out.append(FlagNote(int(rows[i]), ind, season, trait, Kind.OUTLIER, show(bv[i]),
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
            out.append(FlagNote(int(valid["_row"].iloc[i]), ind, season, col, Kind.UNKNOWN_PARENT, parent,
                                f"{col} {parent!r} of {ind} is not on record in any season; check the ID "
                                "(heritability uses only parents on record)"))
    return out


def lookalike_ids(protocol: Protocol, valid: pd.DataFrame, known_ids: set[str]) -> list[FlagNote]:
    """A new ID (not on record in any season) that differs from one on record, or from another new ID of
    this batch, only in case, spaces or look-alike characters (O/0, l/1/I, S/5 ...): flagged on each row,
    naming the other ID, so a misread tag never becomes a new individual unnoticed."""
    if valid.empty:
        return []
    id_text = valid[protocol.id_col].astype(str)
    new_ids = list(set(id_text.unique()) - known_ids)
    if not new_ids:
        return []
    on_record = lookalikes(known_ids, new_ids)
    keys = id_keys(new_ids)
    by_key: dict[str, set[str]] = {}
    if len(set(keys)) < len(keys):         # some new IDs read like another new one (rare: only then a loop)
        for key, ind in zip(keys, new_ids):
            by_key.setdefault(key, set()).add(ind)
    alike = {ind for inds in by_key.values() if len(inds) > 1 for ind in inds}
    flagged = set(on_record) | alike
    if not flagged:
        return []
    ids = id_text.to_numpy(dtype=object)
    seasons = valid[protocol.season_col].astype(str).to_numpy(dtype=object)
    rows = valid["_row"].to_numpy()
    out = []
    for i in np.flatnonzero(id_text.isin(flagged).to_numpy()):
        ind = ids[i]
        twin = on_record.get(ind)
        if twin is not None:
            where = "is on record"
        else:
            twin, where = sorted(by_key[id_key(ind)] - {ind})[0], "is also in this batch"
        out.append(FlagNote(int(rows[i]), ind, seasons[i], protocol.id_col, Kind.LOOKALIKE_ID, ind,
                            f"ID {ind!r} is new, but {twin!r} {where} and differs from it only in "
                            f"{how_they_differ(ind, twin)}; if they are one individual, correct the ID (the row moves "
                            "to it); if not, keep it"))
    return out
