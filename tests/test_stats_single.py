"""Unit and property tests of prespec.stats.single: validation, edges, dualities, symmetries."""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats.intervals import wilson
from prespec.stats.results import Estimate, TestResult
from prespec.stats.single import binomial_exact, clopper_pearson, jeffreys, one_proportion_z

ALTERNATIVES = ("two-sided", "greater", "less")
OPPOSITE = {"two-sided": "two-sided", "greater": "less", "less": "greater"}


@st.composite
def one_group(draw: st.DrawFn, max_n: int = 300) -> tuple[int, int]:
    n = draw(st.integers(1, max_n))
    return draw(st.integers(0, n)), n


RATES = st.floats(0.001, 0.999)
LEVELS = st.sampled_from([0.8, 0.9, 0.95, 0.99])


def test_results_are_plain_and_named_as_in_the_plan() -> None:
    exact = binomial_exact(3, 10, 0.2, alternative="greater")
    z = one_proportion_z(3, 10, 0.2, alternative="less")
    assert isinstance(exact, TestResult) and isinstance(z, TestResult)
    assert (exact.method, z.method) == ("binomial-exact", "one-proportion-z")
    assert exact.statistic is None and exact.df is None and z.df is None
    assert type(z.statistic) is float and type(exact.p_value) is float
    for estimate, method in ((clopper_pearson(3, 10, 0.95), "clopper-pearson"),
                             (jeffreys(3, 10, 0.9), "jeffreys")):  # fmt: skip
        assert isinstance(estimate, Estimate)
        assert (estimate.measure, estimate.method, estimate.value) == ("proportion", method, 0.3)
        assert all(type(getattr(estimate, f)) is float for f in ("value", "low", "high", "level"))
        json.dumps(estimate.__dict__)
    json.dumps(exact.__dict__)
    json.dumps(z.__dict__)


# --- validation ------------------------------------------------------------------------------


@pytest.mark.parametrize("rate", [0, 1, 0.0, 1.0, -0.1, 1.5, math.nan, math.inf, "0.5", True, None])
def test_null_rate_is_validated(rate: object) -> None:
    for test in (binomial_exact, one_proportion_z):
        with pytest.raises(ValueError, match="null_rate must be"):
            test(3, 10, rate, alternative="two-sided")  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "args, message",
    [
        ((11, 10), r"x \(11\) must not exceed n \(10\)"),
        ((0, 0), "n must be >= 1"),
        ((-1, 10), "x must be >= 0"),
        ((1.0, 10), "x must be an integer"),
    ],
)
def test_counts_are_validated(args: tuple[object, object], message: str) -> None:
    for test in (binomial_exact, one_proportion_z):
        with pytest.raises(ValueError, match=message):
            test(*args, 0.5, alternative="two-sided")  # type: ignore[arg-type]
    for interval in (clopper_pearson, jeffreys):
        with pytest.raises(ValueError, match=message):
            interval(*args, 0.95)  # type: ignore[arg-type]


def test_alternative_and_level_are_validated() -> None:
    for test in (binomial_exact, one_proportion_z):
        with pytest.raises(ValueError, match="alternative must be one of two-sided, greater, less"):
            test(3, 10, 0.5, alternative="larger")
        with pytest.raises(TypeError):
            test(3, 10, 0.5)  # type: ignore[call-arg]
    for interval in (clopper_pearson, jeffreys):
        for level in (0, 1, 95, math.nan, "0.95"):
            with pytest.raises(ValueError, match="level must be"):
                interval(3, 10, level)  # type: ignore[arg-type]


# --- edges -------------------------------------------------------------------------------------


def test_single_participant_by_hand() -> None:
    # n = 1, p0 = 0.3: P(X = 1) = 0.3, P(X = 0) = 0.7. # by hand
    assert binomial_exact(1, 1, 0.3, alternative="greater").p_value == pytest.approx(0.3)
    assert binomial_exact(1, 1, 0.3, alternative="less").p_value == pytest.approx(1.0)
    assert binomial_exact(1, 1, 0.3, alternative="two-sided").p_value == pytest.approx(0.3)
    assert binomial_exact(0, 1, 0.3, alternative="two-sided").p_value == pytest.approx(1.0)
    # z = (1 - 0.3) / sqrt(0.3 * 0.7)
    z = one_proportion_z(1, 1, 0.3, alternative="greater").statistic
    assert z == pytest.approx(0.7 / math.sqrt(0.21), rel=1e-12)
    # Clopper-Pearson for 1 of 1 at 95%: lower limit 0.025 (0.025^(1/1)), upper 1
    cp = clopper_pearson(1, 1, 0.95)
    assert (cp.low, cp.high) == (pytest.approx(0.025, rel=1e-12), 1.0)


@pytest.mark.parametrize("n", [1, 7, 400])
def test_no_events_and_all_events(n: int) -> None:
    # Clopper-Pearson at x = 0: [0, 1 - (alpha/2)^(1/n)], at x = n: [(alpha/2)^(1/n), 1]
    # common practice (Clopper and Pearson 1934)
    cp0, cpn = clopper_pearson(0, n, 0.95), clopper_pearson(n, n, 0.95)
    assert cp0.low == 0.0 and cp0.high == pytest.approx(1 - 0.025 ** (1 / n), rel=1e-10)
    assert cpn.high == 1.0 and cpn.low == pytest.approx(0.025 ** (1 / n), rel=1e-10)
    # Jeffreys with the boundary modification: 0 at x = 0 and 1 at x = n
    assert jeffreys(0, n, 0.95).low == 0.0 and jeffreys(n, n, 0.95).high == 1.0
    assert 0.0 < jeffreys(0, n, 0.95).high < 1.0 and 0.0 < jeffreys(n, n, 0.95).low < 1.0
    # tests at the edges: P(X = 0) = (1 - p0)^n
    assert binomial_exact(0, n, 0.1, alternative="less").p_value == pytest.approx(0.9**n)
    assert binomial_exact(n, n, 0.1, alternative="greater").p_value == pytest.approx(0.1**n)
    assert binomial_exact(0, n, 0.1, alternative="greater").p_value == 1.0


def test_outcome_at_the_null_mean_is_not_evidence() -> None:
    assert binomial_exact(5, 10, 0.5, alternative="two-sided").p_value == 1.0
    assert one_proportion_z(5, 10, 0.5, alternative="two-sided").statistic == 0.0
    assert one_proportion_z(5, 10, 0.5, alternative="two-sided").p_value == 1.0


# --- properties ------------------------------------------------------------------------------


@settings(max_examples=150, deadline=None)
@given(one_group(), RATES, st.sampled_from(ALTERNATIVES))
def test_p_values_are_probabilities_and_mirror(
    group: tuple[int, int], rate: float, alternative: str
) -> None:
    # counting non-events: x of n against p0 is n - x of n against 1 - p0, direction reversed
    x, n = group
    for test in (binomial_exact, one_proportion_z):
        result = test(x, n, rate, alternative=alternative)
        mirror = test(n - x, n, 1.0 - rate, alternative=OPPOSITE[alternative])
        assert 0.0 <= result.p_value <= 1.0
        assert mirror.p_value == pytest.approx(result.p_value, rel=1e-6, abs=1e-12)
        if result.statistic is not None:
            assert mirror.statistic == pytest.approx(-result.statistic, rel=1e-9, abs=1e-9)


@settings(max_examples=150, deadline=None)
@given(one_group(), RATES)
def test_two_sided_is_never_below_the_one_sided_in_the_observed_direction(
    group: tuple[int, int], rate: float
) -> None:
    x, n = group
    if x == n * rate:
        return
    direction = "greater" if x > n * rate else "less"
    for test in (binomial_exact, one_proportion_z):
        two = test(x, n, rate, alternative="two-sided").p_value
        assert two >= test(x, n, rate, alternative=direction).p_value


@settings(max_examples=150, deadline=None)
@given(one_group(), LEVELS)
def test_intervals_contain_the_estimate_and_mirror(group: tuple[int, int], level: float) -> None:
    x, n = group
    for interval in (clopper_pearson, jeffreys):
        estimate = interval(x, n, level)
        assert 0.0 <= estimate.low <= estimate.value <= estimate.high <= 1.0
        mirror = interval(n - x, n, level)
        assert mirror.low == pytest.approx(1.0 - estimate.high, abs=1e-12)
        assert mirror.high == pytest.approx(1.0 - estimate.low, abs=1e-12)


@settings(max_examples=150, deadline=None)
@given(one_group(), LEVELS)
def test_jeffreys_lies_within_clopper_pearson(group: tuple[int, int], level: float) -> None:
    # Beta(x, n - x + 1) <= Beta(x + 1/2, n - x + 1/2) <= Beta(x + 1, n - x) in the stochastic
    # order, so each Jeffreys limit lies inside the Clopper-Pearson one. # common practice
    x, n = group
    cp, jp = clopper_pearson(x, n, level), jeffreys(x, n, level)
    assert cp.low <= jp.low + 1e-15 and jp.high <= cp.high + 1e-15


@settings(max_examples=100, deadline=None)
@given(one_group(max_n=200), LEVELS)
def test_clopper_pearson_inverts_the_exact_tests(group: tuple[int, int], level: float) -> None:
    # Clopper and Pearson (1934): the lower limit is the rate at which P(X >= x) = alpha/2, the
    # upper the rate at which P(X <= x) = alpha/2 (each one-sided exact test at alpha/2)
    x, n = group
    tail = (1.0 - level) / 2.0
    cp = clopper_pearson(x, n, level)
    if x > 0:
        assert binomial_exact(x, n, cp.low, alternative="greater").p_value == pytest.approx(
            tail, rel=1e-7
        )
    if x < n:
        assert binomial_exact(x, n, cp.high, alternative="less").p_value == pytest.approx(
            tail, rel=1e-7
        )


@settings(max_examples=100, deadline=None)
@given(one_group(), LEVELS)
def test_wilson_inverts_the_score_z_test(group: tuple[int, int], level: float) -> None:
    # common practice (Wilson 1927; Agresti, chapter 1): the Wilson limits are the null rates at
    # which the two-sided score z test has p = 1 - level
    x, n = group
    interval = wilson(x, n, level)
    for limit, boundary in ((interval.low, 0.0), (interval.high, 1.0)):
        if limit == boundary or not 0.0 < limit < 1.0:
            continue
        p = one_proportion_z(x, n, limit, alternative="two-sided").p_value
        assert p == pytest.approx(1.0 - level, rel=1e-6)
