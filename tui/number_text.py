"""Numbers written the same way wherever they are shown (command line, dashboard, report)."""

from __future__ import annotations

import math

# significant digits of the between-season variance tau^2 (its size varies over orders of magnitude)
TAU2_DIGITS = 3


def tau2_text(value) -> str:
    """tau^2 in TAU2_DIGITS significant digits ("0" when there is no between-season variance, "" when
    missing); the one way it is written on the command line, in the dashboard and in the report."""
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
        return ""
    return "0" if value == 0 else f"{value:.{TAU2_DIGITS}g}"
