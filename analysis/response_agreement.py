"""Do the three predictions of the response to selection agree within their uncertainty?

R = h²S (the breeder's equation; Falconer & Mackay 1996, Introduction to
Quantitative Genetics, ch. 11), Δz̄ = Gβ (Lande 1979, Evolution 33:402-416)
and the Robertson-Price response cov_A(z, w) (Robertson 1966, Anim. Prod.
8:95-108; Morrissey, Kruuk & Wilson 2010, J. Evol. Biol. 23:2277-2288)
predict the same change of the mean when fitness depends on the measured
traits only and genetic and phenotypic correlations are alike.

R and Gβ are per season (pooled over sites: site ``all``); they disagree when
their means over the seasons differ by more than 1.96 standard errors of the
difference of the means (R's from the delta method, Gβ's from the bootstrap;
with no resamples Gβ has none and only R's counts). The Robertson-Price response comes from
one animal model over all seasons, which weights each season by the
relatives it links, so it is compared with the range of the other
prediction's seasonal values: it disagrees when it lies outside that range by
more than 1.96 standard errors of the difference with the nearest season's
value, the two treated as independent. They share data, so this is cautious:
a real disagreement can go unflagged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from fieldslope.analysis.response import breeders_response, response_se
from fieldslope.common.names import ALL, Q

Z95 = 1.959963984540054
BREEDER, LANDE, PRICE = "R = h²S", "Gβ", "Robertson–Price"


@dataclass(frozen=True)
class Prediction:
    name: str
    estimates: tuple[float, ...]  # one per season (one value for the Robertson-Price response)
    ses: tuple[float, ...]  # NaN where unknown

    @property
    def mean(self) -> float:
        return float(np.mean(self.estimates))

    @property
    def mean_se(self) -> float:
        return float(np.sqrt(np.sum(np.square(self.ses)))) / len(self.ses)

    def shown(self) -> str:
        if len(self.estimates) == 1:
            se = self.ses[0]
            return f"{self.name} {self.estimates[0]:.3g}" + (f" (se {se:.2g})" if se == se else "")
        return f"{self.name} {min(self.estimates):.3g} to {max(self.estimates):.3g} (mean {self.mean:.3g})"


def _z(diff: float, *ses: float) -> bool:
    var = sum(se * se for se in ses if se == se)
    return var > 0 and abs(diff) > Z95 * math.sqrt(var)


def _differ(a: Prediction, b: Prediction) -> bool:
    if len(a.estimates) > 1 and len(b.estimates) > 1:  # both seasonal: compare their means
        return _z(a.mean - b.mean, a.mean_se, b.mean_se)
    one, many = (a, b) if len(a.estimates) == 1 else (b, a)
    value, se = one.estimates[0], one.ses[0]
    k = int(np.argmin(np.abs(np.array(many.estimates) - value)))
    inside = min(many.estimates) <= value <= max(many.estimates)
    return not inside and _z(value - many.estimates[k], se, many.ses[k])


@dataclass(frozen=True)
class Disagreement:
    fitness: str
    trait: str
    predictions: tuple[Prediction, ...]
    pairs: tuple[tuple[str, str], ...]  # the pairs that differ beyond their uncertainty

    def sentence(self) -> str:
        shown = "; ".join(p.shown() for p in self.predictions)
        seasons = max(len(p.estimates) for p in self.predictions)
        which = "; ".join(f"{a} and {b}" for a, b in self.pairs)
        why = []
        if any(PRICE in pair for pair in self.pairs):
            why.append("The Robertson–Price response departs from predictions from the measured traits when "
                       "selection acts through traits not measured or the environment makes trait and fitness "
                       "covary (Morrissey, Kruuk & Wilson 2010).")
        if (BREEDER, LANDE) in self.pairs:
            why.append("R = h²S and Gβ part when selection on correlated traits is passed on through genetic "
                       "correlations unlike the phenotypic ones (Lande & Arnold 1983).")
        if any(LANDE in pair for pair in self.pairs) and not all(
                se == se for p in self.predictions if p.name == LANDE for se in p.ses):
            why.append("Gβ has no standard error without resamples, so only the other prediction's is counted.")
        return (f"For {self.fitness}, the predicted responses of {self.trait} per generation disagree beyond their "
                f"uncertainty ({which}): {shown}; over {seasons} season{'' if seasons == 1 else 's'}. "
                + " ".join(why))


def disagreements(table: pd.DataFrame, price_rows: list[dict], h2: dict[str, tuple[float, float]]) -> list[Disagreement]:
    """Each (fitness, trait) with a Robertson-Price row whose predictions disagree (see the module's text).

    ``table`` is the estimates table (differential and response_multi rows at site ``all``), ``price_rows``
    the ``response_price`` rows, ``h2`` the heritability used for R (trait -> (h², se); the pedigree's).
    """
    out = []
    pooled = table[(table["site"] == ALL) & (table["season"] != ALL)]
    for row in price_rows:
        if row["quantity"] != Q.RESPONSE_PRICE or not np.isfinite(row["estimate"]):
            continue
        fitness, trait = row["fitness"], row["term"]
        mine = pooled[(pooled["fitness"] == fitness) & (pooled["term"] == trait)]
        preds = []
        s = mine[mine["quantity"] == Q.DIFFERENTIAL].dropna(subset=["estimate"])
        if trait in h2 and len(s):
            h, h_se = h2[trait]
            h_se = h_se if h_se == h_se else None
            preds.append(Prediction(BREEDER, tuple(breeders_response(h, v) for v in s["estimate"]),
                                    tuple(response_se(h, h_se, v, e) for v, e in zip(s["estimate"], s["se"]))))
        g = mine[mine["quantity"] == Q.RESPONSE_MULTI].dropna(subset=["estimate"])
        if len(g):
            preds.append(Prediction(LANDE, tuple(float(v) for v in g["estimate"]),
                                    tuple(pd.to_numeric(g["se"], errors="coerce").astype(float))))
        preds.append(Prediction(PRICE, (float(row["estimate"]),), (float(row["se"]),)))
        pairs = tuple((a.name, b.name) for i, a in enumerate(preds) for b in preds[i + 1:] if _differ(a, b))
        if pairs:
            out.append(Disagreement(fitness, trait, tuple(preds), pairs))
    return out


def brief(found: list[Disagreement]) -> str:
    """One short sentence for a narrow screen, in the Response table's column names (R, Gβ, Price)."""
    short = {BREEDER: "R", LANDE: "Gβ", PRICE: "Price"}
    parts = [f"{d.trait} ({'; '.join(f'{short[a]} vs {short[b]}' for a, b in d.pairs)})" for d in found]
    return f"Predictions disagree beyond their uncertainty: {', '.join(parts)}; see fieldslope estimate."
