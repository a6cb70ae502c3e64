"""Intervals of the loadings of the canonical axes of gamma (the eigenvectors, ``canonical_loading``).

An eigenvector's sign is arbitrary, so each resample's eigenvector is first signed to point the way of
the estimate's (``quadratic.aligned``: reversed when their inner product is negative); the 95 %
percentile interval of each loading is taken over these sign-aligned resamples (Phillips & Arnold 1989,
Evolution 43:1209-1222, for the canonical analysis; Efron & Tibshirani 1993 for the percentile interval).
Axes are matched by rank (largest eigenvalue first), as for the eigenvalues. The loadings have no
p-value: no test is made of them.
"""

from __future__ import annotations

import numpy as np

from fieldslope.analysis.quadratic import aligned
from fieldslope.analysis.resample import CANONICAL_AXES, percentile_interval
from fieldslope.common.names import Q

__all__ = ["loading_intervals"]


def loading_intervals(rows: list[dict], boot: dict, traits) -> None:
    """Fill ci_low and ci_high of a season's ``canonical_loading`` rows in place."""
    blocks: dict[tuple, dict] = {}
    for r in rows:
        if r["quantity"] == Q.CANONICAL_LOADING:
            blocks.setdefault((r["site"], r["fitness"]), {})[r["term"]] = r
    p = len(traits)
    for (site, fitness), found in blocks.items():
        vecs = boot.get((site, fitness, CANONICAL_AXES, ""))
        if vecs is None:
            continue
        ref = np.array([[found[f"m{i + 1}:{t}"]["estimate"] for i in range(p)] for t in traits])
        signed = aligned(np.nan_to_num(vecs), ref)
        signed[~np.isfinite(vecs).all(axis=(1, 2))] = np.nan
        for i in range(p):
            for j, t in enumerate(traits):
                r = found[f"m{i + 1}:{t}"]
                r["ci_low"], r["ci_high"], _ = percentile_interval(signed[:, j, i])
