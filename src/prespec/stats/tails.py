"""Tail probabilities of the binomial and hypergeometric laws that keep their relative precision.

scipy's tail functions lose digits at the extremes: ``binom.sf`` returns 0 for a tail of
2.5e-277 (682 or more of 713 against 1/3), and ``hypergeom.sf`` carries a relative error near
1e-10 once the table total passes 1e5. Here a tail is the sum of its point probabilities,
summed from the observed value away from the mode (so the terms fall and the sum stops once they
no longer count), and a tail that holds the mode is one minus the opposite tail (then at least
about a half, so the subtraction costs nothing).

The binomial point probabilities are scipy's ``binom.pmf`` (computed without logarithms of
large factorials, to full relative precision). The hypergeometric one is the product of three
of them with p = n/N (Loader's identity, exact in algebra for every p in (0, 1)):
P(X = k) = b(k; K, p)·b(n − k; N − K, p)/b(n; N, p), K events among N, n drawn.

References
----------
Loader C. Fast and accurate computation of binomial probabilities. 2000 (the saddle-point
binomial and the hypergeometric as a ratio of binomials).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy import stats

#: Terms are summed in blocks of this many.
_BLOCK = 4096
#: A tail stops once a block's last term is below this fraction of the sum so far.
_NEGLIGIBLE = 1e-20


def binomial_pmf(k: np.ndarray, n: int, p: float) -> np.ndarray:
    """P(X = k) for X ~ Binomial(n, p), k an integer array."""
    return np.asarray(stats.binom.pmf(k, n, p), dtype=float)


def hypergeometric_pmf(k: np.ndarray, total: int, events: int, drawn: int) -> np.ndarray:
    """P(X = k) for X the events among ``drawn`` of ``total`` units of which ``events`` are
    events, as b(k; events, p)·b(drawn − k; total − events, p)/b(drawn; total, p), p =
    drawn/total (0 outside the support)."""
    p = drawn / total
    top = stats.binom.pmf(k, events, p) * stats.binom.pmf(drawn - k, total - events, p)
    return np.asarray(top / stats.binom.pmf(drawn, total, p), dtype=float)


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


def hypergeometric_tail(x: int, total: int, events: int, drawn: int, *, upper: bool) -> float:
    """P(X >= x) (upper) or P(X <= x) for the hypergeometric law of ``hypergeometric_pmf``."""
    low, high = max(0, drawn - (total - events)), min(drawn, events)
    if low == high:
        return 1.0 if (x <= low if upper else x >= high) else 0.0
    mode = min(high, max(low, (events + 1) * (drawn + 1) // (total + 2)))
    return _tail(lambda k: hypergeometric_pmf(k, total, events, drawn), low, high, mode, x,
                 upper)
