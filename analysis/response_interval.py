"""Intervals of the predicted response to selection R = h^2 S (breeder's equation).

R* = h2* x S* for each bootstrap resample: S* is the resample's selection
differential (individuals resampled within cells, as for every interval), and
h2* is drawn from a normal distribution with the heritability's estimate and
standard error (a parametric bootstrap of h^2, which comes from other
individuals: parents and offspring, or an entered value; with no standard
error h^2 is taken as exact). The 95 % interval is the percentile interval
of R* (Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13);
``response_pct`` divides by the trait's mean.
"""

from __future__ import annotations

import zlib

import numpy as np

from fieldslope.analysis.resample import percentile_interval
from fieldslope.common.names import Q

__all__ = ["heritability_draws", "response_intervals"]


def heritability_draws(h2: float, se: float | None, size: int, rng: np.random.Generator) -> np.ndarray:
    """``size`` draws of h^2 from a normal distribution with its estimate and se (all equal to h2 when the se is
    unknown). Parameters: ``h2``, ``se``, ``size`` and a Generator. Returns the draws. Source: the parametric
    bootstrap, Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 6.
    """
    if se is None or not np.isfinite(se) or se <= 0:
        return np.full(size, float(h2))
    return h2 + se * rng.standard_normal(size)


def response_intervals(rows: list[dict], boot: dict, used_h2: dict, seed: int, season: str) -> None:
    """Fill ci_low and ci_high of a season's ``response`` and ``response_pct`` rows in place.

    Parameters: the season's rows, its bootstrap replicates, the h^2 used, the seed and the season. Returns
    nothing (rows filled). Source: Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13.
    """
    means = {(r["site"], r["fitness"], r["term"]): r["estimate"] for r in rows if r["quantity"] == Q.MEAN}
    for r in rows:
        if r["quantity"] not in (Q.RESPONSE, Q.RESPONSE_PCT) or r["term"] not in used_h2:
            continue
        S = boot.get((r["site"], r["fitness"], Q.DIFFERENTIAL, r["term"]))
        if S is None:
            continue
        h2, se = used_h2[r["term"]]
        where = zlib.crc32(f"{season}\n{r['site']}\n{r['fitness']}\n{r['term']}".encode())
        rng = np.random.default_rng(np.random.SeedSequence([seed, where, 3]))  # the same draws for R and R %
        R = heritability_draws(h2, se, len(S), rng) * S
        if r["quantity"] == Q.RESPONSE_PCT:
            mean = means.get((r["site"], r["fitness"], r["term"]))
            if not mean:
                continue
            R = 100 * R / mean
        r["ci_low"], r["ci_high"], _ = percentile_interval(R)
