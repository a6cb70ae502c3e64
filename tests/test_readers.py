"""Batch readers: one generated fixture per field-sheet hazard.

Every hazard is either read correctly (values compared with the text that was
written) or refused with one SheetError sentence that says where.
"""

from __future__ import annotations

import csv
import datetime as dt
import io

import openpyxl
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldslope.schemas import readers
from fieldslope.common.errors import SheetError
from fieldslope.schemas.readers import is_partial_name, read_sheet

PLAIN = "tag,season,site,femur,notes\n0042,2025,Knoll Bench,11.5,NA\n0043,2025,Knoll Bench,12,None\n"


def column(sheet, name):
    return list(sheet.frame[name])


def refused(name: str, data: bytes) -> str:
    with pytest.raises(SheetError) as err:
        read_sheet(name, data)
    msg = str(err.value)
    assert "\n" not in msg and msg.startswith(name.split("/")[-1])
    return msg


def xlsx_bytes(tmp_path, rows, *, at=None):
    """An XLSX built with openpyxl: ``rows`` from A1, or ``at`` = {cell: value}."""
    wb = openpyxl.Workbook()
    ws = wb.active
    for r in rows:
        ws.append(r)
    for ref, value in (at or {}).items():
        ws[ref] = value
    path = tmp_path / "batch.xlsx"
    wb.save(path)
    return path.read_bytes()


# -- text files ---------------------------------------------------------------------

def test_plain_csv_keeps_ids_and_codes_as_text():
    sheet = read_sheet("week1.csv", PLAIN.encode())
    assert list(sheet.frame.columns) == ["tag", "season", "site", "femur", "notes"]
    assert column(sheet, "tag") == ["0042", "0043"]
    assert column(sheet, "notes") == ["NA", "None"]          # only protocol codes mean missing
    assert column(sheet, "femur") == ["11.5", "12"]
    assert sheet.row_numbers == [2, 3]
    assert (sheet.encoding, sheet.delimiter, sheet.decimal) == ("utf-8", ",", ".")
    assert all(dtype == object for dtype in sheet.frame.dtypes)


def test_blank_rows_dropped_and_true_row_numbers_kept():
    text = "tag,season\n\n0042,2025\n,\n  ,  \n0043,2025\n;;;\n"
    sheet = read_sheet("b.csv", text.replace(";;;", ",").encode())
    assert column(sheet, "tag") == ["0042", "0043"]
    assert sheet.row_numbers == [3, 6]


def test_blank_cells_are_none_and_cells_are_stripped():
    sheet = read_sheet("b.csv", b"tag,season,femur\n 0042 ,2025,  \n")
    assert column(sheet, "tag") == ["0042"] and column(sheet, "femur") == [None]


def test_utf8_bom():
    sheet = read_sheet("b.csv", b"\xef\xbb\xbf" + "tag,season,observer\n1,2025,Zoë\n".encode())
    assert sheet.encoding == "utf-8-sig"
    assert list(sheet.frame.columns) == ["tag", "season", "observer"]
    assert column(sheet, "observer") == ["Zoë"]


@pytest.mark.parametrize("name", ["Müller", "Sánchez", "Fläche", "Ølstrøm"])
def test_cp1252_is_decoded_and_recorded(name):
    data = f"tag,season,observer,notes\n1,2025,{name},“wet” – 5 €\n".encode("cp1252")
    sheet = read_sheet("b.csv", data)
    assert sheet.encoding == "cp1252"
    assert column(sheet, "observer") == [name]
    assert column(sheet, "notes") == ["“wet” – 5 €"]
    assert any("cp1252" in n for n in sheet.notes)


@pytest.mark.parametrize("name", ["Müller", "Sánchez", "Zürich", "Gençay"])
def test_mac_roman_is_decoded_and_recorded(name):
    sheet = read_sheet("b.csv", f"tag,season,observer\n1,2025,{name}\n".encode("mac_roman"))
    assert sheet.encoding == "mac_roman"
    assert column(sheet, "observer") == [name]


@pytest.mark.parametrize("codec", ["utf-16-le", "utf-16-be"])
def test_utf16_with_bom_tab_separated(codec):
    bom = b"\xff\xfe" if codec.endswith("le") else b"\xfe\xff"
    data = bom + "tag\tseason\tfemur\r\n007\t2025\t11.5\r\n".encode(codec)
    sheet = read_sheet("export.txt", data)
    assert (sheet.encoding, sheet.delimiter) == ("utf-16", "\t")
    assert column(sheet, "tag") == ["007"] and column(sheet, "femur") == ["11.5"]


def test_semicolon_with_decimal_comma():
    sheet = read_sheet("b.csv", b"tag;season;femur;tibia\n1;2025;11,5;9\n2;2025;12,25;\n")
    assert (sheet.delimiter, sheet.decimal) == (";", ",")
    assert column(sheet, "femur") == ["11,5", "12,25"]      # conversion happens in the checks


def test_semicolon_with_decimal_point():
    sheet = read_sheet("b.csv", b"tag;season;femur\n1;2025;11.5\n")
    assert (sheet.delimiter, sheet.decimal) == (";", ".")


def test_tsv_by_extension_and_content():
    sheet = read_sheet("b.tsv", b"tag\tseason\n1\t2025\n")
    assert sheet.delimiter == "\t" and column(sheet, "season") == ["2025"]


def test_quoted_newline_and_separator_inside_quotes():
    text = 'tag,season,notes\n1,2025,"wing torn,\nleft side"\n2,2025,ok\n'
    sheet = read_sheet("b.csv", text.encode())
    assert column(sheet, "notes") == ["wing torn,\nleft side", "ok"]
    assert sheet.row_numbers == [2, 3]    # a spreadsheet row, not a line of text


def test_old_mac_line_endings():
    sheet = read_sheet("b.csv", b"tag,season\r1,2025\r2,2025\r")
    assert column(sheet, "tag") == ["1", "2"]


def test_unterminated_quote_names_its_line():
    msg = refused("b.csv", b'tag,season,notes\n1,2025,ok\n2,2025,"never closed\n3,2025,x\n4,2025,y\n')
    assert "line 3" in msg and "quote" in msg


def test_text_after_closing_quote_names_its_line():
    assert "line 3" in refused("b.csv", b'tag,season\n1,2025\n"2"x,2025\n')


def test_ragged_rows_are_named():
    msg = refused("b.csv", b"tag,season,femur\n1,2025,3\n2,2025\n3,2025,4\n4,2025\n")
    assert "rows 3, 5 have fewer cells" in msg
    msg = refused("b.csv", b"tag,season\n1,2025\n2,2025,12\n")
    assert "row 3 has more cells" in msg


def test_trailing_empty_separators_are_not_ragged():
    sheet = read_sheet("b.csv", b"tag;season;;\n1;2025;;\n2;2025;;\n;;;\n")
    assert list(sheet.frame.columns) == ["tag", "season"] and len(sheet.frame) == 2


def test_blank_header_with_data_is_named():
    msg = refused("b.csv", b"tag,,season\n1,x,2025\n")
    assert "column 2 (B)" in msg and "no name" in msg


def test_duplicate_headers_are_named():
    msg = refused("b.csv", b"tag,season,femur,femur\n1,2025,3,4\n")
    assert "'femur' (column 3 (C) and column 4 (D))" in msg


@pytest.mark.parametrize("data", [b"", b"   \n\n", b"\xef\xbb\xbf"])
def test_empty_file(data):
    assert "empty" in refused("b.csv", data) or "no header" in refused("b.csv", data)


def test_header_without_rows():
    assert "no data rows" in refused("b.csv", b"tag,season\n\n")


def test_nul_bytes_refused():
    assert "NUL" in refused("b.csv", b"tag,season\n1\x00,2025\n")


def test_size_cap(monkeypatch):
    monkeypatch.setattr(readers, "MAX_BYTES", 100)
    assert "limit" in refused("b.csv", b"tag,season\n" + b"1,2025\n" * 20)


def test_row_cap(monkeypatch):
    monkeypatch.setattr(readers, "MAX_ROWS", 5)
    assert "more than 5 data rows" in refused("b.csv", b"tag,season\n" + b"1,2025\n" * 6)
    assert len(read_sheet("b.csv", b"tag,season\n" + b"1,2025\n" * 5).frame) == 5


def test_old_xls_refused():
    assert ".xls" in refused("b.xls", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 100)


# -- workbooks ------------------------------------------------------------------------

def test_xlsx_types_become_text(tmp_path):
    data = xlsx_bytes(tmp_path, [
        ["tag", "season", "femur", "pods", "date", "notes"],
        ["0042", 2025, 11.5, 3, dt.datetime(2025, 6, 14), "NA"],
        [43, 2025.0, 12.0, 0, dt.date(2025, 6, 15), True],
    ])
    sheet = read_sheet("week1.xlsx", data)
    assert sheet.encoding == "xlsx" and sheet.delimiter == ""
    assert column(sheet, "tag") == ["0042", "43"]
    assert column(sheet, "season") == ["2025", "2025"]      # no spurious ".0"
    assert column(sheet, "femur") == ["11.5", "12"]
    assert column(sheet, "pods") == ["3", "0"]
    assert column(sheet, "date") == ["2025-06-14", "2025-06-15"]
    assert column(sheet, "notes") == ["NA", "TRUE"]
    assert sheet.row_numbers == [2, 3]


def test_xlsx_date_with_time_and_big_number(tmp_path):
    data = xlsx_bytes(tmp_path, [["tag", "season", "date"], [2.31e13, 2025, dt.datetime(2025, 6, 14, 7, 30)]])
    sheet = read_sheet("w.xlsx", data)
    assert column(sheet, "tag") == ["23100000000000"]
    assert column(sheet, "date") == ["2025-06-14 07:30:00"]


def test_xlsx_gaps_keep_sheet_rows_and_offset_table(tmp_path):
    data = xlsx_bytes(tmp_path, [], at={"B3": "tag", "C3": "season", "B4": "7", "C4": 2025, "B7": "8", "C7": 2025})
    sheet = read_sheet("w.xlsx", data)
    assert list(sheet.frame.columns) == ["tag", "season"]   # empty column A is not a column
    assert sheet.row_numbers == [4, 7]


def test_xlsx_data_beyond_header_is_refused(tmp_path):
    data = xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025, "stray"]])
    assert "row 2 has more cells" in refused("w.xlsx", data)


def test_xlsx_truncated_is_incomplete(tmp_path):
    data = xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025]])
    for cut in (2, 30, len(data) // 2, len(data) - 5):
        msg = refused("w.xlsx", data[:cut])
        assert "incomplete (still being written or damaged)" in msg


def test_xlsx_name_with_text_content():
    assert "not a workbook" in refused("w.xlsx", b"tag,season\n1,2025\n")


def test_zip_that_is_not_a_workbook(tmp_path):
    import zipfile
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        zf.writestr("readme.txt", "hello")
    assert "not an XLSX workbook" in refused("w.xlsx", buf.getvalue())


def test_xlsx_zip_bomb_is_refused(tmp_path, monkeypatch):
    from fieldslope.schemas import xlsx_cells
    data = xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025]])
    monkeypatch.setattr(xlsx_cells, "MAX_UNPACKED", 1000)
    assert "unpacks to more than" in refused("w.xlsx", data)


def test_openpyxl_parses_xml_with_defusedxml():
    # Entity-expansion attacks in workbook XML are stopped only when defusedxml is used.
    from openpyxl.xml import DEFUSEDXML
    assert DEFUSEDXML is True


# -- drop-folder names ------------------------------------------------------------------

@pytest.mark.parametrize("name", [
    "week3.csv.part", "week3.xlsx.filepart", "week3.csv.crdownload", "week3.tmp", "~$week3.xlsx",
    ".~lock.week3.xlsx#", ".week3.csv", "intake/.DS_Store", "week3.csv~",
])
def test_partial_names(name):
    assert is_partial_name(name)


@pytest.mark.parametrize("name", ["week3.csv", "intake/week3.xlsx", "census_2025.tsv", "my.batch.csv"])
def test_complete_names(name):
    assert not is_partial_name(name)


# -- anything at all: only SheetError ---------------------------------------------------------

def _read_or_refuse(name: str, data: bytes) -> None:
    try:
        sheet = read_sheet(name, data)
    except SheetError as err:
        assert str(err) and "\n" not in str(err)
        return
    assert len(sheet.frame) == len(sheet.row_numbers) > 0
    assert all(v is None or isinstance(v, str) for col in sheet.frame.columns for v in sheet.frame[col])


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=400), st.sampled_from(["b.csv", "b.tsv", "b.xlsx", "b.txt", "b"]))
def test_any_bytes_read_or_refused(data, name):
    _read_or_refuse(name, data)


_CSV_ALPHABET = st.sampled_from(list('ab01,;\t"\r\n .é') + ["2025", "NA", '""'])


@settings(max_examples=300, deadline=None)
@given(st.lists(_CSV_ALPHABET, max_size=80).map("".join), st.sampled_from(["utf-8", "cp1252", "utf-16"]))
def test_malformed_csv_text_read_or_refused(text, codec):
    _read_or_refuse("b.csv", text.encode(codec))


@settings(max_examples=40, deadline=None)
@given(st.binary(min_size=1, max_size=60), st.integers(min_value=0, max_value=10_000))
def test_damaged_workbook_read_or_refused(patch, where):
    wb = openpyxl.Workbook()
    wb.active.append(["tag", "season"])
    wb.active.append(["1", 2025])
    buf = io.BytesIO()
    wb.save(buf)
    data = bytearray(buf.getvalue())
    where %= len(data)
    data[where:where + len(patch)] = patch
    _read_or_refuse("b.xlsx", bytes(data))


def test_excel_sep_directive_line():
    sheet = read_sheet("b.csv", b"sep=;\r\ntag;season;femur\r\n1;2025;11,5\r\n")
    assert (sheet.delimiter, sheet.decimal) == (";", ",")
    assert list(sheet.frame.columns) == ["tag", "season", "femur"] and sheet.row_numbers == [2]


def test_stray_quote_closed_far_below_is_refused():
    text = 'tag,season,site,notes\n1,2025,Knoll,"wet\n2,2025,Knoll,dry\n3,2025,Knoll,cold"\n4,2025,Knoll,ok\n'
    msg = refused("b.csv", text.encode())
    assert "line 2" in msg and "line 4" in msg and "stray quote" in msg


def test_xlsx_other_worksheets_are_noted(tmp_path):
    wb = openpyxl.Workbook()
    wb.active.title = "week 3"
    wb.active.append(["tag", "season"])
    wb.active.append(["1", 2025])
    wb.create_sheet("lookup")
    path = tmp_path / "b.xlsx"
    wb.save(path)
    sheet = read_sheet("b.xlsx", path.read_bytes())
    assert len(sheet.frame) == 1
    assert sheet.notes and "'week 3'" in sheet.notes[0] and "'lookup'" in sheet.notes[0]


@pytest.mark.parametrize("codec", ["utf-16-le", "utf-16-be"])
def test_utf16_without_bom(codec):
    sheet = read_sheet("export.txt", "tag\tseason\tobserver\r\n007\t2025\tZoë\r\n".encode(codec))
    assert sheet.encoding == codec and column(sheet, "observer") == ["Zoë"]


def test_nul_inside_utf16_text_refused():
    assert "NUL" in refused("b.txt", b"\xff\xfe" + "tag\tseason\r\n1\x00\t2025\r\n".encode("utf-16-le"))


def test_xlsx_formula_without_saved_result_is_refused(tmp_path):
    # openpyxl writes formulas without their results, as scripts do; reading them would give blanks
    data = xlsx_bytes(tmp_path, [["tag", "season", "clutch"], ["1", 2025, "=2+1"], ["2", 2025, 4]])
    msg = refused("w.xlsx", data)
    assert "C2" in msg and "formulas" in msg


def test_xlsx_without_formulas_is_not_scanned_twice(tmp_path, monkeypatch):
    from fieldslope.schemas import xlsx_cells

    def fail(*args):
        raise AssertionError("second pass without formulas")

    monkeypatch.setattr(xlsx_cells, "_refuse_unsaved_formulas", fail)
    data = xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025]])
    assert column(read_sheet("w.xlsx", data), "tag") == ["1"]


def edit_sheet_xml(data: bytes, old: bytes, new: bytes, prefix: bytes = b"") -> bytes:
    """The workbook with ``old`` replaced by ``new`` (and ``prefix`` put first) in its first sheet's XML."""
    import zipfile
    src, out = zipfile.ZipFile(io.BytesIO(data)), io.BytesIO()
    with zipfile.ZipFile(out, "w") as dst:
        for info in src.infolist():
            body = src.read(info)
            if info.filename == "xl/worksheets/sheet1.xml":
                assert old in body
                body = prefix + body.replace(old, new)
            dst.writestr(info, body)
    return out.getvalue()


def test_xlsx_formula_with_saved_result_reads_the_result(tmp_path):
    data = xlsx_bytes(tmp_path, [["tag", "season", "clutch"], ["1", 2025, "=2+1"]])
    data = edit_sheet_xml(data, b"<f>2+1</f><v />", b"<f>2+1</f><v>3</v>")   # as a spreadsheet saves it
    assert column(read_sheet("w.xlsx", data), "clutch") == ["3"]


def test_xlsx_entity_expansion_is_refused_not_expanded(tmp_path):
    # the "billion laughs" entity bomb (defusedxml documentation); expanded, it would take gigabytes
    bomb = (b'<?xml version="1.0"?><!DOCTYPE worksheet [<!ENTITY lol "lol">'
            + b"".join(b'<!ENTITY lol%d "%s">' % (i, (b"&lol%d;" % (i - 1) if i > 1 else b"&lol;") * 10)
                       for i in range(1, 10))
            + b"]>")
    data = xlsx_bytes(tmp_path, [["tag", "season"], ["&lol9;", 2025]])
    data = edit_sheet_xml(data, b"<t>&amp;lol9;</t>", b"<t>&lol9;</t>", prefix=bomb)
    assert "declares entities" in refused("w.xlsx", data)


def test_workbook_with_unsupported_zip_version_is_refused(tmp_path):
    # found by Hypothesis: one changed byte in the central directory ("zip file version 6.4")
    data = bytearray(xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025]]))
    central = data.rfind(b"PK\x01\x02")
    data[central + 6] = 64                      # "version needed to extract" of the last entry
    assert "incomplete" in refused("w.xlsx", bytes(data))


def test_password_protected_workbook():
    # an encrypted .xlsx is stored as an OLE compound file (MS-OFFCRYPTO; from memory), the same container as .xls
    assert "password-protected" in refused("w.xlsx", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 100)


def test_missing_header_row():
    msg = refused("b.csv", b"0042,2025,11.5\n0043,2025,12\n")
    assert "row 1" in msg and "not column names" in msg


def test_note_with_commas_across_lines_is_kept():
    text = 'tag,season,site,notes\n1,2025,Knoll,"wing torn, left side,\nrecheck"\n'
    assert column(read_sheet("b.csv", text.encode()), "notes") == ["wing torn, left side,\nrecheck"]


# -- round trip: what Python's csv writer (RFC 4180 quoting) writes is read back cell for cell --------

_NAMES = st.lists(st.from_regex(r"[a-z][a-z0-9_]{0,7}", fullmatch=True), min_size=2, max_size=5, unique=True)
_CELL = st.lists(st.sampled_from(list("aZ09 .,;\t\"'-\né€") + ["NA", "0007"]), max_size=6).map("".join)


@settings(max_examples=200, deadline=None)
@given(_NAMES, st.data(), st.sampled_from([",", ";", "\t"]), st.sampled_from(["utf-8", "utf-8-sig", "utf-16"]),
       st.sampled_from(["\n", "\r\n"]))
def test_written_table_reads_back(names, data, sep, codec, newline):
    rows = data.draw(st.lists(st.lists(_CELL, min_size=len(names), max_size=len(names)), min_size=1, max_size=8))
    for row in rows:   # a note spanning lines with a whole row's separators is refused by design
        for cell in row:
            if "\n" in cell and any(line.count(sep) >= max(3, len(names) - 1) for line in cell.split("\n")):
                return
    buf = io.StringIO()
    csv.writer(buf, delimiter=sep, lineterminator=newline).writerows([names, *rows])
    expected = [[c.strip() or None for c in row] for row in rows]
    kept = [(i + 2, row) for i, row in enumerate(expected) if any(row)]
    try:
        sheet = read_sheet("t.csv", buf.getvalue().encode(codec))
    except SheetError as err:
        assert not kept and "no data rows" in str(err)
        return
    assert list(sheet.frame.columns) == names
    assert sheet.row_numbers == [n for n, _ in kept]
    assert sheet.frame.values.tolist() == [row for _, row in kept]


def test_xlsx_float_noise_shown_as_a_spreadsheet_shows_it(tmp_path):
    # spreadsheets keep and show at most 15 significant digits (common practice; from memory)
    data = xlsx_bytes(tmp_path, [["tag", "season", "femur"], ["1", 2025, 0.1 + 0.2], ["2", 2025, -0.125]])
    assert column(read_sheet("w.xlsx", data), "femur") == ["0.3", "-0.125"]


def _bomb(tmp_path, megabytes: int, declare: int | None = None) -> bytes:
    """A real workbook whose sheet XML carries ``megabytes`` MB of blanks (a few hundred kB zipped); with
    ``declare`` the zip directory claims the sheet unpacks to that many bytes (a lying size)."""
    import struct
    import zipfile

    base = xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025]])
    src, out = zipfile.ZipFile(io.BytesIO(base)), io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            body = src.read(info)
            if info.filename != "xl/worksheets/sheet1.xml":
                dst.writestr(info.filename, body)
                continue
            head, tail = body.split(b"</sheetData>")
            with dst.open(info.filename, "w") as fh:       # streamed: the test never holds the blanks at once
                fh.write(head)
                for _ in range(megabytes):
                    fh.write(b" " * 2**20)
                fh.write(b"</sheetData>" + tail)
    data = bytearray(out.getvalue())
    if declare is not None:
        at = data.index(b"PK\x01\x02")
        while at >= 0:                                      # central directory entries: sizes at +20, +24
            name_len = struct.unpack_from("<H", data, at + 28)[0]
            if data[at + 46:at + 46 + name_len] == b"xl/worksheets/sheet1.xml":
                struct.pack_into("<I", data, at + 24, declare)
            at = data.find(b"PK\x01\x02", at + 4)
    return bytes(data)


def test_a_workbook_unpacking_to_hundreds_of_mb_is_refused_before_parsing(tmp_path, monkeypatch):
    from fieldslope.schemas import xlsx_cells

    data = _bomb(tmp_path, 200)
    assert len(data) < 2**20                                # under 1 MB on disk, 200 MB unpacked

    def never(*args, **kwargs):
        raise AssertionError("the XML of a bomb was handed to the parser")

    monkeypatch.setattr(openpyxl, "load_workbook", never)
    inflated = []
    real_open = xlsx_cells.zipfile.ZipFile.open
    monkeypatch.setattr(xlsx_cells.zipfile.ZipFile, "open", lambda *a, **k: inflated.append(a[1]) or real_open(*a, **k))
    message = refused("w.xlsx", data)
    assert "unpacks to more than 64 MB" in message and "damaged" not in message
    assert inflated == []                                    # refused from the sizes its directory declares


def test_a_workbook_lying_about_its_unpacked_size_is_stopped_before_parsing(tmp_path, monkeypatch):
    data = _bomb(tmp_path, 200, declare=1000)

    def never(*args, **kwargs):
        raise AssertionError("the XML of a bomb was handed to the parser")

    monkeypatch.setattr(openpyxl, "load_workbook", never)
    message = refused("w.xlsx", data)                        # the budgeted inflate pass stops it
    assert "damaged" in message or "unpacks to more than" in message


def test_a_row_numbered_a_billion_does_not_make_the_reader_walk_every_blank_row(tmp_path, monkeypatch):
    monkeypatch.setattr(readers, "MAX_ROWS", 1000)
    data = xlsx_bytes(tmp_path, [["tag", "season"], ["1", 2025]])
    data = edit_sheet_xml(data, b"</sheetData>",
                          b'<row r="1000000000"><c r="A1000000000" t="inlineStr"><is><t>9</t></is></c></row>'
                          b"</sheetData>")
    message = refused("w.xlsx", data)
    assert "more than 1,000 data rows" in message
