"""Reference checks of the stratified risk difference (prespec.stats.stratified_difference).

No published worked example of the stratified Miettinen–Nurminen interval or of the stratified
Newcombe interval of Yan and Su (2010) is recalled here reliably enough to assert its digits,
so none is asserted; no value below is presented as published except Newcombe's one-table
limits (Statistics in Medicine 1998;17:873–890, Table II, ``# from memory``), which the
methods must reproduce with one stratum. The checks against something we did not write are:

- the one-stratum reductions to the one-table intervals (``intervals``), 1e-10, on tables with
  zero cells and all-event groups, and through them Newcombe's published limits;
- statsmodels ``test_proportions_2indep(value=0, method="score", compare="diff",
  correction=True)`` for the one-stratum statistic at delta = 0 (away from 0 its constrained
  estimates are not the likelihood maximum, see ``test_ref_intervals``);
- an independent computation written here: the restricted MLE of each stratum by bisection on
  the derivative of its log-likelihood (no closed form), the statistic in numpy, the point
  estimate and the limits by a dense grid and scipy.optimize.brentq, and the stratified Wilson
  limits as roots of their quadratic by brentq, agreeing to 1e-8;
- the interval inverts the test: the two-sided p-value at each limit is 1 − level (1e-9).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.stats
from scipy import optimize
from statsmodels.stats import proportion as sm_proportion

from prespec.stats.intervals import miettinen_nurminen_difference, newcombe_difference
from prespec.stats.stratified import mantel_haenszel_risk_difference
from prespec.stats.stratified_difference import (
    WEIGHTS,
    stratified_newcombe_interval,
    stratified_score_interval,
    stratified_score_test,
    stratum_weights,
)
from tests.reference.test_ref_intervals import (
    NEWCOMBE_1998_TABLE_II_METHOD_6,  # Newcombe 1998, Table II, method 6; from memory
    NEWCOMBE_1998_TABLE_II_METHOD_10,  # the same table, method 10; from memory
)

Stratum = tuple[int, int, int, int]
LEVELS = (0.80, 0.90, 0.95, 0.99)

# One-table edge cases: zero cells, all-event groups, groups of one, both groups at an edge.
EDGE_TABLES: list[Stratum] = [
    (0, 10, 0, 20), (10, 10, 20, 20), (10, 10, 0, 20), (0, 10, 20, 20), (0, 1, 1, 1),
    (1, 1, 0, 1), (1, 1, 1, 1), (0, 1, 0, 1), (0, 7, 3, 9), (7, 7, 3, 9), (5, 56, 0, 29),
    (1, 300, 0, 2), (299, 300, 2, 2),
]

# Invented series of strata (a vaccine scenario: cases among vaccinated vs placebo per region,
# and others), with unequal sizes, sparse strata, strata with no events or only events and one
# where a group has no member.
SERIES: list[list[Stratum]] = [
    [(4, 40, 9, 41), (7, 55, 12, 52), (2, 30, 6, 33)],
    [(1, 120, 9, 118), (0, 60, 4, 63), (3, 210, 14, 205), (2, 15, 1, 16)],
    [(12, 20, 5, 22), (30, 45, 18, 44), (9, 12, 9, 13), (1, 3, 0, 2)],
    [(0, 10, 0, 10), (8, 20, 2, 20)],
    [(0, 25, 0, 24), (3, 25, 7, 26), (5, 30, 0, 0), (10, 10, 8, 10)],
    [(45, 50, 30, 50), (20, 22, 14, 25)],
    # with the inverse-variance weights {|Z| <= z} is two intervals here: one of width 0.009
    # around -0.046, where 0/8 vs 1/14's restricted estimate of the first group reaches 0
    [(2, 2, 1, 30), (0, 8, 1, 14), (1, 2, 2, 38)],
    # and here: one around 1/31, the
    # d̂ of the second stratum, whose Ṽ is small there
    [(1, 5, 14, 29), (2, 2, 30, 31), (9, 29, 16, 16)],
    # and here, one around 0
    [(0, 8, 0, 1), (0, 24, 13, 14), (1, 3, 1, 2), (5, 8, 11, 11)],
]


def _random_tables(seed: int, count: int) -> list[Stratum]:
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(count):
        n1, n2 = (int(v) for v in rng.integers(1, 80, 2))
        out.append((int(rng.integers(0, n1 + 1)), n1, int(rng.integers(0, n2 + 1)), n2))
    return out


# --- the independent computation -----------------------------------------------------------


def _restricted_mle(stratum: Stratum, delta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(p̃1, p̃2) under p1 − p2 = delta by 64 bisection steps (to 2^-64) on the derivative in p2 of the
    log-likelihood (strictly decreasing), for an array of delta in (−1, 1)."""
    x1, n1, x2, n2 = stratum
    low = np.maximum(0.0, -delta)
    high = np.minimum(1.0, 1.0 - delta)
    for _ in range(64):
        p2 = (low + high) / 2.0
        p1 = p2 + delta
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (
                (x1 / p1 if x1 else 0.0)
                - ((n1 - x1) / (1.0 - p1) if n1 - x1 else 0.0)
                + (x2 / p2 if x2 else 0.0)
                - ((n2 - x2) / (1.0 - p2) if n2 - x2 else 0.0)
            )
        up = slope > 0.0
        low, high = np.where(up, p2, low), np.where(up, high, p2)
    p2 = (low + high) / 2.0
    return p2 + delta, p2


def _z(strata: list[Stratum], weights: str, delta: np.ndarray) -> np.ndarray:
    """Z(δ) written out: Σ w (d̂ − δ) / sqrt(Σ w² Ṽ), w = n1 n2/N or 1/Ṽ, normalised."""
    delta = np.atleast_1d(np.asarray(delta, dtype=float))
    used = [s for s in strata if s[1] > 0 and s[3] > 0]
    numerator = np.zeros_like(delta)
    variance = np.zeros_like(delta)
    for x1, n1, x2, n2 in used:
        p1, p2 = _restricted_mle((x1, n1, x2, n2), delta)
        size = n1 + n2
        v = (p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2) * size / (size - 1)
        w = np.full_like(delta, n1 * n2 / size) if weights == "cmh" else 1.0 / v
        numerator += w * (x1 / n1 - x2 / n2 - delta)
        variance += w * w * v
    return numerator / np.sqrt(variance)  # the normalisation cancels


def _independent_interval(
    strata: list[Stratum], weights: str, levels: tuple[float, ...]
) -> list[tuple[float, float, float]]:
    """Estimate and limits per level by a grid of 1000 points in (−1, 1) (never 0) and brentq."""
    grid = np.linspace(-1 + 1e-9, 1 - 1e-9, 1000)
    z = _z(strata, weights, grid)

    def scalar(delta: float) -> float:
        return float(_z(strata, weights, np.array([delta]))[0])

    signs = np.flatnonzero((z[:-1] > 0) & (z[1:] < 0))
    assert len(signs) == 1, "the independent search expects one sign change"
    i = int(signs[0])
    estimate = optimize.brentq(scalar, grid[i], grid[i + 1], xtol=1e-15)
    out = []
    for level in levels:
        crit = float(scipy.stats.norm.isf((1 - level) / 2))
        inside = np.flatnonzero(np.abs(z) <= crit)
        if weights == "cmh":
            # the set {|Z| <= z} is one interval on the grid; with the inverse-variance weights
            # and a stratum with a zero cell it may not be (module docstring): the limits are
            # then those of the smallest interval holding it
            assert (np.diff(inside) == 1).all()
        first, last = int(inside[0]), int(inside[-1])
        low = optimize.brentq(lambda d, c=crit: scalar(d) - c, grid[first - 1], grid[first],
                              xtol=1e-15)
        high = optimize.brentq(lambda d, c=crit: scalar(d) + c, grid[last], grid[last + 1],
                               xtol=1e-15)
        out.append((estimate, low, high))
    return out


# --- one stratum ---------------------------------------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("level", LEVELS)
def test_one_stratum_is_the_one_table_score_interval(weights: str, level: float) -> None:
    for table in EDGE_TABLES + _random_tables(seed=3, count=40):
        ours = stratified_score_interval([table], level, weights=weights)
        one = miettinen_nurminen_difference(*table, level)
        assert ours.value == pytest.approx(one.value, abs=1e-10), table
        assert ours.low == pytest.approx(one.low, abs=1e-10), table
        assert ours.high == pytest.approx(one.high, abs=1e-10), table
        # a stratum in which a group has no member changes nothing
        padded = stratified_score_interval([(0, 0, 3, 5), table], level, weights=weights)
        assert (padded.value, padded.low, padded.high) == (ours.value, ours.low, ours.high)


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("level", LEVELS)
def test_one_stratum_is_the_one_table_newcombe_interval(weights: str, level: float) -> None:
    for table in EDGE_TABLES + _random_tables(seed=5, count=40):
        ours = stratified_newcombe_interval([table], level, weights=weights)
        one = newcombe_difference(*table, level)
        assert ours.value == pytest.approx(one.value, abs=1e-10), table
        assert ours.low == pytest.approx(one.low, abs=1e-10), table
        assert ours.high == pytest.approx(one.high, abs=1e-10), table


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize(("table", "limits"), NEWCOMBE_1998_TABLE_II_METHOD_6)
def test_one_stratum_reproduces_newcombe_method_6(
    weights: str, table: Stratum, limits: tuple[float, float]
) -> None:
    ours = stratified_score_interval([table], 0.95, weights=weights)
    assert (round(ours.low, 4), round(ours.high, 4)) == limits


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize(("table", "limits"), NEWCOMBE_1998_TABLE_II_METHOD_10)
def test_one_stratum_reproduces_newcombe_method_10(
    weights: str, table: Stratum, limits: tuple[float, float]
) -> None:
    ours = stratified_newcombe_interval([table], 0.95, weights=weights)
    assert (round(ours.low, 4), round(ours.high, 4)) == limits


@pytest.mark.parametrize("weights", WEIGHTS)
def test_one_stratum_statistic_at_zero_against_statsmodels(weights: str) -> None:
    # statsmodels.stats.proportion.test_proportions_2indep(x1, n1, x2, n2, value=0,
    # method="score", compare="diff", correction=True): at delta = 0 the restricted estimate
    # is the pooled proportion, and the statistic carries the same N/(N - 1) factor
    for x1, n1, x2, n2 in _random_tables(seed=7, count=80):
        if x1 + x2 in (0, n1 + n2):
            continue  # the pooled variance is 0: ours is nan, statsmodels divides by 0
        ours = stratified_score_test([(x1, n1, x2, n2)], weights=weights)
        with warnings.catch_warnings():
            # it also computes the ratio and odds ratio, which divide by 0 when x2 = 0
            warnings.simplefilter("ignore", RuntimeWarning)
            ref = sm_proportion.test_proportions_2indep(
                x1, n1, x2, n2, value=0, method="score", compare="diff", correction=True
            )
        assert ours.statistic == pytest.approx(float(ref.statistic), rel=1e-9, abs=1e-12)
        assert ours.p_value == pytest.approx(float(ref.pvalue), rel=1e-9, abs=1e-12)


# --- several strata: the independent computation ---------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("index", range(len(SERIES)))
def test_interval_against_an_independent_computation(weights: str, index: int) -> None:
    strata = SERIES[index]
    levels = (0.90, 0.95, 0.99)
    for level, (estimate, low, high) in zip(
        levels, _independent_interval(strata, weights, levels), strict=True
    ):
        ours = stratified_score_interval(strata, level, weights=weights)
        assert ours.value == pytest.approx(estimate, abs=1e-8)
        assert ours.low == pytest.approx(low, abs=1e-8)
        assert ours.high == pytest.approx(high, abs=1e-8)


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("index", range(len(SERIES)))
def test_statistic_against_an_independent_computation(weights: str, index: int) -> None:
    strata = SERIES[index]
    for delta in (-0.3, -0.05, 0.02, 0.15, 0.4):
        z = float(_z(strata, weights, np.array([delta]))[0])
        ours = stratified_score_test(strata, weights=weights, delta=delta)
        assert ours.statistic == pytest.approx(z, rel=1e-8, abs=1e-10), delta
        assert ours.p_value == pytest.approx(
            2 * scipy.stats.norm.sf(abs(z)), rel=1e-8, abs=1e-12
        )


@pytest.mark.parametrize("index", range(len(SERIES)))
def test_weights_against_an_independent_computation(index: int) -> None:
    strata = SERIES[index]
    cmh = [n1 * n2 / (n1 + n2) if n1 and n2 else 0.0 for _, n1, _, n2 in strata]
    assert stratum_weights(strata, weights="cmh") == pytest.approx(
        [w / sum(cmh) for w in cmh], rel=1e-12
    )
    delta = 0.07
    inverse = []
    for x1, n1, x2, n2 in strata:
        if not (n1 and n2):
            inverse.append(0.0)
            continue
        p1, p2 = _restricted_mle((x1, n1, x2, n2), np.array([delta]))
        v = (p1[0] * (1 - p1[0]) / n1 + p2[0] * (1 - p2[0]) / n2) * (n1 + n2) / (n1 + n2 - 1)
        inverse.append(1.0 / v)
    assert stratum_weights(strata, weights="miettinen-nurminen", delta=delta) == pytest.approx(
        [w / sum(inverse) for w in inverse], rel=1e-9
    )


def _stratified_wilson(p: float, effective: float, z: float) -> tuple[float, float]:
    """Roots in [0, p] and [p, 1] of (p − q)² − z² q(1 − q)/effective, by brentq."""

    def f(q: float) -> float:
        return (p - q) ** 2 - z * z * q * (1 - q) / effective

    low = 0.0 if p == 0 else optimize.brentq(f, 0.0, p, xtol=1e-15)
    high = 1.0 if p == 1 else optimize.brentq(f, p, 1.0, xtol=1e-15)
    return low, high


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("index", range(len(SERIES)))
def test_newcombe_against_an_independent_computation(weights: str, index: int) -> None:
    strata = [s for s in SERIES[index] if s[1] and s[3]]
    if weights == "cmh":
        w = np.array([n1 * n2 / (n1 + n2) for _, n1, _, n2 in strata])
    else:
        ((estimate, _, _),) = _independent_interval(strata, weights, (0.95,))
        if abs(estimate) < 1e-12 and any(x1 + x2 in (0, n1 + n2) for x1, n1, x2, n2 in strata):
            # the estimate is 0 and a stratum with no events (or only events) has Ṽ(0) = 0:
            # its inverse-variance weight is infinite and the weights are undefined
            ours = stratified_newcombe_interval(SERIES[index], 0.95, weights=weights)
            assert math.isnan(ours.value) and math.isnan(ours.low) and math.isnan(ours.high)
            assert ours.note is not None and "undefined" in ours.note
            return
        v = []
        for stratum in strata:
            p1, p2 = _restricted_mle(stratum, np.array([estimate]))
            n1, n2 = stratum[1], stratum[3]
            v.append((p1[0] * (1 - p1[0]) / n1 + p2[0] * (1 - p2[0]) / n2)
                     * (n1 + n2) / (n1 + n2 - 1))
        w = 1.0 / np.array(v)
    w = w / w.sum()
    x1, n1, x2, n2 = (np.array(c, dtype=float) for c in zip(*strata))
    for level in (0.90, 0.95, 0.99):
        z = float(scipy.stats.norm.isf((1 - level) / 2))
        p1, p2 = float(w @ (x1 / n1)), float(w @ (x2 / n2))
        l1, u1 = _stratified_wilson(p1, 1 / float(w**2 @ (1 / n1)), z)
        l2, u2 = _stratified_wilson(p2, 1 / float(w**2 @ (1 / n2)), z)
        low = p1 - p2 - math.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2)
        high = p1 - p2 + math.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)
        ours = stratified_newcombe_interval(SERIES[index], level, weights=weights)
        assert ours.value == pytest.approx(p1 - p2, abs=1e-8)
        assert ours.low == pytest.approx(low, abs=1e-8)
        assert ours.high == pytest.approx(high, abs=1e-8)


# --- the interval inverts the test -----------------------------------------------------------


@pytest.mark.parametrize("weights", WEIGHTS)
@pytest.mark.parametrize("level", LEVELS)
def test_interval_inverts_the_test(weights: str, level: float) -> None:
    checked = 0
    for strata in SERIES + [[t] for t in _random_tables(seed=11, count=10)]:
        ours = stratified_score_interval(strata, level, weights=weights)
        for limit in (ours.low, ours.high):
            if abs(limit) == 1.0:
                continue  # a limit at -1 or 1 is where the test is not defined
            p = stratified_score_test(strata, weights=weights, delta=limit).p_value
            assert p == pytest.approx(1 - level, abs=1e-9), (strata, limit)
            checked += 1
        # the estimate is where Z = 0 (p = 1)
        if abs(ours.value) < 1.0:
            assert stratified_score_test(strata, weights=weights, delta=ours.value).statistic \
                == pytest.approx(0.0, abs=1e-9)
    assert checked >= 2 * len(SERIES)


def test_cmh_estimate_is_the_mantel_haenszel_risk_difference() -> None:
    # With w_h ∝ n1h·n2h/N_h, Z(δ) = 0 at Σ w_h d̂_h: the Mantel–Haenszel risk difference
    for strata in SERIES:
        ours = stratified_score_interval(strata, 0.95, weights="cmh")
        assert ours.value == mantel_haenszel_risk_difference(strata, 0.95).value
        assert stratified_newcombe_interval(strata, 0.95).value == ours.value


def test_inverse_variance_interval_is_the_hull_of_a_set_in_two_parts() -> None:
    # The last series: with the inverse-variance weights Z(0) = 0 (a stratum without events has
    # Ṽ(0) = 0), so {|Z| <= z} holds a short piece around 0 apart from the piece around the
    # estimate; the interval reported is the smallest one holding both (found above by the
    # independent grid as its first and last point inside)
    strata = SERIES[-1]
    grid = np.linspace(-1 + 1e-9, 1 - 1e-9, 1000)
    inside = np.abs(_z(strata, "miettinen-nurminen", grid)) <= scipy.stats.norm.isf(0.025)
    pieces = int(inside[0]) + int(np.count_nonzero(inside[1:] & ~inside[:-1]))
    assert pieces == 2
    ours = stratified_score_interval(strata, 0.95, weights="miettinen-nurminen")
    assert ours.value < -0.6 and 0.0 < ours.high < 0.02
    assert stratified_score_test(strata, weights="miettinen-nurminen", delta=-0.3).p_value < 0.05
    # the other series: a piece around the d̂ = 1/31 of 2/2 vs 30/31
    strata = SERIES[-2]
    inside = np.abs(_z(strata, "miettinen-nurminen", grid)) <= scipy.stats.norm.isf(0.025)
    assert int(inside[0]) + int(np.count_nonzero(inside[1:] & ~inside[:-1])) == 2
    ours = stratified_score_interval(strata, 0.95, weights="miettinen-nurminen")
    assert ours.low < -0.6 and 1 / 31 < ours.high < 0.06
    assert stratified_score_test(strata, weights="miettinen-nurminen", delta=-0.1).p_value < 0.05
