"""Expected counts of a k×2 table of events and non-events under equal proportions."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from prespec.stats import _checks


def expected_counts(events: Sequence[int], totals: Sequence[int]) -> np.ndarray:
    """Expected counts under equal proportions, shape (k, 2): events, non-events.

    Each cell is row total × column total / grand total, the expected frequency of the
    chi-square test of independence (Pearson 1900; Agresti, *Categorical Data Analysis*, 3rd
    ed., 2013, chapter 3). A zero column margin gives a column of zeros.

    Raises ValueError unless there are k >= 2 groups of integers with 0 <= events <= totals
    and totals >= 1.
    """
    ev, tot = _checks.table(events, totals)
    observed = np.column_stack([np.asarray(ev, float), np.asarray(tot, float) - ev])
    rows = observed.sum(axis=1)
    columns = observed.sum(axis=0)
    return np.outer(rows, columns) / observed.sum()


def smallest_expected(events: Sequence[int], totals: Sequence[int]) -> float:
    """The smallest expected count of the k×2 table (see :func:`expected_counts`)."""
    return float(expected_counts(events, totals).min())
