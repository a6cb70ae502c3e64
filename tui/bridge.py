"""The one place where the protocol, the store and the estimators meet.

The command line and the dashboard both call these functions, so there is a
single path from stored records to numbers.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable

from fieldslope.analysis.design import Design
from fieldslope.schemas.protocol import Protocol

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def design_from_protocol(protocol: Protocol) -> Design:
    """The estimators' view of a protocol: which columns are traits, fitness, groups and parents."""
    return Design(
        traits=protocol.trait_names,
        fitness={name: protocol.fitness[name].kind for name in protocol.component_names},
        totals=dict(protocol.totals),
        id=protocol.id_col,
        season=protocol.season_col,
        groups=protocol.groups,
        mother=protocol.mother,
        father=protocol.father,
    )


def estimates_for_frame(
    frame: "pd.DataFrame",
    protocol: Protocol,
    *,
    bootstrap: int = 2000,
    seed: int | None = None,
    h2: dict | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    pedigree: bool = False,
    genetics=None,
    season: str | None = None,
    random_effects: str = "dl",
    site: str | None = None,
    fitness: str | None = None,
    generalized: bool = True,
):
    """Estimates for an effective-data frame (see DEVELOPERS.md for its columns).

    ``season``, ``site`` (ALL for the pooled rows) and ``fitness`` restrict the work to one season, site
    or fitness measure; the rows asked for have the whole table's numbers; ``generalized=False`` leaves out
    the generalized gradients (``estimate_table``). ``random_effects`` picks the
    interval of the mean gradient across seasons ("dl" or "hk", as ``estimate_table``). ``pedigree`` fits the animal
    models first (slow: the command line does, the dashboard's live refresh does not); ``genetics`` passes a fit already made.
    """
    from fieldslope.analysis.table import estimate_table  # heavy: imported on first use

    if pedigree and genetics is None:
        genetics = pedigree_genetics(frame, protocol, progress=progress)
    kwargs = {"bootstrap": bootstrap, "progress": progress, "h2": h2, "genetics": genetics, "random_effects": random_effects,
              "generalized": generalized}
    if season is not None:
        kwargs["only_seasons"] = [season]
    if site is not None:
        kwargs["only_sites"] = [site]
    if fitness is not None:
        kwargs["fitness"] = [fitness]
    if seed is not None:
        kwargs["seed"] = seed
    return estimate_table(frame, design_from_protocol(protocol), **kwargs)


def pedigree_genetics(frame: "pd.DataFrame", protocol: Protocol, *, progress=None):
    """Animal-model rows and notes for the whole pedigree (``analysis.genetics.Genetics``)."""
    from fieldslope.analysis.genetics import pedigree_estimates  # heavy: imported on first use
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):  # many small dense products
        return pedigree_estimates(frame, design_from_protocol(protocol), progress=progress)
