"""The p-values of standard normal and chi-square statistics, shared by every z and X² test.

Each is written once on arrays (the design simulation and the tipping-point grid compute
thousands at once; a distribution function is the costly step, so it runs once per distinct
value); the scalar :func:`normal_p_value` is the one-element case.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats


def by_value(fn: Callable[[np.ndarray], np.ndarray], values: np.ndarray) -> np.ndarray:
    """``fn`` computed once per distinct value of ``values`` (count tables of fixed totals
    take few distinct statistics), in the shape of ``values``; nan stays nan."""
    values = np.asarray(values, dtype=float)
    unique, inverse = np.unique(values, return_inverse=True)
    return np.asarray(fn(unique), dtype=float)[inverse.reshape(values.shape)]


def normal_p_values(z: np.ndarray, alternative: str) -> np.ndarray:
    """P-values of standard normal statistics: the upper tail (scipy.stats.norm.sf) for
    "greater", the lower (scipy.stats.norm.cdf) for "less", twice the smaller tail (capped at
    1) for "two-sided"; nan stays nan."""
    if alternative == "greater":
        return by_value(stats.norm.sf, z)
    if alternative == "less":
        return by_value(stats.norm.cdf, z)
    return np.minimum(1.0, 2.0 * by_value(stats.norm.sf, np.abs(np.asarray(z, dtype=float))))


def normal_p_value(z: float, alternative: str) -> float:
    """:func:`normal_p_values` of one statistic."""
    if math.isnan(z):
        return math.nan
    return float(normal_p_values(np.array([z], dtype=float), alternative)[0])


def chi_square_p_values(x2: np.ndarray, df: int) -> np.ndarray:
    """The upper tail of chi-square with ``df`` degrees of freedom (scipy.stats.chi2.sf) of
    each statistic; nan stays nan."""
    return by_value(lambda u: stats.chi2.sf(u, df), x2)
