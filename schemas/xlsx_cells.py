"""XLSX workbooks as rows of text cells (first worksheet, read-only, XML parsed by defusedxml).

Spreadsheet cell types become the text a person sees: dates as ISO text
(YYYY-MM-DD), whole numbers without a spurious ".0".
"""

from __future__ import annotations

import datetime as dt
import io
import math
import warnings
import zipfile
from fieldslope.common.errors import SheetError

# A workbook unpacking to more than this is refused (zip bomb). openpyxl parses about 1-2 MB of sheet XML a
# second here, so 64 MB (some 200,000 rows of 7 columns) is about a minute at most; larger sheets come as CSV.
MAX_UNPACKED = 64 * 1024 * 1024
CHUNK = 1 << 20
_INCOMPLETE = ("the workbook is incomplete (still being written or damaged); "
               "wait until it is fully saved or copied, then import it again.")


def cell_text(value: object) -> str | None:
    """One spreadsheet value as text, or None when blank."""
    if value is None:
        return None
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return str(value)
        if value.is_integer() and abs(value) < 1e16:
            return str(int(value))
        return f"{value:.15g}"   # at most 15 significant digits, as a spreadsheet shows and keeps them
    if isinstance(value, dt.datetime):
        if value.time() == dt.time(0, 0):
            return value.date().isoformat()
        return value.isoformat(sep=" ", timespec="seconds")
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    return str(value)


def _hostile_xml(exc: BaseException | None) -> bool:
    """Whether defusedxml stopped the parse (entity bombs, external entities) somewhere in the chain."""
    from defusedxml.common import DefusedXmlException

    seen = 0
    while exc is not None and seen < 10:
        if isinstance(exc, DefusedXmlException):
            return True
        exc, seen = exc.__cause__ or exc.__context__, seen + 1
    return False


def _check_archive(label: str, data: bytes) -> set[str]:
    """Refuse what is not a workbook or unpacks to more than MAX_UNPACKED; return the parts holding formulas.

    The sizes declared in the zip directory are checked first (a bomb is refused at once), then every part is
    inflated once with a byte budget, so a part whose declared size lies is stopped at the budget too, in
    well under a second (inflating runs at hundreds of MB a second; parsing the XML is the slow part). The
    same pass notes which parts hold formula elements.
    """
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as zf:
            infos = zf.infolist()
            names = {info.filename for info in infos}
            if "xl/workbook.xml" not in names:
                if "mimetype" in names or "content.xml" in names:
                    raise SheetError(f"{label}: this is an OpenDocument spreadsheet; save it as .xlsx or CSV.")
                raise SheetError(f"{label}: this is a zip archive, not an XLSX workbook; import the sheet itself.")
            if sum(info.file_size for info in infos) > MAX_UNPACKED:
                raise SheetError(_too_big(label))
            return _inflate_within_budget(label, zf, infos)
    except SheetError:
        raise
    except Exception:  # noqa: BLE001 - zipfile raises many kinds (BadZipFile, unsupported compression, CRC, ...)
        raise SheetError(f"{label}: {_INCOMPLETE}") from None


def _too_big(label: str) -> str:
    return (f"{label}: the workbook unpacks to more than {MAX_UNPACKED // 2**20} MB, more than a batch sheet "
            "holds; save the sheet as CSV or split it.")


def _inflate_within_budget(label: str, zf: zipfile.ZipFile, infos: list[zipfile.ZipInfo]) -> set[str]:
    budget, formulas = MAX_UNPACKED, set()
    for info in infos:
        with zf.open(info) as stream:
            tail = b""
            while chunk := stream.read(CHUNK):
                budget -= len(chunk)
                if budget < 0:
                    raise SheetError(_too_big(label))
                window = tail + chunk
                if b"<f>" in window or b"<f " in window or b"<f/>" in window:
                    formulas.add(info.filename)
                tail = window[-3:]
    return formulas


def _refuse_unsaved_formulas(label: str, data: bytes, rows: list[tuple[int, list[str | None]]]) -> None:
    """A formula whose result was never saved reads as blank: refuse rather than lose the value."""
    import openpyxl
    from openpyxl.utils import get_column_letter

    wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=False)
    try:
        ws = wb.worksheets[0]
        ws.reset_dimensions()
        cells, cached_rows = [], dict(rows)
        for number, formulas in enumerate(ws.iter_rows(min_row=1, max_row=max(cached_rows, default=1),
                                                       values_only=True), start=1):
            cached = cached_rows.get(number, [])
            for col, formula in enumerate(formulas):
                if formula is not None and (col >= len(cached) or cached[col] is None):
                    cells.append(f"{get_column_letter(col + 1)}{number}")
    finally:
        wb.close()
    if cells:
        shown = ", ".join(cells[:5]) + (f" and {len(cells) - 5} more" if len(cells) > 5 else "")
        raise SheetError(f"{label}: cell{'s' if len(cells) > 1 else ''} {shown} hold formulas whose results "
                         "were never saved; open the workbook in a spreadsheet program and save it, "
                         "or paste the values.")


def read_xlsx_rows(label: str, data: bytes, max_rows: int) -> tuple[list[tuple[int, list[str | None]]], list[str]]:
    """(rows as (sheet row, cells), notes) for the first worksheet; raise SheetError when unreadable.

    The notes say what was left out, e.g. further worksheets.
    """
    formula_parts = _check_archive(label, data)
    import openpyxl  # slow import: only when a workbook arrives

    rows: list[tuple[int, list[str | None]]] = []
    notes: list[str] = []
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
            try:
                if not wb.worksheets:
                    raise SheetError(f"{label}: the workbook has no worksheet; save the sheet with its data.")
                ws = wb.worksheets[0]
                if len(wb.worksheets) > 1:
                    others = ", ".join(repr(w.title) for w in wb.worksheets[1:4])
                    more = " and more" if len(wb.worksheets) > 4 else ""
                    notes.append(f"only the first worksheet ({ws.title!r}) was read; the workbook also has "
                                 f"{others}{more}: import each as its own file if it holds records.")
                if hasattr(ws, "reset_dimensions"):
                    ws.reset_dimensions()   # stored dimensions may be wrong; read what is there
                # at most one row past the cap is looked at: a row numbered a billion would otherwise make
                # openpyxl hand over every blank row before it, for minutes
                last = max_rows + 2
                for number, values in enumerate(ws.iter_rows(min_row=1, max_row=last, values_only=True), start=1):
                    if number == last:
                        raise SheetError(f"{label}: more than {max_rows:,} data rows (the sheet goes on past row "
                                         f"{last - 1:,}); split it into smaller batches.")
                    if any(v is not None for v in values):     # blank rows are left out here already
                        rows.append((number, [cell_text(v) for v in values]))
                part = getattr(ws, "_worksheet_path", None)
            finally:
                wb.close()
            if part and part.lstrip("/") in formula_parts:
                _refuse_unsaved_formulas(label, data, rows)
    except SheetError:
        raise
    except Exception as exc:  # noqa: BLE001 - any parser failure of a damaged workbook means the same to the user
        if _hostile_xml(exc):
            raise SheetError(f"{label}: the workbook's XML declares entities or external references, which "
                             "spreadsheet programs never write (a damaged or hostile file); save it again "
                             "from a spreadsheet program.") from None
        raise SheetError(f"{label}: {_INCOMPLETE}") from None
    return rows, notes
