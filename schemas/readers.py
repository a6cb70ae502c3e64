"""Batch readers: a CSV, TSV or XLSX field sheet as text cells.

Every cell comes back as ``str`` (stripped) or ``None`` (blank); nothing is
converted here, so IDs keep their leading zeros and codes such as "NA" stay
text. Each hazard of field sheets is either handled (and recorded on the
:class:`~schemas.records.Sheet`) or refused with one :class:`SheetError`
sentence saying what, where and how to fix it.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Iterable, Iterator
from pathlib import PurePath

import pandas as pd

from fieldslope.common.errors import SheetError
from fieldslope.schemas.records import Sheet
from fieldslope.schemas.xlsx_cells import read_xlsx_rows

MAX_BYTES = 50 * 1024 * 1024      # largest batch file accepted
MAX_ROWS = 1_000_000              # most data rows accepted

_SEPARATORS = (",", ";", "\t")
_SEP_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}
_ZIP_MAGIC = b"PK\x03\x04"
_OLE_MAGIC = b"\xd0\xcf\x11\xe0"
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+$")
_DECIMAL_POINT = re.compile(r"^[+-]?\d*\.\d+$")
_LOOKS_LIKE_VALUE = re.compile(r"^[+-]?[\d.,:/ -]*\d[\d.,:/ -]*$")   # 12.5, 2025, 14/06/2025
_SEP_DIRECTIVE = re.compile(r'"?sep=([,;\t])"?[ ,;\t]*(?:\r\n|\r|\n)', re.IGNORECASE)
_NON_ASCII_IN_WORD = re.compile(r"(?<=[^\W\d_])[^\x00-\x7f](?=[^\W\d_])")
_LEGACY_NOTE = {
    enc: f"not UTF-8: read as {what}; if accented letters look wrong, save the sheet as 'CSV UTF-8'."
    for enc, what in (("cp1252", "Windows text (cp1252)"), ("mac_roman", "old Mac text (Mac Roman)"))
}

# Temporary names written by browsers, sync tools, editors and spreadsheets
# while a file is still being written or is open.
_PARTIAL_SUFFIXES = (".part", ".partial", ".filepart", ".crdownload", ".download", ".tmp", ".temp", ".swp")


def is_partial_name(filename: str) -> bool:
    """True for names a drop folder must ignore: temp, lock and hidden files."""
    base = PurePath(filename).name
    lower = base.lower()
    if not base or base.startswith((".", "~$")) or lower.endswith("~"):
        return True   # hidden files, editor backups, spreadsheet lock files (~$x.xlsx, .~lock.x#)
    return lower.endswith(_PARTIAL_SUFFIXES)


def read_sheet(name: str, data: bytes) -> Sheet:
    """Read one batch file's bytes; raise :class:`SheetError` when it cannot be read."""
    label = PurePath(name).name or "the batch file"
    if len(data) > MAX_BYTES:
        raise SheetError(
            f"{label}: the file is {len(data) / 2**20:.1f} MB, over the {MAX_BYTES / 2**20:.0f} MB limit; "
            "split it into smaller batches."
        )
    if not data.strip():
        raise SheetError(f"{label}: the file is empty; export the sheet again with its header row.")
    ext = PurePath(name).suffix.lower()
    if data.startswith(_ZIP_MAGIC) or (ext in (".xlsx", ".xlsm") and _ZIP_MAGIC.startswith(data[:4])):
        rows, notes = read_xlsx_rows(label, data, MAX_ROWS)
        sheet = _assemble(label, rows, encoding="xlsx", delimiter="", pad_short=True)
        return Sheet(sheet.name, sheet.frame, sheet.row_numbers, "xlsx", "", notes=tuple(notes))
    if data.startswith(_OLE_MAGIC) and ext in (".xlsx", ".xlsm"):
        raise SheetError(f"{label}: the workbook is password-protected (encrypted); save a copy without a "
                         "password and import that.")
    if data.startswith(_OLE_MAGIC):
        raise SheetError(f"{label}: this is an old Excel (.xls) workbook; save it as .xlsx or CSV and import that.")
    if ext in (".xlsx", ".xlsm"):
        raise SheetError(f"{label}: the name ends in {ext} but the content is not a workbook; "
                         "save the sheet again as .xlsx or as CSV.")
    text, encoding = _decode(label, data)
    directive = _SEP_DIRECTIVE.match(text)
    if directive:                      # Excel's "sep=;" first line: not a row of the sheet
        sep, text = directive.group(1), text[directive.end():]
    else:
        sep = _guess_separator(text, ext)
    records = _csv_records(label, text, sep)
    sheet = _assemble(label, records, encoding=encoding, delimiter=sep)
    decimal = "," if sep != "," and _uses_decimal_comma(sheet.frame) else "."
    notes = (_LEGACY_NOTE[encoding],) if encoding in _LEGACY_NOTE else ()
    return Sheet(sheet.name, sheet.frame, sheet.row_numbers, encoding, sep, decimal=decimal, notes=notes)


# -- text files ------------------------------------------------------------

def _decode(label: str, data: bytes) -> tuple[str, str]:
    """Decode the bytes; return (text, encoding used). Never silently garbles letters."""
    utf16 = "utf-16" if data.startswith((b"\xff\xfe", b"\xfe\xff")) else _bomless_utf16(data)
    if utf16:
        try:
            text, encoding = data.decode(utf16), utf16
        except UnicodeDecodeError as exc:
            raise SheetError(f"{label}: the UTF-16 text is damaged near byte {exc.start}; "
                             "export the sheet again.") from None
    elif data.startswith(b"\xef\xbb\xbf"):
        try:
            text, encoding = data.decode("utf-8-sig"), "utf-8-sig"
        except UnicodeDecodeError as exc:
            raise SheetError(f"{label}: the file is marked as UTF-8 but byte {exc.start} is not UTF-8; "
                             "save it again as 'CSV UTF-8'.") from None
    else:
        try:
            text, encoding = data.decode("utf-8"), "utf-8"
        except UnicodeDecodeError:
            text, encoding = _decode_legacy(data)
    if "\x00" in text:
        raise SheetError(f"{label}: the file holds NUL bytes, so it is not a text sheet; "
                         "export it as CSV, TSV or XLSX.")
    return text, encoding


def _bomless_utf16(data: bytes) -> str | None:
    """UTF-16 without its byte-order mark: mostly-ASCII text has a NUL in every other byte."""
    sample = data[:4000]
    if len(sample) < 8 or len(data) % 2:
        return None
    even, odd = sample[0::2], sample[1::2]
    even_nul, odd_nul = even.count(0) / len(even), odd.count(0) / len(odd)
    if odd_nul > 0.5 and even_nul < 0.02:
        return "utf-16-le"
    if even_nul > 0.5 and odd_nul < 0.02:
        return "utf-16-be"
    return None


def _decode_legacy(data: bytes) -> tuple[str, str]:
    """A spreadsheet's 8-bit export: Windows (cp1252) or old Mac (mac_roman).

    The two agree on ASCII and differ on accented letters. Inside a word
    (between two letters) the right decoding gives a lowercase letter ("Müller")
    where the wrong one gives a symbol or a capital ("M¸ller", "MŸller"); the
    decoding with the better count wins, Windows on a tie. The encoding used is
    recorded on the Sheet, with a note, so the choice is never silent.
    """
    try:
        win = data.decode("cp1252")
    except UnicodeDecodeError:
        return data.decode("mac_roman"), "mac_roman"
    mac = data.decode("mac_roman")
    return (mac, "mac_roman") if _in_word_score(mac) > _in_word_score(win) else (win, "cp1252")


def _in_word_score(text: str) -> int:
    score = 0
    for match in _NON_ASCII_IN_WORD.finditer(text):
        score += 1 if match.group().islower() else -1
    return score


def _first_line(text: str, limit: int = 65536) -> str:
    """The first non-blank logical line (quoted separators and newlines skipped)."""
    out, quoted = [], False
    for ch in text[:limit]:
        if ch == '"':
            quoted = not quoted
        elif ch in "\r\n" and not quoted:
            if "".join(out).strip():
                break
            out = []
            continue
        if not quoted:
            out.append(ch)
    return "".join(out)


def _guess_separator(text: str, ext: str) -> str:
    header = _first_line(text)
    counts = {sep: header.count(sep) for sep in _SEPARATORS}
    default = "\t" if ext in (".tsv", ".tab") else ","
    best = max(_SEPARATORS, key=lambda s: (counts[s], s == default))
    return best if counts[best] else default


def _csv_records(label: str, text: str, sep: str) -> Iterator[tuple[int, list[str]]]:
    """Yield (sheet row, cells) for each record; sheet rows count records as a spreadsheet does."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep, quotechar='"', strict=True)
    row = width = 0
    while True:
        start = reader.line_num + 1
        try:
            cells = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            yield from _raise_csv_error(label, str(exc), start, reader.line_num, sep)
            return
        row += 1
        if reader.line_num > start and width:
            _refuse_swallowed_rows(label, cells, sep, width, start, reader.line_num)
        elif not width and any(c.strip() for c in cells):
            width = len(cells)
        yield row, cells


def _refuse_swallowed_rows(label: str, cells: list[str], sep: str, width: int, start: int, end: int) -> None:
    """A stray quote closed by another far below turns whole rows into one cell: refuse that."""
    need = max(3, width - 1)     # a note may hold a comma or two; a swallowed row holds a row's separators
    for cell in cells:
        if "\n" in cell or "\r" in cell:
            if any(line.count(sep) >= need for line in cell.splitlines()):
                raise SheetError(
                    f"{label}: the quote opened on line {start} runs to line {end} and takes in lines that look "
                    "like rows; remove the stray quote (\") or close it where the cell ends."
                )


def _raise_csv_error(label: str, problem: str, start: int, line: int, sep: str) -> Iterator:
    if "end of data" in problem:
        raise SheetError(f"{label}: the quote opened on line {start} is never closed; "
                         "add the closing quote (\") or remove the stray one.")
    if "expected after" in problem:
        raise SheetError(f"{label}, line {line}: text follows a closing quote; quote the whole cell "
                         "or remove the stray quote.")
    if "field larger" in problem:
        raise SheetError(f"{label}, line {start}: a cell is longer than {csv.field_size_limit()} characters "
                         "(often a stray quote); check that line.")
    raise SheetError(f"{label}, line {start}: not readable as {_SEP_NAMES[sep]}-separated text ({problem}).")


def _uses_decimal_comma(frame: pd.DataFrame) -> bool:
    """A ';' or tab file whose numbers are written 12,5 rather than 12.5."""
    comma = point = 0
    for col in frame.columns:
        values = frame[col].dropna()
        if len(values) > 2000:
            values = values.iloc[:2000]
        for value in values:
            if _DECIMAL_COMMA.match(value):
                comma += 1
            elif _DECIMAL_POINT.match(value):
                point += 1
    return comma > point


# -- shared: header, blank rows, ragged rows ---------------------------------

def _column_label(index: int) -> str:
    letters, n = "", index + 1
    while n:
        n, r = divmod(n - 1, 26)
        letters = chr(65 + r) + letters
    return f"column {index + 1} ({letters})"


def _clean(cells: list) -> list[str | None]:
    """Stripped text, None for a blank cell."""
    return [(cell.strip() or None) if cell else None for cell in cells]


def _rows_phrase(rows: list[int]) -> str:
    """'row 7 has' / 'rows 7, 9 and 3 more have'."""
    if len(rows) == 1:
        return f"row {rows[0]} has"
    shown = ", ".join(map(str, rows[:5]))
    more = f" and {len(rows) - 5} more" if len(rows) > 5 else ""
    return f"rows {shown}{more} have"


def _assemble(label: str, records: Iterable[tuple[int, list]], *, encoding: str, delimiter: str,
              pad_short: bool = False) -> Sheet:
    """Header, blank rows, ragged rows and caps, shared by text and workbook readers.

    ``pad_short``: a workbook row simply ends at its last filled cell, so short
    rows are padded with blanks; in a text file a short row is an error.
    """
    header: list[str | None] | None = None
    header_row = 0
    rows: list[list[str | None]] = []
    numbers: list[int] = []
    long_rows: list[int] = []
    short_rows: list[int] = []
    width = 0
    for number, raw in records:
        cells = _clean(raw)
        if not any(cells):
            continue                          # blank rows (and trailing ;;; rows) are dropped
        if header is None:
            header, header_row = cells, number
            while header and header[-1] is None:
                header.pop()                  # unnamed trailing columns may hold no data (checked below)
            width = len(header)
            continue
        if len(cells) > width:
            if any(cells[width:]):
                long_rows.append(number)
            cells = cells[:width]
        elif len(cells) < width:
            if not pad_short:
                short_rows.append(number)
                continue
            cells = cells + [None] * (width - len(cells))
        rows.append(cells)
        numbers.append(number)
        if len(rows) > MAX_ROWS:
            raise SheetError(f"{label}: more than {MAX_ROWS:,} data rows; split it into smaller batches.")
    if header is None:
        raise SheetError(f"{label}: the file has no header row; the first row must name the columns.")
    if long_rows:
        raise SheetError(
            f"{label}: {_rows_phrase(long_rows)} more cells than the {width} named columns of the header "
            f"(row {header_row}); name the extra column in the header or remove the extra cells or separators."
        )
    if short_rows:
        raise SheetError(
            f"{label}: {_rows_phrase(short_rows)} fewer cells than the {width} columns of the header "
            f"(row {header_row}); add the missing separators there."
        )
    keep = _check_header(label, header, header_row, rows)
    if not rows:
        raise SheetError(f"{label}: the file has a header (row {header_row}) but no data rows.")
    if len(keep) < width:
        rows = [[r[i] for i in keep] for r in rows]
    frame = pd.DataFrame(rows, columns=[header[i] for i in keep], dtype=object)
    return Sheet(name=label, frame=frame, row_numbers=numbers, encoding=encoding, delimiter=delimiter)


def _check_header(label: str, header: list[str | None], header_row: int,
                  rows: list[list[str | None]]) -> list[int]:
    """Refuse unnamed columns holding data and duplicate names; return the positions to keep."""
    named = [h for h in header if h is not None]
    if named and all(_LOOKS_LIKE_VALUE.match(h) for h in named):
        raise SheetError(f"{label}: the first row (row {header_row}) holds values, not column names; "
                         "add a header row naming the columns as in protocol.toml.")
    unnamed = [i for i, h in enumerate(header) if h is None]
    filled = [i for i in unnamed if any(r[i] is not None for r in rows)]
    if filled:
        names = ", ".join(_column_label(i) for i in filled)
        raise SheetError(f"{label}: {names} of the header (row {header_row}) "
                         f"{'have' if len(filled) > 1 else 'has'} data but no name; name the column or delete it.")
    seen: dict[str, int] = {}
    dups: list[str] = []
    for i, h in enumerate(header):
        if h is None:
            continue
        if h in seen:
            dups.append(f"{h!r} ({_column_label(seen[h])} and {_column_label(i)})")
        else:
            seen[h] = i
    if dups:
        raise SheetError(f"{label}: the header (row {header_row}) names {', '.join(dups)} twice; "
                         "give each column its own name.")
    return [i for i, h in enumerate(header) if h is not None]
