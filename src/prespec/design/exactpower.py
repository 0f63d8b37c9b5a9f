"""Exact power of Fisher's exact test and the exact binomial test, by enumeration.

The p-values are those of the tests' array kernels in ``prespec.stats`` (Fisher's
:func:`~prespec.stats.fisherarray.fisher_p_values`, of which the run's ``fisher_exact`` is the
one-table case; :func:`~prespec.stats.single.binomial_exact_all`), on every outcome at once, so
the same code serves the simulation of whole trials.
The power is the sum, over every outcome, of its probability under the assumed rates times
whether the test rejects it. Outcomes beyond 1e-12 of each tail of each group's binomial law
are left out (their total probability, below 4e-12, is a bound on the error).

Exact power is saw-toothed in n: it can fall when n grows by one, because the discrete
rejection region changes. :func:`fisher_n` and :func:`binomial_n` report the smallest n whose
power reaches the target, and where the power dips below it again at larger n.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from prespec.stats._lazy import scipy_stats
from prespec.stats.fisherarray import fisher_p_values
from prespec.stats.proportions import FISHER_TIE_TOLERANCE
from prespec.stats.single import binomial_exact_all

#: Probability left out of each tail of each group's binomial law in an enumeration.
TAIL = 1e-12


class FisherTables:
    """Fisher's p-values for tables of two groups of fixed sizes, computed once per total.

    ``p_values(x1, x2)`` takes arrays of events and returns the p-value of each table; the rows
    of totals seen so far are kept (at most ``keep`` values) for later calls.
    """

    def __init__(self, n1: int, n2: int, alternative: str, keep: int = 2_000_000) -> None:
        self.n1, self.n2, self.alternative = n1, n2, alternative
        self._rows: dict[int, tuple[int, np.ndarray]] = {}
        self._kept, self._keep = 0, keep

    def _compute(self, totals: list[int]) -> list[tuple[int, np.ndarray]]:
        """The rows of these totals, computed in one call of the Fisher kernel (for a total t
        the tables x1 = lowest, …, min(t, n1), x2 = t − x1), and kept while at most ``keep``
        values are kept (all rows are forgotten when one more would pass it)."""
        n1, n2 = self.n1, self.n2
        lows = [max(0, t - n2) for t in totals]
        sizes = [min(t, n1) - low + 1 for t, low in zip(totals, lows, strict=True)]
        x1 = np.concatenate([np.arange(low, low + size)
                             for low, size in zip(lows, sizes, strict=True)])
        x2 = np.repeat(np.asarray(totals, dtype=np.int64), sizes) - x1
        p = fisher_p_values(x1, n1 - x1, x2, n2 - x2, alternative=self.alternative,
                            tie_tolerance=FISHER_TIE_TOLERANCE)
        rows = list(zip(lows, np.split(p, np.cumsum(sizes)[:-1]), strict=True))
        for t, got in zip(totals, rows, strict=True):
            if self._kept + got[1].size > self._keep:
                self._rows.clear()
                self._kept = 0
            self._rows[t] = got
            self._kept += got[1].size
        return rows

    def row(self, t: int) -> tuple[int, np.ndarray]:
        """(lowest x1, p-values for x1 = lowest, …, min(t, n1)) of the tables with t events."""
        got = self._rows.get(t)
        return got if got is not None else self._compute([t])[0]

    def p_values(self, x1: np.ndarray, x2: np.ndarray) -> np.ndarray:
        x1 = np.asarray(x1, dtype=np.int64)
        t = x1 + np.asarray(x2, dtype=np.int64)
        out = np.empty(x1.shape, dtype=float)
        totals, inverse = np.unique(t, return_inverse=True)
        inverse = inverse.reshape(t.shape)
        rows: dict[int, tuple[int, np.ndarray]] = {}
        missing = []
        for value in totals.tolist():
            got = self._rows.get(int(value))
            if got is None:
                missing.append(int(value))
            else:
                rows[int(value)] = got
        if missing:
            rows.update(zip(missing, self._compute(missing), strict=True))
        for i, value in enumerate(totals.tolist()):
            low, p = rows[int(value)]
            where = inverse == i
            out[where] = p[x1[where] - low]
        return out


def _range(n: int, p: float) -> np.ndarray:
    law = scipy_stats().binom(n, p)
    low = int(max(0, law.ppf(TAIL) - 1))
    high = int(min(n, law.isf(TAIL) + 1))
    return np.arange(low, high + 1)


def fisher_power(p1: float, p2: float, n1: int, n2: int, level: float, alternative: str,
                 tables: FisherTables | None = None) -> float:
    """Exact power of Fisher's exact test at ``level`` (reject when p <= level): the sum over
    the tables (x1, x2) of Bin(x1; n1, p1)·Bin(x2; n2, p2) where the test rejects."""
    tables = tables or FisherTables(n1, n2, alternative)
    x1, x2 = _range(n1, p1), _range(n2, p2)
    grid1, grid2 = np.meshgrid(x1, x2, indexing="ij")
    reject = tables.p_values(grid1, grid2) <= level
    binom = scipy_stats().binom
    weight = np.outer(binom.pmf(x1, n1, p1), binom.pmf(x2, n2, p2))
    return float(np.sum(weight[reject]))


def binomial_power(p: float, null_rate: float, n: int, level: float, alternative: str) -> float:
    """Exact power of the exact binomial test of p = null_rate at ``level``: Σ Bin(x; n, p) over
    the outcomes x it rejects."""
    reject = binomial_exact_all(n, null_rate, alternative) <= level
    return float(np.sum(scipy_stats().binom.pmf(np.arange(n + 1), n, p)[reject]))


@dataclass(frozen=True)
class ExactSize:
    """The smallest n (per group, in order) whose exact power reaches the target, its power,
    and the saw-tooth seen above it: the larger sizes checked whose power falls below the
    target again, and the largest size checked."""

    n: tuple[int, ...]
    power: float
    dips: tuple[int, ...]
    checked_to: int
    start: int


def _scan(power_at: Callable[[int], float], target: float, start: int, check: int,
          limit: int = 100_000) -> ExactSize:
    """Scan m upward from ``start`` (where the power is below the target) to the first m
    reaching it, then ``check`` sizes more for dips below the target."""
    m = start
    while True:
        got = power_at(m)
        if got >= target:
            break
        m += 1
        if m > limit:
            raise ValueError(f"no size up to {limit} reaches the power")
    dips = tuple(k for k in range(m + 1, m + check + 1) if power_at(k) < target)
    return ExactSize((m,), got, dips, m + check, start)


def _start_below(power_at: Callable[[int], float], target: float, guess: int) -> int:
    """A size at or below ``guess`` whose power is below the target (stepping down by 10%)."""
    m = max(1, guess)
    while m > 1 and power_at(m) >= target:
        m = max(1, int(m * 0.9))
    return m


def fisher_n(p1: float, p2: float, level: float, target: float, alternative: str, *,
             ratio: float = 1.0, guess: int, check: int = 10) -> ExactSize:
    """The smallest n1 (n2 = ⌈ratio·n1⌉) reached by scanning upward from a size below the
    target power, ``guess`` being a first estimate (the continuity-corrected normal
    approximation is close: Casagrande, Pike and Smith 1978)."""

    def power_at(m: int) -> float:
        return fisher_power(p1, p2, m, max(1, math.ceil(ratio * m - 1e-9)), level, alternative)

    start = _start_below(power_at, target, int(0.95 * guess))
    found = _scan(power_at, target, start, check)
    n2 = max(1, math.ceil(ratio * found.n[0] - 1e-9))
    return ExactSize((found.n[0], n2), found.power, found.dips, found.checked_to, start)


def binomial_n(p: float, null_rate: float, level: float, target: float, alternative: str, *,
               check: int | None = None, guess: int | None = None) -> ExactSize:
    """The smallest n whose exact binomial power reaches the target, scanning from n = 1 (from
    a size below the target at or under 90% of ``guess``, the normal approximation, when that
    is above 400); then ``check`` (default: a fifth of n, at least 10) larger sizes for
    dips."""

    def power_at(m: int) -> float:
        return binomial_power(p, null_rate, m, level, alternative)

    start = 1 if guess is None or guess <= 400 else \
        _start_below(power_at, target, int(0.9 * guess))
    found = _scan(power_at, target, start, 0)
    more = check if check is not None else max(10, found.n[0] // 5)
    dips = tuple(k for k in range(found.n[0] + 1, found.n[0] + more + 1)
                 if power_at(k) < target)
    return ExactSize(found.n, found.power, dips, found.n[0] + more, start)


def saw_tooth(found: ExactSize) -> str:
    """The exact search in words: where it started, and the dips above the size found."""
    where = "from n = 1" if found.start == 1 else \
        f"upward from n = {found.start}, where the power is below the target"
    text = f"exact power searched {where}; n = {found.n[0]} is the first to reach the target"
    if found.dips:
        shown = ", ".join(map(str, found.dips[:8])) + (" …" if len(found.dips) > 8 else "")
        return (text + f"; it falls below the target again at n = {shown} and stays at or "
                f"above it from n = {found.dips[-1] + 1} to {found.checked_to}, the largest "
                "checked (exact power is saw-toothed in n)")
    return text + f"; no larger n up to {found.checked_to} falls below it"
