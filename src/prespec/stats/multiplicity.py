"""Multiplicity-adjusted p-values for a family of hypotheses.

:func:`adjust` returns adjusted p-values in input order, capped at 1: hypothesis i is
rejected at family-wise level alpha (or, for the two false-discovery-rate methods, at FDR
level alpha) exactly when its adjusted p-value is <= alpha. Each method is written once, on
an array of families (one per row: :func:`adjust_many`, used by the design simulation for its
simulated trials); :func:`adjust` is its one-row case.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from numbers import Real

import numpy as np

#: An adjustment on an array of families: one row per family, one column per hypothesis.
Adjuster = Callable[[np.ndarray], np.ndarray]


def _none(p: np.ndarray) -> np.ndarray:
    return p.copy()


def _bonferroni(p: np.ndarray) -> np.ndarray:
    return p * p.shape[1]


def _sidak(p: np.ndarray) -> np.ndarray:
    # 1 - (1 - p)^m, written so that small p keep their precision; p = 1 gives log 0 = -inf
    # and so exactly 1, which is right, hence the silenced warning
    with np.errstate(divide="ignore"):
        return -np.expm1(p.shape[1] * np.log1p(-p))


def _sorted(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The stable ascending order of each row, and the rows sorted by it."""
    order = np.argsort(p, axis=1, kind="stable")
    return order, np.take_along_axis(p, order, axis=1)


def _unsort(sorted_values: np.ndarray, order: np.ndarray) -> np.ndarray:
    result = np.empty_like(sorted_values)
    np.put_along_axis(result, order, sorted_values, axis=1)
    return result


def _holm(p: np.ndarray) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    stepped = np.maximum.accumulate((m - np.arange(m)) * s, axis=1)
    return _unsort(np.minimum(stepped, 1.0), order)


def _hochberg(p: np.ndarray) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    scaled = (m - np.arange(m)) * s
    stepped = np.minimum.accumulate(scaled[:, ::-1], axis=1)[:, ::-1]
    return _unsort(stepped, order)


def _hommel(p: np.ndarray) -> np.ndarray:
    # Wright (1992): for each subset size j, the smallest Simes-type value among the j largest
    # p-values bounds the adjusted p of those j hypotheses from below, and of each of the
    # others through min(j * p_i, that value).
    order, s = _sorted(p)
    m = p.shape[1]
    adjusted = s.copy()
    for j in range(m, 1, -1):
        largest = s[:, m - j :]
        simes = np.min(j * largest / np.arange(1, j + 1), axis=1)[:, None]
        adjusted[:, m - j :] = np.maximum(adjusted[:, m - j :], simes)
        adjusted[:, : m - j] = np.maximum(adjusted[:, : m - j],
                                          np.minimum(j * s[:, : m - j], simes))
    return _unsort(adjusted, order)


def _step_up_fdr(p: np.ndarray, factor: float) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    scaled = factor * m * s / np.arange(1, m + 1)
    stepped = np.minimum.accumulate(scaled[:, ::-1], axis=1)[:, ::-1]
    return _unsort(stepped, order)


def _benjamini_hochberg(p: np.ndarray) -> np.ndarray:
    return _step_up_fdr(p, 1.0)


def _benjamini_yekutieli(p: np.ndarray) -> np.ndarray:
    return _step_up_fdr(p, float(np.sum(1.0 / np.arange(1, p.shape[1] + 1))))


def _fixed_sequence(p: np.ndarray) -> np.ndarray:
    # Hypotheses are tested in the given order at the full alpha, stopping at the first that
    # is not rejected; the adjusted p-value is the running maximum in that order (Maurer,
    # Hothorn and Lehmacher 1995; Westfall and Krishen, J Stat Plan Inference 2001).
    return np.maximum.accumulate(p, axis=1)


_ADJUSTERS: dict[str, Adjuster] = {
    "none": _none,
    "bonferroni": _bonferroni,
    "sidak": _sidak,
    "holm": _holm,
    "hochberg": _hochberg,
    "hommel": _hommel,
    "fixed-sequence": _fixed_sequence,
    "benjamini-hochberg": _benjamini_hochberg,
    "benjamini-yekutieli": _benjamini_yekutieli,
}

#: The adjustment methods :func:`adjust` knows, by their plan names.
ADJUSTMENT_METHODS: frozenset[str] = frozenset(_ADJUSTERS)


def adjust(p_values: Sequence[float], method: str) -> list[float]:
    """Adjusted p-values in input order, capped at 1.

    Methods: ``none``; ``bonferroni`` (m·p); ``sidak`` (1 − (1 − p)^m); ``holm`` (step-down,
    running maximum of (m − i + 1)·p(i)); ``hochberg`` (step-up, running minimum of the same
    from the largest p); ``hommel``; ``benjamini-hochberg`` (running minimum of m·p(i)/i from
    the largest p) and ``benjamini-yekutieli`` (the same times the sum of 1/i, for any
    dependence). Empty input gives []. Raises ValueError for an unknown method or a p-value
    that is not a number in [0, 1].

    References
    ----------
    Dunn OJ. Multiple comparisons among means. JASA 1961;56:52–64 (Bonferroni).
    Šidák Z. Rectangular confidence regions for the means of multivariate normal
    distributions. JASA 1967;62:626–633.
    Holm S. A simple sequentially rejective multiple test procedure. Scandinavian Journal of
    Statistics 1979;6:65–70.
    Hochberg Y. A sharper Bonferroni procedure for multiple tests of significance. Biometrika
    1988;75:800–802.
    Hommel G. A stagewise rejective multiple test procedure based on a modified Bonferroni
    test. Biometrika 1988;75:383–386.
    Wright SP. Adjusted p-values for simultaneous inference. Biometrics 1992;48:1005–1013.
    Benjamini Y, Hochberg Y. Controlling the false discovery rate. JRSS B 1995;57:289–300.
    Benjamini Y, Yekutieli D. The control of the false discovery rate in multiple testing
    under dependency. Annals of Statistics 2001;29:1165–1188.
    """
    if not isinstance(method, str) or method not in _ADJUSTERS:
        known = ", ".join(sorted(ADJUSTMENT_METHODS))
        raise ValueError(f"{method!r} is not a known adjustment method (known: {known})")
    if isinstance(p_values, (str, bytes)):
        raise ValueError("p_values must be a sequence of numbers")  # noqa: TRY004 (the interface raises ValueError)
    values = list(p_values)
    for i, value in enumerate(values):
        if isinstance(value, bool) or not isinstance(value, Real):
            raise ValueError(f"p_values[{i}] must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
        if math.isnan(value) or not 0.0 <= value <= 1.0:
            raise ValueError(f"p_values[{i}] must be in [0, 1], got {value!r}")
    if not values:
        return []
    return [float(v) for v in adjust_many(np.asarray([values], dtype=float), method)[0]]


def adjust_many(p: np.ndarray, method: str) -> np.ndarray:
    """:func:`adjust` on each row of an array (one family per row, the hypotheses in columns,
    in plan order), capped at 1: the array kernel of which :func:`adjust` is the one-row case.

    The p-values are not validated (the caller's are p-values by construction; a nan stays
    nan). Raises ValueError for an unknown method.
    """
    if method not in _ADJUSTERS:
        raise ValueError(f"{method!r} is not a known adjustment method")
    p = np.asarray(p, dtype=float)
    if p.shape[1] == 0:
        return p.copy()
    return np.minimum(_ADJUSTERS[method](p), 1.0)
