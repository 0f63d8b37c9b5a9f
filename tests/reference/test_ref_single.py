"""Reference checks of the one-group tests and intervals: published values, scipy, statsmodels.

Published values are marked ``# from memory`` where they were recalled rather than looked up.
Library checks name the function that computed the reference value.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats
from statsmodels.stats.proportion import proportion_confint, proportions_ztest

from prespec.stats.single import binomial_exact, clopper_pearson, jeffreys, one_proportion_z

ALTERNATIVES = ("two-sided", "greater", "less")
STATSMODELS_NAME = {"two-sided": "two-sided", "greater": "larger", "less": "smaller"}
RATES = (0.001, 0.01, 0.1, 0.25, 1 / 3, 0.5, 0.7, 0.9, 0.99)
LEVELS = (0.8, 0.9, 0.95, 0.99)

# Newcombe RG. Two-sided confidence intervals for the single proportion: comparison of seven
# methods. Statistics in Medicine 1998;17:857-872, Table II, method 5 (the Clopper-Pearson
# "exact" interval), 95 per cent limits. # from memory
NEWCOMBE_1998_SINGLE_TABLE_II_METHOD_5 = [
    ((81, 263), (0.2527, 0.3676)),
    ((15, 148), (0.0578, 0.1617)),
    ((0, 20), (0.0000, 0.1684)),
    ((1, 29), (0.0009, 0.1776)),
]
# Same table, method 3 (Wilson score): the limits at which the score z test has p = 0.05.
# # from memory (as in tests/reference/test_ref_intervals.py)
NEWCOMBE_1998_SINGLE_TABLE_II_METHOD_3 = [
    ((81, 263), (0.2553, 0.3662)),
    ((15, 148), (0.0624, 0.1605)),
    ((1, 29), (0.0061, 0.1718)),
]


def _groups() -> list[tuple[int, int]]:
    """(x, n) with tiny to large n, always including 0 and n events."""
    groups = []
    for n in (1, 2, 3, 5, 8, 13, 20, 29, 50, 148, 263, 1000, 5000):
        xs = {0, 1, n // 3, n // 2, n - 1, n}
        groups += [(x, n) for x in sorted(xs) if 0 <= x <= n]
    return groups


# --- published examples -------------------------------------------------------------------------


@pytest.mark.parametrize("counts, limits", NEWCOMBE_1998_SINGLE_TABLE_II_METHOD_5)
def test_clopper_pearson_published_examples(
    counts: tuple[int, int], limits: tuple[float, float]
) -> None:
    estimate = clopper_pearson(*counts, 0.95)
    assert (round(estimate.low, 4), round(estimate.high, 4)) == limits


def test_clopper_pearson_no_vegetarians() -> None:
    # Agresti A. Categorical Data Analysis, 3rd ed. 2013, chapter 1: none of 25 students is a
    # vegetarian; the 95% Clopper-Pearson interval is (0.0, 0.137). # from memory
    estimate = clopper_pearson(0, 25, 0.95)
    assert (estimate.low, round(estimate.high, 3)) == (0.0, 0.137)


def test_binomial_exact_arbuthnot() -> None:
    # Arbuthnot J. An argument for divine providence, taken from the constant regularity
    # observ'd in the births of both sexes. Philosophical Transactions 1710;27:186-190: in each
    # of 82 years more boys than girls were christened in London; under p0 = 1/2 the one-sided
    # probability is (1/2)^82 = 2.07e-25 (Conover, Practical Nonparametric Statistics, the
    # sign test). # from memory
    result = binomial_exact(82, 82, 0.5, alternative="greater")
    assert f"{result.p_value:.2e}" == "2.07e-25"
    assert binomial_exact(82, 82, 0.5, alternative="two-sided").p_value == pytest.approx(
        2 * 0.5**82, rel=1e-12
    )


@pytest.mark.parametrize("counts, limits", NEWCOMBE_1998_SINGLE_TABLE_II_METHOD_3)
def test_score_z_at_newcombes_wilson_limits(
    counts: tuple[int, int], limits: tuple[float, float]
) -> None:
    # The Wilson interval inverts the score z test, so at Newcombe's published limits (4
    # decimals) the two-sided p-value is 0.05 up to the rounding of the limits.
    for limit in limits:
        p = one_proportion_z(*counts, limit, alternative="two-sided").p_value
        assert p == pytest.approx(0.05, abs=0.003)


# --- scipy and statsmodels ---------------------------------------------------------------------


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_binomial_exact_matches_scipy(alternative: str) -> None:
    # scipy.stats.binomtest(x, n, p0, alternative).pvalue, 1e-12 relative (the same method of
    # small p-values and the same 1e-7 tie tolerance for the two-sided test)
    for x, n in _groups():
        for rate in RATES:
            ours = binomial_exact(x, n, rate, alternative=alternative).p_value
            ref = scipy.stats.binomtest(x, n, rate, alternative=alternative).pvalue
            assert ours == pytest.approx(ref, rel=1e-12, abs=1e-300), (x, n, rate)


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_one_proportion_z_matches_statsmodels(alternative: str) -> None:
    # statsmodels.stats.proportion.proportions_ztest(x, n, value=p0, prop_var=p0): the score
    # test, standard error at the null rate; "larger" is our "greater". 1e-9 relative.
    for x, n in _groups():
        for rate in RATES:
            ours = one_proportion_z(x, n, rate, alternative=alternative)
            z, p = proportions_ztest(
                x, n, value=rate, prop_var=rate, alternative=STATSMODELS_NAME[alternative]
            )
            assert ours.statistic == pytest.approx(z, rel=1e-9, abs=1e-12), (x, n, rate)
            assert ours.p_value == pytest.approx(p, rel=1e-9, abs=1e-300), (x, n, rate)


@pytest.mark.parametrize("level", LEVELS)
def test_clopper_pearson_matches_statsmodels_and_scipy(level: float) -> None:
    # statsmodels.stats.proportion.proportion_confint(method="beta"), 1e-9 relative, and
    # scipy.stats.binomtest(x, n).proportion_ci(confidence_level, method="exact"), 1e-11
    # absolute: scipy finds the limits by root finding with an absolute tolerance, which near
    # 0 is a few parts in 1e9 of the limit (see the next test for which value is right).
    for x, n in _groups():
        ours = clopper_pearson(x, n, level)
        low, high = proportion_confint(x, n, alpha=1 - level, method="beta")
        ci = scipy.stats.binomtest(x, n).proportion_ci(confidence_level=level, method="exact")
        assert ours.low == pytest.approx(low, rel=1e-9, abs=1e-300), (x, n)
        assert ours.high == pytest.approx(high, rel=1e-9), (x, n)
        assert ours.low == pytest.approx(ci.low, abs=1e-11), (x, n)
        assert ours.high == pytest.approx(ci.high, abs=1e-11), (x, n)


@pytest.mark.parametrize("n, level", [(148, 0.99), (148, 0.95), (1000, 0.95), (5000, 0.8)])
def test_clopper_pearson_lower_limit_for_one_event_in_closed_form(n: int, level: float) -> None:
    # common practice: with x = 1 the lower limit solves 1 - (1 - p)^n = alpha/2, so
    # p = 1 - (1 - alpha/2)^(1/n). Ours and statsmodels' agree with it to 1e-12 relative;
    # scipy.stats.binomtest(...).proportion_ci(method="exact") is off by a few parts in 1e9
    # relative (its root finder's absolute tolerance), so here ours is the more accurate.
    tail = (1 - level) / 2
    closed = -math.expm1(math.log1p(-tail) / n)
    assert clopper_pearson(1, n, level).low == pytest.approx(closed, rel=1e-12)
    low, _ = proportion_confint(1, n, alpha=1 - level, method="beta")
    assert low == pytest.approx(closed, rel=1e-12)


@pytest.mark.parametrize("level", LEVELS)
def test_jeffreys_matches_statsmodels_inside_and_differs_at_the_boundary(level: float) -> None:
    # statsmodels.stats.proportion.proportion_confint(method="jeffreys") is the unmodified
    # equal-tailed Beta(x + 1/2, n - x + 1/2) interval; 1e-9 relative for 0 < x < n. At x = 0
    # (x = n) statsmodels keeps a positive lower (an upper below 1) limit, where Brown, Cai and
    # DasGupta (2001) set it to 0 (1): both are right for their definition; the other limit
    # agrees.
    for x, n in _groups():
        ours = jeffreys(x, n, level)
        low, high = proportion_confint(x, n, alpha=1 - level, method="jeffreys")
        if 0 < x < n:
            assert ours.low == pytest.approx(low, rel=1e-9)
            assert ours.high == pytest.approx(high, rel=1e-9)
        if x == 0:
            assert ours.low == 0.0 < low
            assert ours.high == pytest.approx(high, rel=1e-9)
        if x == n:
            assert high < 1.0 == ours.high
            assert ours.low == pytest.approx(low, rel=1e-9)


def test_jeffreys_is_the_beta_posterior_interval() -> None:
    # common practice (Brown, Cai and DasGupta 2001): the Jeffreys limits are the
    # (1 -/+ level)/2 quantiles of the Beta(x + 1/2, n - x + 1/2) posterior, here from
    # scipy.stats.beta.interval; 1e-12 relative
    rng = np.random.default_rng(53)
    for _ in range(100):
        n = int(rng.integers(2, 500))
        x = int(rng.integers(1, n))
        low, high = scipy.stats.beta.interval(0.9, x + 0.5, n - x + 0.5)
        ours = jeffreys(x, n, 0.9)
        assert ours.low == pytest.approx(low, rel=1e-12)
        assert ours.high == pytest.approx(high, rel=1e-12)
