"""Errors of the estimation engine (one plain sentence each)."""

from __future__ import annotations

from schemas.errors import FieldslopeError


class EstimationError(FieldslopeError):
    """The data frame does not match the design, or a planning input is out of range."""
