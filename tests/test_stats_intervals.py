"""Unit tests of prespec.stats.intervals: validation, edges and properties of the formulas."""

from __future__ import annotations

import itertools
import json
import math

import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats import Estimate, newcombe_difference, wald_difference, wilson
from prespec.stats.intervals import (
    agresti_caffo_difference,
    difference_constrained_mle,
    miettinen_nurminen_difference,
)

Z95 = float(scipy.stats.norm.isf(0.025))  # 1.959964...


def test_estimates_are_frozen_and_plain() -> None:
    estimate = newcombe_difference(56, 70, 48, 80, 0.95)
    assert isinstance(estimate, Estimate)
    with pytest.raises(AttributeError):
        estimate.low = 0.0  # type: ignore[misc]
    assert (estimate.measure, estimate.method, estimate.level) == (
        "risk-difference",
        "newcombe",
        0.95,
    )
    assert estimate.value == 0.2  # exact fraction (56*80 - 48*70) / (70*80), one rounding
    for e in (estimate, wald_difference(1, 2, 1, 3, 0.9), wilson(1, 2, 0.9)):
        assert all(type(getattr(e, f)) is float for f in ("value", "low", "high", "level"))
        json.dumps(e.__dict__)
    assert (wilson(1, 2, 0.9).measure, wilson(1, 2, 0.9).method) == ("proportion", "wilson")
    assert wald_difference(1, 2, 1, 3, 0.9).method == "wald"


# --- validation ----------------------------------------------------------------------------


@pytest.mark.parametrize("level", [0, 1, 0.0, 1.0, -0.5, 95, math.nan, math.inf, True, "0.95"])
def test_bad_level_is_refused(level: object) -> None:
    for call in (
        lambda: wilson(1, 2, level),  # type: ignore[arg-type]
        lambda: wald_difference(1, 2, 1, 2, level),  # type: ignore[arg-type]
        lambda: newcombe_difference(1, 2, 1, 2, level),  # type: ignore[arg-type]
    ):
        with pytest.raises(ValueError, match="level must be"):
            call()


@pytest.mark.parametrize(
    "args, message",
    [
        ((3, 2), r"x \(3\) must not exceed n \(2\)"),
        ((0, 0), "n must be >= 1"),
        ((-1, 5), "x must be >= 0"),
        ((1.0, 5), "x must be an integer"),
        ((1, "5"), "n must be an integer"),
    ],
)
def test_wilson_counts_are_validated(args: tuple[object, object], message: str) -> None:
    with pytest.raises(ValueError, match=message):
        wilson(*args, 0.95)  # type: ignore[arg-type]


@pytest.mark.parametrize("function", [wald_difference, newcombe_difference])
def test_difference_counts_are_validated(function: object) -> None:
    with pytest.raises(ValueError, match=r"x2 \(6\) must not exceed n2 \(5\)"):
        function(1, 5, 6, 5, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="n1 must be >= 1"):
        function(0, 0, 1, 5, 0.95)  # type: ignore[operator]


# --- Wilson --------------------------------------------------------------------------------


def test_wilson_at_zero_and_all_events() -> None:
    # common practice: at x = 0 the Wilson interval is [0, z^2 / (n + z^2)], and at x = n it is
    # [n / (n + z^2), 1]; the limits are exactly 0 and 1, not a rounding residue
    for n in (1, 2, 10, 1000):
        zero, full = wilson(0, n, 0.95), wilson(n, n, 0.95)
        assert zero.low == 0.0 and full.high == 1.0
        assert zero.high == pytest.approx(Z95**2 / (n + Z95**2), rel=1e-12)
        assert full.low == pytest.approx(n / (n + Z95**2), rel=1e-12)


def test_wilson_is_symmetric_under_relabelling() -> None:
    # property of the formula: the interval for x / n mirrors that for (n - x) / n
    for x, n in [(0, 7), (3, 7), (12, 40), (1, 1)]:
        a, b = wilson(x, n, 0.9), wilson(n - x, n, 0.9)
        assert a.low == pytest.approx(1 - b.high, abs=1e-15)
        assert a.high == pytest.approx(1 - b.low, abs=1e-15)


def test_wilson_half_is_centred() -> None:
    estimate = wilson(5, 10, 0.95)
    assert estimate.value == 0.5
    assert estimate.low + estimate.high == pytest.approx(1.0, rel=1e-15)


def test_higher_level_is_wider() -> None:
    widths = [wilson(7, 30, lvl).high - wilson(7, 30, lvl).low for lvl in (0.8, 0.9, 0.95, 0.99)]
    assert widths == sorted(widths) and len(set(widths)) == 4
    for function in (wald_difference, newcombe_difference):
        w = [function(7, 30, 12, 31, lvl) for lvl in (0.8, 0.95, 0.99)]
        assert w[0].low > w[1].low > w[2].low and w[0].high < w[1].high < w[2].high


# --- Wald ------------------------------------------------------------------------------------


def test_wald_zero_width_is_kept() -> None:
    # both proportions 0, or both 1, or 0 and 1: the standard error is 0 and so is the width
    for args, value in [((0, 10, 0, 20), 0.0), ((10, 10, 20, 20), 0.0), ((4, 4, 0, 9), 1.0)]:
        estimate = wald_difference(*args, 0.95)
        assert estimate.low == estimate.high == estimate.value == value


def test_wald_clipped_to_minus_one_one() -> None:
    # 9/10 vs 1/10 at 99 per cent: 0.8 + 2.5758 * sqrt(0.018) = 1.1456 unclipped
    assert wald_difference(9, 10, 1, 10, 0.99).high == 1.0
    assert wald_difference(1, 10, 9, 10, 0.99).low == -1.0
    assert wald_difference(9, 10, 1, 10, 0.99).low == pytest.approx(
        0.8 - float(scipy.stats.norm.isf(0.005)) * math.sqrt(0.018), rel=1e-12
    )


def test_wald_by_hand() -> None:
    # 3/8 vs 1/8: d = 0.25, se^2 = (3/8)(5/8)/8 + (1/8)(7/8)/8 = 22/512 (hand computation)
    estimate = wald_difference(3, 8, 1, 8, 0.95)
    half = Z95 * math.sqrt(22 / 512)
    assert estimate.value == 0.25
    assert (estimate.low, estimate.high) == pytest.approx((0.25 - half, 0.25 + half), rel=1e-12)


# --- Newcombe --------------------------------------------------------------------------------


def test_newcombe_changes_sign_when_groups_swap() -> None:
    # property of the formula: (x2, n2) vs (x1, n1) gives the interval of -(p1 - p2)
    for args in [(56, 70, 48, 80), (5, 56, 0, 29), (0, 1, 1, 1), (3, 3, 0, 8)]:
        a = newcombe_difference(*args, 0.95)
        b = newcombe_difference(args[2], args[3], args[0], args[1], 0.95)
        assert (a.low, a.high) == pytest.approx((-b.high, -b.low), abs=1e-15)


def test_newcombe_at_the_extremes_stays_in_range() -> None:
    # single participants and all-or-none groups: within [-1, 1], containing the estimate
    for args in [(1, 1, 0, 1), (0, 1, 1, 1), (1, 1, 1, 1), (0, 1, 0, 1), (50, 50, 0, 50)]:
        e = newcombe_difference(*args, 0.99)
        assert -1.0 <= e.low <= e.value <= e.high <= 1.0
    # 1/1 vs 0/1: d = 1, upper limit exactly 1 (Wilson limits u1 = 1, l2 = 0)
    assert newcombe_difference(1, 1, 0, 1, 0.95).high == 1.0


def test_newcombe_from_wilson_limits() -> None:
    # the definition (Newcombe 1998, method 10), from our own Wilson limits
    a, b = wilson(9, 10, 0.9), wilson(3, 10, 0.9)
    e = newcombe_difference(9, 10, 3, 10, 0.9)
    assert e.low == pytest.approx(0.6 - math.hypot(0.9 - a.low, b.high - 0.3), rel=1e-12)
    assert e.high == pytest.approx(0.6 + math.hypot(a.high - 0.9, 0.3 - b.low), rel=1e-12)


# --- Agresti-Caffo ---------------------------------------------------------------------------

DIFFERENCE_METHODS = [
    wald_difference,
    newcombe_difference,
    agresti_caffo_difference,
    miettinen_nurminen_difference,
]


@pytest.mark.parametrize("function", [agresti_caffo_difference, miettinen_nurminen_difference])
def test_new_difference_counts_and_level_are_validated(function: object) -> None:
    with pytest.raises(ValueError, match=r"x2 \(6\) must not exceed n2 \(5\)"):
        function(1, 5, 6, 5, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="n1 must be >= 1"):
        function(0, 0, 1, 5, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="x1 must be an integer"):
        function(1.5, 5, 1, 5, 0.95)  # type: ignore[operator]
    with pytest.raises(ValueError, match="level must be strictly between 0 and 1"):
        function(1, 5, 1, 5, 1.0)  # type: ignore[operator]


def test_agresti_caffo_by_hand() -> None:
    # 3/8 vs 1/8: adjusted 4/10 and 2/10, centre 0.2, se^2 = 0.24/10 + 0.16/10 = 0.04 (by hand)
    e = agresti_caffo_difference(3, 8, 1, 8, 0.95)
    assert (e.measure, e.method, e.value, e.note) == (
        "risk-difference",
        "agresti-caffo",
        0.25,
        None,
    )
    assert (e.low, e.high) == pytest.approx((0.2 - Z95 * 0.2, 0.2 + Z95 * 0.2), rel=1e-12)


def test_agresti_caffo_is_clipped_and_never_zero_width() -> None:
    # 1/1 vs 0/1 at 99 per cent: centre 1/3, half 2.5758 * sqrt(4/27) = 0.991, so clipped at 1
    e = agresti_caffo_difference(1, 1, 0, 1, 0.99)
    assert e.high == 1.0 and e.value == 1.0
    # unlike Wald, no data give a zero-width interval
    for args in [(0, 10, 0, 20), (10, 10, 20, 20), (0, 1, 0, 1)]:
        e = agresti_caffo_difference(*args, 0.95)
        assert e.high - e.low > 0.05


def test_agresti_caffo_may_exclude_the_observed_difference_at_low_levels() -> None:
    # a property of the method (the interval is centred on the adjusted difference): 0/1 vs 1/1
    # at 90 per cent is -1/3 -/+ 1.645 * sqrt(4/27) = [-0.966, 0.300], without d = -1; at
    # 95 per cent the lower end is -1.088, clipped to -1
    e90 = agresti_caffo_difference(0, 1, 1, 1, 0.90)
    half = float(scipy.stats.norm.isf(0.05)) * math.sqrt(4 / 27)
    assert e90.low == pytest.approx(-1 / 3 - half, rel=1e-12) and e90.low > e90.value == -1.0
    assert agresti_caffo_difference(0, 1, 1, 1, 0.95).low == -1.0


def test_agresti_caffo_contains_the_difference_from_95_per_cent() -> None:
    # every table with n1, n2 <= 12 (the worst cases are the smallest groups)
    for n1 in range(1, 13):
        for n2 in range(1, 13):
            for x1 in range(n1 + 1):
                for x2 in range(n2 + 1):
                    e = agresti_caffo_difference(x1, n1, x2, n2, 0.95)
                    assert e.low <= e.value <= e.high, (x1, n1, x2, n2)


# --- Miettinen-Nurminen ----------------------------------------------------------------------


def test_constrained_mle_satisfies_the_constraint_and_its_range() -> None:
    for x1, n1, x2, n2 in [(56, 70, 48, 80), (0, 10, 0, 20), (10, 10, 0, 20), (1, 1, 0, 1)]:
        for delta in (-1.0, -0.999, -0.5, -0.1, 0.0, 0.2, 0.7, 0.999999, 1.0):
            t1, t2 = difference_constrained_mle(x1, n1, x2, n2, delta)
            assert 0.0 <= t1 <= 1.0 and 0.0 <= t2 <= 1.0
            assert t1 - t2 == pytest.approx(delta, abs=1e-12)


def test_constrained_mle_at_zero_is_the_pooled_proportion() -> None:
    # common practice: under p1 = p2 the maximum likelihood estimate is the pooled proportion
    for x1, n1, x2, n2 in [(56, 70, 48, 80), (0, 10, 3, 20), (7, 7, 1, 2), (0, 3, 0, 4)]:
        t1, t2 = difference_constrained_mle(x1, n1, x2, n2, 0.0)
        assert t1 == pytest.approx((x1 + x2) / (n1 + n2), abs=1e-12)
        assert t2 == pytest.approx((x1 + x2) / (n1 + n2), abs=1e-12)


def test_constrained_mle_at_the_observed_difference_is_the_observed_pair() -> None:
    for x1, n1, x2, n2 in [(56, 70, 48, 80), (9, 10, 3, 10), (5, 56, 0, 29), (3, 3, 0, 8)]:
        t1, t2 = difference_constrained_mle(x1, n1, x2, n2, x1 / n1 - x2 / n2)
        assert (t1, t2) == pytest.approx((x1 / n1, x2 / n2), abs=1e-9)


def test_mn_no_events_in_either_group_has_a_closed_form() -> None:
    # 0/n1 vs 0/n2: for delta < 0 the constrained estimates are (0, -delta), so
    # Z^2 = -delta * n2 (N - 1) / (N (1 + delta)) and the lower limit is -k/(1 + k) with
    # k = z^2 N / (n2 (N - 1)); the upper limit is the same with n1 (derivation by hand)
    for n1, n2 in [(10, 20), (1, 1), (3, 50), (400, 7)]:
        e = miettinen_nurminen_difference(0, n1, 0, n2, 0.95)
        total = n1 + n2
        k2 = Z95**2 * total / (n2 * (total - 1))
        k1 = Z95**2 * total / (n1 * (total - 1))
        assert e.value == 0.0
        assert e.low == pytest.approx(-k2 / (1 + k2), rel=1e-12)
        assert e.high == pytest.approx(k1 / (1 + k1), rel=1e-12)


def test_mn_limits_reach_minus_one_and_one() -> None:
    # 0/n1 vs n2/n2: d = -1 and the lower limit is exactly -1 (the score numerator is 0
    # there, where a naive search on Z(delta) - z meets 0/0); the upper limit is inside
    for n1, n2 in [(1, 1), (10, 20), (200, 3)]:
        e = miettinen_nurminen_difference(0, n1, n2, n2, 0.95)
        assert e.value == -1.0 and e.low == -1.0 and -1.0 < e.high < 1.0
        # relabelling events as non-events maps this table to n1/n1 vs 0/n2 and d to -d
        f = miettinen_nurminen_difference(n1, n1, 0, n2, 0.95)
        assert f.value == 1.0 and f.high == 1.0
        assert f.low == pytest.approx(-e.high, rel=1e-13)


def _mn_z(x1: int, n1: int, x2: int, n2: int, delta: float) -> float:
    """The Miettinen-Nurminen statistic from the closed-form constrained estimates."""
    t1, t2 = difference_constrained_mle(x1, n1, x2, n2, delta)
    total = n1 + n2
    variance = (t1 * (1 - t1) / n1 + t2 * (1 - t2) / n2) * total / (total - 1)
    return (x1 / n1 - x2 / n2 - delta) / math.sqrt(variance)


@pytest.mark.parametrize(
    "args", [(56, 70, 48, 80), (9, 10, 3, 10), (1, 1, 0, 1), (0, 3, 1, 2), (40, 40, 1, 400)]
)
def test_mn_limits_solve_the_score_equation(args: tuple[int, int, int, int]) -> None:
    for level in (0.8, 0.95, 0.999):
        z = float(scipy.stats.norm.isf((1 - level) / 2))
        e = miettinen_nurminen_difference(*args, level)
        if e.low > -1.0:
            assert _mn_z(*args, e.low) == pytest.approx(z, rel=1e-9)
        if e.high < 1.0:
            assert _mn_z(*args, e.high) == pytest.approx(-z, rel=1e-9)


def test_mn_score_is_decreasing_on_a_grid() -> None:
    # the interval is {delta: |Z| <= z} only if Z falls with delta; checked on a fine grid
    for args in [(56, 70, 48, 80), (0, 10, 0, 20), (1, 1, 0, 1), (5, 56, 0, 29), (2, 3, 3, 3)]:
        grid = [-0.999 + 1.998 * i / 400 for i in range(401)]
        d = args[0] / args[1] - args[2] / args[3]
        zs = [_mn_z(*args, delta) for delta in grid if abs(delta - d) > 1e-9]
        assert all(a > b for a, b in itertools.pairwise(zs)), args


def test_mn_at_the_smallest_tables() -> None:
    # n1 = n2 = 1, every outcome: within [-1, 1], containing d, mirrored by the swap
    z = Z95
    for x1 in (0, 1):
        for x2 in (0, 1):
            e = miettinen_nurminen_difference(x1, 1, x2, 1, 0.95)
            assert -1.0 <= e.low <= e.value <= e.high <= 1.0
    # 0/1 vs 0/1: k = z^2 * 2 / (1 * 1) = 2 z^2, limits -/+ k / (1 + k)
    e = miettinen_nurminen_difference(0, 1, 0, 1, 0.95)
    assert e.high == pytest.approx(2 * z * z / (1 + 2 * z * z), rel=1e-12)


# --- properties of all four difference intervals --------------------------------------------

_group = st.integers(min_value=1, max_value=60).flatmap(
    lambda n: st.tuples(st.integers(min_value=0, max_value=n), st.just(n))
)
_level = st.sampled_from([0.8, 0.9, 0.95, 0.99])


@settings(max_examples=150, deadline=None)
@given(first=_group, second=_group, level=_level)
def test_difference_intervals_properties(
    first: tuple[int, int], second: tuple[int, int], level: float
) -> None:
    (x1, n1), (x2, n2) = first, second
    for function in DIFFERENCE_METHODS:
        e = function(x1, n1, x2, n2, level)
        m = function(x2, n2, x1, n1, level)
        assert -1.0 <= e.low <= e.high <= 1.0
        assert e.value == x1 / n1 - x2 / n2 or e.value == pytest.approx(x1 / n1 - x2 / n2)
        # swapping the groups mirrors the interval
        assert (m.low, m.high) == pytest.approx((-e.high, -e.low), abs=1e-12)
        if function is not agresti_caffo_difference or level >= 0.95:
            assert e.low <= e.value <= e.high
        wider = function(x1, n1, x2, n2, 0.999)
        assert wider.low <= e.low + 1e-12 and wider.high >= e.high - 1e-12


def test_constrained_mle_is_validated() -> None:
    for delta in (1.5, -1.01, math.nan, "0.1", True):
        with pytest.raises(ValueError, match="delta must be a number in"):
            difference_constrained_mle(1, 2, 1, 2, delta)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="n2 must be >= 1"):
        difference_constrained_mle(1, 2, 0, 0, 0.1)
