"""One name for each quantity of the estimates table, each kind of flag and each batch outcome.

The strings are part of the binding contracts (``estimation.md``: the ``quantity``
column; ``intake.md``: flag kinds) and are written into the store and into exported
tables, so their values never change; new names may be added. Code refers to them
through these classes (``Q.GRADIENT``, ``Kind.OUTLIER``) instead of repeating the text.
"""

from __future__ import annotations

from typing import Final

#: The ``season`` or ``site`` of a pooled estimate (all seasons, all sites).
ALL: Final = "all"


class Q:
    """Quantity names: the ``quantity`` column of the estimates table (estimation.md)."""

    MEAN: Final = "mean"
    SD: Final = "sd"
    DIFFERENTIAL: Final = "differential"
    DIFFERENTIAL_STD: Final = "differential_std"
    GRADIENT: Final = "gradient"
    GRADIENT_RAW: Final = "gradient_raw"
    QUADRATIC: Final = "quadratic"
    CORRELATIONAL: Final = "correlational"
    CANONICAL: Final = "canonical"
    GRADIENT_LOGISTIC: Final = "gradient_logistic"
    OPPORTUNITY: Final = "opportunity"
    HERITABILITY: Final = "heritability"
    RESPONSE: Final = "response"
    RESPONSE_PCT: Final = "response_pct"
    RESPONSE_MULTI: Final = "response_multi"
    # across seasons (season ``all``)
    GRADIENT_MEAN: Final = "gradient_mean"
    GRADIENT_TAU2: Final = "gradient_tau2"
    GRADIENT_Q: Final = "gradient_q"
    SIGN_CHANGES: Final = "sign_changes"
    # from the animal model on the whole pedigree (season and site ``all``)
    HERITABILITY_PEDIGREE: Final = "heritability_pedigree"
    ADDITIVE_VARIANCE: Final = "additive_variance"
    GENETIC_CORRELATION: Final = "genetic_correlation"
    RESPONSE_PRICE: Final = "response_price"
    # random-effects mean (weights 1/(se^2 + tau^2)) and sign changes between seasons whose intervals
    # exclude zero on opposite sides
    GRADIENT_MEAN_RE: Final = "gradient_mean_re"
    SIGN_CHANGES_SIGNIFICANT: Final = "sign_changes_significant"
    # generalized gradients from a model of the fitness function (logistic for 0/1 fitness, Poisson or
    # negative binomial for counts): mean first and second derivatives of expected fitness / mean fitness
    GRADIENT_GLM: Final = "gradient_glm"
    QUADRATIC_GLM: Final = "quadratic_glm"
    CORRELATIONAL_GLM: Final = "correlational_glm"
    # loading of a trait on a canonical axis of gamma (term ``m1:trait``): an eigenvector's element
    CANONICAL_LOADING: Final = "canonical_loading"


#: Every quantity name, in the order of the estimation contract.
QUANTITIES: Final = tuple(v for k, v in vars(Q).items() if k.isupper())


class Kind:
    """Flag kinds: raised by the sheet checks (schemas.validate) or by the store."""

    # from the sheet alone
    OUT_OF_RANGE: Final = "out_of_range"
    MISSING_FITNESS: Final = "missing_fitness"
    DUPLICATE_ID: Final = "duplicate_id"
    MANGLED_ID: Final = "mangled_id"
    ID_PATTERN: Final = "id_pattern"            # an ID that does not match the protocol's [checks] id_pattern
    SEASON_RANGE: Final = "season_range"        # a season outside the protocol's [checks] seasons
    # from the sheet against the record
    OUTLIER: Final = "outlier"
    DIFFERS_FROM_RECORD: Final = "differs_from_record"
    UNKNOWN_PARENT: Final = "unknown_parent"
    QUARANTINED: Final = "quarantined"
    LOOKALIKE_ID: Final = "lookalike_id"        # a new ID that reads like one on record (case, spaces, O/0 ...)


#: Every flag kind.
FLAG_KINDS: Final = tuple(v for k, v in vars(Kind).items() if k.isupper())
#: Flags on a row's ID: correcting one moves the whole row to the right ID.
ID_KINDS: Final = (Kind.DUPLICATE_ID, Kind.MANGLED_ID, Kind.LOOKALIKE_ID, Kind.ID_PATTERN)
#: The same, as an SQL list (``f.kind IN (...)``).
ID_KINDS_SQL: Final = ", ".join(f"'{k}'" for k in ID_KINDS)

#: Each flag kind in the plain words the dashboard shows (short: they sit in table cells).
FLAG_LABELS: Final = {
    Kind.DIFFERS_FROM_RECORD: "differs",
    Kind.OUT_OF_RANGE: "out of range",
    Kind.OUTLIER: "outlier",
    Kind.MISSING_FITNESS: "no fitness",
    Kind.DUPLICATE_ID: "duplicate ID",
    Kind.MANGLED_ID: "mangled ID",
    Kind.QUARANTINED: "quarantined",
    Kind.UNKNOWN_PARENT: "unknown parent",
    Kind.LOOKALIKE_ID: "look-alike ID",
    Kind.ID_PATTERN: "ID off pattern",
    Kind.SEASON_RANGE: "season off range",
}


def flag_label(kind: object) -> str:
    """A flag kind in plain words (a kind without a label: its name with spaces for underscores)."""
    return FLAG_LABELS.get(str(kind), str(kind).replace("_", " "))


class Outcome:
    """What became of a batch (``ImportResult.outcome``, ``BatchInfo.outcome``)."""

    STORED: Final = "stored"
    PARTIAL: Final = "partial"          # valid rows stored, the rest kept aside or refused
    REFUSED: Final = "refused"          # nothing stored but the record of the refusal
    DUPLICATE: Final = "duplicate"      # the same bytes were taken in before


class Status:
    """Where a flag stands (``StoredFlag.status``)."""

    OPEN: Final = "open"
    KEEP: Final = "keep"
    EXCLUDE: Final = "exclude"
    SET: Final = "set"
    SUPERSEDED: Final = "superseded"    # a later batch gave a new value for that field
