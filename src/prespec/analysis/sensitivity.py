"""Sensitivity analyses of missing outcomes: worst case, best case and the tipping point.

They are pre-specified per hypothesis (``sensitivity:``) and reported beside the primary
result, never instead of it. "Missing" for a group is its blank and unmapped outcomes among
the analysed rows, whatever the ``missing`` rule did with them in the primary analysis; the
complete-case counts are the primary ones less what the rule imputed.

- **Worst case / best case**: every missing outcome of the first group counted as the
  unfavourable value and every one of the second group as the favourable value (worst case),
  or the reverse (best case); the hypothesis's own test and estimate then run on that table.
- **Tipping point**: for every number i = 0…m1 of events among the first group's missing and
  j = 0…m2 among the second's, the hypothesis's test on the completed table, its p-value and
  its decision at the nominal alpha. The grid is computed on whole arrays at once, by the
  tests' array kernels in ``prespec.stats`` (for Fisher's exact test one hypergeometric law
  per anti-diagonal: cells with the same number of events share it).

References
----------
Gould AL. A new approach to the analysis of clinical drug trials with withdrawals.
Biometrics 1980;36:721–727 (bounds by extreme imputation).
Yan X, Lee S, Li N. Missing data handling methods in medical device clinical trials. Journal
of Biopharmaceutical Statistics 2009;19:1085–1098 (the tipping-point analysis).
ICH E9(R1). Addendum on estimands and sensitivity analysis in clinical trials, 2019.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from prespec.analysis import decision
from prespec.data import GroupCounts
from prespec.plan import vocabulary
from prespec.stats.fisherarray import fisher_p_values
from prespec.stats.margins import (
    MarginStatistic,
    farrington_manning_z_many,
    margin_p_values,
    wald_margin_z_many,
)
from prespec.stats.proportions import (
    FISHER_TIE_TOLERANCE,
    likelihood_ratio_many,
    pearson_many,
    two_proportion_z_many,
)
from prespec.stats.tables import smallest_expected_many

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis

#: Tests whose tipping-point grid is computed here, on arrays (see the module docstring).
GRID_TESTS: frozenset[str] = frozenset({
    "pearson-chi-square", "likelihood-ratio", "two-proportion-z", "fisher-exact",
    "farrington-manning",
})
#: Tests refused for a tipping point by the plan rules, and why.
NO_GRID_TESTS: dict[str, str] = vocabulary.NO_TIPPING_POINT_TESTS


@dataclass(frozen=True)
class Observed:
    """One group's complete-case counts and its number of missing outcomes."""

    group: str
    events: int
    total: int
    missing: int


def observed(counts: GroupCounts, missing_rule: str) -> Observed:
    """The complete-case events and total of a group: the primary ones less what the rule
    imputed (``event`` added the missing as events, ``no-event`` as non-events)."""
    missing = counts.blank + counts.unmapped
    events, total = counts.events, counts.total
    if missing_rule == "event":
        events, total = events - missing, total - missing
    elif missing_rule == "no-event":
        total -= missing
    return Observed(counts.group, events, total, missing)


def extreme_imputation(analysis: str, favourable: str, groups: list[str]) -> dict[str, str]:
    """What the missing of each group count as: worst case = the first group's missing
    unfavourable, the second's favourable; best case the reverse."""
    unfavourable = "no-event" if favourable == "event" else "event"
    if analysis == "worst-case":
        return {groups[0]: unfavourable, groups[1]: favourable}
    if analysis == "best-case":
        return {groups[0]: favourable, groups[1]: unfavourable}
    raise ValueError(f"not an extreme-case analysis: {analysis!r}")


def impute(part: Observed, value: str) -> tuple[int, int]:
    """Events and total when every missing outcome of the group counts as ``value``."""
    return part.events + (part.missing if value == "event" else 0), part.total + part.missing


# --- the p-values on the grid: x1, x2 broadcastable integer arrays, n1, n2 fixed totals; each
# test is its array kernel in ``prespec.stats`` (of which the primary analysis's function is
# the one-table case, or the array twin held to it by a test) ---

def _as_tables(x1: np.ndarray, x2: np.ndarray) -> tuple[np.ndarray, tuple[int, ...]]:
    """The broadcast grid as one table per row (events T × 2), and the grid's shape."""
    b1, b2 = np.broadcast_arrays(x1, x2)
    return np.stack([b1.ravel(), b2.ravel()], axis=1), b1.shape


def _pearson(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Hypothesis) -> np.ndarray:
    events, shape = _as_tables(x1, x2)
    _, p = pearson_many(events, np.array([n1, n2]), continuity=bool(hyp.continuity),
                        alternative=hyp.alternative)
    return p.reshape(shape)


def _likelihood_ratio(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int,
                      hyp: Any) -> np.ndarray:
    events, shape = _as_tables(x1, x2)
    return likelihood_ratio_many(events, np.array([n1, n2]))[1].reshape(shape)


def _z_pooled(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Hypothesis) -> np.ndarray:
    if hyp.comparison != "superiority":
        return _margin(wald_margin_z_many)(x1, n1, x2, n2, hyp)
    events, shape = _as_tables(x1, x2)
    return two_proportion_z_many(events, np.array([n1, n2]), hyp.alternative)[1].reshape(shape)


def _fisher(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Hypothesis) -> np.ndarray:
    x1, x2 = np.broadcast_arrays(x1, x2)
    return fisher_p_values(x1, n1 - x1, x2, n2 - x2, alternative=hyp.alternative,
                           tie_tolerance=FISHER_TIE_TOLERANCE)


def _margin(statistic: MarginStatistic) -> Callable[..., np.ndarray]:
    """A test at the margin: one-sided for non-inferiority, two one-sided tests (the larger
    p-value, nan if either is) for equivalence, as ``methods._margin_test``."""

    def run(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Hypothesis) -> np.ndarray:
        return margin_p_values(statistic, x1, n1, x2, n2, comparison=hyp.comparison,
                               margin=hyp.margin, measure=hyp.measure,
                               alternative=hyp.alternative)

    return run


GridTest = Callable[[np.ndarray, int, np.ndarray, int, Any], np.ndarray]

GRID: dict[str, GridTest] = {
    "pearson-chi-square": _pearson,
    "likelihood-ratio": _likelihood_ratio,
    "two-proportion-z": _z_pooled,
    "fisher-exact": _fisher,
    "farrington-manning": _margin(farrington_manning_z_many),
}
assert set(GRID) == GRID_TESTS


def grid_p_values(test: str, x1: Any, n1: int, x2: Any, n2: int, hyp: Any) -> np.ndarray:
    """The p-values of ``test`` on the tables (x1 of n1, x2 of n2), x1 and x2 broadcast.

    ``hyp`` gives the test's options: ``alternative``, ``continuity``, ``comparison``,
    ``margin`` and ``measure``. A p-value the test does not define is ``nan``.
    """
    if test not in GRID:
        raise ValueError(f"no tipping-point grid for {test!r}: {NO_GRID_TESTS.get(test, '')}")
    x1 = np.asarray(x1, dtype=np.int64)
    x2 = np.asarray(x2, dtype=np.int64)
    return np.asarray(GRID[test](x1, int(n1), x2, int(n2), hyp), dtype=float)


def smallest_expected_grid(x1: Any, n1: int, x2: Any, n2: int) -> np.ndarray:
    """The smallest expected count of each 2×2 table (``stats.tables.smallest_expected_many``),
    in the grid's shape."""
    events, shape = _as_tables(np.asarray(x1), np.asarray(x2))
    return smallest_expected_many(events, np.array([n1, n2])).reshape(shape)


@dataclass(frozen=True)
class TippingPoint:
    """The tipping-point grid of one comparison of two groups.

    ``p_values[i, j]`` is the p-value with i events among the first group's missing and j
    among the second's (nan where not computable); ``reject`` is ``p <= alpha``; ``switched``
    marks the cells where a pre-specified sparse switch chose the other test.
    """

    groups: tuple[str, str]
    missing: tuple[int, int]
    events: tuple[int, int]
    totals: tuple[int, int]
    alpha: float
    test: str
    p_values: np.ndarray
    reject: np.ndarray
    switched: np.ndarray
    observed_point: tuple[float, float] | None


def tipping_point(a: Observed, b: Observed, hyp: Hypothesis, alpha: float) -> TippingPoint:
    """The p-value and decision at ``alpha`` of the hypothesis's test at every completion.

    Every table has the full totals n = complete + missing; x1 = e1 + i, x2 = e2 + j. The
    plan's rule (``decision``) decides each cell as it decides the run: the pre-specified
    sparse switch on the cell's smallest expected count, the test it chooses, and the
    decision at the nominal ``alpha``.
    """
    n1, n2 = a.total + a.missing, b.total + b.missing
    shape = (a.missing + 1, b.missing + 1)
    i, j = np.indices(shape)
    x1, x2 = a.events + i, b.events + j
    switched = np.zeros(shape, dtype=bool)
    if n1 == 0 or n2 == 0:
        p = np.full(shape, np.nan)
    else:
        if decision.has_sparse_switch(hyp):
            switched = decision.sparse_fires(hyp, smallest_expected_grid(x1, n1, x2, n2))

        def p_of(test: str, where: np.ndarray) -> np.ndarray:
            return grid_p_values(test, x1[where], n1, x2[where], n2, hyp)

        p = decision.chosen_p_values(hyp, switched, p_of)
    reject = decision.rejects(p, alpha)
    point = None
    if a.total > 0 and b.total > 0:
        point = (a.missing * a.events / a.total, b.missing * b.events / b.total)
    return TippingPoint((a.group, b.group), (a.missing, b.missing), (a.events, b.events),
                        (a.total, b.total), alpha, hyp.test, p, reject, switched, point)


def boundary(p_values: np.ndarray, alpha: float, primary_rejects: bool) -> list[int | None]:
    """For each row i, the smallest j whose decision at ``alpha`` differs from the primary
    decision, or None; cells without a p-value decide nothing."""
    computable = ~np.isnan(p_values)
    flips = computable & ((np.where(computable, p_values, 1.0) <= alpha) != primary_rejects)
    first = np.argmax(flips, axis=1)
    return [int(f) if flips[r, f] else None for r, f in enumerate(first)]


def tipping_point_json(tp: TippingPoint, primary_rejects: bool | None) -> dict[str, Any]:
    """The ``tipping-point`` entry of results.json (see the results contract)."""
    compared = False if primary_rejects is None else primary_rejects
    computable = ~np.isnan(tp.p_values)
    changing = computable & (tp.reject != compared)
    entry: dict[str, Any] = {
        "analysis": "tipping-point",
        "groups": list(tp.groups),
        "missing": list(tp.missing),
        "complete": {"events": list(tp.events), "totals": list(tp.totals)},
        "alpha": tp.alpha,
        "test": tp.test,
        "p_values": [[None if math.isnan(v) else float(v) for v in row]
                     for row in tp.p_values.tolist()],
        "observed_point": None if tp.observed_point is None else list(tp.observed_point),
        "primary_rejects": primary_rejects,
        "cells_changing": int(changing.sum()),
        "boundary": [[i, j] for i, j in enumerate(boundary(tp.p_values, tp.alpha, compared))],
        "cells": int(tp.p_values.size),
        "cells_not_computable": int((~computable).sum()),
        "cells_switched": int(tp.switched.sum()),
    }
    return entry
