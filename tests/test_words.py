"""Counted nouns (English plural rules, from memory)."""

from fieldslope.common.words import plural


def test_plural_reads_right_for_one_and_for_many():
    assert plural(1, "batch") == "1 batch" and plural(0, "batch") == "0 batches"
    assert plural(2, "row") == "2 rows" and plural(1, "row") == "1 row"
    assert plural(3, "flag") == "3 flags" and plural(1, "error") == "1 error"
    assert plural(2, "box", "boxen") == "2 boxen"
