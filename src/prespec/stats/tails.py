"""Tail probabilities of the binomial law that keep their relative precision.

scipy's tail functions lose digits at the extremes: ``binom.sf`` returns 0 for a tail of
2.5e-277 (682 or more of 713 against 1/3). Here a tail is the sum of its point probabilities,
summed from the observed value away from the mode (so the terms fall and the sum stops once they
no longer count), and a tail that holds the mode is one minus the opposite tail (then at least
about a half, so the subtraction costs nothing). The point probabilities are scipy's
``binom.pmf`` (computed without logarithms of large factorials, to full relative precision).
The hypergeometric tails of Fisher's exact test are those of
:mod:`prespec.stats.fisherarray` (exact ratios in extended precision).

References
----------
Loader C. Fast and accurate computation of binomial probabilities. 2000 (the saddle-point
binomial).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from prespec.stats._lazy import scipy_stats

#: Terms are summed in blocks of this many.
_BLOCK = 4096
#: A tail stops once a block's last term is below this fraction of the sum so far.
_NEGLIGIBLE = 1e-20


def binomial_pmf(k: np.ndarray, n: int, p: float) -> np.ndarray:
    """P(X = k) for X ~ Binomial(n, p), k an integer array."""
    return np.asarray(scipy_stats().binom.pmf(k, n, p), dtype=float)


def _away_from_mode(pmf: Callable[[np.ndarray], np.ndarray], start: int, stop: int,
                    step: int) -> float:
    """Σ pmf(j) for j from start to stop inclusive in direction step (±1), the terms falling
    (start is on the far side of the mode); stops when the rest is negligible."""
    total = 0.0
    position = start
    while (stop - position) * step >= 0:
        end = position + step * _BLOCK
        end = min(end, stop + 1) if step > 0 else max(end, stop - 1)
        terms = pmf(np.arange(position, end, step))
        total += float(np.sum(terms))
        if terms.size == 0 or terms[-1] <= total * _NEGLIGIBLE:
            break
        position = end
    return total


def _tail(pmf: Callable[[np.ndarray], np.ndarray], low: int, high: int, mode: int, x: int,
          upper: bool) -> float:
    """P(X >= x) (upper) or P(X <= x) on the support [low, high] of a unimodal law."""
    if upper:
        if x <= low:
            return 1.0
        if x > high:
            return 0.0
        if x > mode:
            return _away_from_mode(pmf, x, high, 1)
        return max(0.0, 1.0 - _away_from_mode(pmf, x - 1, low, -1))
    if x >= high:
        return 1.0
    if x < low:
        return 0.0
    if x < mode:
        return _away_from_mode(pmf, x, low, -1)
    return max(0.0, 1.0 - _away_from_mode(pmf, x + 1, high, 1))


def binomial_tail(x: int, n: int, p: float, *, upper: bool) -> float:
    """P(X >= x) (upper) or P(X <= x), X ~ Binomial(n, p), 0 < p < 1."""
    mode = min(n, int((n + 1) * p))
    return _tail(lambda k: binomial_pmf(k, n, p), 0, n, mode, x, upper)
