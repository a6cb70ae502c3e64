"""``fieldslope estimate --format table``: the estimates table as text, 80 columns wide.

Rows are grouped by season · site · fitness, then by quantity (its unit in the heading, or beside each
term when the traits' units differ); terms are never cut: a term too long for its column stands on a
line of its own with its numbers on the next. Units follow the estimation contract's table
(``/work/shared/spec/estimation.md``: w is relative fitness, sd the trait's standard deviation).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Mapping

from fieldslope.common.names import Q
from fieldslope.tui.cli_format import missing, number, p_text, wrap
from fieldslope.tui.number_text import tau2_text
from fieldslope.tui.safe_text import escape_controls

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

MAX_NOTES = 20
LABEL = 28          # indent and term; the six number columns take the other 52 of 80
_NUMBERS = ((" estimate", 9), ("se", 8), ("ci_low", 9), ("ci_high", 9), ("p", 6), ("n", 5))
HEAD = " " * LABEL + "".join(f" {name.strip():>{width}}" for name, width in _NUMBERS)
LEGEND = ("units: w is relative fitness (W / mean W in its cell); sd is the trait's standard deviation; "
          "mm, mg ... are the protocol's units; no unit given = a pure number.")

# The unit of each quantity (estimation contract): TRAIT = the term's trait unit, SQUARED = its square,
# PER_TRAIT = "w per" that unit; the rest are fixed words, "" for a pure number.
TRAIT, SQUARED, PER_TRAIT = object(), object(), object()
UNITS: dict[str, object] = {
    Q.MEAN: TRAIT, Q.SD: TRAIT, Q.DIFFERENTIAL: TRAIT, Q.RESPONSE: TRAIT, Q.RESPONSE_MULTI: TRAIT,
    Q.RESPONSE_PRICE: TRAIT, Q.ADDITIVE_VARIANCE: SQUARED, Q.GRADIENT_RAW: PER_TRAIT,
    Q.DIFFERENTIAL_STD: "sd",
    Q.GRADIENT: "w per sd", Q.GRADIENT_LOGISTIC: "w per sd", Q.GRADIENT_GLM: "w per sd",
    Q.GRADIENT_MEAN: "w per sd", Q.GRADIENT_MEAN_RE: "w per sd", Q.GRADIENT_TAU2: "w² per sd²",
    Q.QUADRATIC: "w per sd²", Q.CORRELATIONAL: "w per sd²", Q.CANONICAL: "w per sd²",
    Q.QUADRATIC_GLM: "w per sd²", Q.CORRELATIONAL_GLM: "w per sd²",
    Q.RESPONSE_PCT: "% of the mean",
}


def unit_of(quantity: str, term: str, trait_units: Mapping[str, str]) -> str:
    """The unit of one row's estimate in words ("" for a pure number such as I, h² or a loading)."""
    kind = UNITS.get(quantity, "")
    if isinstance(kind, str):
        return kind
    unit = trait_units.get(term, "")
    if kind is TRAIT:
        return unit or "trait units"
    if kind is SQUARED:
        return f"{unit}²" if unit else "trait units²"
    return f"w per {unit}" if unit else "w per trait unit"


def term_traits(term: str) -> set[str]:
    """The traits a term is about: ``a``, ``a^2``, ``a:b``, ``m1:a`` (canonical loadings)."""
    return {part.removesuffix("^2") for part in str(term).split(":")}


def estimates_text(table: pd.DataFrame, notes=(), trait_units: Mapping[str, str] | None = None) -> str:
    """The estimates table in blocks of season · site · fitness and quantity; every line fits 80 columns
    and no name is cut."""
    units = dict(trait_units or {})
    lines: list[str] = []
    if table.empty:
        lines.append("no estimates (see the notes below)")
    else:
        lines.append(wrap(LEGEND, indent=""))
    for (season, site, fitness), block in table.groupby(["season", "site", "fitness"], sort=False):
        lines += ["", wrap(f"season {season} · site {site} · fitness {fitness}", indent=""), HEAD]
        for quantity, rows in block.groupby("quantity", sort=False):
            lines += _quantity_lines(str(quantity), rows, units)
    if notes:
        notes = list(notes)
        lines += ["", "notes:"]
        for note in notes[:MAX_NOTES]:
            where = " · ".join(str(x) for x in (note.season, note.site, note.fitness, note.quantity) if x)
            lines.append(wrap(f"{where}: {note.message}" if where else note.message, indent="  "))
        if len(notes) > MAX_NOTES:
            lines.append(wrap(f"… and {len(notes) - MAX_NOTES} more notes; narrow the table with --season, "
                              "--site, --fitness or --quantity to see theirs.", indent="  "))
    return "\n".join(lines).lstrip("\n") + "\n"


def _quantity_lines(quantity: str, rows: pd.DataFrame, units: Mapping[str, str]) -> list[str]:
    row_units = [unit_of(quantity, str(t), units) for t in rows["term"]]
    common = len(set(row_units)) == 1
    heading = quantity + (f" ({row_units[0]})" if common and row_units[0] else "")
    out = [wrap(heading, indent="")]
    for r, unit in zip(rows.itertuples(index=False), row_units):
        term = escape_controls("" if missing(r.term) else r.term) or "–"
        label = "  " + term + ("" if common or not unit else f" ({unit})")
        figures = _figures(r)
        if len(label) <= LABEL - 2:
            out.append(f"{label:<{LABEL}}{figures}")
        else:       # never cut a name: the term on its own line(s), its numbers on the next
            out.append(wrap(label.strip(), indent="  "))
            out.append(" " * LABEL + figures)
    return out


def _figures(r) -> str:
    n = "" if missing(r.n) else str(int(r.n))
    estimate = f"{tau2_text(r.estimate):>9}" if r.quantity == Q.GRADIENT_TAU2 else _number(r.estimate, 9)
    return (f" {estimate} {_number(r.se, 8)} {_number(r.ci_low, 9)} {_number(r.ci_high, 9)} "
            f"{p_text(r.p_value):>6} {n:>5}")


def _number(value, width: int) -> str:
    """Four significant digits, fewer when that is what fits the column (-1.235e-05 is 10 characters)."""
    text = number(value, width)
    digits = 3
    while len(text) > width and digits > 0:
        text = f"{value:>{width}.{digits}g}"
        digits -= 1
    return text
