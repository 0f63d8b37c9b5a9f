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
    """The smallest expected count of the k×2 table (see :func:`expected_counts`): the
    one-table case of :func:`smallest_expected_many`."""
    ev, tot = _checks.table(events, totals)
    return float(smallest_expected_many(np.asarray([ev]), np.asarray(tot))[0])


def smallest_expected_many(events: np.ndarray, totals: np.ndarray) -> np.ndarray:
    """The smallest expected count of each k×2 table: ``events`` holds one table per row
    (T × k), every table with the group ``totals`` (k).

    The smallest of the cells row × column / grand total is the smallest row total times the
    smaller column total over the grand total (each product and quotient rounds monotonically,
    so this is exactly the smallest of the cells of :func:`expected_counts`). Not validated.
    """
    events = np.asarray(events)
    totals = np.asarray(totals)
    grand = float(totals.sum())
    column_events = events.sum(axis=1).astype(float)
    column_other = grand - column_events
    return float(totals.min()) * np.minimum(column_events, column_other) / grand
