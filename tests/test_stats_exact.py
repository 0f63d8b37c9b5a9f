"""Unit and property tests of prespec.stats.exact: validation, edges, symmetries, the cap.

Values checked against published examples and against scipy are in
tests/reference/test_ref_exact.py; here the tests are of the functions' own contracts.
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from prespec.stats.exact import (
    MAX_TABLES,
    FisherK,
    barnard_exact,
    boschloo_exact,
    fisher_exact_k,
)
from prespec.stats.proportions import fisher_exact
from prespec.stats.results import TestResult

ALTERNATIVES = ("two-sided", "greater", "less")
UNCONDITIONAL = (barnard_exact, boschloo_exact)


@st.composite
def two_groups(draw: st.DrawFn, max_n: int = 12) -> tuple[int, int, int, int]:
    n1 = draw(st.integers(1, max_n))
    n2 = draw(st.integers(1, max_n))
    return draw(st.integers(0, n1)), n1, draw(st.integers(0, n2)), n2


@st.composite
def k_groups(draw: st.DrawFn) -> tuple[list[int], list[int]]:
    totals = draw(st.lists(st.integers(1, 7), min_size=2, max_size=5))
    events = [draw(st.integers(0, n)) for n in totals]
    return events, totals


# --- results ---------------------------------------------------------------------------------


def test_results_are_frozen_plain_and_named_as_in_the_plan() -> None:
    barnard = barnard_exact(3, 10, 7, 10, alternative="two-sided")
    boschloo = boschloo_exact(3, 10, 7, 10, alternative="less")
    k = fisher_exact_k([1, 4, 6], [8, 8, 8])
    assert (barnard.method, boschloo.method, k.result.method) == (
        "barnard-exact",
        "boschloo-exact",
        "fisher-exact",
    )
    assert isinstance(k, FisherK) and isinstance(k.result, TestResult)
    for result in (barnard, boschloo, k.result):
        assert result.df is None
        assert type(result.p_value) is float
        json.dumps(result.__dict__)
    assert type(barnard.statistic) is float and type(boschloo.statistic) is float
    assert k.result.statistic is None and k.result.alternative == "two-sided"
    assert type(k.tables_enumerated) is int and k.monte_carlo_se is None
    with pytest.raises(AttributeError):
        k.tables_enumerated = 0  # type: ignore[misc]
    with pytest.raises(AttributeError):
        barnard.p_value = 0.5  # type: ignore[misc]


# --- validation ------------------------------------------------------------------------------


@pytest.mark.parametrize("test", UNCONDITIONAL)
@pytest.mark.parametrize(
    "args, message",
    [
        ((4, 3, 1, 3), r"x1 \(4\) must not exceed n1 \(3\)"),
        ((1, 3, 5, 4), r"x2 \(5\) must not exceed n2 \(4\)"),
        ((0, 0, 1, 3), "n1 must be >= 1"),
        ((-1, 3, 1, 3), "x1 must be >= 0"),
        ((1.5, 3, 1, 3), "x1 must be an integer"),
        ((1, 3, True, 3), "x2 must be an integer"),
    ],
)
def test_unconditional_counts_are_validated(test, args, message) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(ValueError, match=message):
        test(*args, alternative="two-sided")


@pytest.mark.parametrize("test", UNCONDITIONAL)
@pytest.mark.parametrize("bad", ["two.sided", "both", None, "Greater"])
def test_unconditional_alternative_is_validated(test, bad) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(ValueError, match="alternative must be one of two-sided, greater, less"):
        test(1, 3, 2, 4, alternative=bad)


def test_unconditional_alternative_has_no_default() -> None:
    # the brief's signature: the alternative is always stated
    with pytest.raises(TypeError):
        barnard_exact(1, 3, 2, 4)  # type: ignore[call-arg]
    with pytest.raises(TypeError):
        boschloo_exact(1, 3, 2, 4)  # type: ignore[call-arg]


@pytest.mark.parametrize(
    "events, totals, message",
    [
        ([1], [3], "at least 2 groups"),
        ([1, 2], [3], "differ in length"),
        ([1, 4], [3, 3], r"events\[1\] \(4\) must not exceed totals\[1\] \(3\)"),
        ([1, 2], [3, 0], r"totals\[1\] must be >= 1"),
        ("12", "34", "sequences of integers"),
    ],
)
def test_fisher_k_table_is_validated(events: object, totals: object, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        fisher_exact_k(events, totals)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "option, message",
    [
        (100, r"monte_carlo must be \(tables, seed\)"),
        ("100", r"monte_carlo must be \(tables, seed\)"),
        ((100,), r"monte_carlo must be \(tables, seed\)"),
        ((0, 1), "monte_carlo tables must be an integer >= 1, got 0"),
        ((10.0, 1), "monte_carlo tables must be an integer >= 1"),
        ((10, -1), "monte_carlo seed must be an integer >= 0, got -1"),
        ((10, True), "monte_carlo seed must be an integer >= 0"),
    ],
)
def test_monte_carlo_option_is_validated(option: object, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        fisher_exact_k([1, 2, 3], [5, 5, 5], monte_carlo=option)  # type: ignore[arg-type]


@pytest.mark.parametrize("bad", [0, -5, 2.5, True, None])
def test_max_tables_is_validated(bad: object) -> None:
    with pytest.raises(ValueError, match="max_tables must be an integer >= 1"):
        fisher_exact_k([1, 2, 3], [5, 5, 5], max_tables=bad)  # type: ignore[arg-type]


# --- the cap on enumeration ------------------------------------------------------------------


def test_too_many_tables_is_one_line_suggesting_monte_carlo() -> None:
    events, totals = [30, 45, 50, 38, 42, 61, 40, 55, 47, 52], [150] * 10
    with pytest.raises(ValueError) as caught:
        fisher_exact_k(events, totals)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith("the 10x2 table has ")
    assert f"max_tables = {MAX_TABLES}" in message
    assert message.endswith("monte_carlo: {tables: 100000, seed: 1}")


def test_a_reference_set_within_the_cap_is_always_enumerated() -> None:
    # 3 groups of 4 with 6 events: the tables (a, b, c), 0 <= each <= 4, a + b + c = 6, are
    # 28 - 3 * 3 = 19 (stars and bars less those with a count above 4) # common practice
    result = fisher_exact_k([2, 2, 2], [4, 4, 4], max_tables=19)
    assert result.tables_enumerated == 19
    assert result.result.p_value == 1.0  # the observed table is the most probable
    # beyond the cap the walk may still finish when pruning keeps it small; here it cannot
    with pytest.raises(ValueError, match="has 19 tables with its margins"):
        fisher_exact_k([0, 2, 4], [4, 4, 4], max_tables=1)


def test_pruning_lets_a_large_reference_set_finish() -> None:
    # 8 groups of 30: about 2e8 tables with these margins, far above the cap, yet the pruned
    # walk visits few of them; the Monte Carlo estimate agrees (within 4 standard errors)
    events, totals = [3, 9, 4, 8, 5, 7, 6, 6], [30] * 8
    exact = fisher_exact_k(events, totals)
    assert exact.tables_enumerated is not None and exact.tables_enumerated > MAX_TABLES
    mc = fisher_exact_k(events, totals, monte_carlo=(20_000, 3))
    assert mc.monte_carlo_se is not None
    assert abs(mc.result.p_value - exact.result.p_value) < 4 * mc.monte_carlo_se


# --- edges ------------------------------------------------------------------------------------


@pytest.mark.parametrize("alternative", ALTERNATIVES)
@pytest.mark.parametrize("x1, n1, x2, n2", [(0, 5, 0, 7), (5, 5, 7, 7), (0, 1, 0, 1), (1, 1, 1, 1)])
def test_unconditional_no_events_or_all_events(
    x1: int, n1: int, x2: int, n2: int, alternative: str
) -> None:
    # p1 = p2, so w = 0 and every table is at least as extreme in the two-sided and the
    # one-sided sense that includes ties: p = 1 (scipy.stats.barnard_exact also gives 1)
    barnard = barnard_exact(x1, n1, x2, n2, alternative=alternative)
    assert barnard.statistic == 0.0
    assert barnard.p_value == pytest.approx(1.0, abs=1e-12)
    # Fisher's one-sided p-value of a table alone in its margin is 1: every table counts
    assert boschloo_exact(x1, n1, x2, n2, alternative=alternative).p_value == pytest.approx(1.0)


def test_single_participant_groups_by_hand() -> None:
    # With n1 = n2 = 1 the table (1, 0) has probability pi(1 - pi), largest (1/4) at pi = 1/2;
    # the two-sided region {(1, 0), (0, 1)} has 2 pi(1 - pi), at most 1/2. # common practice
    for test in UNCONDITIONAL:
        assert test(1, 1, 0, 1, alternative="greater").p_value == pytest.approx(0.25, abs=1e-12)
        assert test(1, 1, 0, 1, alternative="two-sided").p_value == pytest.approx(0.5, abs=1e-12)
        assert test(0, 1, 1, 1, alternative="less").p_value == pytest.approx(0.25, abs=1e-12)
        assert test(1, 1, 0, 1, alternative="less").p_value == pytest.approx(1.0, abs=1e-12)
    assert barnard_exact(1, 1, 0, 1, alternative="greater").statistic == pytest.approx(
        math.sqrt(2.0)
    )
    # Boschloo's statistic is Fisher's one-sided p-value of the observed table: 1/2
    assert boschloo_exact(1, 1, 0, 1, alternative="greater").statistic == pytest.approx(0.5)


def test_barnard_exact_ties_are_kept() -> None:
    # n1 = n2 = 6, x1 = 5, x2 = 0: the tables (6, 0) and (6, 1) have w >= w_obs, (6, 1) with
    # exactly w_obs (w^2 = 12 * 30^2 / (36 * 5 * 7) for both). The region's probability is
    # u^5 (6 - 11 u), u = pi(1 - pi), increasing on [0, 1/4], so the p-value is its value at
    # pi = 1/2: (6 + 1 + 6) / 4096. # by hand
    assert Fraction(12 * 30**2, 36 * 5 * 7) == Fraction(12 * 30**2, 36 * 7 * 5)
    p = barnard_exact(5, 6, 0, 6, alternative="greater").p_value
    assert p == pytest.approx(13 / 4096, rel=1e-12)
    assert barnard_exact(0, 6, 5, 6, alternative="less").p_value == pytest.approx(13 / 4096)


@pytest.mark.parametrize("events, totals", [([0, 0, 0], [3, 4, 5]), ([3, 4, 5], [3, 4, 5])])
def test_fisher_k_zero_margin_is_one_table(events: list[int], totals: list[int]) -> None:
    result = fisher_exact_k(events, totals)
    assert result.result.p_value == 1.0 and result.tables_enumerated == 1
    mc = fisher_exact_k(events, totals, monte_carlo=(50, 1))
    assert mc.result.p_value == 1.0 and mc.monte_carlo_se == 0.0


def test_fisher_k_single_participant_groups() -> None:
    # three groups of 1 with one event: three equally probable tables, p = 1
    assert fisher_exact_k([1, 0, 0], [1, 1, 1]).result.p_value == pytest.approx(1.0)
    assert fisher_exact_k([1, 0, 0], [1, 1, 1]).tables_enumerated == 3


def test_monte_carlo_counts_the_observed_table() -> None:
    # (1 + hits) / (tables + 1): never 0, and 1 when every table is at most as probable
    mc = fisher_exact_k([0, 0, 9], [9, 9, 9], monte_carlo=(99, 5))
    assert mc.result.p_value == pytest.approx(1 / 100)
    assert mc.tables_enumerated is None
    assert mc.monte_carlo_se == pytest.approx(math.sqrt(0.01 * 0.99 / 99))


def test_monte_carlo_is_reproducible_by_seed() -> None:
    events, totals = [3, 9, 4, 8, 2], [20, 20, 20, 20, 20]
    first = fisher_exact_k(events, totals, monte_carlo=(5_000, 11))
    again = fisher_exact_k(events, totals, monte_carlo=(5_000, 11))
    other = fisher_exact_k(events, totals, monte_carlo=(5_000, 12))
    assert first == again
    assert first.result.p_value != other.result.p_value


def test_monte_carlo_over_several_batches() -> None:
    # more than one batch of 100000 draws: the p-value stays within 4 standard errors of the
    # exact value
    events, totals = [1, 5, 2], [6, 6, 6]
    exact = fisher_exact_k(events, totals).result.p_value
    mc = fisher_exact_k(events, totals, monte_carlo=(150_000, 7))
    assert mc.monte_carlo_se is not None
    assert abs(mc.result.p_value - exact) < 4 * mc.monte_carlo_se


# --- properties -------------------------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(two_groups(), st.sampled_from(ALTERNATIVES))
def test_unconditional_p_values_are_probabilities(
    table: tuple[int, int, int, int], alternative: str
) -> None:
    for test in UNCONDITIONAL:
        p = test(*table, alternative=alternative).p_value
        assert 0.0 <= p <= 1.0


@settings(max_examples=60, deadline=None)
@given(two_groups())
def test_two_sided_is_never_below_the_one_sided_in_the_observed_direction(
    table: tuple[int, int, int, int],
) -> None:
    x1, n1, x2, n2 = table
    if x1 * n2 == x2 * n1:
        return
    direction = "greater" if x1 * n2 > x2 * n1 else "less"
    for test in UNCONDITIONAL:
        two = test(*table, alternative="two-sided").p_value
        one = test(*table, alternative=direction).p_value
        # the two-sided region contains the one-sided one (Barnard) or the p-value doubles
        # the smaller one-sided p-value (Boschloo); 1e-12 allows the optimiser's rounding
        assert two >= one - 1e-12


@settings(max_examples=60, deadline=None)
@given(two_groups())
def test_boschloo_one_sided_never_exceeds_fishers(
    table: tuple[int, int, int, int],
) -> None:
    # Boschloo's test is uniformly more powerful than Fisher's: its one-sided p-value never
    # exceeds Fisher's (Boschloo 1970). 1e-9 allows the optimiser's rounding.
    for alternative in ("greater", "less"):
        boschloo = boschloo_exact(*table, alternative=alternative).p_value
        fisher = fisher_exact(*table, alternative=alternative).p_value
        assert boschloo <= fisher + 1e-9


@settings(max_examples=35, deadline=None)
@given(two_groups())
def test_swapping_the_groups_mirrors_the_result(table: tuple[int, int, int, int]) -> None:
    x1, n1, x2, n2 = table
    mirrored = {"two-sided": "two-sided", "greater": "less", "less": "greater"}
    for alternative, opposite in mirrored.items():
        a = barnard_exact(x1, n1, x2, n2, alternative=alternative)
        b = barnard_exact(x2, n2, x1, n1, alternative=opposite)
        assert b.statistic == pytest.approx(-a.statistic, abs=1e-12)  # type: ignore[operator]
        assert b.p_value == pytest.approx(a.p_value, rel=1e-9, abs=1e-15)
        c = boschloo_exact(x1, n1, x2, n2, alternative=alternative)
        d = boschloo_exact(x2, n2, x1, n1, alternative=opposite)
        assert d.statistic == pytest.approx(c.statistic, rel=1e-9)
        assert d.p_value == pytest.approx(c.p_value, rel=1e-9, abs=1e-15)


@settings(max_examples=40, deadline=None)
@given(two_groups(), st.sampled_from(ALTERNATIVES))
def test_swapping_events_and_non_events_mirrors_the_result(
    table: tuple[int, int, int, int], alternative: str
) -> None:
    # counting non-events instead reverses the direction: p1 > p2 becomes 1 - p1 < 1 - p2
    x1, n1, x2, n2 = table
    opposite = {"two-sided": "two-sided", "greater": "less", "less": "greater"}[alternative]
    for test in UNCONDITIONAL:
        a = test(x1, n1, x2, n2, alternative=alternative).p_value
        b = test(n1 - x1, n1, n2 - x2, n2, alternative=opposite).p_value
        assert b == pytest.approx(a, rel=1e-9, abs=1e-15)


@settings(max_examples=60, deadline=None)
@given(k_groups(), st.randoms(use_true_random=False))
def test_fisher_k_is_a_probability_and_ignores_group_order(
    table: tuple[list[int], list[int]], random: object
) -> None:
    events, totals = table
    result = fisher_exact_k(events, totals)
    assert 0.0 < result.result.p_value <= 1.0
    order = list(range(len(events)))
    random.shuffle(order)  # type: ignore[attr-defined]
    shuffled = fisher_exact_k([events[i] for i in order], [totals[i] for i in order])
    assert shuffled.result.p_value == pytest.approx(result.result.p_value, rel=1e-9)
    assert shuffled.tables_enumerated == result.tables_enumerated
    flipped = fisher_exact_k([n - x for x, n in zip(events, totals)], totals)
    assert flipped.result.p_value == pytest.approx(result.result.p_value, rel=1e-9)


@settings(max_examples=40, deadline=None)
@given(two_groups(max_n=30))
def test_fisher_k_with_two_groups_is_the_2x2_test(table: tuple[int, int, int, int]) -> None:
    x1, n1, x2, n2 = table
    ours = fisher_exact_k([x1, x2], [n1, n2]).result.p_value
    assert ours == pytest.approx(fisher_exact(x1, n1, x2, n2).p_value, rel=1e-12)


def test_unconditional_support_is_limited() -> None:
    # (n1 + 1)(n2 + 1) tables are held in memory; 1000 per group is the largest allowed
    for test in UNCONDITIONAL:
        with pytest.raises(ValueError, match=r"\(n1 \+ 1\)\(n2 \+ 1\) = 1004004 tables, more than"):
            test(10, 1001, 10, 1001, alternative="two-sided")


def test_fisher_k_with_large_groups_uses_the_weaker_bound() -> None:
    # 100000 per group: the smallest-completion bound is not computed (too many steps) and 0 is
    # used; the walk still finishes. With 2 groups it is the 2x2 test (scipy-checked there).
    result = fisher_exact_k([1000, 1100], [100_000, 100_000])
    assert result.tables_enumerated == 2101
    assert result.result.p_value == pytest.approx(
        fisher_exact(1000, 100_000, 1100, 100_000).p_value
    )
    three = fisher_exact_k([5, 0, 1], [100_000] * 3)
    assert three.tables_enumerated == 28  # 6 events in 3 groups: C(8, 2) # common practice
    assert 0.0 < three.result.p_value < 1.0


def _fisher_one_sided_fraction(a: int, n1: int, b: int, n2: int, side: str) -> Fraction:
    """Fisher's one-sided p-value of the table (a, b) as an exact fraction (math.comb)."""
    s = a + b
    support = range(max(0, s - n2), min(s, n1) + 1)
    kept = [j for j in support if (j >= a if side == "greater" else j <= a)]
    return Fraction(sum(math.comb(n1, j) * math.comb(n2, s - j) for j in kept),
                    math.comb(n1 + n2, s))


def _exact_boschloo_region(a: int, n1: int, b: int, n2: int, side: str) -> np.ndarray:
    observed = _fisher_one_sided_fraction(a, n1, b, n2, side)
    return np.array([[_fisher_one_sided_fraction(i, n1, j, n2, side) <= observed
                      for j in range(n2 + 1)] for i in range(n1 + 1)])


@pytest.mark.parametrize("a, n1, b, n2, side", [
    (1, 5, 119, 120, "greater"), (3, 20, 5, 20, "less"), (3, 20, 5, 20, "greater"),
    (7, 15, 2, 15, "greater"), (0, 10, 10, 10, "less"), (4, 9, 4, 9, "greater"),
])
def test_boschloo_region_is_the_exact_ordering(a: int, n1: int, b: int, n2: int,
                                               side: str) -> None:
    """The tables counted as at least as extreme are exactly those whose Fisher p-value, as an
    exact fraction, is at most the observed one: exact ties in, near ties out."""
    from prespec.stats.exact import _boschloo_region

    region, _ = _boschloo_region(a, n1, b, n2, side)
    assert np.array_equal(region, _exact_boschloo_region(a, n1, b, n2, side))


def test_boschloo_near_ties_are_not_ties() -> None:
    """(1/5 vs 119/120, greater): tables whose Fisher p-value exceeds the observed one by up to
    2e-8 relative used to count as ties and gave p = 1. The reference: the exact region, then
    1 − min over π of the probability of the tables outside it, minimised by scipy on a grid
    of 2000 intervals."""
    from scipy import optimize
    from scipy.stats import binom

    outside = np.argwhere(~_exact_boschloo_region(1, 5, 119, 120, "greater"))
    assert len(outside) > 0

    def mass_outside(rate: float) -> float:
        return float(np.sum(binom.pmf(outside[:, 0], 5, rate) * binom.pmf(outside[:, 1], 120, rate)))

    edges = np.linspace(1e-9, 1 - 1e-9, 2001)
    values = [mass_outside(r) for r in edges]
    k = int(np.argmin(values))
    found = optimize.minimize_scalar(mass_outside, bounds=(edges[max(k - 1, 0)],
                                     edges[min(k + 1, 2000)]), method="bounded",
                                     options={"xatol": 1e-14})
    want = 1.0 - min(found.fun, min(values))
    got = boschloo_exact(1, 5, 119, 120, alternative="greater").p_value
    assert want < 0.99999  # not 1: the near ties are out
    assert got == pytest.approx(want, rel=1e-9, abs=0.0)
