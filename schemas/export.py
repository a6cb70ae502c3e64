"""Exports that are safe to open in a spreadsheet (OWASP, "CSV Injection").

A text cell beginning with = + - @, a tab, CR or LF could run as a formula, so
it gets a leading apostrophe; numbers are written as numbers (a negative
estimate stays -0.12, unquoted), and so is text that is a plain number.
"""

from __future__ import annotations

import numbers
import re

import pandas as pd

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n")
_PLAIN_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$")


def neutralise_cell(value: object) -> object:
    """The value itself, or text with a leading ' when it could start a formula."""
    if isinstance(value, str) and value.startswith(_TRIGGERS) and not _PLAIN_NUMBER.match(value):
        return "'" + value
    return value


def frame_to_safe_csv(df: pd.DataFrame) -> str:
    """The frame as CSV text with every text cell (and column name) neutralised."""
    safe = df.copy()
    safe.columns = [neutralise_cell(str(c)) for c in df.columns]
    for i, col in enumerate(df.columns):
        series = df.iloc[:, i]
        if not (pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series)):
            safe.isetitem(i, series.map(lambda v: v if isinstance(v, numbers.Number) else neutralise_cell(v)))
    return safe.to_csv(index=False, lineterminator="\n")
