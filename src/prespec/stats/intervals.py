"""Confidence intervals for one proportion and for the difference of two proportions.

Each function returns an :class:`~prespec.stats.results.Estimate`; ``level`` is the two-sided
confidence level (e.g. 0.95) and the critical value is the normal quantile 1 − (1 − level)/2.
"""

from __future__ import annotations

import math

from scipy import stats

from prespec.stats import _checks
from prespec.stats.results import Estimate


def _critical(level: float) -> float:
    """Two-sided standard normal critical value for a confidence level."""
    return float(stats.norm.isf((1.0 - level) / 2.0))


def _difference(x1: int, n1: int, x2: int, n2: int) -> float:
    """p1 − p2 from one rounding of the exact integer fraction (0.8 − 0.6 gives 0.2)."""
    return (x1 * n2 - x2 * n1) / (n1 * n2)


def _wilson_limits(x: int, n: int, z: float) -> tuple[float, float]:
    """Wilson score limits for x events out of n, exact 0 at x = 0 and 1 at x = n."""
    p = x / n
    z2 = z * z
    denominator = 1.0 + z2 / n
    centre = (p + z2 / (2.0 * n)) / denominator
    half = z * math.sqrt(p * (1.0 - p) / n + z2 / (4.0 * n * n)) / denominator
    low = 0.0 if x == 0 else max(0.0, centre - half)
    high = 1.0 if x == n else min(1.0, centre + half)
    return low, high


def wilson(x: int, n: int, level: float) -> Estimate:
    """Wilson score interval for a single proportion x / n.

    The limits are the roots in p of (x/n − p)² = z² p(1 − p)/n. They lie in [0, 1] and, unlike
    the Wald interval, do not collapse at x = 0 or x = n.

    References
    ----------
    Wilson EB. Probable inference, the law of succession, and statistical inference. Journal of
    the American Statistical Association 1927;22:209–212.
    Newcombe RG. Two-sided confidence intervals for the single proportion: comparison of seven
    methods. Statistics in Medicine 1998;17:857–872 (method 3).
    """
    x, n = _checks.events_of_total("x", x, "n", n)
    lvl = _checks.level(level)
    low, high = _wilson_limits(x, n, _critical(lvl))
    return Estimate("proportion", x / n, low, high, "wilson", lvl)


def wald_difference(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Wald interval for the risk difference p1 − p2, clipped to [−1, 1].

    d ± z·sqrt(p1(1 − p1)/n1 + p2(1 − p2)/n2). When both proportions are 0 or 1 the standard
    error is 0 and so is the width: that is what the method gives, and it is kept.

    References
    ----------
    Newcombe RG. Interval estimation for the difference between independent proportions:
    comparison of eleven methods. Statistics in Medicine 1998;17:873–890 (method 1).
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    lvl = _checks.level(level)
    p1, p2 = x1 / n1, x2 / n2
    difference = _difference(x1, n1, x2, n2)
    half = _critical(lvl) * math.sqrt(p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    low = max(-1.0, difference - half)
    high = min(1.0, difference + half)
    return Estimate("risk-difference", difference, low, high, "wald", lvl)


def newcombe_difference(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Newcombe's hybrid score interval for the risk difference p1 − p2.

    With Wilson limits (l1, u1) for p1 and (l2, u2) for p2, the interval is
    d − sqrt((p1 − l1)² + (u2 − p2)²) to d + sqrt((u1 − p1)² + (p2 − l2)²), d = p1 − p2.
    It always lies within [−1, 1].

    References
    ----------
    Newcombe RG. Interval estimation for the difference between independent proportions:
    comparison of eleven methods. Statistics in Medicine 1998;17:873–890 (method 10).
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    lvl = _checks.level(level)
    z = _critical(lvl)
    p1, p2 = x1 / n1, x2 / n2
    l1, u1 = _wilson_limits(x1, n1, z)
    l2, u2 = _wilson_limits(x2, n2, z)
    difference = _difference(x1, n1, x2, n2)
    low = difference - math.hypot(p1 - l1, u2 - p2)
    high = difference + math.hypot(u1 - p1, p2 - l2)
    return Estimate("risk-difference", difference, max(-1.0, low), min(1.0, high), "newcombe", lvl)
