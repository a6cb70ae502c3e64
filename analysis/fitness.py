"""Fitness: totals as products of components, the kind of a total, relative fitness."""

from __future__ import annotations

import numpy as np
import pandas as pd

from fieldslope.analysis.design import Design

__all__ = ["add_totals", "total_kind", "relative", "is_binary"]


def add_totals(frame: pd.DataFrame, design: Design) -> pd.DataFrame:
    """A copy of ``frame`` with one column per declared total (product of its components).

    A total is 0 where any component is 0 (a dead individual has no later
    fitness to multiply), otherwise missing where any component is missing.

    Parameters: effective data ``frame`` and ``design``. Returns the copy. Source: total fitness as the
    product of its components, Arnold & Wade 1984 (Evolution 38:709-719).
    """
    out = frame.copy()
    for name, parts in design.totals.items():
        values = np.ones(len(out))
        zero = np.zeros(len(out), dtype=bool)
        missing = np.zeros(len(out), dtype=bool)
        for part in parts:
            col = pd.to_numeric(out[part], errors="coerce").to_numpy(dtype=float)
            zero |= col == 0
            missing |= np.isnan(col)
            values = values * np.where(np.isnan(col), 1.0, col)
        values[missing] = np.nan
        values[zero] = 0.0
        out[name] = values
    return out


def total_kind(design: Design, name: str) -> str:
    """Kind of a fitness measure; a total is binary only if every component is.

    Parameters: ``design`` and a fitness ``name``. Returns "binary", "count" or "continuous". Source: none
    (bookkeeping, no published method).
    """
    if name in design.fitness:
        return design.fitness[name]
    kinds = {design.fitness.get(p, "continuous") for p in design.totals[name]}
    return "binary" if kinds == {"binary"} else "count" if kinds <= {"binary", "count"} else "continuous"


def relative(w_abs: np.ndarray) -> np.ndarray:
    """Relative fitness w = W / mean(W) (the caller makes sure mean(W) > 0).

    Parameters: absolute fitness ``w_abs``. Returns relative fitness. Source: Lande & Arnold 1983, Evolution
    37:1210-1226.
    """
    return w_abs / w_abs.mean()


def is_binary(values: np.ndarray) -> bool:
    """True if every value is 0 or 1.

    Parameters: ``values``. Source: none (bookkeeping, no published method).
    """
    return bool(np.all((values == 0) | (values == 1)))
