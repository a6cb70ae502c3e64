"""Heritability from parent-offspring regression.

Parents are looked up by ID among all records (any season); a parent with
several records contributes the mean of its records, and so does an
offspring. Offspring are grouped into families by (mother, father); the
family means are regressed on the midparent value where at least three
families have both parents measured, otherwise on the better-represented
single parent, and that slope (and its OLS standard error) is doubled.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from fieldslope.analysis.design import Design
from fieldslope.analysis.linear import Collinear, ols

__all__ = ["HeritabilityFit", "Pedigree", "code_pedigree", "parent_offspring"]

MIN_FAMILIES = 3


@dataclass(frozen=True)
class HeritabilityFit:
    """A parent-offspring heritability: estimate, se, families and which parents were used."""

    trait: str
    estimate: float
    se: float
    n_families: int
    method: str  # "midparent", "mother" or "father"

    def describe(self) -> str:
        how = "offspring family means on the midparent value" if self.method == "midparent" else (
            f"offspring family means on the {self.method}'s value, slope doubled")
        return f"Heritability of {self.trait} from {self.n_families} families: regression of {how}."


@dataclass(frozen=True)
class Pedigree:
    """Each row's individual, mother and father coded to integers once (-1 where missing), so the
    family means of every trait come from integer group-bys."""

    ids: np.ndarray
    mother: np.ndarray
    father: np.ndarray
    n_codes: int


def clean_ids(series: pd.Series) -> pd.Series:
    """IDs as trimmed text; blank, "nan" and missing become NA."""
    s = series.astype("string").str.strip()
    return s.mask(s.isna() | (s == "") | (s.str.lower() == "nan"))


def code_pedigree(frame: pd.DataFrame, design: Design) -> Pedigree:
    """The ID and parent columns coded to one set of integers (-1 = missing). The text is cleaned once per
    distinct value (IDs written with stray spaces share a code), not once per row and trait.

    Parameters: effective data and ``design``. Returns a ``Pedigree`` of integer codes. Source: none
    (bookkeeping, no published method).
    """
    n = len(frame)
    cols = [frame[design.id]] + [frame[c] if c is not None and c in frame else pd.Series(pd.NA, index=frame.index)
                                 for c in (design.mother, design.father)]
    raw, distinct = pd.factorize(pd.concat(cols, ignore_index=True), use_na_sentinel=True)
    distinct = pd.Series(distinct, dtype=object)
    cleaned = clean_ids(distinct)
    if cleaned.isna().any() or (cleaned.astype(object) != distinct).any():  # stray spaces or blanks: merge
        clean, uniques = pd.factorize(cleaned, use_na_sentinel=True)
        codes = np.append(clean.astype(np.int64), -1)[raw]  # raw code -1 (missing) reads the -1 at the end
    else:
        codes, uniques = raw.astype(np.int64), distinct
    return Pedigree(codes[:n], codes[n : 2 * n], codes[2 * n :], len(uniques))


def group_mean(keys: np.ndarray, values: np.ndarray, size: int) -> np.ndarray:
    """Mean of ``values`` for each integer key 0..size-1 (NaN where a key has none)."""
    total = np.bincount(keys, weights=values, minlength=size)
    count = np.bincount(keys, minlength=size)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def first_present(keys: np.ndarray, parent: np.ndarray, size: int) -> np.ndarray:
    """For each key 0..size-1, the first parent code recorded (-1 if none), in row order."""
    have = np.flatnonzero(parent >= 0)
    first = np.full(size, len(parent), dtype=np.int64)
    np.minimum.at(first, keys[have], have)
    return np.append(parent, -1)[first]


def family_means(ped: Pedigree, value: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Offspring family means and their parents' values: (family mean, mother's, father's) with one
    entry per (mother, father) pair; an offspring or parent with several records counts once, by its mean."""
    K = ped.n_codes
    measured = ~np.isnan(value) & (ped.ids >= 0)
    by_id = group_mean(ped.ids[measured], value[measured], K)
    kids = measured & ((ped.mother >= 0) | (ped.father >= 0))
    kid_ids = ped.ids[kids]
    kid_value = group_mean(kid_ids, value[kids], K)
    kid_codes = np.flatnonzero(np.bincount(kid_ids, minlength=K))
    mom = first_present(kid_ids, ped.mother[kids], K)[kid_codes]
    dad = first_present(kid_ids, ped.father[kids], K)[kid_codes]
    family, first = pd.factorize((mom + 1) * (K + 1) + (dad + 1))  # integer keys: hashing, no string group-by
    fam_value = group_mean(family, kid_value[kid_codes], len(first))
    lookup = np.append(by_id, np.nan)  # code -1 reads the NaN at the end
    idx = np.zeros(len(first), dtype=np.int64)
    np.maximum.at(idx, family, np.arange(len(family)))  # any member: all share the pair
    return fam_value, lookup[mom[idx]], lookup[dad[idx]]


def parent_offspring(frame: pd.DataFrame, design: Design, trait: str,
                     pedigree: Pedigree | None = None) -> tuple[HeritabilityFit | None, str]:
    """The heritability of ``trait``, or None and one sentence saying why not. Pass ``pedigree``
    (``code_pedigree(frame, design)``) to code the IDs once for several traits.

    Parameters: effective data, ``design``, the ``trait`` and optionally the coded ``pedigree``. Returns
    (HeritabilityFit or None, why not). Source: offspring on midparent (slope h^2) or on one parent (slope h^2
    / 2), Falconer & Mackay 1996, Introduction to Quantitative Genetics, 4th ed., ch. 10.
    """
    if design.mother is None and design.father is None:
        return None, "the protocol names no parent columns"
    ped = pedigree if pedigree is not None else code_pedigree(frame, design)
    value = pd.to_numeric(frame[trait], errors="coerce").to_numpy(dtype=float)
    if not ((~np.isnan(value)) & (ped.ids >= 0) & ((ped.mother >= 0) | (ped.father >= 0))).any():
        return None, "no measured individual has a recorded parent"
    fam_value, pm, pf = family_means(ped, value)
    both = ~np.isnan(pm) & ~np.isnan(pf)
    if both.sum() >= MIN_FAMILIES:
        x, y, method, factor = (pm[both] + pf[both]) / 2, fam_value[both], "midparent", 1.0
    else:
        has_m, has_f = ~np.isnan(pm), ~np.isnan(pf)
        use, px, method = (has_m, pm, "mother") if has_m.sum() >= has_f.sum() else (has_f, pf, "father")
        if use.sum() < MIN_FAMILIES:
            return None, f"fewer than {MIN_FAMILIES} families have a measured parent"
        x, y, factor = px[use], fam_value[use], 2.0
    try:
        fit = ols(np.column_stack([np.ones(len(x)), x]), y.astype(float))
    except (Collinear, ValueError):
        return None, "the parents' values do not vary enough for a regression"
    return HeritabilityFit(trait, float(factor * fit.coef[1]), float(factor * fit.se[1]), len(x), method), ""
