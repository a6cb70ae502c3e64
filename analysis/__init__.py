"""Pure numerical estimation of selection: no file, database or Textual access.

The public surface, importable from here (each loaded on first use, so importing one module of this
package does not load the others): ``estimate_table`` with ``Design``, ``Estimates``, ``Note`` and
``DEFAULT_SEED`` (``analysis.table``), ``pedigree_estimates`` (``analysis.genetics``),
``fitness_function`` (``analysis.fitness_spline``), ``individuals_for_gradient`` (``analysis.planning``),
``canonical_axes`` (``analysis.quadratic``), ``project_mean`` and ``generations_needed``
(``analysis.response``), ``combine`` (``analysis.seasons``). Every module lists its own in ``__all__``.
"""

from __future__ import annotations

import importlib

__all__ = ["DEFAULT_SEED", "Design", "Estimates", "Note", "canonical_axes", "combine", "estimate_table",
           "fitness_function", "generations_needed", "individuals_for_gradient", "pedigree_estimates",
           "project_mean"]

_HOME = {
    "DEFAULT_SEED": "table", "Estimates": "table", "Note": "table", "estimate_table": "table",
    "Design": "design", "pedigree_estimates": "genetics", "fitness_function": "fitness_spline",
    "individuals_for_gradient": "planning", "canonical_axes": "quadratic", "project_mean": "response",
    "generations_needed": "response", "combine": "seasons",
}


def __getattr__(name: str):
    """Load a public name's module on first use (PEP 562)."""
    if name not in _HOME:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(importlib.import_module(f"{__name__}.{_HOME[name]}"), name)


def __dir__() -> list[str]:
    return sorted(__all__)
