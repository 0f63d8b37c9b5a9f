"""The Cochran–Armitage test for a linear trend in proportions across ordered groups."""

from __future__ import annotations

import math
from collections.abc import Sequence
from numbers import Real

import numpy as np

from prespec.stats import _checks
from prespec.stats._normal import normal_p_values
from prespec.stats.results import TestResult


def _scores(scores: Sequence[object] | None, k: int) -> np.ndarray:
    """Validate the group scores: k distinct finite numbers (default 0, 1, …, k − 1)."""
    if scores is None:
        return np.arange(k, dtype=float)
    if isinstance(scores, (str, bytes)) or not isinstance(scores, Sequence):
        raise ValueError(f"scores must be a list of {k} numbers, got {scores!r}")  # noqa: TRY004 (the interface raises ValueError)
    if len(scores) != k:
        raise ValueError(f"scores must give one number per group ({k}), got {len(scores)}")
    for i, s in enumerate(scores):
        if isinstance(s, bool) or not isinstance(s, Real) or not math.isfinite(float(s)):
            raise ValueError(f"scores[{i}] must be a finite number, got {s!r}")
    values = np.asarray([float(s) for s in scores])
    if np.unique(values).size != k:
        raise ValueError(f"scores must be distinct, got {[float(s) for s in scores]}")
    return values


def cochran_armitage(
    events: Sequence[int],
    totals: Sequence[int],
    *,
    scores: Sequence[float] | None = None,
    alternative: str = "two-sided",
) -> TestResult:
    """The Cochran–Armitage test for trend in k ordered proportions, as a signed z.

    With group scores s_i (default 0, 1, …, k − 1), events x_i of n_i, N = Σ n_i and the pooled
    proportion p̄ = Σ x_i / N,

        z = Σ s_i (x_i − n_i p̄) / sqrt(p̄(1 − p̄) [Σ n_i s_i² − (Σ n_i s_i)² / N]),

    Armitage's statistic with the N (not N − 1) denominator, referred to the standard normal.
    z > 0 when the proportion rises with the score; ``greater`` is the alternative of a rising
    trend, ``less`` of a falling one. ``df`` is ``None``. With no events, or only events, the
    variance is 0 and z and p are ``nan``. For k = 2 and scores (0, 1) it is the pooled
    two-proportion z of the second group against the first. z² is N/(N − 1) times the
    linear-by-linear association statistic M² = (N − 1) r².

    References
    ----------
    Cochran WG. Some methods for strengthening the common χ² tests. Biometrics
    1954;10:417–451.
    Armitage P. Tests for linear trends in proportions and frequencies. Biometrics
    1955;11:375–386.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3 (the linear trend
    test for a k×2 table).
    """
    ev, tot = _checks.table(events, totals)
    alt = _checks.alternative(alternative)
    s = _scores(scores, len(ev))
    z, p = cochran_armitage_many(np.asarray([ev]), np.asarray(tot), s, alt)
    return TestResult("cochran-armitage-trend", float(z[0]), None, float(p[0]), alt)


def cochran_armitage_many(events: np.ndarray, totals: np.ndarray, scores: np.ndarray,
                          alternative: str) -> tuple[np.ndarray, np.ndarray]:
    """(z, p) of :func:`cochran_armitage` for each table: ``events`` T × k, ``totals`` and
    ``scores`` k; ``nan`` where the variance is 0. Not validated; the scalar is its one-table
    case."""
    s = np.asarray(scores, dtype=float)
    x = np.asarray(events).astype(float)
    n = np.asarray(totals).astype(float)
    population = float(n.sum())
    pooled = x.sum(axis=1) / population
    spread = float(np.sum(n * s * s) - np.sum(n * s) ** 2 / population)
    variance = pooled * (1.0 - pooled) * spread
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0.0,
                     (s[None, :] * (x - n[None, :] * pooled[:, None])).sum(axis=1)
                     / np.sqrt(variance), np.nan)
    return z, normal_p_values(z, alternative)
