"""Plain records passed between the reader, the checks and the store."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover   (annotations only: flags, history and batches start without pandas)
    import pandas as pd

# Visit columns a batch may carry besides the protocol's: stored as text, never compared with the record.
OPTIONAL_TEXT = ("date", "observer", "notes")


@dataclass(frozen=True)
class Sheet:
    """A batch file read as text: every cell a ``str`` or ``None`` (blank)."""

    name: str                 # file name as given
    frame: pd.DataFrame       # columns as in the header (stripped), all object dtype
    row_numbers: list[int]    # sheet row of each frame row, as a person counts (header = 1)
    encoding: str             # e.g. "utf-8", "utf-8-sig", "cp1252", "utf-16", "xlsx"
    delimiter: str            # "," ";" "\t" or "" for xlsx
    decimal: str = "."        # "." or ","
    notes: tuple[str, ...] = ()   # remarks on how it was read, e.g. the encoding guessed


@dataclass(frozen=True)
class RowError:
    """A hard error in one cell (or row, when column is empty)."""

    row: int        # sheet row as a person counts it
    column: str
    value: str
    reason: str

    def sentence(self) -> str:
        where = f"row {self.row}" + (f", column {self.column}" if self.column else "")
        shown = f" {self.value!r}" if self.value not in ("", None) else ""
        return f"{where}:{shown} {self.reason}"


@dataclass(frozen=True)
class FlagNote:
    """A soft problem found in a batch; stored with the batch as an open flag."""

    row: int            # sheet row
    individual: str     # ID
    season: str
    field: str          # trait / fitness column, or "" for whole-record flags
    kind: str           # a flag kind of common.names.Kind (out_of_range, outlier, lookalike_id, ...)
    value: str
    message: str


@dataclass
class CheckReport:
    """Outcome of checking one sheet against the protocol (before anything is stored)."""

    sheet: Sheet
    # typed values of the rows without hard errors: ID/season/group columns as str,
    # traits and fitness as float (NaN = blank), parents as str or None, plus
    # date/observer/notes when present, and "_row" (sheet row number).
    valid: pd.DataFrame
    errors: list[RowError] = field(default_factory=list)
    flags: list[FlagNote] = field(default_factory=list)
    # rows (sheet numbers) with at least one hard error
    bad_rows: list[int] = field(default_factory=list)
    # True for a fitness census: ID + season + fitness only, completing earlier records
    census: bool = False
    # sentences about the whole sheet: columns the protocol does not name (kept as text beside each record, not
    # used), likely causes of many odd values (two columns swapped, another unit); kept with the batch
    notes: tuple[str, ...] = ()
    # columns the protocol does not name, kept as text beside each record (in ``valid`` under their names)
    kept: tuple[str, ...] = ()

    @property
    def n_rows(self) -> int:
        return len(self.sheet.frame)
