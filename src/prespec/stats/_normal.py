"""The p-value of a standard normal statistic, shared by every z-type test."""

from __future__ import annotations

import math

from scipy import stats


def normal_p_value(z: float, alternative: str) -> float:
    """P-value of ``z`` on the standard normal: upper tail for "greater", lower for "less",
    twice the smaller tail (capped at 1) for "two-sided"; nan stays nan."""
    if math.isnan(z):
        return math.nan
    if alternative == "greater":
        return float(stats.norm.sf(z))
    if alternative == "less":
        return float(stats.norm.cdf(z))
    return float(min(1.0, 2.0 * stats.norm.sf(abs(z))))
