"""The scipy functions of the statistics room that are imported where they are called.

``import prespec.stats`` must stay light: a report's notebook imports it as its kernel starts,
and scipy.stats and scipy.optimize together cost over a second there, most of the report's
fixed cost. The normal and chi-square functions come from scipy.special
(:mod:`prespec.stats._normal`); the few functions below load their scipy module on their
first call (Python keeps it, so later calls pay only a dictionary lookup).
"""

from __future__ import annotations

from types import ModuleType
from typing import Any


def scipy_stats() -> ModuleType:
    """``scipy.stats``, imported on the first call."""
    from scipy import stats

    return stats


def brentq(*args: Any, **kwargs: Any) -> Any:
    """``scipy.optimize.brentq``, imported on the first call."""
    from scipy.optimize import brentq as solve

    return solve(*args, **kwargs)


def minimize_scalar(*args: Any, **kwargs: Any) -> Any:
    """``scipy.optimize.minimize_scalar``, imported on the first call."""
    from scipy.optimize import minimize_scalar as minimize

    return minimize(*args, **kwargs)
