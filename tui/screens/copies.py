"""The copies of a duplicated ID side by side, and what each decision on one copy does (the flags dialog).

Pure text building (no Textual widgets): the flags screen puts the result into its decision form."""

from __future__ import annotations

from typing import TYPE_CHECKING

from textual.content import Content

from fieldslope.tui.cli_format import cut
from fieldslope.tui.widgets.literal import assemble

if TYPE_CHECKING:  # pragma: no cover
    from fieldslope.schemas.store_copies import Copy

STATUS = {"open": "open", "keep": "kept", "exclude": "left out", "superseded": "superseded"}


def copy_status(copy: Copy) -> str:
    return f"moved to {copy.new_id}" if copy.status == "set" else STATUS.get(copy.status, copy.status)


def side_by_side(copies: list[Copy], this_flag: int, width: int = 68) -> Content:
    """One line per field (those filled in some copy), one column per copy; the copy the decision acts on
    is marked "this"; lines where the copies differ start with "≠" and are highlighted."""
    heads = [f"row {c.row}" + (" (this)" if c.flag_id == this_flag else "") for c in copies]
    names = [n for n, _ in copies[0].values] if copies else []
    table = {n: [dict(c.values).get(n, "") for c in copies] for n in names}
    shown = [n for n in names if any(table[n])]
    label_w = min(12, max([len("status"), *(len(n) for n in shown)]))
    col_w = max(8, min(24, (width - label_w - 2) // max(1, len(copies)) - 2))
    lines = [assemble(("  " + " " * label_w, ""),
                      *[(f"  {cut(h, col_w):<{col_w}}", "bold $accent" if "this" in h else "bold")
                        for h in heads])]
    for n in shown:
        values = table[n]
        differ = len(set(values)) > 1
        mark = "≠ " if differ else "  "
        style = "bold $warning" if differ else ""
        lines.append(assemble((mark + f"{cut(n, label_w):<{label_w}}", style),
                              *[(f"  {cut(v or '–', col_w):<{col_w}}", style) for v in values]))
    statuses = [copy_status(c) for c in copies]
    if any(s != "open" for s in statuses):
        lines.append(assemble(("  " + f"{'status':<{label_w}}", "$text-muted"),
                              *[(f"  {cut(s, col_w):<{col_w}}", "$text-muted") for s in statuses]))
    if any(len(set(table[n])) > 1 for n in shown):
        lines.append(assemble(("≠ the copies differ here", "$text-muted")))
    return Content("\n").join(lines)


def duplicate_texts(copies: list[Copy], this: Copy, individual: str, season: str) -> dict[str, str]:
    """What keep, exclude and set do to the copy ``this``, in the words of the dialog."""
    others = [c for c in copies if c.flag_id != this.flag_id and c.status == "open"]
    rows = ", ".join(str(c.row) for c in others)
    last = f" Row {others[0].row}, then the only copy left, is kept." if len(others) == 1 else ""
    keep = f"Sheet row {this.row} becomes the record of {individual} in {season}"
    if others:
        keep += (f"; the other {'copy' if len(others) == 1 else 'copies'} (row {rows}) "
                 f"{'is' if len(others) == 1 else 'are'} left out of the estimates (still stored)")
    return {
        "keep": keep + ".",
        "exclude": f"Sheet row {this.row} is left out of the estimates (it stays stored).{last}",
        "set": f"Give the ID sheet row {this.row} should have had: the row moves to that ID (checked like a "
               f"new row) and row {this.row} under {individual} is left out.{last}",
    }
