"""Splitting the effective data into seasons, cells and analysis samples.

A cell is one season and one value of each group column. For every fitness
measure a cell yields up to three kinds of sample: the individuals with that
fitness value (opportunity), those with fitness and one trait (per-trait
quantities), and the complete cases (models with all traits).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from fieldslope.analysis.design import Design
from fieldslope.analysis.fitness import is_binary
from fieldslope.analysis.standardize import constant_columns
from fieldslope.common.names import ALL, Q

__all__ = ["Cell", "Sample", "Prepared", "MIN_SINGLE", "natural_key", "as_text", "split_cells",
           "measured_traits", "prepare"]

MIN_SINGLE = 3  # individuals for a per-trait differential with a standard error


@dataclass(frozen=True)
class Cell:
    """One season and site: traits (individuals x traits) and absolute fitness per measure."""

    season: str
    site: str
    z: np.ndarray  # individuals x traits, raw units, NaN = missing
    fitness: dict[str, np.ndarray]  # absolute fitness per measure, NaN = missing


@dataclass(frozen=True)
class Sample:
    """One analysis sample of one cell: rows (positions in the cell), traits and absolute fitness."""

    rows: np.ndarray
    z: np.ndarray
    W: np.ndarray


@dataclass
class Prepared:
    """The usable samples of one cell for one fitness measure, and why others are missing."""

    cell: Cell
    fitness: str
    binary: bool
    kind: str = "continuous"  # as declared: "binary", "count" or "continuous"
    opp: Sample | None = None
    single: list[Sample | None] = field(default_factory=list)
    multi: Sample | None = None
    n_missing: int = 0
    notes: list[tuple[str, str]] = field(default_factory=list)  # (quantity, sentence)


def too_large(values: np.ndarray) -> bool:
    """Values so large that their mean or variance overflows double precision (a kept 1e200, say): the
    cell's estimates that use them would be inf or NaN, so that cell leaves them out with a note."""
    with np.errstate(over="ignore", invalid="ignore"):
        return not (np.isfinite(np.mean(values)) and np.isfinite(np.var(values)))


def _largest(values: np.ndarray) -> str:
    return f"{np.nanmax(np.abs(values)):.3g}"


def natural_key(text: str) -> list:
    """Sort key that orders '2' before '10' inside text.

    Parameters: ``text``. Returns the key (a list). Source: none (bookkeeping, no published method).
    """
    # isdecimal, not isdigit: a superscript '¹' is a digit that int() refuses and \d does not split off
    return [int(part) if part.isdecimal() else part for part in re.split(r"(\d+)", text)]


MISSING_LABEL = "(blank)"


def as_text(col: pd.Series) -> pd.Series:
    """Labels as plain text; a missing season or group value becomes "(blank)".

    Parameters: a column. Returns it as text. Source: none (bookkeeping, no published method).
    """
    return col.astype(object).where(col.notna(), MISSING_LABEL).astype(str)


def split_cells(frame: pd.DataFrame, design: Design, fitness_names: list[str]) -> dict[str, list[Cell]]:
    """Cells per season (seasons and sites in natural order).

    Parameters: effective data with totals, ``design`` and the fitness measures. Returns season -> list of
    ``Cell``. Source: selection measured within cells (one season and site), Lande & Arnold 1983, Evolution
    37:1210-1226.
    """
    seasons = as_text(frame[design.season])
    if design.groups:
        site = as_text(frame[design.groups[0]])
        for col in design.groups[1:]:
            site = site + "/" + as_text(frame[col])
    else:
        site = pd.Series(ALL, index=frame.index)
    z_all = frame[list(design.traits)].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    w_all = {f: pd.to_numeric(frame[f], errors="coerce").to_numpy(dtype=float) for f in fitness_names}
    out: dict[str, list[Cell]] = {}
    keys = pd.DataFrame({"season": seasons.to_numpy(), "site": site.to_numpy()})
    for season in sorted(keys["season"].unique(), key=natural_key):
        cells = []
        in_season = keys["season"].to_numpy() == season
        for s in sorted(keys.loc[in_season, "site"].unique(), key=natural_key):
            idx = np.flatnonzero(in_season & (keys["site"].to_numpy() == s))
            cells.append(Cell(season, s, z_all[idx], {f: w[idx] for f, w in w_all.items()}))
        out[season] = cells
    return out


def measured_traits(traits: tuple[str, ...], cells: list[Cell]) -> tuple[tuple[str, ...], list[Cell], list[str]]:
    """The traits with at least one value in a season's cells, the cells cut to those traits, and the
    traits the season lacks (a trait added to the protocol in a later season has no values in earlier ones).

    Parameters: the design's ``traits`` and a season's ``cells``. Source: none (bookkeeping, no published
    method).
    """
    has = [any(np.any(~np.isnan(c.z[:, j])) for c in cells) for j in range(len(traits))]
    if all(has):
        return traits, cells, []
    keep = [j for j, h in enumerate(has) if h]
    cut = [Cell(c.season, c.site, c.z[:, keep], c.fitness) for c in cells]
    return tuple(traits[j] for j in keep), cut, [t for t, h in zip(traits, has) if not h]


def prepare(cell: Cell, fitness: str, kind: str, traits: tuple[str, ...]) -> Prepared:
    """The samples of ``cell`` for ``fitness``; unusable ones are None with a note saying why.

    Parameters: one ``cell``, the ``fitness`` measure, its ``kind`` and the ``traits``. Returns ``Prepared``.
    Source: the samples each quantity of Lande & Arnold 1983, Evolution 37:1210-1226 needs.
    """
    W = cell.fitness[fitness]
    has_w = ~np.isnan(W)
    where = f"in season {cell.season}, site {cell.site}"
    prep = Prepared(cell=cell, fitness=fitness, binary=False, kind=kind, n_missing=int((~has_w).sum()))
    if prep.n_missing:
        prep.notes.append(("", f"{prep.n_missing} individuals {where} lack {fitness} and are left out of its analyses."))
    p = len(traits)
    prep.single = [None] * p
    rows = np.flatnonzero(has_w)
    if len(rows) < 2:
        if len(rows) == 0:
            prep.notes.append(("", f"No individual {where} has {fitness} recorded yet; estimates follow once it is."))
        else:
            prep.notes.append(("", f"Only 1 individual {where} has {fitness}; at least 2 are needed for any estimate."))
        return prep
    Wf = W[rows]
    if Wf.mean() <= 0:
        prep.notes.append(("", f"Mean {fitness} is 0 {where}, so relative fitness is undefined and nothing is estimated for it."))
        return prep
    if np.any(Wf < 0):
        prep.notes.append(("", f"{fitness} has negative values {where}; fitness must be 0 or more, so nothing is estimated for it."))
        return prep
    if too_large(Wf):
        prep.notes.append(("", f"{fitness} holds a value too large to compute with ({_largest(Wf)}) {where}, so "
                               "nothing is estimated for it there; check the value (fieldslope history)."))
        return prep
    prep.binary = kind == "binary" and is_binary(Wf)
    if kind == "binary" and not prep.binary:
        prep.notes.append((Q.GRADIENT_LOGISTIC, f"{fitness} is declared 0/1 but has other values {where}, so it has no logistic gradient."))
    prep.opp = Sample(rows, cell.z[rows], Wf)
    for j, name in enumerate(traits):
        r = np.flatnonzero(has_w & ~np.isnan(cell.z[:, j]))
        if len(r) < MIN_SINGLE:
            prep.notes.append((Q.DIFFERENTIAL, f"Only {len(r)} individuals {where} have {name} and {fitness}; at least {MIN_SINGLE} are needed for its differential."))
            continue
        zj = cell.z[r, j]
        if too_large(zj):
            prep.notes.append((Q.DIFFERENTIAL, f"{name} holds a value too large to compute with ({_largest(zj)}) "
                                               f"{where}, so it has no estimates there for {fitness}; check the "
                                               "value (fieldslope history)."))
            continue
        if constant_columns(zj[:, None]):
            prep.notes.append((Q.DIFFERENTIAL, f"{name} is constant {where}, so it cannot be standardized and has no differential for {fitness}."))
            continue
        if W[r].mean() <= 0:
            prep.notes.append((Q.DIFFERENTIAL, f"Mean {fitness} is 0 among individuals {where} measured for {name}, so it has no differential."))
            continue
        prep.single[j] = Sample(r, cell.z[r][:, [j]], W[r])
    complete = has_w & ~np.isnan(cell.z).any(axis=1)
    r = np.flatnonzero(complete)
    if len(r) < p + 2:
        prep.notes.append((Q.GRADIENT, f"Only {len(r)} individuals {where} have {fitness} and every trait; gradients need at least {p + 2}."))
        return prep
    zc = cell.z[r]
    huge = [traits[j] for j in range(p) if too_large(zc[:, j])]
    if huge:
        prep.notes.append((Q.GRADIENT, f"{', '.join(huge)} holds a value too large to compute with {where}, so no "
                                       f"gradients are estimated there for {fitness}."))
        return prep
    const = [traits[j] for j in constant_columns(zc)]
    if const:
        prep.notes.append((Q.GRADIENT, f"{', '.join(const)} is constant among complete cases {where}, so no gradients are estimated for {fitness}."))
        return prep
    if W[r].mean() <= 0:
        prep.notes.append((Q.GRADIENT, f"Mean {fitness} is 0 among complete cases {where}, so no gradients are estimated."))
        return prep
    prep.multi = Sample(r, zc, W[r])
    return prep
