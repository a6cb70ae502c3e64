"""IDs a spreadsheet may have mangled: turned into dates, scientific notation,
date serial numbers, or stripped of leading zeros.

These are soft findings (an ID may truly look like this); the reader keeps IDs
as text, so what is seen here is what the file holds.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence

_MONTH = r"(?:jan|feb|mar|apr|may|jun|jul|aug|sep|sept|oct|nov|dec)[a-z]*\.?"
_DATE_LIKE = [
    re.compile(r"^\d{4}-\d{1,2}-\d{1,2}(?:[ T]\d{1,2}:\d{2}(?::\d{2})?)?$"),       # 2024-03-01 (ISO, as read from XLSX)
    re.compile(r"^\d{1,2}[/.]\d{1,2}[/.]\d{2,4}$"),                                # 3/1/2024, 01.03.24
    re.compile(r"^\d{1,2}-\d{1,2}-\d{4}$"),                                        # 01-03-2024
    re.compile(rf"^\d{{1,2}}[-/ ]{_MONTH}(?:[-/ ]\d{{2,4}})?$", re.IGNORECASE),    # 1-Mar, 01-Mar-24
    re.compile(rf"^{_MONTH}[-/ ]\d{{1,4}}$", re.IGNORECASE),                       # Mar-01, Mar-2024
]
_SCIENTIFIC = re.compile(r"^[+-]?\d+(?:[.,]\d+)?[eE][+-]?\d+$")                    # 2.31E+13
_SERIAL = re.compile(r"^\d{5}$")
# Spreadsheet day numbers of the years 1950 to 2099 (day 1 = 1900-01-01, common practice).
_SERIAL_RANGE = (18264, 73050)
_DIGITS = re.compile(r"^\d+$")


def mangled_id_reasons(ids: Sequence[object]) -> list[tuple[int, str]]:
    """(position, reason) for each ID that looks mangled by a spreadsheet."""
    texts = ["" if v is None else str(v) for v in ids]
    out: list[tuple[int, str]] = []
    serial_like = [bool(_SERIAL.match(t)) and _SERIAL_RANGE[0] <= int(t) <= _SERIAL_RANGE[1] for t in texts]
    five_digit = sum(1 for t in texts if _SERIAL.match(t))
    serials_stand_out = five_digit * 2 < len(texts)
    digit_lengths = Counter(len(t) for t in texts if _DIGITS.match(t))
    padded_len = _padded_length(texts, digit_lengths)
    for i, t in enumerate(texts):
        if any(p.match(t) for p in _DATE_LIKE):
            out.append((i, "looks like a date a spreadsheet made from it"))
        elif _SCIENTIFIC.match(t):
            out.append((i, "is in scientific notation, so a spreadsheet may have rounded it"))
        elif serial_like[i] and serials_stand_out:
            out.append((i, "looks like a spreadsheet date serial number, unlike the other IDs"))
        elif padded_len and _DIGITS.match(t) and len(t) < padded_len:
            out.append((i, f"is shorter than the other {padded_len}-digit IDs; a spreadsheet may have "
                           "dropped its leading zeros"))
    return out


def _padded_length(texts: list[str], lengths: Counter) -> int:
    """The length of all-digit IDs written with leading zeros, when most IDs are such."""
    if not lengths:
        return 0
    length, n = lengths.most_common(1)[0]
    zero_padded = any(len(t) == length and t.startswith("0") for t in texts)
    return length if zero_padded and n * 2 > len(texts) else 0
