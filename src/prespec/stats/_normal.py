"""The p-values of standard normal and chi-square statistics, shared by every z and X² test,
and the normal quantile of every interval.

They call the functions of ``scipy.special`` that ``scipy.stats.norm`` and ``scipy.stats.chi2``
themselves call (``ndtr``, ``ndtri``, ``chdtrc``), so the values are those of scipy.stats to the
bit (tested), without importing scipy.stats: a report's notebook imports prespec.stats as its
kernel starts, and scipy.stats alone costs about a second there. The scipy.stats and
scipy.optimize functions the rest of the room needs are imported where they are called
(:mod:`prespec.stats._lazy`).

Each is written once on arrays (the design simulation and the tipping-point grid compute
thousands at once; a distribution function is the costly step, so it runs once per distinct
value); the scalar :func:`normal_p_value` is the one-element case.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import special


def by_value(fn: Callable[[np.ndarray], np.ndarray], values: np.ndarray) -> np.ndarray:
    """``fn`` computed once per distinct value of ``values`` (count tables of fixed totals
    take few distinct statistics), in the shape of ``values``; nan stays nan."""
    values = np.asarray(values, dtype=float)
    unique, inverse = np.unique(values, return_inverse=True)
    return np.asarray(fn(unique), dtype=float)[inverse.reshape(values.shape)]


def normal_p_values(z: np.ndarray, alternative: str) -> np.ndarray:
    """P-values of standard normal statistics: the upper tail (scipy.stats.norm.sf, which is
    ``ndtr(-z)``) for "greater", the lower (scipy.stats.norm.cdf, ``ndtr(z)``) for "less",
    twice the smaller tail (capped at 1) for "two-sided"; nan stays nan."""
    if alternative == "greater":
        return by_value(_upper_tail, z)
    if alternative == "less":
        return by_value(special.ndtr, z)
    return np.minimum(1.0, 2.0 * by_value(_upper_tail, np.abs(np.asarray(z, dtype=float))))


def lower_tail(z: float) -> np.float64:
    """The standard normal's distribution function at ``z``, scipy.stats.norm.cdf(z) as scipy
    computes it (``ndtr(z)``)."""
    return np.float64(special.ndtr(z))


def _upper_tail(z: np.ndarray) -> np.ndarray:
    return np.asarray(special.ndtr(-np.asarray(z, dtype=float)), dtype=float)


def normal_p_value(z: float, alternative: str) -> float:
    """:func:`normal_p_values` of one statistic."""
    if math.isnan(z):
        return math.nan
    return float(normal_p_values(np.array([z], dtype=float), alternative)[0])


def chi_square_p_values(x2: np.ndarray, df: int) -> np.ndarray:
    """The upper tail of chi-square with ``df`` degrees of freedom (scipy.stats.chi2.sf, which is
    ``chdtrc(df, x)`` on its support) of each statistic; nan stays nan, and a negative
    statistic (rounding can leave a likelihood-ratio statistic at -1e-16) gives 1, as
    scipy.stats gives (chdtrc gives nan there)."""
    return by_value(lambda u: np.where(u < 0.0, 1.0, special.chdtrc(df, u)), x2)


def chi_square_p_value(x2: float, df: int) -> float:
    """:func:`chi_square_p_values` of one statistic."""
    return 1.0 if x2 < 0.0 else float(special.chdtrc(df, x2))


def upper_quantile(q: float) -> np.float64:
    """The standard normal's upper ``q`` quantile, scipy.stats.norm.isf(q) as scipy computes it
    (``-ndtri(q)``): 1.959964 for q = 0.025."""
    return np.float64(-special.ndtri(q))
