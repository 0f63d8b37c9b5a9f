"""Unit and property tests of prespec.stats.trend: validation, edges and symmetries."""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats.proportions import two_proportion_z
from prespec.stats.results import TestResult
from prespec.stats.trend import cochran_armitage


@st.composite
def ordered_groups(draw: st.DrawFn) -> tuple[list[int], list[int]]:
    totals = draw(st.lists(st.integers(1, 60), min_size=2, max_size=6))
    events = [draw(st.integers(0, n)) for n in totals]
    return events, totals


def test_result_is_plain_and_named_as_in_the_plan() -> None:
    result = cochran_armitage([2, 5, 9], [20, 20, 20])
    assert isinstance(result, TestResult)
    assert result.method == "cochran-armitage-trend"
    assert result.df is None and result.alternative == "two-sided"
    assert type(result.statistic) is float and type(result.p_value) is float
    json.dumps(result.__dict__)


# --- validation ------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "scores, message",
    [
        ([0, 1], "scores must give one number per group \\(3\\), got 2"),
        ([0, 1, 1], "scores must be distinct"),
        ([0, 1, math.nan], r"scores\[2\] must be a finite number"),
        ([0, 1, math.inf], r"scores\[2\] must be a finite number"),
        ([0, "1", 2], r"scores\[1\] must be a finite number"),
        ([0, True, 2], r"scores\[1\] must be a finite number"),
        ("012", "scores must be a list of 3 numbers"),
        (3, "scores must be a list of 3 numbers"),
    ],
)
def test_scores_are_validated(scores: object, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        cochran_armitage([1, 2, 3], [5, 5, 5], scores=scores)  # type: ignore[arg-type]


def test_counts_and_alternative_are_validated() -> None:
    with pytest.raises(ValueError, match="at least 2 groups"):
        cochran_armitage([1], [5])
    with pytest.raises(ValueError, match=r"events\[0\] \(6\) must not exceed totals\[0\] \(5\)"):
        cochran_armitage([6, 1], [5, 5])
    with pytest.raises(ValueError, match="alternative must be one of two-sided, greater, less"):
        cochran_armitage([1, 2], [5, 5], alternative="rising")


# --- edges -------------------------------------------------------------------------------------


@pytest.mark.parametrize("events, totals", [([0, 0, 0], [4, 5, 6]), ([4, 5, 6], [4, 5, 6])])
def test_no_events_or_all_events_is_nan(events: list[int], totals: list[int]) -> None:
    # p-bar(1 - p-bar) = 0: the variance is 0 and the statistic undefined
    for alternative in ("two-sided", "greater", "less"):
        result = cochran_armitage(events, totals, alternative=alternative)
        assert math.isnan(result.statistic) and math.isnan(result.p_value)  # type: ignore[arg-type]


def test_single_participant_groups() -> None:
    # events [0, 1] of [1, 1], scores (0, 1): p-bar = 1/2, sum s(x - n p-bar) = 1/2,
    # variance 1/4 * (1 - 1/2) = 1/8, so z = (1/2) / sqrt(1/8) = sqrt(2) # by hand
    result = cochran_armitage([0, 1], [1, 1])
    assert result.statistic == pytest.approx(math.sqrt(2.0), rel=1e-12)


def test_flat_proportions_give_zero() -> None:
    result = cochran_armitage([2, 4, 6], [10, 20, 30])
    assert result.statistic == pytest.approx(0.0, abs=1e-12)
    assert result.p_value == pytest.approx(1.0)


def test_directions() -> None:
    rising = cochran_armitage([2, 6, 12], [20, 20, 20], alternative="greater")
    assert rising.statistic > 0 and rising.p_value < 0.01  # type: ignore[operator]
    assert cochran_armitage([2, 6, 12], [20, 20, 20], alternative="less").p_value > 0.99
    two = cochran_armitage([2, 6, 12], [20, 20, 20]).p_value
    assert two == pytest.approx(2 * rising.p_value, rel=1e-12)


# --- properties ------------------------------------------------------------------------------


@settings(max_examples=100, deadline=None)
@given(ordered_groups())
def test_two_groups_is_the_pooled_z_of_the_second_against_the_first(
    table: tuple[list[int], list[int]],
) -> None:
    # common practice (Agresti, Categorical Data Analysis, chapter 3): with two groups and
    # scores (0, 1) the trend test is the two-proportion z test
    events, totals = table
    events, totals = events[:2], totals[:2]
    trend = cochran_armitage(events, totals)
    z = two_proportion_z(events[1], totals[1], events[0], totals[0])
    if math.isnan(z.statistic):  # type: ignore[arg-type]
        assert math.isnan(trend.statistic)  # type: ignore[arg-type]
        return
    assert trend.statistic == pytest.approx(z.statistic, rel=1e-9, abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(ordered_groups(), st.floats(-50, 50), st.floats(0.1, 20))
def test_scores_matter_only_up_to_a_linear_map(
    table: tuple[list[int], list[int]], shift: float, scale: float
) -> None:
    events, totals = table
    k = len(events)
    base = cochran_armitage(events, totals)
    moved = cochran_armitage(events, totals, scores=[shift + scale * i for i in range(k)])
    flipped = cochran_armitage(events, totals, scores=[-float(i) for i in range(k)])
    if math.isnan(base.statistic):  # type: ignore[arg-type]
        assert math.isnan(moved.statistic) and math.isnan(flipped.statistic)  # type: ignore[arg-type]
        return
    assert moved.statistic == pytest.approx(base.statistic, rel=1e-7, abs=1e-9)
    assert flipped.statistic == pytest.approx(-base.statistic, rel=1e-9, abs=1e-12)  # type: ignore[operator]


@settings(max_examples=100, deadline=None)
@given(ordered_groups(), st.sampled_from(["two-sided", "greater", "less"]))
def test_reversing_the_order_or_the_outcome_mirrors_the_result(
    table: tuple[list[int], list[int]], alternative: str
) -> None:
    events, totals = table
    opposite = {"two-sided": "two-sided", "greater": "less", "less": "greater"}[alternative]
    base = cochran_armitage(events, totals, alternative=alternative)
    reversed_ = cochran_armitage(events[::-1], totals[::-1], alternative=opposite)
    non_events = cochran_armitage(
        [n - x for x, n in zip(events, totals)], totals, alternative=opposite
    )
    if math.isnan(base.p_value):
        return
    assert 0.0 <= base.p_value <= 1.0
    for other in (reversed_, non_events):
        assert other.statistic == pytest.approx(-base.statistic, rel=1e-9, abs=1e-12)  # type: ignore[operator]
        assert other.p_value == pytest.approx(base.p_value, rel=1e-9, abs=1e-15)
