"""Robust z-scores for flagging outliers within an estimation cell.

The modified z-score of Iglewicz and Hoaglin (1993, "How to Detect and Handle
Outliers", ASQC Quality Press): M = 0.6745 (x - median) / MAD, where MAD is
the median absolute deviation from the median. 0.6745 is the 0.75 quantile of
the standard normal, so M is on the scale of an ordinary z for normal data.
"""

from __future__ import annotations

import numpy as np

NORMAL_Q75 = 0.6745


def robust_z(values: np.ndarray) -> np.ndarray:
    """Modified z-score of each value; NaN stays NaN, and all are NaN when MAD is 0.

    A MAD of 0 (half the values identical) gives no usable scale, so nothing
    can be called an outlier: the result is NaN everywhere rather than infinite.
    """
    x = np.asarray(values, dtype=float)
    out = np.full(x.shape, np.nan)
    finite = np.isfinite(x)
    if not finite.any():
        return out
    median = np.median(x[finite])
    mad = np.median(np.abs(x[finite] - median))
    if not mad > 0:
        return out
    out[finite] = NORMAL_Q75 * (x[finite] - median) / mad
    return out
