"""What to estimate: the columns of the effective data and the kind of each fitness measure.

The estimators take a ``Design`` and a pandas DataFrame; they know nothing of
protocol files or the store (the command line and the dashboard build the
``Design`` from the study's protocol).
"""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["Design"]


@dataclass(frozen=True)
class Design:
    """The effective data's column names, each fitness measure's kind and the declared totals."""

    traits: tuple[str, ...]
    # measured fitness components: name -> "binary" | "count" | "continuous"
    fitness: dict[str, str]
    # declared totals: name -> components whose product it is
    totals: dict[str, tuple[str, ...]] = field(default_factory=dict)
    id: str = "id"
    season: str = "season"
    groups: tuple[str, ...] = ("site",)
    mother: str | None = None
    father: str | None = None

    @property
    def fitness_names(self) -> tuple[str, ...]:
        """Components then totals, in declaration order."""
        return (*self.fitness, *self.totals)
