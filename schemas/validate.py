"""Checks of one sheet against the protocol, before anything is stored.

Three outcomes, as the intake rules ask:

* the file is refused whole (:class:`SheetError`): no ID or season column, or a
  column that is a near miss of a protocol column the sheet lacks (``elytrn``);
  any other column the protocol does not name is kept as text beside each
  record, not used in checks or estimates, and said once in the report's notes;
* hard errors, one :class:`RowError` per bad cell (sheet row, column, value,
  reason): the row is refused;
* soft flags, one :class:`FlagNote` per finding on an accepted row (refused
  rows get their errors only): ``out_of_range``, ``missing_fitness`` (one flag
  per blank component, so each can be resolved by setting that one value; a
  component column left wholly blank was not measured in this batch and is not
  flagged), ``duplicate_id`` (every row of the pair), ``mangled_id``, and, when the
  protocol declares them, ``id_pattern`` and ``season_range``.

Sentences about the whole sheet go into the report's notes: columns not in the
protocol and the likely causes of many odd values (``schemas.diagnose``).

Numbers are converted here (decimal comma honoured) so that one bad cell is
reported by itself and the other cells of its column are still checked; the
value rules then run as one pandera schema built from the protocol.
"""

from __future__ import annotations

import difflib
import re
import unicodedata
from functools import lru_cache

import numpy as np
import pandas as pd
import pandera.pandas as pa

from fieldslope.common.errors import SheetError
from fieldslope.common.names import Kind
from fieldslope.schemas.diagnose import column_causes, unit_in_cell
from fieldslope.schemas.id_checks import mangled_id_reasons
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import OPTIONAL_TEXT, CheckReport, FlagNote, RowError, Sheet


# -- which column is what ----------------------------------------------------

class _Roles:
    """The sheet's columns sorted by their meaning in the protocol."""

    def __init__(self, protocol: Protocol, columns: list[str], label: str):
        self.id, self.season = protocol.id_col, protocol.season_col
        missing = [c for c in (self.id, self.season) if c not in columns]
        if missing:
            what = " and ".join(f"{c!r} ({'ID' if c == self.id else 'season'})" for c in missing)
            near = [m for c in missing for m in _near(c, columns)]
            hint = f" ({', '.join(map(repr, near))} may be meant: rename it)" if near else ""
            raise SheetError(f"{label}: the header has no {what} column{hint}; every batch needs the ID and "
                             "season columns named as in protocol.toml.")
        self.groups = [c for c in protocol.groups if c in columns]
        self.traits = [c for c in protocol.trait_names if c in columns]
        self.components = [c for c in protocol.component_names if c in columns]
        self.parents = [c for c in protocol.parent_cols if c in columns]
        self.extra: dict[str, str] = {}   # sheet name -> canonical optional name
        known = {self.id, self.season, *self.groups, *self.traits, *self.components, *self.parents}
        totals = [c for c in columns if c in protocol.totals]
        if totals:
            c = totals[0]
            raise SheetError(f"{label}: column {c!r} is the product of {' × '.join(protocol.totals[c])}, "
                             "which is computed, not imported; delete it from the sheet and keep its components.")
        unknown = []
        for c in columns:
            if c in known:
                continue
            if c.lower() not in OPTIONAL_TEXT:
                unknown.append(c)
                continue
            twin = [k for k, v in self.extra.items() if v == c.lower()]
            if twin:
                raise SheetError(f"{label}: columns {twin[0]!r} and {c!r} are the same column in another case; "
                                 "merge them into one.")
            self.extra[c] = c.lower()
        self.notes = _unknown_columns(protocol, label, unknown, columns)
        # kept beside each record, under their own names (not "_row" and the like: those name our own columns)
        self.kept = [c for c in unknown if not c.startswith("_")]

    @property
    def numeric(self) -> list[str]:
        return [*self.traits, *self.components]

    @property
    def text(self) -> list[str]:
        return [self.id, self.season, *self.groups, *self.parents, *self.extra, *self.kept]


def _near(name: str, candidates: list[str]) -> list[str]:
    """The candidate that is ``name`` in another case, or else the closest spelling (at most one)."""
    lower = {n.lower(): n for n in candidates}
    if name.lower() in lower:
        return [lower[name.lower()]]
    return difflib.get_close_matches(name, candidates, n=1, cutoff=0.75)


MAX_NAMED = 10     # columns named in one sentence; the rest are counted


def _unknown_columns(protocol: Protocol, label: str, unknown: list[str], columns: list[str]) -> tuple[str, ...]:
    """Columns the protocol does not name. A near miss of a protocol column the sheet lacks (``elytrn`` for
    ``elytron``) refuses the file, naming both; any other is kept, not used, and said
    once (a near miss of a column the sheet has, or of date, observer or notes, says which); their values are
    kept as text beside each record."""
    expected = [protocol.id_col, protocol.season_col, *protocol.groups, *protocol.trait_names,
                *protocol.component_names, *protocol.parent_cols]
    notes, plain = [], []
    for c in unknown:
        near = _near(c, [*expected, *OPTIONAL_TEXT])
        if near and near[0] in expected and near[0] not in columns:
            raise SheetError(f"{label}: column {c!r} is not in the protocol, but it is a near miss of {near[0]!r}, "
                             f"which the protocol names and this sheet lacks; rename the column to {near[0]!r} if "
                             "that is meant, or add it to protocol.toml.")
        if near:
            notes.append(f"column {c!r} is not in the protocol; it is a near miss of {near[0]!r}"
                         + (", which the sheet also has" if near[0] in columns else "")
                         + f"; it is kept as text with each record but not used (rename it to {near[0]!r} if "
                         "that is meant).")
        else:
            plain.append(c)
    if plain:
        named = ", ".join(map(repr, plain[:MAX_NAMED])) + (
            f" and {len(plain) - MAX_NAMED} more" if len(plain) > MAX_NAMED else "")
        one = len(plain) == 1
        notes.insert(0, f"{'column' if one else 'columns'} {named} {'is' if one else 'are'} not in the protocol: "
                        f"kept as text with each record (fieldslope history shows {'it' if one else 'them'}), not "
                        f"used in checks or estimates (add {'it' if one else 'them'} to protocol.toml to use "
                        f"{'it' if one else 'them'}).")
    return tuple(notes)


# -- the pandera schema (built once per protocol) -------------------------------

def _finite(s: pd.Series) -> pd.Series:
    return pd.Series(np.isfinite(s.to_numpy(dtype=float)), index=s.index)


def _not_negative(s: pd.Series) -> pd.Series:
    return s >= 0


def _whole(s: pd.Series) -> pd.Series:
    return s == np.floor(s)


def _binary(s: pd.Series) -> pd.Series:
    return s.isin((0.0, 1.0))


_REASONS_NOT_NULL = {"id": "the ID is missing; fill it in or delete the row",
                     "season": "the season is missing; fill in the year"}


def _protocol_key(protocol: Protocol) -> tuple:
    """Everything the value rules depend on, as a hashable key for the schema cache."""
    return (
        protocol.id_col, protocol.season_col, tuple(protocol.groups), tuple(protocol.trait_names),
        tuple((n, protocol.fitness[n].kind) for n in protocol.component_names), tuple(protocol.parent_cols),
        tuple(sorted(protocol.allowed.items())),
    )


@lru_cache(maxsize=16)
def _schema(key: tuple) -> tuple[pa.DataFrameSchema, dict[tuple[str, int], str]]:
    """The value rules as a pandera schema, and the reason sentence for each (column, check number)."""
    id_col, season_col, groups, traits, components, parents, allowed_items = key
    allowed = dict(allowed_items)
    columns: dict[str, pa.Column] = {}
    reasons: dict[tuple[str, int], str] = {}

    def add(name: str, *, required: bool, numeric: bool, rules: list[tuple[pa.Check, str]]) -> None:
        if name in allowed:
            values = allowed[name]
            if numeric:
                values = tuple(float(v) for v in values if _is_number(v))
            rules = [*rules, (pa.Check.isin(values), f"is not allowed for {name} (allowed: {', '.join(allowed[name])})")]
        columns[name] = pa.Column("float64" if numeric else None, nullable=not required, required=required,
                                  checks=[c for c, _ in rules])
        for i, (_, reason) in enumerate(rules):
            reasons[(name, i)] = reason

    add(id_col, required=True, numeric=False, rules=[])
    add(season_col, required=True, numeric=False,
        rules=[(pa.Check.str_matches(r"^[0-9]{4}$"),
               "is not a year; write the season as four digits 0-9, e.g. 2025")])
    for name in (*groups, *parents):
        add(name, required=False, numeric=False, rules=[])
    finite = (pa.Check(_finite), "is not a finite number")
    for name in traits:
        add(name, required=False, numeric=True, rules=[finite])
    for name, kind in components:
        if kind == "binary":
            rules = [(pa.Check(_binary), "must be 0 or 1 (binary fitness)")]
        elif kind == "count":
            rules = [finite, (pa.Check(_not_negative), "is negative; a count is 0 or more"),
                     (pa.Check(_whole), "is not a whole number; a count is 0, 1, 2, ...")]
        else:
            rules = [finite, (pa.Check(_not_negative), "is negative; fitness cannot be below 0")]
        add(name, required=False, numeric=True, rules=rules)
    reasons[(id_col, -1)] = _REASONS_NOT_NULL["id"]
    reasons[(season_col, -1)] = _REASONS_NOT_NULL["season"]
    return pa.DataFrameSchema(columns, strict=False, coerce=False), reasons


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


# -- numbers ---------------------------------------------------------------------

# What a fitness cell of these kinds holds (a decimal point is no help there).
WHAT_TO_WRITE = {"binary": ("0 or 1 (binary fitness)", "0 or 1"), "count": ("a count", "a whole number (0, 1, 2, …)")}

def _to_numbers(text: pd.Series, decimal: str, codes: list[str],
                kind: str = "") -> tuple[pd.Series, list[tuple[pd.Series, str]]]:
    """(floats, [(mask of filled cells that are not numbers, reason for those), ...]); ``kind`` is the fitness
    kind of the column (binary, count), which the reason names instead of asking for a decimal number."""
    present = text.notna()
    blank = "leave the cell blank" + (f" or write {' or '.join(codes)}" if codes else "") + " when there is no value"
    if kind in WHAT_TO_WRITE:
        numbers = pd.to_numeric(text, errors="coerce").astype("float64")
        what, write = WHAT_TO_WRITE[kind]
        return numbers, [(present & numbers.isna(), f"is not {what}; write {write}, or {blank}")]
    if decimal == ",":
        ambiguous = present & text.str.contains(".", regex=False).fillna(False).astype(bool)
        numbers = pd.to_numeric(text.str.replace(",", ".", regex=False).where(~ambiguous), errors="coerce")
        numbers = numbers.astype("float64")
        other = present & numbers.isna() & ~ambiguous
        return numbers, [
            (ambiguous, "is ambiguous: this file writes decimals with a comma (12,5), so the point may be a "
                        "thousands mark; write the number without it"),
            (other, f"is not a number; write digits with a decimal comma (12,5), or {blank}"),
        ]
    numbers = pd.to_numeric(text, errors="coerce").astype("float64")
    return numbers, [(present & numbers.isna(), f"is not a number; write digits with a decimal point (12.5), or {blank}")]


def _odd_character(value: str) -> str | None:
    """A reason naming a look-alike or invisible character that spoils a number, e.g. a Unicode minus."""
    for ch in value:
        if ch.isascii() and ch.isprintable():
            continue
        if ch.isalpha():
            return None     # plain text, not a spoiled number
        name = unicodedata.name(ch, f"U+{ord(ch):04X}")
        return (f"is not a number: it holds the character {name} (U+{ord(ch):04X}), which looks like part of "
                "a number but is not; retype the value")
    return None


# -- the check -------------------------------------------------------------------

def check_sheet(protocol: Protocol, sheet: Sheet) -> CheckReport:
    """Check one sheet; raise :class:`SheetError` when the file must be refused whole."""
    frame = sheet.frame.reset_index(drop=True)
    if frame.columns.duplicated().any() or len(sheet.row_numbers) != len(frame):
        raise SheetError(f"{sheet.name}: the sheet's columns or row numbers are inconsistent "
                         "(a column named twice); read the file again with read_sheet.")
    roles = _Roles(protocol, [str(c) for c in frame.columns], sheet.name)
    rows = np.asarray(sheet.row_numbers, dtype=np.int64)
    codes = [c for c in protocol.missing_codes if c]

    text: dict[str, pd.Series] = {}
    for col in frame.columns:
        s = frame[col].astype(object)
        s = s.where(s.notna(), None)
        if codes:
            s = s.mask(s.isin(codes), None)
        text[col] = s

    errors: list[RowError] = []
    typed: dict[str, pd.Series] = {}
    for col in roles.text:
        typed[col] = text[col]
    for col in roles.numeric:
        spec = protocol.fitness.get(col)
        numbers, problems = _to_numbers(text[col], sheet.decimal, codes, spec.kind if spec is not None else "")
        typed[col] = numbers
        unit = protocol.traits[col].unit if col in protocol.traits else ""
        for bad, reason in problems:
            for pos in np.flatnonzero(bad.to_numpy()):
                value = str(text[col].iat[pos])
                errors.append(RowError(int(rows[pos]), col, value,
                                       unit_in_cell(value, col, unit) or _odd_character(value) or reason))

    errors.extend(_rule_errors(protocol, typed, text, rows))
    errors.extend(_group_errors(protocol, roles, text, rows, sheet.name))
    position = {c: i for i, c in enumerate(frame.columns)}
    errors.sort(key=lambda e: (e.row, position.get(e.column, -1)))
    bad_rows = sorted({e.row for e in errors})
    good = ~np.isin(rows, bad_rows)

    order = [c for c in frame.columns if c in typed]
    valid = pd.DataFrame({(roles.extra.get(c, c)): typed[c][good].reset_index(drop=True) for c in order})
    valid["_row"] = rows[good]
    for col in roles.text:
        name = roles.extra.get(col, col)
        valid[name] = valid[name].astype(object)
    flags = _flags(protocol, roles, valid, text, good)
    census = not roles.traits and bool(roles.components)
    causes = column_causes(protocol.traits, {c: typed[c].to_numpy(dtype=float) for c in roles.traits})
    notes = (*roles.notes, *(f"likely cause: {c}" for c in causes))
    return CheckReport(sheet=sheet, valid=valid, errors=errors, flags=flags, bad_rows=bad_rows, census=census,
                       notes=notes, kept=tuple(roles.kept))


def _group_errors(protocol: Protocol, roles: _Roles, text: dict[str, pd.Series], rows: np.ndarray,
                  label: str) -> list[RowError]:
    """A measured row must name its cell: a group column present in the sheet may not be blank there."""
    if not roles.traits:
        return []     # a census or parent list completes individuals already placed in a cell
    out = []
    for g in roles.groups:
        for pos in np.flatnonzero(text[g].isna().to_numpy()):
            out.append(RowError(int(rows[pos]), g, "", f"is blank; a measured individual needs its {g}: fill it in"))
    return out


def _rule_errors(protocol: Protocol, typed: dict[str, pd.Series], text: dict[str, pd.Series],
                 rows: np.ndarray) -> list[RowError]:
    schema, reasons = _schema(_protocol_key(protocol))
    frame = pd.DataFrame(typed)
    try:
        schema.validate(frame, lazy=True)
    except pa.errors.SchemaErrors as exc:
        cases = exc.failure_cases
    else:
        return []
    out = []
    for col, check, number, index in zip(cases["column"], cases["check"], cases["check_number"], cases["index"]):
        if pd.isna(index) or col not in text:
            # a frame-level failure would mean the schema and the roles disagree: a bug, not bad data
            raise AssertionError(f"unexpected frame-level check failure: {col} {check}")
        pos = int(index)
        if check == "not_nullable":
            reason = reasons.get((col, -1), "is missing")
        else:
            reason = reasons[(col, int(number))]
        value = text[col].iat[pos]
        out.append(RowError(int(rows[pos]), col, "" if value is None else str(value), reason))
    return out


# -- soft flags ------------------------------------------------------------------

def _flags(protocol: Protocol, roles: _Roles, valid: pd.DataFrame, text: dict[str, pd.Series],
           good: np.ndarray) -> list[FlagNote]:
    if valid.empty:
        return []
    ids = valid[roles.id].to_numpy(dtype=object)
    seasons = valid[roles.season].to_numpy(dtype=object)
    rows = valid["_row"].to_numpy()
    flags: list[FlagNote] = []

    def note(i: int, field: str, kind: str, value: str, message: str) -> None:
        flags.append(FlagNote(int(rows[i]), str(ids[i]), str(seasons[i]), field, kind, value, message))

    for col in roles.traits:
        spec = protocol.traits[col]
        values = valid[col].to_numpy()
        lo = -np.inf if spec.min is None else spec.min
        hi = np.inf if spec.max is None else spec.max
        with np.errstate(invalid="ignore"):
            outside = ~np.isnan(values) & ((values < lo) | (values > hi))
        shown = text[col][good].to_numpy(dtype=object)
        unit = f" {spec.unit}" if spec.unit else ""
        span = f"{'' if spec.min is None else f'{spec.min:g}'}–{'' if spec.max is None else f'{spec.max:g}'}{unit}"
        for i in np.flatnonzero(outside):
            note(i, col, Kind.OUT_OF_RANGE, str(shown[i]),
                 f"{col} = {shown[i]}{unit} is outside the plausible range {span}; check the sheet, then keep, "
                 "correct or exclude it.")

    for col in roles.components:
        blank = np.isnan(valid[col].to_numpy())
        if blank.all():
            continue   # a column left wholly blank was not measured in this batch: nothing to flag
        for earlier in protocol.earlier_components(col):   # died before it: nothing to count, not missing
            if earlier in valid.columns:
                blank &= valid[earlier].to_numpy() != 0
        for i in np.flatnonzero(blank):
            note(i, col, Kind.MISSING_FITNESS, "",
                 f"{col} is blank for {ids[i]} in {seasons[i]}; fill it in (or a later census will).")

    keys = pd.Series(list(zip(ids, seasons)))
    dup = keys.duplicated(keep=False).to_numpy()
    if dup.any():
        groups: dict[tuple, list[int]] = {}
        for i in np.flatnonzero(dup):
            groups.setdefault(keys.iat[i], []).append(int(rows[i]))
        for i in np.flatnonzero(dup):
            where = ", ".join(map(str, groups[keys.iat[i]]))
            note(i, "", Kind.DUPLICATE_ID, str(ids[i]),
                 f"ID {ids[i]} appears more than once for season {seasons[i]} (rows {where}); "
                 "keep the right row (its other copies are then left out), or exclude a wrong copy or "
                 "correct its ID.")

    for i, reason in mangled_id_reasons(ids):
        note(i, roles.id, Kind.MANGLED_ID, str(ids[i]),
             f"ID {ids[i]!r} {reason}; check it against the paper sheet and correct it.")
    if protocol.id_pattern is not None:
        pattern = re.compile(protocol.id_pattern)
        for i, ind in enumerate(ids):
            if pattern.fullmatch(str(ind)) is None:
                note(i, roles.id, Kind.ID_PATTERN, str(ind),
                     f"ID {str(ind)!r} does not match the protocol's ID pattern {protocol.id_pattern}; check it "
                     "against the paper sheet and correct it (the row moves to the right ID), or keep it if the "
                     "pattern is too strict.")
    if protocol.seasons is not None:
        first, last = protocol.seasons
        for i, season in enumerate(seasons):
            if not first <= int(season) <= last:
                note(i, roles.season, Kind.SEASON_RANGE, str(season),
                     f"season {season} of {ids[i]} is outside the protocol's seasons {first}–{last}; check the "
                     "year (exclude the row and import it again corrected), or keep it and widen "
                     "[checks] seasons.")
    flags.sort(key=lambda f: f.row)
    return flags
