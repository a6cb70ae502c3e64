"""Common causes behind odd values in a sheet, said in one sentence each.

* a unit typed into a number cell (``68.2 mg``): remove the unit;
* two trait columns swapped (most values of each fit the other trait's range);
* a column in another unit (grams for milligrams, centimetres for millimetres, inches), or off by
  a power of ten: most values fit the trait's range once multiplied by that factor.

Pure functions of text cells and numbers; the checks (``schemas.validate``) call them.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping

import numpy as np

from fieldslope.schemas.protocol import TraitSpec

# A number followed (or, for a currency-like habit, preceded) by a word: 68.2 mg, 68,2mg, 12 mm.
_NUMBER_UNIT = re.compile(r"^(?P<number>[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+))\s*(?P<unit>[^\W\d_][^\d]{0,11}?)\.?$")
_UNIT_NUMBER = re.compile(r"^(?P<unit>[^\W\d_][^\d]{0,11}?)\s*(?P<number>[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+))$")

# Units of a kind, in one base unit each (common practice: SI prefixes; 1 in = 25.4 mm, 1 oz = 28.349523125 g,
# 1 lb = 453.59237 g, the international yard and pound agreement of 1959).
_FAMILIES: tuple[dict[str, float], ...] = (
    {"µg": 1e-6, "ug": 1e-6, "mg": 1e-3, "g": 1.0, "kg": 1e3, "oz": 28.349523125, "lb": 453.59237},
    {"µm": 1e-6, "um": 1e-6, "mm": 1e-3, "cm": 1e-2, "dm": 1e-1, "m": 1.0, "km": 1e3, "in": 0.0254,
     "ft": 0.3048},
)
# Factors tried when the protocol's unit is not one of the above: powers of ten.
_POWERS = tuple(10.0 ** k for k in (1, 2, 3, 6, -1, -2, -3, -6))

# "Most" values (common practice here, not a published rule): at least this share, and at least 3 values.
MOST = 0.8
MIN_VALUES = 3


def unit_in_cell(value: str, column: str, unit: str) -> str | None:
    """The reason for a number cell holding a unit or word beside the number (``68.2 mg``), else None."""
    text = value.strip()
    match = _NUMBER_UNIT.match(text) or _UNIT_NUMBER.match(text)
    if match is None:
        return None
    written = match.group("unit").strip()
    number = match.group("number")
    if not unit or written.casefold() == unit.casefold():
        where = f" ({column} is recorded in {unit})" if unit else ""
        return f"is not a number: it holds the unit {written!r}; remove the unit and write {number} alone{where}"
    factor = _factor_between(written, unit)
    convert = f" (multiply by {_factor_text(factor)})" if factor is not None else ""
    return (f"is not a number: it holds the unit {written!r}, but {column} is recorded in {unit}; remove the "
            f"unit and write the value in {unit}{convert}")


def column_causes(traits: Mapping[str, TraitSpec], values: Mapping[str, np.ndarray]) -> list[str]:
    """One sentence for each likely cause of many out-of-range values in a trait column: two columns
    swapped, or a column in another unit (or off by a power of ten). ``values`` maps each trait column
    of the sheet to its numbers (NaN = blank)."""
    columns = {c: v[np.isfinite(v)] for c, v in values.items() if c in traits and _has_range(traits[c])}
    columns = {c: v for c, v in columns.items() if len(v) >= MIN_VALUES}
    odd = {c for c, v in columns.items() if _share(v, traits[c]) <= 1 - MOST}   # most values out of range
    out: list[str] = []
    explained: set[str] = set()
    for a in sorted(odd, key=list(columns).index):
        if a in explained:
            continue
        for b in columns:
            if b == a or b in explained:
                continue
            fits_b = _share(columns[a], traits[b])
            if fits_b < MOST:
                continue
            back = _share(columns[b], traits[a])
            if b in odd and back >= MOST:
                out.append(f"columns {a} and {b} look swapped: {_count(columns[a], traits[b])} {a} values fit the "
                           f"range of {b} ({_span(traits[b])}) and {_count(columns[b], traits[a])} {b} values fit "
                           f"the range of {a} ({_span(traits[a])}); swap the two names in the header.")
                explained |= {a, b}
            else:
                out.append(f"column {a} looks like {b}: {_count(columns[a], traits[b])} {a} values fit the range of "
                           f"{b} ({_span(traits[b])}), not that of {a} ({_span(traits[a])}); check which column "
                           f"holds which trait.")
                explained.add(a)
            break
    for c in odd - explained:
        sentence = _unit_sentence(c, columns[c], traits[c])
        if sentence:
            out.append(sentence)
    return out


# -- helpers -------------------------------------------------------------------------------------

def _has_range(spec: TraitSpec) -> bool:
    return spec.min is not None or spec.max is not None


def _inside(v: np.ndarray, spec: TraitSpec) -> np.ndarray:
    lo = -math.inf if spec.min is None else spec.min
    hi = math.inf if spec.max is None else spec.max
    return (v >= lo) & (v <= hi)


def _share(v: np.ndarray, spec: TraitSpec) -> float:
    return float(_inside(v, spec).mean()) if len(v) else 0.0


def _count(v: np.ndarray, spec: TraitSpec) -> str:
    return f"{int(_inside(v, spec).sum())} of {len(v)}"


def _span(spec: TraitSpec) -> str:
    lo = "" if spec.min is None else f"{spec.min:g}"
    hi = "" if spec.max is None else f"{spec.max:g}"
    return f"{lo}–{hi}" + (f" {spec.unit}" if spec.unit else "")


def _family(unit: str) -> dict[str, float] | None:
    for family in _FAMILIES:
        if unit in family:
            return family
    return None


def _factor_between(written: str, unit: str) -> float | None:
    """The factor turning a value in ``written`` into ``unit`` (1000 for g into mg), when both are known."""
    family = _family(unit)
    for key in (written, written.lower()):
        if family is not None and key in family:
            return family[key] / family[unit]
    return None


def _factor_text(factor: float) -> str:
    return f"{factor:.6g}" if factor >= 1 else f"{factor:.6g} (divide by {1 / factor:.6g})"


def _unit_sentence(column: str, v: np.ndarray, spec: TraitSpec) -> str | None:
    """Which other unit (or power of ten) brings most values of ``column`` into its range."""
    family = _family(spec.unit)
    tries: list[tuple[float, str]] = []
    if family is not None:
        seen: set[float] = set()
        for name, base in family.items():
            factor = base / family[spec.unit]
            if name != spec.unit and factor not in seen and name != "ug" and name != "um":
                seen.add(factor)
                tries.append((factor, name))
    tries += [(f, "") for f in _POWERS if all(not math.isclose(f, t, rel_tol=1e-9) for t, _ in tries)]
    best = None
    for factor, name in tries:
        share = _share(v * factor, spec)
        if share >= MOST and (best is None or share > best[0]):
            best = (share, factor, name)
    if best is None:
        return None
    _, factor, name = best
    fits = _count(v * factor, spec)
    if name:
        return (f"column {column} looks written in {name}, not {spec.unit}: multiplied by {_factor_text(factor)}, "
                f"{fits} values fit its range ({_span(spec)}); convert the column to {spec.unit}.")
    return (f"column {column} looks off by a factor of {_factor_text(factor)}: multiplied by it, {fits} values "
            f"fit its range ({_span(spec)}); check the unit or the decimal point.")
