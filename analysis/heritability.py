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

MIN_FAMILIES = 3


@dataclass(frozen=True)
class HeritabilityFit:
    trait: str
    estimate: float
    se: float
    n_families: int
    method: str  # "midparent", "mother" or "father"

    def describe(self) -> str:
        how = "offspring family means on the midparent value" if self.method == "midparent" else (
            f"offspring family means on the {self.method}'s value, slope doubled")
        return f"Heritability of {self.trait} from {self.n_families} families: regression of {how}."


def _ids(series: pd.Series) -> pd.Series:
    s = series.astype("string").str.strip()
    return s.mask(s.isna() | (s == "") | (s.str.lower() == "nan"))


def parent_offspring(frame: pd.DataFrame, design: Design, trait: str) -> tuple[HeritabilityFit | None, str]:
    """The heritability of ``trait``, or None and one sentence saying why not."""
    if design.mother is None and design.father is None:
        return None, "the protocol names no parent columns"
    ids = _ids(frame[design.id])
    value = pd.to_numeric(frame[trait], errors="coerce")
    by_id = value.groupby(ids).mean()  # mean of each individual's records
    mother = _ids(frame[design.mother]) if design.mother in frame else pd.Series(pd.NA, index=frame.index, dtype="string")
    father = _ids(frame[design.father]) if design.father in frame else pd.Series(pd.NA, index=frame.index, dtype="string")
    kids = pd.DataFrame({"id": ids, "mother": mother, "father": father, "value": value})
    kids = kids[(kids["mother"].notna() | kids["father"].notna()) & kids["value"].notna() & kids["id"].notna()]
    if kids.empty:
        return None, "no measured individual has a recorded parent"
    kid_means = kids.groupby(["id"], dropna=False).agg(
        mother=("mother", "first"), father=("father", "first"), value=("value", "mean"))
    fam = kid_means.groupby(["mother", "father"], dropna=False)["value"].mean().reset_index()
    fam["pm"] = fam["mother"].map(by_id)
    fam["pf"] = fam["father"].map(by_id)
    fam[["pm", "pf"]] = fam[["pm", "pf"]].astype(float)
    both = fam.dropna(subset=["pm", "pf"])
    if len(both) >= MIN_FAMILIES:
        x, y, method, factor = ((both["pm"] + both["pf"]) / 2).to_numpy(), both["value"].to_numpy(), "midparent", 1.0
    else:
        mom, dad = fam.dropna(subset=["pm"]), fam.dropna(subset=["pf"])
        one, col, method = (mom, "pm", "mother") if len(mom) >= len(dad) else (dad, "pf", "father")
        if len(one) < MIN_FAMILIES:
            return None, f"fewer than {MIN_FAMILIES} families have a measured parent"
        x, y, factor = one[col].to_numpy(), one["value"].to_numpy(), 2.0
    try:
        fit = ols(np.column_stack([np.ones(len(x)), x]), y.astype(float))
    except (Collinear, ValueError):
        return None, "the parents' values do not vary enough for a regression"
    return HeritabilityFit(trait, float(factor * fit.coef[1]), float(factor * fit.se[1]), len(x), method), ""
