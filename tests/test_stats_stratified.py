"""Unit tests of prespec.stats.stratified: validation, edges, symmetries and properties."""

from __future__ import annotations

import json
import math
from collections.abc import Callable

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats.intervals import wald_difference
from prespec.stats.proportions import pearson_chi_square
from prespec.stats.results import Estimate, TestResult
from prespec.stats.stratified import (
    breslow_day_tarone,
    cochran_mantel_haenszel,
    mantel_haenszel_odds_ratio,
    mantel_haenszel_risk_difference,
    mantel_haenszel_risk_ratio,
)

Stratum = tuple[int, int, int, int]
ESTIMATORS: list[Callable[[list[Stratum], float], Estimate]] = [
    mantel_haenszel_odds_ratio,
    mantel_haenszel_risk_ratio,
    mantel_haenszel_risk_difference,
]
# An invented series: wound infection, new dressing (first) vs standard, at three sites.
SITES: list[Stratum] = [(4, 40, 9, 41), (7, 55, 12, 52), (2, 30, 6, 33)]


def _swap_groups(strata: list[Stratum]) -> list[Stratum]:
    return [(x2, n2, x1, n1) for x1, n1, x2, n2 in strata]


def _swap_outcome(strata: list[Stratum]) -> list[Stratum]:
    return [(n1 - x1, n1, n2 - x2, n2) for x1, n1, x2, n2 in strata]


@st.composite
def strata_lists(draw: st.DrawFn, max_n: int = 25) -> list[Stratum]:
    """1 to 5 strata; totals 0..max_n (so some strata lack a group), events 0..total."""
    series = []
    for _ in range(draw(st.integers(1, 5))):
        n1 = draw(st.integers(0, max_n))
        n2 = draw(st.integers(0, max_n))
        series.append((draw(st.integers(0, n1)), n1, draw(st.integers(0, n2)), n2))
    return series


# --- results and names ---------------------------------------------------------------------


def test_results_are_plain_frozen_and_named() -> None:
    test = cochran_mantel_haenszel(SITES)
    assert isinstance(test, TestResult) and test.method == "cochran-mantel-haenszel"
    assert test.df == 1 and type(test.statistic) is float and type(test.p_value) is float
    with pytest.raises(AttributeError):
        test.p_value = 0.5  # type: ignore[misc]
    homogeneity = breslow_day_tarone(SITES)
    assert homogeneity.method == "breslow-day-tarone" and homogeneity.df == 2
    assert homogeneity.alternative == "two-sided"
    names = [(e.measure, e.method) for e in (f(SITES, 0.95) for f in ESTIMATORS)]
    assert names == [
        ("odds-ratio", "robins-breslow-greenland"),
        ("risk-ratio", "greenland-robins"),
        ("risk-difference", "sato"),
    ]
    for estimate in (f(SITES, 0.9) for f in ESTIMATORS):
        assert estimate.level == 0.9
        assert all(type(v) is float for v in (estimate.value, estimate.low, estimate.high))
        json.dumps(estimate.__dict__)
    json.dumps(test.__dict__)


# --- validation ----------------------------------------------------------------------------

BAD_STRATA = [
    ([], "at least one"),
    ("1234", "sequence of"),
    (5, "sequence of"),
    ([(1, 2, 3)], r"strata\[0\] must have 4 counts"),
    ([(1, 2, 1, 2), 7], r"strata\[1\] must be a table"),
    ([(1, 2, 1, 2), "abcd"], r"strata\[1\] must be a table"),
    ([(3, 2, 1, 2)], r"strata\[0\] x1 \(3\) must not exceed n1 \(2\)"),
    ([(1, 2, 5, 4)], r"strata\[0\] x2 \(5\) must not exceed n2 \(4\)"),
    ([(1, 2, -1, 4)], r"strata\[0\] x2 must be >= 0"),
    ([(1.0, 2, 1, 4)], r"strata\[0\] x1 must be an integer"),
    ([(True, 2, 1, 4)], r"strata\[0\] x1 must be an integer"),
    ([(1, 2, 1, 4), (0, 1, 0, None)], r"strata\[1\] n2 must be an integer"),
    ([(1, 2, 0, 0), (1, 0, 0, 3)], r"strata\[1\] x1 \(1\) must not exceed n1 \(0\)"),
]


@pytest.mark.parametrize("strata, message", BAD_STRATA)
def test_bad_strata_are_refused_with_one_clear_line(strata: object, message: str) -> None:
    calls = [
        lambda: cochran_mantel_haenszel(strata),  # type: ignore[arg-type]
        lambda: breslow_day_tarone(strata),  # type: ignore[arg-type]
        *[lambda f=f: f(strata, 0.95) for f in ESTIMATORS],  # type: ignore[misc]
    ]
    for call in calls:
        with pytest.raises(ValueError, match=message) as caught:
            call()
        assert "\n" not in str(caught.value)


@pytest.mark.parametrize("level", [0, 1, 1.5, -0.1, math.nan, "0.95", None, True])
def test_bad_level_is_refused(level: object) -> None:
    for f in ESTIMATORS:
        with pytest.raises(ValueError, match="level must be"):
            f(SITES, level)  # type: ignore[arg-type]


def test_bad_alternative_and_continuity_are_refused() -> None:
    with pytest.raises(ValueError, match="alternative must be one of two-sided, greater, less"):
        cochran_mantel_haenszel(SITES, alternative="two.sided")
    with pytest.raises(ValueError, match="continuity must be true or false"):
        cochran_mantel_haenszel(SITES, continuity=1)  # type: ignore[arg-type]


def test_numpy_integers_and_lists_are_accepted() -> None:
    import numpy as np

    as_numpy = [tuple(np.int64(v) for v in s) for s in SITES]
    as_lists = [list(s) for s in SITES]
    reference = cochran_mantel_haenszel(SITES)
    assert cochran_mantel_haenszel(as_numpy) == reference  # type: ignore[arg-type]
    assert cochran_mantel_haenszel(as_lists) == reference  # type: ignore[arg-type]


# --- edges ---------------------------------------------------------------------------------


def test_strata_missing_a_group_contribute_nothing() -> None:
    padded = [(0, 0, 3, 7), *SITES, (2, 5, 0, 0), (0, 0, 0, 0)]
    assert cochran_mantel_haenszel(padded) == cochran_mantel_haenszel(SITES)
    assert breslow_day_tarone(padded) == breslow_day_tarone(SITES)
    for f in ESTIMATORS:
        assert f(padded, 0.95) == f(SITES, 0.95)


def test_no_stratum_with_both_groups_is_undefined() -> None:
    lonely = [(0, 0, 3, 7), (2, 5, 0, 0)]
    test = cochran_mantel_haenszel(lonely)
    assert math.isnan(test.statistic) and math.isnan(test.p_value) and test.df == 1
    homogeneity = breslow_day_tarone(lonely)
    assert math.isnan(homogeneity.statistic) and math.isnan(homogeneity.p_value)
    assert homogeneity.df == 0
    for f in ESTIMATORS:
        e = f(lonely, 0.95)
        assert math.isnan(e.value) and math.isnan(e.low) and math.isnan(e.high)


@pytest.mark.parametrize("strata", [[(0, 5, 0, 7), (0, 3, 0, 2)], [(5, 5, 7, 7), (3, 3, 2, 2)]])
def test_no_events_or_all_events(strata: list[Stratum]) -> None:
    # every stratum has a zero margin: the hypergeometric variance is 0, CMH undefined
    test = cochran_mantel_haenszel(strata, alternative="greater")
    assert math.isnan(test.statistic) and math.isnan(test.p_value)
    assert math.isnan(breslow_day_tarone(strata).statistic)
    odds = mantel_haenszel_odds_ratio(strata, 0.95)
    assert math.isnan(odds.value) and math.isnan(odds.low) and math.isnan(odds.high)
    # both risks equal in every stratum: the difference is exactly 0, its variance 0
    rd = mantel_haenszel_risk_difference(strata, 0.95)
    assert (rd.value, rd.low, rd.high) == (0.0, 0.0, 0.0)
    rr = mantel_haenszel_risk_ratio(strata, 0.95)
    if strata[0][0] == 0:  # no events at all: 0/0
        assert math.isnan(rr.value) and math.isnan(rr.low) and math.isnan(rr.high)
    else:  # everyone had the event: risk ratio 1, Greenland-Robins variance 0
        assert rr.value == pytest.approx(1.0, rel=1e-15)
        assert rr.low == pytest.approx(1.0, rel=1e-15) and rr.high == pytest.approx(1.0)


def test_events_in_one_group_only() -> None:
    # no events in the first group anywhere: OR and RR are 0, their log variance infinite,
    # so the interval is [0, inf]; the mirror gives inf with the same interval.
    strata = [(0, 10, 3, 10), (0, 8, 1, 9)]
    for f in (mantel_haenszel_odds_ratio, mantel_haenszel_risk_ratio):
        zero, infinite = f(strata, 0.95), f(_swap_groups(strata), 0.95)
        assert (zero.value, zero.low, zero.high) == (0.0, 0.0, math.inf)
        assert (infinite.value, infinite.low, infinite.high) == (math.inf, 0.0, math.inf)
    test = cochran_mantel_haenszel(strata, alternative="less")
    assert test.p_value < 0.5 and math.isfinite(test.statistic)
    rd = mantel_haenszel_risk_difference(strata, 0.95)
    assert rd.value < 0 and -1.0 <= rd.low < rd.value < rd.high <= 1.0


def test_one_member_a_group() -> None:
    # strata of two people, one in each group: the smallest informative tables
    strata = [(1, 1, 0, 1)] * 4 + [(0, 1, 1, 1)]
    test = cochran_mantel_haenszel(strata)
    # Σ(a − Ea) = 4·0.5 − 0.5 = 1.5; Var = 5·(1·1·1·1)/(4·1) = 1.25; X² = 2.25/1.25 = 1.8
    assert test.statistic == pytest.approx(1.8, rel=1e-15)
    # Σad/N = 4·0.5 = 2, Σbc/N = 0.5: OR = 4
    assert mantel_haenszel_odds_ratio(strata, 0.95).value == pytest.approx(4.0)
    # RD = Σ(a·n2 − c·n1)/N / Σ n1·n2/N = (4 − 1)/2 / (5/2) = 0.6
    assert mantel_haenszel_risk_difference(strata, 0.95).value == pytest.approx(0.6)
    assert breslow_day_tarone(strata).df == 4


def test_continuity_never_increases_the_statistic() -> None:
    plain = cochran_mantel_haenszel(SITES)
    corrected = cochran_mantel_haenszel(SITES, continuity=True)
    assert corrected.statistic < plain.statistic and corrected.p_value > plain.p_value


def test_one_stratum_agrees_with_the_two_group_methods() -> None:
    # CMH = (N − 1)/N · Pearson X² (common practice) and the one-sided p follows its sign;
    # RD and its Sato interval are p1 − p2 with the Wald interval.
    x1, n1, x2, n2 = 12, 40, 21, 44
    n = n1 + n2
    for alternative in ("two-sided", "greater", "less"):
        ours = cochran_mantel_haenszel([(x1, n1, x2, n2)], alternative=alternative)
        pearson = pearson_chi_square([x1, x2], [n1, n2])
        assert ours.statistic == pytest.approx((n - 1) / n * pearson.statistic, rel=1e-12)
        assert ours.alternative == alternative
    assert cochran_mantel_haenszel([(x1, n1, x2, n2)], alternative="less").p_value < 0.5
    rd = mantel_haenszel_risk_difference([(x1, n1, x2, n2)], 0.95)
    wald = wald_difference(x1, n1, x2, n2, 0.95)
    assert rd.value == wald.value
    assert rd.low == pytest.approx(wald.low, rel=1e-12)
    assert rd.high == pytest.approx(wald.high, rel=1e-12)


def test_wider_level_gives_a_wider_interval() -> None:
    for f in ESTIMATORS:
        narrow, wide = f(SITES, 0.80), f(SITES, 0.99)
        assert wide.low < narrow.low < narrow.value < narrow.high < wide.high


# --- properties ----------------------------------------------------------------------------


@settings(max_examples=150, deadline=None)
@given(strata_lists(), st.sampled_from(["two-sided", "greater", "less"]), st.booleans())
def test_cmh_p_values_in_range_and_mirror(
    strata: list[Stratum], alternative: str, continuity: bool
) -> None:
    result = cochran_mantel_haenszel(strata, continuity=continuity, alternative=alternative)
    if math.isnan(result.p_value):
        assert math.isnan(result.statistic)
        return
    assert 0.0 <= result.p_value <= 1.0 and result.statistic >= 0.0
    # swapping the groups: the same statistic, greater and less exchanged
    mirror_alt = {"two-sided": "two-sided", "greater": "less", "less": "greater"}[alternative]
    mirrored = cochran_mantel_haenszel(
        _swap_groups(strata), continuity=continuity, alternative=mirror_alt
    )
    assert mirrored.statistic == pytest.approx(result.statistic, rel=1e-12, abs=1e-15)
    assert mirrored.p_value == pytest.approx(result.p_value, rel=1e-9, abs=1e-15)
    # swapping event and non-event mirrors too
    flipped = cochran_mantel_haenszel(
        _swap_outcome(strata), continuity=continuity, alternative=mirror_alt
    )
    assert flipped.p_value == pytest.approx(result.p_value, rel=1e-9, abs=1e-15)
    # the two-sided p is twice the one-sided p in the observed direction (or 1)
    two = cochran_mantel_haenszel(strata, continuity=continuity).p_value
    greater = cochran_mantel_haenszel(strata, continuity=continuity, alternative="greater")
    less = cochran_mantel_haenszel(strata, continuity=continuity, alternative="less")
    smaller = min(greater.p_value, less.p_value)
    assert two >= smaller
    assert two == pytest.approx(min(1.0, 2.0 * smaller), rel=1e-9, abs=1e-15)
    # the order of the strata does not matter
    assert cochran_mantel_haenszel(
        strata[::-1], continuity=continuity, alternative=alternative
    ).statistic == pytest.approx(result.statistic, rel=1e-12, abs=1e-15)


@settings(max_examples=150, deadline=None)
@given(strata_lists(), st.sampled_from([0.8, 0.9, 0.95, 0.99]))
def test_intervals_contain_the_estimate_and_mirror(strata: list[Stratum], level: float) -> None:
    swapped = _swap_groups(strata)
    for f in ESTIMATORS:
        e = f(strata, level)
        if math.isnan(e.value):
            assert math.isnan(e.low) and math.isnan(e.high)
            assert math.isnan(f(swapped, level).value)
            continue
        assert e.low <= e.value <= e.high
        m = f(swapped, level)
        if e.measure == "risk-difference":
            assert -1.0 <= e.low and e.high <= 1.0
            assert m.value == pytest.approx(-e.value, abs=1e-15)
            assert (m.low, m.high) == pytest.approx((-e.high, -e.low), rel=1e-9, abs=1e-12)
        else:
            assert e.low >= 0.0
            if 0.0 < e.value < math.inf:
                assert m.value == pytest.approx(1.0 / e.value, rel=1e-12)
                assert m.low == pytest.approx(1.0 / e.high, rel=1e-9)
                assert m.high == pytest.approx(1.0 / e.low, rel=1e-9)
            else:
                assert (m.low, m.high) == (0.0, math.inf)
                assert m.value == (math.inf if e.value == 0.0 else 0.0)
    # swapping event and non-event inverts the odds ratio
    odds, flipped = (mantel_haenszel_odds_ratio(s, level) for s in (strata, _swap_outcome(strata)))
    if 0.0 < odds.value < math.inf:
        assert flipped.value == pytest.approx(1.0 / odds.value, rel=1e-12)
        assert flipped.low == pytest.approx(1.0 / odds.high, rel=1e-9)


@settings(max_examples=150, deadline=None)
@given(strata_lists())
def test_breslow_day_in_range_and_symmetric(strata: list[Stratum]) -> None:
    result = breslow_day_tarone(strata)
    if math.isnan(result.p_value):
        return
    assert result.statistic >= 0.0 and 0.0 <= result.p_value <= 1.0
    assert result.df >= 1
    for other in (_swap_groups(strata), _swap_outcome(strata), strata[::-1]):
        again = breslow_day_tarone(other)
        assert again.df == result.df
        assert again.statistic == pytest.approx(result.statistic, rel=1e-7, abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(strata_lists(max_n=8), st.integers(2, 4))
def test_copies_of_one_stratum_pool_to_it(strata: list[Stratum], copies: int) -> None:
    # K identical strata: each Mantel-Haenszel estimate equals the single-stratum one, and
    # the stratum odds ratios are equal, so Breslow-Day is 0 (common practice).
    one = [strata[0]]
    many = one * copies
    for f in ESTIMATORS:
        a, b = f(one, 0.95), f(many, 0.95)
        if math.isnan(a.value):
            assert math.isnan(b.value)
        else:
            assert b.value == pytest.approx(a.value, rel=1e-12, abs=1e-15)
    homogeneity = breslow_day_tarone(many)
    if not math.isnan(homogeneity.statistic):
        assert homogeneity.statistic == pytest.approx(0.0, abs=1e-9)
        assert homogeneity.df == copies - 1
