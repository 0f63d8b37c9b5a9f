"""Unit tests of prespec.stats.intervals: validation, edges and properties of the formulas."""

from __future__ import annotations

import json
import math

import pytest
import scipy.stats

from prespec.stats import Estimate, newcombe_difference, wald_difference, wilson

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
