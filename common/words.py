"""Counted nouns in messages: ``1 batch``, ``2 batches``, ``1 row``, ``3 rows``."""

from __future__ import annotations

_IRREGULAR = {"individual": "individuals", "batch": "batches", "ID": "IDs"}


def plural(n: int, word: str, many: str | None = None) -> str:
    """``n`` and ``word``, the plural when ``n`` is not 1 (``many`` names an irregular plural)."""
    if n == 1:
        return f"1 {word}"
    if many is None:
        many = _IRREGULAR.get(word) or (word + "es" if word.endswith(("s", "sh", "ch", "x")) else word + "s")
    return f"{n} {many}"
