"""Entered heritabilities: each entry with its source, kept for good; the latest per trait is used."""

from __future__ import annotations

import math
import sqlite3

from fieldslope.schemas.batch_plan import now
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.store_types import HeritabilityEntry, RecordError

COLUMNS = ["id", "trait", "value", "se", "source", "operator", "created", "login"]


def checked_entry(protocol: Protocol, trait: str, value: float, se: float | None, source: str) -> str:
    """Refuse an unusable entry with one sentence; return the source as stored (trimmed)."""
    if trait not in protocol.traits:
        raise RecordError(f"{trait!r} is not a trait of this protocol; use one of "
                          f"{', '.join(protocol.trait_names)}.")
    if not isinstance(value, (int, float)) or not math.isfinite(value) or not 0 <= value <= 1:
        raise RecordError(f"heritability of {trait} must be a number from 0 to 1, not {value!r}.")
    if se is not None and (not math.isfinite(se) or se < 0):
        raise RecordError(f"the standard error of h² for {trait} must be 0 or more, not {se!r}.")
    if not source or not source.strip():
        raise RecordError("say where the heritability comes from (a study, a breeding design, an estimate).")
    return source.strip()


def add(conn: sqlite3.Connection, trait: str, value: float, se: float | None, source: str,
        people: tuple[str, str]) -> None:
    """Keep one entry; ``people`` is (operator, login)."""
    conn.execute("INSERT INTO heritability(trait, value, se, source, operator, login, created) VALUES (?,?,?,?,?,?,?)",
                 (trait, float(value), None if se is None else float(se), source, *people, now()))


def rows(conn: sqlite3.Connection) -> list[tuple]:
    """Every entry in the order entered, as tuples in ``COLUMNS`` order."""
    return conn.execute(f"SELECT {', '.join(COLUMNS)} FROM heritability ORDER BY id").fetchall()


def entries(rows_: list[tuple]) -> tuple[HeritabilityEntry, ...]:
    return tuple(HeritabilityEntry(int(i), str(t), float(v), None if s is None else float(s), str(src), str(op),
                                   str(c), str(lg)) for i, t, v, s, src, op, c, lg in rows_)


def latest(rows_: list[tuple]) -> dict[str, tuple[float, float | None, str]]:
    """trait -> (h², se or None, source) of its latest entry, as ``estimate_table``'s ``h2``."""
    return {e.trait: (e.value, e.se, e.source) for e in entries(rows_)}
