"""Simulated pedigrees under the infinitesimal model, for checking the animal model against known values.

Generation 0 are unrelated founders; each later generation are offspring of
random dam-sire pairs from the one before (several offspring per pair, so
there are full- and half-sib families). Breeding values: founders draw from
N(0, G0); an offspring has the parents' mean plus a Mendelian sampling term of
covariance G0 / 2 (Bulmer 1971, Am. Nat. 105:201-211; inbreeding is ignored,
which keeps these populations close to the model while they stay large).

``tabular_a`` builds A by the tabular method (Emik & Terrill 1949, J. Anim.
Sci. 8:606; Henderson 1976, Biometrics 32:69-83), independently of the code
under test.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def tabular_a(dam: list[int], sire: list[int]) -> np.ndarray:
    """The additive relationship matrix by the tabular method (parents before offspring, -1 unknown)."""
    n = len(dam)
    A = np.zeros((n, n))
    for i in range(n):
        s, d = sire[i], dam[i]
        for j in range(i):
            A[i, j] = A[j, i] = 0.5 * ((A[j, s] if s >= 0 else 0.0) + (A[j, d] if d >= 0 else 0.0))
        A[i, i] = 1.0 + (0.5 * A[s, d] if s >= 0 and d >= 0 else 0.0)
    return A


def simulate(rng, G0, R0, generations=3, per_generation=120, pairs=40, sites=("A", "B"), trait_names=None):
    G0, R0 = np.atleast_2d(G0), np.atleast_2d(R0)
    k = G0.shape[0]
    names = trait_names or [f"t{j}" for j in range(k)]
    rows, prev_ids, prev_a = [], None, None
    Lg, Lr = np.linalg.cholesky(G0), np.linalg.cholesky(R0)
    cell_mean = {}
    for g in range(generations):
        season = str(2020 + g)
        ids = [f"g{g}-{i}" for i in range(per_generation)]
        if g == 0:
            a = rng.standard_normal((per_generation, k)) @ Lg.T
            dam = sire = [""] * per_generation
        else:
            order = rng.permutation(len(prev_ids))
            d_idx, s_idx = order[:pairs], order[pairs:2 * pairs]
            fam = rng.integers(0, pairs, per_generation)
            a = (prev_a[d_idx[fam]] + prev_a[s_idx[fam]]) / 2 + rng.standard_normal((per_generation, k)) @ Lg.T / np.sqrt(2)
            dam = [prev_ids[i] for i in d_idx[fam]]
            sire = [prev_ids[i] for i in s_idx[fam]]
        site = [sites[i % len(sites)] for i in range(per_generation)]
        e = rng.standard_normal((per_generation, k)) @ Lr.T
        for i in range(per_generation):
            mu = cell_mean.setdefault((season, site[i]), rng.normal(0, 1, k))
            rows.append({"id": ids[i], "season": season, "site": site[i], "dam": dam[i], "sire": sire[i],
                         **{names[j]: mu[j] + a[i, j] + e[i, j] for j in range(k)}})
        prev_ids, prev_a = ids, a
    return pd.DataFrame(rows)
