"""Unit tests of prespec.stats.stratified_difference: arguments, alternatives, symmetries,
weights and the edges (strata without events, without members, at the limits of the range)."""

from __future__ import annotations

import dataclasses
import math

import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats.intervals import difference_mle
from prespec.stats.results import Estimate, TestResult
from prespec.stats.stratified_difference import (
    WEIGHTS,
    _landmarks,
    _series,
    stratified_newcombe_interval,
    stratified_score_interval,
    stratified_score_test,
    stratum_weights,
)

Stratum = tuple[int, int, int, int]
# An invented series: infection after a new dressing (first group) vs the standard, per site.
SITES: list[Stratum] = [(4, 40, 9, 41), (7, 55, 12, 52), (2, 30, 6, 33)]
# The same with a site where no one had the event.
WITH_EMPTY_SITE: list[Stratum] = [(0, 10, 0, 10), (8, 20, 2, 20)]
INTERVALS = (stratified_score_interval, stratified_newcombe_interval)


def _swap_groups(strata: list[Stratum]) -> list[Stratum]:
    return [(x2, n2, x1, n1) for x1, n1, x2, n2 in strata]


def _swap_outcome(strata: list[Stratum]) -> list[Stratum]:
    return [(n1 - x1, n1, n2 - x2, n2) for x1, n1, x2, n2 in strata]


# --- arguments -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("strata", "message"),
    [
        ([], "at least one"),
        ("1234", "sequence of"),
        (5, "sequence of"),
        ([(1, 2, 3)], "4 counts"),
        ([(3, 2, 1, 5)], "must not exceed"),
        ([(1, 5, -1, 5)], ">= 0"),
        ([(1.0, 5, 1, 5)], "integer"),
        (["abcd"], "must be a table"),
    ],
)
def test_bad_strata_are_refused(strata: object, message: str) -> None:
    calls = [
        lambda: stratified_score_test(strata),  # type: ignore[arg-type]
        lambda: stratified_score_interval(strata, 0.95),  # type: ignore[arg-type]
        lambda: stratified_newcombe_interval(strata, 0.95),  # type: ignore[arg-type]
        lambda: stratum_weights(strata),  # type: ignore[arg-type]
    ]
    for call in calls:
        with pytest.raises(ValueError, match=message):
            call()


@pytest.mark.parametrize("weights", ["CMH", "inverse-variance", "", None, 1])
def test_unknown_weights_are_refused(weights: object) -> None:
    for call in (
        lambda: stratified_score_test(SITES, weights=weights),  # type: ignore[arg-type]
        lambda: stratified_score_interval(SITES, 0.95, weights=weights),  # type: ignore[arg-type]
        lambda: stratified_newcombe_interval(SITES, 0.95, weights=weights),  # type: ignore[arg-type]
        lambda: stratum_weights(SITES, weights=weights),  # type: ignore[arg-type]
    ):
        with pytest.raises(ValueError, match="weights must be one of cmh, miettinen-nurminen"):
            call()


@pytest.mark.parametrize("delta", [1.0, -1.0, 1.5, -2, math.nan, math.inf, True, "0.1", None])
def test_bad_delta_is_refused(delta: object) -> None:
    with pytest.raises(ValueError, match="delta must"):
        stratified_score_test(SITES, delta=delta)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="delta must"):
        stratum_weights(SITES, delta=delta)  # type: ignore[arg-type]


@pytest.mark.parametrize("level", [0, 1, 1.5, -0.1, math.nan, True, "0.95"])
def test_bad_level_is_refused(level: object) -> None:
    for interval in INTERVALS:
        with pytest.raises(ValueError, match="level must"):
            interval(SITES, level)  # type: ignore[arg-type]


def test_bad_alternative_is_refused() -> None:
    with pytest.raises(ValueError, match="alternative must be one of"):
        stratified_score_test(SITES, alternative="larger")


# --- alternatives ----------------------------------------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("delta", [-0.2, -0.1, 0.0, 0.05])
def test_alternatives(weights: str, delta: float) -> None:
    two = stratified_score_test(SITES, weights=weights, delta=delta)
    greater = stratified_score_test(SITES, weights=weights, delta=delta, alternative="greater")
    less = stratified_score_test(SITES, weights=weights, delta=delta, alternative="less")
    z = two.statistic
    assert z is not None
    assert greater.statistic == less.statistic == z
    assert greater.p_value == pytest.approx(scipy.stats.norm.sf(z), rel=1e-12)
    assert less.p_value == pytest.approx(scipy.stats.norm.cdf(z), rel=1e-12)
    assert two.p_value == pytest.approx(2 * min(greater.p_value, less.p_value), rel=1e-12)
    assert greater.p_value + less.p_value == pytest.approx(1.0, abs=1e-15)
    assert (two.method, two.df, greater.alternative) == ("stratified-score", None, "greater")


def test_direction_refers_to_the_first_group() -> None:
    # the new dressing has fewer infections at every site: its risk is lower, z < 0
    test = stratified_score_test(SITES, alternative="less")
    assert test.statistic is not None and test.statistic < -2.0
    assert test.p_value < 0.025
    # at a margin below the estimate the first group's risk is "greater" than the margin
    estimate = stratified_score_interval(SITES, 0.95).value
    above = stratified_score_test(SITES, delta=estimate - 0.15, alternative="greater")
    assert above.statistic is not None and above.statistic > 0 and above.p_value < 0.05


# --- symmetries ------------------------------------------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("strata", [SITES, WITH_EMPTY_SITE, [(9, 10, 3, 10)], [(10, 10, 0, 20)]])
def test_swapping_the_groups_mirrors_everything(weights: str, strata: list[Stratum]) -> None:
    swapped = _swap_groups(strata)
    score, mirrored = (stratified_score_interval(s, 0.9, weights=weights) for s in (strata, swapped))
    assert (mirrored.low, mirrored.high) == (-score.high, -score.low)  # exactly, by construction
    assert mirrored.value == pytest.approx(-score.value, abs=1e-12)
    newcombe = stratified_newcombe_interval(strata, 0.9, weights=weights)
    mirrored = stratified_newcombe_interval(swapped, 0.9, weights=weights)
    for ours, theirs in ((mirrored.low, -newcombe.high), (mirrored.high, -newcombe.low),
                         (mirrored.value, -newcombe.value)):
        assert ours == pytest.approx(theirs, abs=1e-12) or (math.isnan(ours) and math.isnan(theirs))
    for delta in (-0.3, 0.1):
        test = stratified_score_test(strata, weights=weights, delta=delta, alternative="greater")
        back = stratified_score_test(swapped, weights=weights, delta=-delta, alternative="less")
        assert back.statistic == pytest.approx(-test.statistic, rel=1e-9, abs=1e-12)
        assert back.p_value == pytest.approx(test.p_value, rel=1e-9, abs=1e-15)


@pytest.mark.parametrize("weights", WEIGHTS)
def test_swapping_event_and_non_event_mirrors_the_interval(weights: str) -> None:
    for interval in INTERVALS:
        one = interval(SITES, 0.95, weights=weights)
        other = interval(_swap_outcome(SITES), 0.95, weights=weights)
        assert other.value == pytest.approx(-one.value, abs=1e-12)
        assert other.low == pytest.approx(-one.high, abs=1e-10)
        assert other.high == pytest.approx(-one.low, abs=1e-10)


@pytest.mark.parametrize("weights", WEIGHTS)
def test_the_order_of_the_strata_does_not_matter(weights: str) -> None:
    for interval in INTERVALS:
        one = interval(SITES, 0.95, weights=weights)
        other = interval(SITES[::-1], 0.95, weights=weights)
        for a, b in ((one.value, other.value), (one.low, other.low), (one.high, other.high)):
            assert a == pytest.approx(b, abs=1e-12)
    assert stratum_weights(SITES[::-1], weights=weights) == pytest.approx(
        stratum_weights(SITES, weights=weights)[::-1], rel=1e-12
    )


# --- weights ---------------------------------------------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("delta", [-0.5, -0.1, 0.0, 0.3])
def test_weights_sum_to_one_and_skip_empty_strata(weights: str, delta: float) -> None:
    strata = [(0, 0, 2, 5), *SITES, (0, 4, 0, 0)]
    w = stratum_weights(strata, weights=weights, delta=delta)
    assert len(w) == 5 and w[0] == w[4] == 0.0
    assert math.fsum(w) == pytest.approx(1.0, abs=1e-15)
    assert all(v > 0 for v in w[1:4])
    assert all(type(v) is float for v in w)


def test_cmh_weights_are_fixed_and_inverse_variance_weights_move_with_delta() -> None:
    # n1·n2/(n1 + n2) of the three sites, normalised
    raw = [40 * 41 / 81, 55 * 52 / 107, 30 * 33 / 63]
    expected = [v / sum(raw) for v in raw]
    for delta in (-0.4, 0.0, 0.2):
        assert stratum_weights(SITES, delta=delta) == pytest.approx(expected, rel=1e-14)
    near = stratum_weights(SITES, weights="miettinen-nurminen", delta=0.0)
    far = stratum_weights(SITES, weights="miettinen-nurminen", delta=-0.6)
    assert near != pytest.approx(far, rel=1e-3)


def test_weights_of_one_or_no_informative_stratum() -> None:
    for weights in WEIGHTS:
        assert stratum_weights([(0, 0, 1, 4), (0, 5, 0, 7)], weights=weights) == (0.0, 1.0)
        assert stratum_weights([(0, 0, 1, 4), (2, 5, 0, 0)], weights=weights) == (0.0, 0.0)


def test_inverse_variance_weights_are_undefined_where_a_variance_is_zero() -> None:
    # a site without events has Ṽ(0) = 0: its weight at delta = 0 is infinite
    weights = stratum_weights(WITH_EMPTY_SITE, weights="miettinen-nurminen", delta=0.0)
    assert all(math.isnan(v) for v in weights)
    moved = stratum_weights(WITH_EMPTY_SITE, weights="miettinen-nurminen", delta=0.01)
    assert moved[0] > 0.9 and math.fsum(moved) == pytest.approx(1.0)


# --- the estimate and the edges --------------------------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
def test_intervals_hold_the_estimate_and_nest_by_level(weights: str) -> None:
    for interval in INTERVALS:
        previous: Estimate | None = None
        for level in (0.5, 0.8, 0.9, 0.95, 0.99, 0.999):
            estimate = interval(SITES, level, weights=weights)
            assert -1.0 <= estimate.low < estimate.value < estimate.high <= 1.0
            assert estimate.measure == "risk-difference" and estimate.level == level
            if previous is not None:
                assert estimate.low < previous.low and estimate.high > previous.high
            previous = estimate
    assert stratified_score_interval(SITES, 0.95).method == "stratified-miettinen-nurminen"
    assert stratified_newcombe_interval(SITES, 0.95).method == "stratified-newcombe"


def test_the_two_weightings_differ_on_unequal_strata() -> None:
    strata = [(45, 50, 30, 50), (2, 80, 1, 20)]  # a large difference where the variance is high
    cmh = stratified_score_interval(strata, 0.95)
    inverse = stratified_score_interval(strata, 0.95, weights="miettinen-nurminen")
    # the inverse-variance weights favour the low-risk stratum, where d̂ is small
    assert inverse.value < cmh.value - 0.01
    # the CMH estimate is Σ w d̂ with the fixed weights
    w = stratum_weights(strata)
    assert cmh.value == pytest.approx(w[0] * (45 / 50 - 30 / 50) + w[1] * (2 / 80 - 1 / 20))


@pytest.mark.parametrize("weights", WEIGHTS)
def test_no_informative_stratum_gives_nan(weights: str) -> None:
    strata = [(0, 0, 3, 5), (2, 4, 0, 0)]
    test = stratified_score_test(strata, weights=weights)
    assert math.isnan(test.statistic) and math.isnan(test.p_value)  # type: ignore[arg-type]
    for interval in INTERVALS:
        estimate = interval(strata, 0.95, weights=weights)
        assert all(math.isnan(v) for v in (estimate.value, estimate.low, estimate.high))


@pytest.mark.parametrize("weights", WEIGHTS)
def test_every_stratum_without_events_leaves_the_test_at_zero_undefined(weights: str) -> None:
    strata = [(0, 10, 0, 12), (0, 5, 0, 3), (4, 4, 6, 6)]
    test = stratified_score_test(strata, weights=weights)
    assert math.isnan(test.statistic) and math.isnan(test.p_value)  # type: ignore[arg-type]
    # away from 0 it is defined, and the interval holds 0 with the estimate 0
    assert stratified_score_test(strata, weights=weights, delta=0.1).statistic < 0  # type: ignore[operator]
    estimate = stratified_score_interval(strata, 0.95, weights=weights)
    assert estimate.value == 0.0 and estimate.low < 0.0 < estimate.high


def test_inverse_variance_weights_with_an_empty_stratum_hold_zero() -> None:
    # The documented consequence of these weights: at delta = 0 the empty site's weight is
    # infinite and Z(0) is its limit 0, although the CMH-weighted test rejects at 5 per cent
    cmh = stratified_score_test(WITH_EMPTY_SITE)
    assert cmh.p_value < 0.05
    inverse = stratified_score_test(WITH_EMPTY_SITE, weights="miettinen-nurminen")
    assert (inverse.statistic, inverse.p_value) == (0.0, 1.0)
    beside = stratified_score_test(WITH_EMPTY_SITE, weights="miettinen-nurminen", delta=1e-6)
    assert beside.statistic is not None and 0.0 < beside.statistic < 0.01
    estimate = stratified_score_interval(WITH_EMPTY_SITE, 0.95, weights="miettinen-nurminen")
    assert estimate.low < 0.0 < estimate.value < estimate.high
    assert estimate.note is not None and "infinite" in estimate.note
    assert stratified_score_interval(WITH_EMPTY_SITE, 0.95).note is None


@pytest.mark.parametrize("weights", WEIGHTS)
def test_every_difference_at_one(weights: str) -> None:
    strata = [(5, 5, 0, 5), (3, 3, 0, 7)]
    score = stratified_score_interval(strata, 0.95, weights=weights)
    assert score.value == 1.0 and score.high == 1.0 and 0.0 < score.low < 1.0
    mirrored = stratified_score_interval(_swap_groups(strata), 0.95, weights=weights)
    assert (mirrored.value, mirrored.low, mirrored.high) == (-1.0, -1.0, -score.low)
    newcombe = stratified_newcombe_interval(strata, 0.95, weights=weights)
    if weights == "cmh":
        assert newcombe.value == 1.0 and newcombe.high == 1.0 and 0.0 < newcombe.low < 1.0
    else:  # the inverse variances at the estimate 1 are all 0: the weights are undefined
        assert math.isnan(newcombe.value) and newcombe.note is not None


def test_results_are_frozen_plain_numbers() -> None:
    test = stratified_score_test(SITES)
    assert isinstance(test, TestResult) and type(test.statistic) is float
    assert type(test.p_value) is float
    for interval in INTERVALS:
        estimate = interval(SITES, 0.95)
        assert all(type(v) is float for v in (estimate.value, estimate.low, estimate.high))
        with pytest.raises(dataclasses.FrozenInstanceError):
            estimate.value = 0.0  # type: ignore[misc]


_STRATUM = st.tuples(st.integers(1, 30), st.integers(1, 30)).flatmap(
    lambda n: st.tuples(st.integers(0, n[0]), st.just(n[0]), st.integers(0, n[1]), st.just(n[1]))
)


@settings(max_examples=60, deadline=None)
@given(strata=st.lists(_STRATUM, min_size=1, max_size=4), weights=st.sampled_from(WEIGHTS))
def test_properties_on_random_strata(strata: list[Stratum], weights: str) -> None:
    score = stratified_score_interval(strata, 0.95, weights=weights)
    assert -1.0 <= score.low <= score.value <= score.high <= 1.0
    mirrored = stratified_score_interval(_swap_groups(strata), 0.95, weights=weights)
    assert (mirrored.low, mirrored.high) == (-score.high, -score.low)
    if score.note is not None:  # the inverse-variance weights hold 0 (Z(0) = 0 by the limit)
        assert weights == "miettinen-nurminen" and score.low <= 0.0 <= score.high
    newcombe = stratified_newcombe_interval(strata, 0.95, weights=weights)
    if not math.isnan(newcombe.value):
        assert -1.0 <= newcombe.low <= newcombe.value <= newcombe.high <= 1.0
    w = stratum_weights(strata, weights=weights, delta=0.25)
    assert math.fsum(w) == pytest.approx(1.0, abs=1e-14)


@pytest.mark.parametrize(
    ("stratum", "kinks"),
    [((0, 8, 1, 14), 1), ((2, 2, 30, 31), 1), ((3, 3, 0, 5), 1), ((0, 6, 4, 4), 1),
     ((0, 10, 0, 20), 0), ((4, 9, 5, 11), 0)],
)
def test_landmarks_are_where_a_restricted_estimate_reaches_0_or_1(
    stratum: Stratum, kinks: int
) -> None:
    # the search grid's extra points: 0, d̂ and each δ where the restricted MLE leaves 0 or 1
    x1, n1, x2, n2 = stratum
    points = _landmarks(_series([stratum])).tolist()
    assert points[:2] == [0.0, (x1 * n2 - x2 * n1) / (n1 * n2)]
    assert len(points) == 2 + kinks
    for delta in points[2:]:
        def edges(d: float) -> int:
            return sum(p in (0.0, 1.0) for p in difference_mle(x1, n1, x2, n2, d))
        # on one side the estimate is on the boundary, on the other not (the all-event group
        # and the empty group keep theirs on both sides)
        assert edges(delta - 1e-4) != edges(delta + 1e-4), delta
