"""Plain records the store hands out (immutable, safe to pass between threads)."""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field

from fieldslope.common.errors import FieldslopeError, RecordError
from fieldslope.common.names import Outcome
from fieldslope.schemas.records import FlagNote, RowError


def show(value) -> str:
    """A value as a person reads it (numbers without a trailing .0)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, float):
        return f"{value:.12g}"
    return str(value)


@dataclass(frozen=True)
class FieldCol:
    """A protocol field and the SQL column of ``records`` holding it."""

    name: str
    col: str      # SQL column in ``records``
    kind: str     # "number" | "text"


@dataclass(frozen=True)
class ImportResult:
    """What happened to one batch (or would happen, for a check)."""

    file_name: str
    outcome: str                  # stored | partial | refused | duplicate
    batch_id: int | None = None   # the new batch (None for a check); the earlier one for a duplicate
    n_rows: int = 0
    n_stored: int = 0
    n_quarantined: int = 0
    errors: tuple[RowError, ...] = ()
    flags: tuple[FlagNote, ...] = ()
    message: str = ""
    checked_only: bool = False
    earlier: str = ""             # a recheck of bytes already taken in: the sentence naming that batch
    notes: tuple[str, ...] = ()   # the reader's notes: further worksheets left out, a guessed encoding

    @property
    def ok(self) -> bool:
        return self.outcome != Outcome.REFUSED

    def flag_counts(self) -> dict[str, int]:
        return dict(Counter(f.kind for f in self.flags))


@dataclass(frozen=True)
class BatchInfo:
    id: int
    file_name: str
    sha256: str
    operator: str
    received: str
    outcome: str
    n_rows: int
    n_stored: int
    n_quarantined: int
    n_errors: int
    message: str
    encoding: str = ""
    delimiter: str = ""
    login: str = ""               # the account's login name, beside the operator name typed
    notes: tuple[str, ...] = ()   # the reader's notes on the file (further worksheets left out, encoding)

    @property
    def by(self) -> str:
        """Who took it in: the operator, with the login name when that differs."""
        from fieldslope.schemas.operator import by_text
        return by_text(self.operator, self.login)


@dataclass(frozen=True)
class StoredFlag:
    id: int
    kind: str
    individual: str
    season: str
    field: str
    value: str
    message: str
    batch_id: int
    file_name: str
    row: int | None
    created: str
    status: str = "open"          # open | keep | exclude | set | superseded (a later batch's value)
    resolved_by: str = ""
    resolved_at: str = ""
    reason: str = ""
    new_value: str = ""
    quarantined: bool = False
    resolved_login: str = ""      # the login name of the account that resolved it
    record_id: int | None = None  # the stored row it was raised on (None for a quarantined row)

    @property
    def is_open(self) -> bool:
        return self.status == "open"


@dataclass(frozen=True)
class HeritabilityEntry:
    """An entered h² with its source (the study keeps every entry; the latest per trait is used)."""

    id: int
    trait: str
    value: float
    se: float | None
    source: str
    operator: str
    created: str
    login: str = ""               # the account's login name, beside the operator name


@dataclass(frozen=True)
class Resolution:
    flag_id: int
    action: str
    old: str = ""
    new: str = ""
    joined: bool = False          # a quarantined row became valid and joined the record
    message: str = ""
    remaining: tuple[str, ...] = field(default_factory=tuple)   # errors left on a quarantined row
