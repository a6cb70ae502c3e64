"""From the effective data to the animal model's matrices: one record per individual, cells as fixed effects.

An individual measured in several seasons enters with its earliest record
that has every response needed (the animal model here has no permanent
environment effect for repeated records). Relative fitness is W / mean(W)
within the individual's cell (season x site) over all records with W.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp

from fieldslope.analysis.animal_model import MixedData
from fieldslope.analysis.cells import as_text, natural_key
from fieldslope.analysis.design import Design
from fieldslope.analysis.pedigree import Pedigree

__all__ = ["model_data", "relative_fitness"]


def cell_labels(frame: pd.DataFrame, design: Design) -> pd.Series:
    label = as_text(frame[design.season])
    for col in design.groups:
        label = label + " / " + as_text(frame[col])
    return label


def relative_fitness(frame: pd.DataFrame, design: Design, fitness: str) -> pd.Series:
    """w = W / mean(W) within each cell; NaN where the cell's mean is not positive.

    Parameters: ``frame``, ``design`` and the fitness column. Returns a Series aligned with ``frame``. Source:
    relative fitness within cells, Lande & Arnold 1983, Evolution 37:1210-1226.
    """
    W = pd.to_numeric(frame[fitness], errors="coerce").astype(float)
    mean = W.groupby(cell_labels(frame, design)).transform("mean")
    return (W / mean.where(mean > 0)).astype(float)


def model_data(frame: pd.DataFrame, design: Design, ped: Pedigree, responses: pd.DataFrame) -> tuple[MixedData, int]:
    """The model for the columns of ``responses`` (aligned with ``frame``): records with every column present,
    the earliest per individual; returns the data and how many later records were left out.

    Parameters: effective data ``frame``, ``design``, the pedigree ``ped`` and the response columns. Returns
    (MixedData, later records left out). Source: the mixed-model equations of Henderson 1984 (Applications of
    Linear Models in Animal Breeding); the animal model in wild populations, Kruuk 2004 (Phil. Trans. R. Soc.
    B 359:873-890).
    """
    ids = frame[design.id].astype("string").str.strip()
    rank = {s: k for k, s in enumerate(sorted(as_text(frame[design.season]).unique(), key=natural_key))}
    keep = responses.notna().all(axis=1) & ids.notna() & (ids != "")
    sub = pd.DataFrame({"id": ids[keep], "rank": as_text(frame[design.season])[keep].map(rank),
                        "cell": cell_labels(frame, design)[keep]})
    sub = sub.sort_values("rank", kind="stable")
    first = ~sub["id"].duplicated()
    later = int((~first).sum())
    sub = sub[first]
    Y = responses.loc[sub.index].to_numpy(dtype=float)
    cells, cell_idx = np.unique(sub["cell"].to_numpy(dtype=str), return_inverse=True)
    pos = ped.index()
    z_idx = np.array([pos[v] for v in sub["id"].tolist()], dtype=np.int64)
    n = len(sub)
    X = sp.csc_matrix((np.ones(n), (np.arange(n), cell_idx)), shape=(n, len(cells)))
    Z = sp.csc_matrix((np.ones(n), (np.arange(n), z_idx)), shape=(n, ped.n))
    return MixedData(X, Z, ped.a_inverse(), ped.log_det_a(), Y), later
