"""IDs a spreadsheet may have mangled: turned into dates, scientific notation,
date serial numbers, stripped of leading zeros, or carrying an invisible character.

These are soft findings (an ID may truly look like this); the reader keeps IDs
as text, so what is seen here is what the file holds.
"""

from __future__ import annotations

import re
import unicodedata
from collections import Counter
from collections.abc import Iterable, Sequence
from itertools import compress

_MONTH = r"(?:jan|feb|mar|apr|may|jun|jul|aug|sep|sept|oct|nov|dec)[a-z]*\.?"
_DATE_FORMS = [
    r"\d{4}-\d{1,2}-\d{1,2}(?:[ T]\d{1,2}:\d{2}(?::\d{2})?)?",   # 2024-03-01 (ISO, as read from XLSX)
    r"\d{1,2}[/.]\d{1,2}[/.]\d{2,4}",                           # 3/1/2024, 01.03.24
    r"\d{1,2}-\d{1,2}-\d{4}",                                   # 01-03-2024
    rf"\d{{1,2}}[-/ ]{_MONTH}(?:[-/ ]\d{{2,4}})?",               # 1-Mar, 01-Mar-24
    rf"{_MONTH}[-/ ]\d{{1,4}}",                                   # Mar-01, Mar-2024
]
# One pattern, one match per ID; the named group says which form it has.
_FORMS = re.compile(
    "(?P<date>" + "|".join(_DATE_FORMS) + ")"
    r"|(?P<scientific>[+-]?\d+(?:[.,]\d+)?e[+-]?\d+)"            # 2.31E+13
    r"|(?P<five>\d{5})"
    r"|(?P<digits>\d+)",
    re.IGNORECASE,
)
# Characters that make two IDs differ while they look the same: whitespace other than a plain
# space inside the ID, and the invisible format characters (Unicode category Cf).
_INVISIBLE = re.compile(r"[^\S ]|[\u00ad\u200b-\u200f\u202a-\u202e\u2060-\u2064\ufeff]")
# Spreadsheet day numbers of the years 1950 to 2099 (day 1 = 1900-01-01, common practice).
_SERIAL_RANGE = (18264, 73050)


def mangled_id_reasons(ids: Sequence[object]) -> list[tuple[int, str]]:
    """(position, reason) for each ID that looks mangled by a spreadsheet."""
    texts = ["" if v is None else str(v) for v in ids]
    forms = [_form(t) for t in texts]
    serials_stand_out = forms.count("five") * 2 < len(texts)
    digit_lengths = Counter(len(t) for t, f in zip(texts, forms) if f in ("five", "digits"))
    padded_len = _padded_length(texts, forms, digit_lengths)
    out: list[tuple[int, str]] = []
    for i, (t, form) in enumerate(zip(texts, forms)):
        hidden = _INVISIBLE.search(t)
        if hidden:
            name = unicodedata.name(hidden.group(), f"U+{ord(hidden.group()):04X}")
            out.append((i, f"holds the invisible character {name}, so it differs from the same ID typed plainly"))
        elif form is None:
            continue
        elif form == "date":
            out.append((i, "looks like a date a spreadsheet made from it"))
        elif form == "scientific":
            out.append((i, "is in scientific notation, so a spreadsheet may have rounded it"))
        elif form == "five" and serials_stand_out and _SERIAL_RANGE[0] <= int(t) <= _SERIAL_RANGE[1]:
            out.append((i, "looks like a spreadsheet date serial number, unlike the other IDs"))
        elif padded_len and len(t) < padded_len:
            out.append((i, f"is shorter than the other {padded_len}-digit IDs; a spreadsheet may have "
                           "dropped its leading zeros"))
    return out


def _form(text: str) -> str | None:
    match = _FORMS.fullmatch(text)
    return match.lastgroup if match else None


def _padded_length(texts: list[str], forms: list[str | None], lengths: Counter) -> int:
    """The length of all-digit IDs written with leading zeros, when most IDs are such."""
    if not lengths:
        return 0
    length, n = lengths.most_common(1)[0]
    zero_padded = any(len(t) == length and t.startswith("0") and f in ("five", "digits")
                      for t, f in zip(texts, forms))
    return length if zero_padded and n * 2 > len(texts) else 0


# -- IDs that read like another ------------------------------------------------------------------

# Characters read or typed for one another (common practice of field sheets and handwriting): each maps
# to the digit it is taken for, after case is folded; spaces and separators (- _ . /) are dropped.
_LOOKALIKE = {ord(a): b for a, b in {"o": "0", "q": "0", "i": "1", "l": "1", "|": "1", "s": "5", "z": "2",
                                     "b": "8", "g": "6"}.items()}
_DROPPED = {ord(c): None for c in "-_./"} | {c: None for c in range(0x3000 + 1) if chr(c).isspace()}
_FOLD = _LOOKALIKE | _DROPPED
_FOLD_KEEP_NEWLINES = {k: v for k, v in _FOLD.items() if k != ord("\n")}
_SEPARATORS = re.compile(r"[\s\-_./]+")


def id_key(text: str) -> str:
    """An ID with case, spaces and separators (- _ . /) and look-alike characters (O/0, l/1/I, S/5, Z/2, B/8,
    G/6) folded: two IDs with the same key read alike on a sheet."""
    return unicodedata.normalize("NFKC", text).casefold().translate(_FOLD)


def id_keys(ids: list[str]) -> list[str]:
    """:func:`id_key` of many IDs at once (one pass over them joined by newlines), the same keys as one by
    one."""
    if any("\n" in t for t in ids):
        return [id_key(t) for t in ids]
    keys = unicodedata.normalize("NFKC", "\n".join(ids)).casefold().translate(_FOLD_KEEP_NEWLINES).split("\n")
    return keys if len(keys) == len(ids) else [id_key(t) for t in ids]


def lookalikes(known: set[str], new: Iterable[str]) -> dict[str, str]:
    """For each ID of ``new`` not in ``known`` that reads like one in ``known`` (same :func:`id_key`), that
    one (the first in sorted order when several do). Only the keys of ``known`` are made, never a table of
    them: a million IDs on record cost about a quarter of a second."""
    if not known:
        return {}
    fresh = list(set(new) - known)
    wanted: dict[str, list[str]] = {}
    for key, ind in zip(id_keys(fresh), fresh):
        wanted.setdefault(key, []).append(ind)
    if not wanted:
        return {}
    ids = list(known)
    keys = id_keys(ids)
    hit = list(map(wanted.__contains__, keys))          # one pass in C; the loop below sees the hits only
    found: dict[str, str] = {}
    for key, ind in zip(compress(keys, hit), compress(ids, hit)):
        if key not in found or ind < found[key]:
            found[key] = ind
    return {ind: found[key] for key, inds in wanted.items() if key in found for ind in inds}


def how_they_differ(new: str, old: str) -> str:
    """In what the two IDs differ, in plain words: case, spaces, look-alike characters (``O for 0``)."""
    parts = []
    a, b = _SEPARATORS.sub("", new), _SEPARATORS.sub("", old)
    if _SEPARATORS.findall(new) != _SEPARATORS.findall(old):
        parts.append("spaces or separators")
    if a != b and a.casefold() == b.casefold():
        parts.append("case")
    elif a.casefold() != b.casefold():
        swaps = []
        if len(a) == len(b):
            swaps = sorted({f"{x} for {y}" for x, y in zip(a, b) if x.casefold() != y.casefold()})
        parts.append("look-alike characters" + (f" ({', '.join(swaps[:3])})" if swaps else ""))
    return " and ".join(parts) or "look-alike characters"
