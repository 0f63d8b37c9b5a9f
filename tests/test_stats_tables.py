"""Unit tests of prespec.stats.tables: expected counts and their validation."""

from __future__ import annotations

import numpy as np
import pytest

from prespec.stats import expected_counts, smallest_expected


def test_three_groups_by_hand() -> None:
    # common practice, row x column / total: events [2, 5, 8] of [10, 10, 20] -> 15 events and
    # 25 non-events of 40; row 1: 10*15/40 = 3.75, 10*25/40 = 6.25; row 3: 20*15/40 = 7.5.
    expected = expected_counts([2, 5, 8], [10, 10, 20])
    np.testing.assert_allclose(expected, [[3.75, 6.25], [3.75, 6.25], [7.5, 12.5]], rtol=1e-12)
    assert smallest_expected([2, 5, 8], [10, 10, 20]) == 3.75
    assert isinstance(smallest_expected([2, 5, 8], [10, 10, 20]), float)


def test_margins_are_kept() -> None:
    expected = expected_counts([3, 0, 7], [9, 4, 12])
    np.testing.assert_allclose(expected.sum(axis=1), [9, 4, 12], rtol=1e-12)
    np.testing.assert_allclose(expected.sum(axis=0), [10, 15], rtol=1e-12)


def test_zero_column_margin_gives_zero_expected() -> None:
    np.testing.assert_array_equal(expected_counts([0, 0], [3, 5]), [[0, 3], [0, 5]])
    assert smallest_expected([3, 5], [3, 5]) == 0.0


def test_single_participant_groups() -> None:
    np.testing.assert_allclose(expected_counts([1, 0], [1, 1]), [[0.5, 0.5], [0.5, 0.5]])


def test_numpy_integers_are_accepted() -> None:
    events = np.array([4, 6], dtype=np.int64)
    totals = np.array([10, 10], dtype=np.int64)
    np.testing.assert_allclose(expected_counts(events, totals), [[5, 5], [5, 5]])


@pytest.mark.parametrize(
    "events, totals, message",
    [
        ([1], [2], "at least 2 groups"),
        ([], [], "at least 2 groups"),
        ([1, 2], [3], "differ in length"),
        ([1, 2], [3, 1], r"events\[1\] \(2\) must not exceed totals\[1\] \(1\)"),
        ([-1, 2], [3, 4], r"events\[0\] must be >= 0"),
        ([1, 2], [0, 4], r"totals\[0\] must be >= 1"),
        ([1.0, 2], [3, 4], r"events\[0\] must be an integer"),
        ([1, 2], [3, 4.5], r"totals\[1\] must be an integer"),
        ([True, 2], [3, 4], r"events\[0\] must be an integer"),
        (["1", 2], [3, 4], r"events\[0\] must be an integer"),
        ([1, None], [3, 4], r"events\[1\] must be an integer"),
        ("12", "34", "sequences of integers"),
        (5, 6, "sequences of integers"),
    ],
)
def test_bad_tables_are_refused(events: object, totals: object, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        expected_counts(events, totals)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=message):
        smallest_expected(events, totals)  # type: ignore[arg-type]
