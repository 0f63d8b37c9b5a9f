"""Unit tests of prespec.stats.ratios: validation, zero cells, edges and properties."""

from __future__ import annotations

import json
import math

import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats.proportions import fisher_exact
from prespec.stats.ratios import (
    HALF_ADDED,
    exact_conditional_odds_ratio,
    katz_ratio,
    koopman_ratio,
    miettinen_nurminen_odds_ratio,
    odds_ratio_constrained_mle,
    ratio_constrained_mle,
    woolf_odds_ratio,
)
from prespec.stats.results import Estimate

Z95 = float(scipy.stats.norm.isf(0.025))
RISK_RATIO = [katz_ratio, koopman_ratio]
ODDS_RATIO = [woolf_odds_ratio, miettinen_nurminen_odds_ratio, exact_conditional_odds_ratio]
ALL = RISK_RATIO + ODDS_RATIO


@pytest.mark.parametrize("function", ALL)
def test_counts_and_level_are_validated(function: object) -> None:
    with pytest.raises(ValueError, match=r"x2 \(6\) must not exceed n2 \(5\)"):
        function(1, 5, 6, 5, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="n2 must be >= 1"):
        function(0, 3, 0, 0, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="x1 must be >= 0"):
        function(-1, 3, 0, 2, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="x1 must be an integer"):
        function(True, 3, 0, 2, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="level must be strictly between 0 and 1"):
        function(1, 3, 0, 2, 0.0)  # type: ignore[operator]


def test_estimates_are_frozen_plain_and_named() -> None:
    names = {
        katz_ratio: ("risk-ratio", "katz"),
        koopman_ratio: ("risk-ratio", "koopman"),
        woolf_odds_ratio: ("odds-ratio", "woolf"),
        miettinen_nurminen_odds_ratio: ("odds-ratio", "miettinen-nurminen"),
        exact_conditional_odds_ratio: ("odds-ratio", "exact-conditional"),
    }
    for function, (measure, method) in names.items():
        e = function(7, 9, 3, 12, 0.9)
        assert isinstance(e, Estimate) and (e.measure, e.method, e.level) == (measure, method, 0.9)
        assert all(type(getattr(e, f)) is float for f in ("value", "low", "high", "level"))
        assert e.note is None
        json.dumps(e.__dict__)
        with pytest.raises(AttributeError):
            e.value = 1.0  # type: ignore[misc]


# --- Katz and Woolf ------------------------------------------------------------------------


def test_katz_by_hand() -> None:
    # 6/10 vs 3/12: RR = 0.6/0.25 = 2.4, se^2 = 1/6 - 1/10 + 1/3 - 1/12 = 0.31667 (by hand)
    e = katz_ratio(6, 10, 3, 12, 0.95)
    se = math.sqrt(1 / 6 - 1 / 10 + 1 / 3 - 1 / 12)
    assert e.value == pytest.approx(2.4, rel=1e-15)
    assert e.low == pytest.approx(2.4 * math.exp(-Z95 * se), rel=1e-12)
    assert e.high == pytest.approx(2.4 * math.exp(Z95 * se), rel=1e-12)


def test_woolf_by_hand() -> None:
    # 6/10 vs 3/12: OR = (6 * 9)/(4 * 3) = 4.5, se^2 = 1/6 + 1/4 + 1/3 + 1/9 (by hand)
    e = woolf_odds_ratio(6, 10, 3, 12, 0.95)
    se = math.sqrt(1 / 6 + 1 / 4 + 1 / 3 + 1 / 9)
    assert e.value == pytest.approx(4.5, rel=1e-15)
    assert (e.low, e.high) == pytest.approx(
        (4.5 * math.exp(-Z95 * se), 4.5 * math.exp(Z95 * se)), rel=1e-12
    )


@pytest.mark.parametrize(
    "counts",
    [(0, 10, 3, 12), (5, 5, 3, 12), (4, 10, 0, 12), (4, 10, 12, 12), (0, 1, 0, 1), (1, 1, 1, 1)],
)
def test_a_zero_cell_adds_one_half_to_every_cell(counts: tuple[int, int, int, int]) -> None:
    # docs/files.md, "results.json": when any cell is zero, 0.5 is added to every cell, for the
    # estimate and the
    # interval, and the note says so; the groups then have n + 1 participants
    x1, n1, x2, n2 = counts
    a, b, c, d = x1 + 0.5, n1 - x1 + 0.5, x2 + 0.5, n2 - x2 + 0.5
    k, w = katz_ratio(*counts, 0.95), woolf_odds_ratio(*counts, 0.95)
    assert k.note == w.note == HALF_ADDED == "0.5 added to every cell because a cell is zero"
    assert k.value == pytest.approx((a / (a + b)) / (c / (c + d)), rel=1e-14)
    assert w.value == pytest.approx(a * d / (b * c), rel=1e-14)
    se_k = math.sqrt(1 / a - 1 / (a + b) + 1 / c - 1 / (c + d))
    se_w = math.sqrt(1 / a + 1 / b + 1 / c + 1 / d)
    assert k.high == pytest.approx(k.value * math.exp(Z95 * se_k), rel=1e-12)
    assert w.low == pytest.approx(w.value * math.exp(-Z95 * se_w), rel=1e-12)
    assert 0.0 < k.low < k.high < math.inf and 0.0 < w.low < w.high < math.inf


def test_no_zero_cell_no_adjustment() -> None:
    assert katz_ratio(1, 2, 1, 3, 0.95).note is None
    assert woolf_odds_ratio(1, 2, 1, 3, 0.95).value == pytest.approx(2.0, rel=1e-15)


# --- constrained estimates -----------------------------------------------------------------


def test_ratio_constrained_mle_keeps_the_constraint() -> None:
    for counts in [(36, 40, 16, 80), (0, 5, 0, 7), (5, 5, 7, 7), (3, 9, 0, 4), (0, 1, 1, 1)]:
        for ratio in (0.0, 0.01, 0.5, 1.0, 2.0, 37.0):
            t1, t2 = ratio_constrained_mle(*counts, ratio)
            assert 0.0 <= t1 <= 1.0 and 0.0 <= t2 <= 1.0
            assert t1 == pytest.approx(ratio * t2, rel=1e-12, abs=1e-15)
    # common practice: under p1 = p2 the estimate is the pooled proportion
    assert ratio_constrained_mle(36, 40, 16, 80, 1.0) == pytest.approx((52 / 120, 52 / 120))


def test_odds_ratio_constrained_mle_keeps_the_constraint() -> None:
    for counts in [(36, 40, 16, 80), (0, 5, 2, 7), (5, 5, 3, 7), (3, 9, 0, 4)]:
        for psi in (0.01, 0.5, 1.0, 2.0, 37.0):
            t1, t2 = odds_ratio_constrained_mle(*counts, psi)
            odds = (t1 / (1 - t1)) / (t2 / (1 - t2))
            assert odds == pytest.approx(psi, rel=1e-9)
            # the total number of events is kept (the score of the nuisance parameter)
            n1, n2 = counts[1], counts[3]
            assert n1 * t1 + n2 * t2 == pytest.approx(counts[0] + counts[2], rel=1e-12)
    assert odds_ratio_constrained_mle(36, 40, 16, 80, 1.0) == pytest.approx((52 / 120,) * 2)


# --- Koopman -------------------------------------------------------------------------------


def test_koopman_all_events_has_a_closed_form() -> None:
    # n1/n1 vs n2/n2: below 1 the constrained estimates are (phi, 1), so Z^2 = n1(1-phi)/phi
    # and the lower limit is n1/(n1 + z^2); above 1 they are (1, 1/phi), Z^2 = n2(phi - 1),
    # and the upper limit is 1 + z^2/n2 (derivation by hand)
    for n1, n2 in [(1, 1), (10, 20), (300, 7)]:
        e = koopman_ratio(n1, n1, n2, n2, 0.95)
        assert e.value == 1.0
        assert e.low == pytest.approx(n1 / (n1 + Z95**2), rel=1e-12)
        assert e.high == pytest.approx(1 + Z95**2 / n2, rel=1e-12)


def test_koopman_zero_events() -> None:
    none_first = koopman_ratio(0, 10, 4, 20, 0.95)
    assert (none_first.value, none_first.low) == (0.0, 0.0) and 0 < none_first.high < math.inf
    none_second = koopman_ratio(4, 20, 0, 10, 0.95)
    assert none_second.value == none_second.high == math.inf
    assert none_second.low == pytest.approx(1 / none_first.high, rel=1e-12)
    neither = koopman_ratio(0, 10, 0, 20, 0.95)
    assert math.isnan(neither.value) and (neither.low, neither.high) == (0.0, math.inf)


# --- Miettinen-Nurminen odds ratio ---------------------------------------------------------


def test_mn_odds_ratio_zero_cells() -> None:
    # an estimate of 0 (x1 = 0 or x2 = n2) has lower limit 0; of inf (x1 = n1 or x2 = 0)
    # upper limit inf; a zero column margin leaves it undefined
    for counts in [(0, 10, 4, 20), (3, 10, 20, 20), (0, 1, 1, 1)]:
        e = miettinen_nurminen_odds_ratio(*counts, 0.95)
        assert e.value == e.low == 0.0 and 0.0 < e.high < math.inf
    for counts in [(10, 10, 4, 20), (3, 10, 0, 20), (1, 1, 0, 1)]:
        e = miettinen_nurminen_odds_ratio(*counts, 0.95)
        assert e.value == e.high == math.inf and 0.0 < e.low < math.inf
    for counts in [(0, 10, 0, 20), (10, 10, 20, 20), (1, 1, 1, 1)]:
        e = miettinen_nurminen_odds_ratio(*counts, 0.95)
        assert math.isnan(e.value) and (e.low, e.high) == (0.0, math.inf)


# --- exact conditional ---------------------------------------------------------------------


def test_exact_conditional_edges() -> None:
    # x1 at the bottom of its support: estimate 0 and lower limit 0; at the top: inf
    bottom = exact_conditional_odds_ratio(0, 10, 4, 20, 0.95)
    assert bottom.value == bottom.low == 0.0 and 0.0 < bottom.high < math.inf
    top = exact_conditional_odds_ratio(4, 4, 0, 20, 0.95)
    assert top.value == top.high == math.inf and 0.0 < top.low
    # a zero margin: one possible table
    for counts in [(0, 10, 0, 20), (10, 10, 20, 20), (0, 1, 0, 1)]:
        e = exact_conditional_odds_ratio(*counts, 0.95)
        assert math.isnan(e.value) and (e.low, e.high) == (0.0, math.inf)


def test_exact_conditional_by_hand() -> None:
    # 1/1 vs 0/1 at level 1 - 2a: X is 0 or 1 with weights 1 and psi, so the lower limit
    # solves psi/(1 + psi) = a, psi = a/(1 - a) (by hand); a = 0.025 gives 1/39
    e = exact_conditional_odds_ratio(1, 1, 0, 1, 0.95)
    assert e.value == e.high == math.inf and e.low == pytest.approx(1 / 39, rel=1e-12)
    # 1/2 vs 1/2: symmetric, estimate 1, limits reciprocal
    f = exact_conditional_odds_ratio(1, 2, 1, 2, 0.95)
    assert f.value == pytest.approx(1.0, rel=1e-12)
    assert f.low * f.high == pytest.approx(1.0, rel=1e-10)


# --- properties ------------------------------------------------------------------------------

_group = st.integers(min_value=1, max_value=40).flatmap(
    lambda n: st.tuples(st.integers(min_value=0, max_value=n), st.just(n))
)
_level = st.sampled_from([0.8, 0.9, 0.95, 0.99])


def _reciprocal(value: float) -> float:
    return math.inf if value == 0.0 else 1.0 / value


@settings(max_examples=120, deadline=None)
@given(first=_group, second=_group, level=_level)
def test_ratio_interval_properties(
    first: tuple[int, int], second: tuple[int, int], level: float
) -> None:
    (x1, n1), (x2, n2) = first, second
    for function in ALL:
        e = function(x1, n1, x2, n2, level)
        s = function(x2, n2, x1, n1, level)
        assert 0.0 <= e.low <= e.high <= math.inf
        if not math.isnan(e.value):
            assert e.low <= e.value * (1 + 1e-12) and e.value <= e.high * (1 + 1e-12)
        # swapping the groups maps the measure and its limits to their reciprocals
        assert s.low == pytest.approx(_reciprocal(e.high), rel=1e-9)
        assert s.high == pytest.approx(_reciprocal(e.low), rel=1e-9)
        wider = function(x1, n1, x2, n2, 0.999)
        assert wider.low <= e.low * (1 + 1e-9) and wider.high >= e.high * (1 - 1e-9)


@settings(max_examples=80, deadline=None)
@given(first=_group, second=_group, level=_level)
def test_odds_ratio_events_and_non_events_relabelled(
    first: tuple[int, int], second: tuple[int, int], level: float
) -> None:
    # counting non-events instead of events maps the odds ratio to its reciprocal
    (x1, n1), (x2, n2) = first, second
    for function in ODDS_RATIO:
        e = function(x1, n1, x2, n2, level)
        r = function(n1 - x1, n1, n2 - x2, n2, level)
        assert r.low == pytest.approx(_reciprocal(e.high), rel=1e-9)
        assert r.high == pytest.approx(_reciprocal(e.low), rel=1e-9)


@settings(max_examples=80, deadline=None)
@given(first=_group, second=_group, level=_level)
def test_exact_interval_excludes_one_as_fisher_one_sided_rejects(
    first: tuple[int, int], second: tuple[int, int], level: float
) -> None:
    # Cornfield's interval and Fisher's test invert the same conditional law: the lower
    # limit exceeds 1 exactly when the one-sided Fisher p-value P(X >= x1; psi = 1) is below
    # (1 - level)/2, and likewise the upper limit is below 1 for the other tail
    (x1, n1), (x2, n2) = first, second
    e = exact_conditional_odds_ratio(x1, n1, x2, n2, level)
    tail = (1 - level) / 2
    greater = fisher_exact(x1, n1, x2, n2, alternative="greater").p_value
    less = fisher_exact(x1, n1, x2, n2, alternative="less").p_value
    two_sided = fisher_exact(x1, n1, x2, n2).p_value
    if abs(greater - tail) > 1e-9:
        assert (e.low > 1.0) == (greater < tail)
    if abs(less - tail) > 1e-9:
        assert (e.high < 1.0) == (less < tail)
    # and the two-sided exact p-value is never below the one-sided one in the direction of
    # the observed effect
    direction = greater if x1 * n2 >= x2 * n1 else less
    assert two_sided >= direction - 1e-12


def test_constrained_estimates_are_validated() -> None:
    with pytest.raises(ValueError, match="ratio must be finite and >= 0, got -1.0"):
        ratio_constrained_mle(1, 2, 1, 2, -1.0)
    with pytest.raises(ValueError, match="odds_ratio must be finite and > 0, got 0.0"):
        odds_ratio_constrained_mle(1, 2, 1, 2, 0.0)
    with pytest.raises(ValueError, match="odds_ratio must be a number"):
        odds_ratio_constrained_mle(1, 2, 1, 2, "2")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"x1 \(3\) must not exceed n1 \(2\)"):
        ratio_constrained_mle(3, 2, 1, 2, 1.0)


@pytest.mark.parametrize("x1, n1, x2, n2, ratio", [
    (2, 2, 1, 1, 0.99999), (1, 1, 2, 2, 1 / 0.99999), (80, 80, 79, 80, 1.0000001),
    (40, 80, 20, 80, 2.0), (0, 30, 5, 30, 0.5), (7, 9, 3, 11, 0.05), (50, 50, 50, 50, 1.0),
])
def test_ratio_mle_matches_the_quadratic_solved_in_50_digits(
        x1: int, n1: int, x2: int, n2: int, ratio: float) -> None:
    """The restricted MLE p̃2 (and 1 − p̃2, which the score variance needs) against the
    smaller root of the same quadratic worked in 50-digit decimal arithmetic by the textbook
    root formula, which has no cancellation to fear at that precision."""
    # common practice: a quadratic's roots checked in extended precision
    from decimal import Decimal, getcontext

    from prespec.stats.ratios import ratio_mle

    getcontext().prec = 50
    r = Decimal(ratio)  # the float's exact value
    a = (n1 + n2) * r
    b = -(n1 * r + x1 + n2 + x2 * r)
    c = Decimal(x1 + x2)
    exact = (-b - (b * b - 4 * a * c).sqrt()) / (2 * a)
    exact = min(exact, Decimal(1), 1 / r)
    p1, p2 = ratio_mle(x1, n1, x2, n2, ratio)
    assert p2 == pytest.approx(float(exact), rel=1e-13, abs=1e-300)
    assert 1.0 - p2 == pytest.approx(float(1 - exact), rel=1e-9, abs=1e-15)
    assert p1 == pytest.approx(min(1.0, ratio * float(exact)), rel=1e-13)


def odds_ratio_cells_50_digits(x1: int, n1: int, x2: int, n2: int, psi: object) -> tuple:
    """(p̃1, 1 − p̃1, p̃2, 1 − p̃2) under odds ratio ψ, from the textbook root of
    n2(ψ − 1)p² + (n1ψ + n2 − m(ψ − 1))p − m = 0 (Miettinen and Nurminen 1985) worked in
    50-digit decimal arithmetic, where its cancellation costs nothing."""
    from decimal import Decimal, getcontext

    getcontext().prec = 50
    psi = Decimal(psi)  # type: ignore[arg-type]
    m = x1 + x2
    b = n1 * psi + n2 - m * (psi - 1)
    discriminant = b * b + 4 * n2 * (psi - 1) * m
    p2 = 2 * m / (b + discriminant.sqrt())
    p1 = psi * p2 / (1 + p2 * (psi - 1))
    return p1, 1 - p1, p2, 1 - p2


@pytest.mark.parametrize("x1, n1, x2, n2", [
    (1, 2, 99999, 100000), (1, 5, 499999, 500000), (1, 1000000, 999999, 1000000),
    (3, 10, 5, 12), (5, 5, 1, 100), (0, 7, 7, 7), (40, 80, 20, 80), (2, 3, 1, 200000),
])
@pytest.mark.parametrize("psi", [1e-13, 3.3e-8, 7.3e-7, 0.05, 0.5, 1.0, 1.0000001, 3.0, 5e4, 1e9])
def test_odds_ratio_mle_and_complements_match_50_digits(
        x1: int, n1: int, x2: int, n2: int, psi: float) -> None:
    """The constrained MLEs and their complements to 1e-12 relative, ψ far below and above 1
    (the second form of each root, b < 0, is taken for ψ > 1 with m > n1 + (n2 + m)/ψ)."""
    # common practice: a quadratic's roots checked in extended precision
    from prespec.stats.ratios import odds_ratio_cells

    got = odds_ratio_cells(x1, n1, x2, n2, psi)
    want = odds_ratio_cells_50_digits(x1, n1, x2, n2, psi)
    for value, exact in zip(got, want, strict=True):
        assert value == pytest.approx(float(exact), rel=1e-12, abs=1e-300)


def _mn_odds_lower_limit_50_digits(x1: int, n1: int, x2: int, n2: int, z: float) -> float:
    """The Miettinen–Nurminen lower limit for the odds ratio by bisection on log ψ of the
    statistic Z(ψ) = (x1 − n1p̃1)·sqrt((1/v1 + 1/v2)(N − 1)/N) in 50-digit arithmetic, for
    the same normal quantile z (its float value taken exactly)."""
    from decimal import Decimal

    total = n1 + n2
    zz = Decimal(z)

    def statistic(psi: Decimal) -> Decimal:
        p1, q1, p2, q2 = odds_ratio_cells_50_digits(x1, n1, x2, n2, psi)
        v1, v2 = n1 * p1 * q1, n2 * p2 * q2
        return (x1 - n1 * p1) * ((1 / v1 + 1 / v2) * (total - 1) / total).sqrt()

    high = Decimal(x1 * (n2 - x2)) / Decimal((n1 - x1) * x2)
    low = high / Decimal(10) ** 40
    for _ in range(400):
        middle = (low * high).sqrt()
        if statistic(middle) > zz:
            low = middle
        else:
            high = middle
    return float((low * high).sqrt())


@pytest.mark.parametrize("x1, n1, x2, n2, level", [
    (1, 2, 99999, 100000, 0.90), (1, 5, 499999, 500000, 0.95),
    (1, 1000000, 999999, 1000000, 0.90), (3, 10, 5, 12, 0.95), (20, 50, 5, 60, 0.99),
])
def test_mn_odds_ratio_limits_on_extreme_tables_match_50_digits(
        x1: int, n1: int, x2: int, n2: int, level: float) -> None:
    """The lower limit (and the upper, as 1/the lower limit of the swapped table) against a
    50-digit search; the first three tables lost up to 4e-4 relative when the discriminant
    was formed as b² + 4n2(ψ − 1)m and 1 − p̃ by subtraction."""
    z = float(scipy.stats.norm.isf((1.0 - level) / 2.0))
    estimate = miettinen_nurminen_odds_ratio(x1, n1, x2, n2, level)
    assert estimate.low == pytest.approx(_mn_odds_lower_limit_50_digits(x1, n1, x2, n2, z),
                                         rel=1e-12, abs=0.0)
    swapped_low = _mn_odds_lower_limit_50_digits(x2, n2, x1, n1, z)
    assert estimate.high == pytest.approx(1.0 / swapped_low, rel=1e-12, abs=0.0)
