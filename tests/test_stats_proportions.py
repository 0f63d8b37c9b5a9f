"""Unit tests of prespec.stats.proportions: validation, edges and identities."""

from __future__ import annotations

import json
import math

import pytest
import scipy.stats

from prespec.stats import (
    TestResult,
    fisher_exact,
    pearson_chi_square,
    two_proportion_z,
)
from prespec.stats.proportions import likelihood_ratio


def _both_tails_overlap(x1: int, n1: int, x2: int, n2: int) -> float:
    """P(X >= x1) + P(X <= x1) - 1: the probability of the observed table."""
    greater = fisher_exact(x1, n1, x2, n2, alternative="greater").p_value
    less = fisher_exact(x1, n1, x2, n2, alternative="less").p_value
    return greater + less - 1.0


# --- results are frozen, plain numbers -----------------------------------------------------


def test_results_are_frozen_and_plain() -> None:
    result = pearson_chi_square([12, 30], [40, 60])
    with pytest.raises(AttributeError):
        result.p_value = 0.5  # type: ignore[misc]
    assert type(result.statistic) is float and type(result.p_value) is float
    assert type(result.df) is int
    assert isinstance(result, TestResult)
    for r in (result, two_proportion_z(3, 10, 5, 10), fisher_exact(3, 10, 5, 10)):
        json.dumps(r.__dict__)  # plain Python values, ready for results.json


def test_method_names_are_the_plan_names() -> None:
    assert pearson_chi_square([1, 2], [3, 4]).method == "pearson-chi-square"
    assert two_proportion_z(1, 3, 2, 4).method == "two-proportion-z"
    assert fisher_exact(1, 3, 2, 4).method == "fisher-exact"
    assert fisher_exact(1, 3, 2, 4).statistic is None and fisher_exact(1, 3, 2, 4).df is None
    assert two_proportion_z(1, 3, 2, 4).df is None


# --- validation ----------------------------------------------------------------------------


@pytest.mark.parametrize("bad", ["two.sided", "both", None, "Greater", ""])
def test_unknown_alternative_is_refused(bad: object) -> None:
    for call in (
        lambda: pearson_chi_square([1, 2], [3, 4], alternative=bad),  # type: ignore[arg-type]
        lambda: two_proportion_z(1, 3, 2, 4, alternative=bad),  # type: ignore[arg-type]
        lambda: fisher_exact(1, 3, 2, 4, alternative=bad),  # type: ignore[arg-type]
    ):
        with pytest.raises(ValueError, match="alternative must be one of two-sided, greater, less"):
            call()


@pytest.mark.parametrize(
    "args, message",
    [
        ((4, 3, 1, 3), r"x1 \(4\) must not exceed n1 \(3\)"),
        ((1, 3, 5, 4), r"x2 \(5\) must not exceed n2 \(4\)"),
        ((0, 0, 1, 3), "n1 must be >= 1"),
        ((1, 3, 0, 0), "n2 must be >= 1"),
        ((-1, 3, 1, 3), "x1 must be >= 0"),
        ((1.5, 3, 1, 3), "x1 must be an integer"),
        ((1, 3.0, 1, 3), "n1 must be an integer"),
        ((1, 3, False, 3), "x2 must be an integer"),
    ],
)
def test_two_group_counts_are_validated(args: tuple[object, ...], message: str) -> None:
    with pytest.raises(ValueError, match=message):
        two_proportion_z(*args)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=message):
        fisher_exact(*args)  # type: ignore[arg-type]


def test_chi_square_refusals() -> None:
    with pytest.raises(ValueError, match="continuity correction applies to 2 groups only, got 3"):
        pearson_chi_square([1, 2, 3], [5, 5, 5], continuity=True)
    with pytest.raises(ValueError, match="one-sided alternative needs exactly 2 groups, got 3"):
        pearson_chi_square([1, 2, 3], [5, 5, 5], alternative="greater")
    with pytest.raises(ValueError, match="continuity must be true or false"):
        pearson_chi_square([1, 2], [5, 5], continuity="yes")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="at least 2 groups"):
        pearson_chi_square([1], [5])


# --- edges -----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "events, totals", [([0, 0], [5, 7]), ([5, 7], [5, 7]), ([0, 0, 0], [1, 2, 3])]
)
def test_chi_square_zero_margin_is_nan(events: list[int], totals: list[int]) -> None:
    # the spec: a zero expected count leaves X^2 undefined (scipy.stats.chi2_contingency raises)
    result = pearson_chi_square(events, totals)
    assert math.isnan(result.statistic) and math.isnan(result.p_value)  # type: ignore[arg-type]
    assert result.df == len(events) - 1
    if len(events) == 2:
        corrected = pearson_chi_square(events, totals, continuity=True, alternative="less")
        assert math.isnan(corrected.p_value)


@pytest.mark.parametrize("x1, n1, x2, n2", [(0, 5, 0, 7), (5, 5, 7, 7), (0, 1, 0, 1)])
def test_z_zero_margin_is_nan(x1: int, n1: int, x2: int, n2: int) -> None:
    for alternative in ("two-sided", "greater", "less"):
        result = two_proportion_z(x1, n1, x2, n2, alternative=alternative)
        assert math.isnan(result.statistic) and math.isnan(result.p_value)  # type: ignore[arg-type]


@pytest.mark.parametrize("x1, n1, x2, n2", [(0, 5, 0, 7), (5, 5, 7, 7), (0, 1, 0, 1), (1, 1, 1, 1)])
def test_fisher_zero_margin_is_one(x1: int, n1: int, x2: int, n2: int) -> None:
    # conditional on the margins only the observed table is possible (scipy.stats.fisher_exact
    # also returns 1)
    for alternative in ("two-sided", "greater", "less"):
        assert fisher_exact(x1, n1, x2, n2, alternative=alternative).p_value == 1.0


def test_single_participant_groups() -> None:
    # scipy.stats.chi2_contingency([[1, 0], [0, 1]], correction=False): X^2 = 2, p = 0.1573
    ref = scipy.stats.chi2_contingency([[1, 0], [0, 1]], correction=False)
    result = pearson_chi_square([1, 0], [1, 1])
    assert result.statistic == pytest.approx(2.0, rel=1e-12) == ref.statistic
    assert result.p_value == pytest.approx(ref.pvalue, rel=1e-12)
    # Fisher on [[1, 0], [0, 1]]: the two possible tables each have probability 1/2
    assert fisher_exact(1, 1, 0, 1).p_value == 1.0
    assert fisher_exact(1, 1, 0, 1, alternative="greater").p_value == pytest.approx(0.5)
    assert fisher_exact(1, 1, 0, 1, alternative="less").p_value == 1.0
    assert two_proportion_z(1, 1, 0, 1).statistic == pytest.approx(math.sqrt(2.0))


def test_continuity_never_makes_a_deviation_negative() -> None:
    # |O - E| = 0.2 < 0.5, so the corrected deviation is 0, as
    # scipy.stats.chi2_contingency([[1, 1], [1, 2]], correction=True) also gives
    ref = scipy.stats.chi2_contingency([[1, 1], [1, 2]], correction=True)
    result = pearson_chi_square([1, 1], [2, 3], continuity=True)
    assert result.statistic == 0.0 == ref.statistic
    assert result.p_value == 1.0
    assert pearson_chi_square([1, 1], [2, 3], continuity=True, alternative="greater").p_value == 0.5


def test_one_sided_directions() -> None:
    # p1 = 0.8 > p2 = 0.3: "greater" is the small tail, "less" the large one, for every test
    for test in (
        lambda alt: pearson_chi_square([16, 6], [20, 20], alternative=alt),
        lambda alt: two_proportion_z(16, 20, 6, 20, alternative=alt),
        lambda alt: fisher_exact(16, 20, 6, 20, alternative=alt),
    ):
        greater, less, both = (
            test("greater").p_value,
            test("less").p_value,
            test("two-sided").p_value,
        )
        assert greater < 0.01
        assert less > 0.99
        assert greater <= both
    z = two_proportion_z(16, 20, 6, 20)
    assert z.statistic is not None and z.statistic > 0  # signed: first minus second
    assert two_proportion_z(6, 20, 16, 20).statistic == pytest.approx(-z.statistic)


def test_normal_based_one_sided_halves_the_two_sided() -> None:
    # common practice: for a symmetric reference distribution the two-sided p is twice the
    # smaller tail
    for test in (
        lambda alt: pearson_chi_square([9, 4], [30, 25], alternative=alt),
        lambda alt: two_proportion_z(9, 30, 4, 25, alternative=alt),
    ):
        assert 2 * min(test("greater").p_value, test("less").p_value) == pytest.approx(
            test("two-sided").p_value, rel=1e-12
        )
        assert test("greater").p_value + test("less").p_value == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize(
    "x1, n1, x2, n2", [(3, 4, 1, 4), (0, 12, 5, 9), (7, 7, 2, 9), (20, 50, 31, 60)]
)
def test_fisher_tails_overlap_in_the_observed_table(x1: int, n1: int, x2: int, n2: int) -> None:
    # common practice: P(X >= x) + P(X <= x) = 1 + P(X = x); P(X = x) from scipy.stats.hypergeom
    observed = scipy.stats.hypergeom.pmf(x1, n1 + n2, x1 + x2, n1)
    assert _both_tails_overlap(x1, n1, x2, n2) == pytest.approx(observed, rel=1e-9)


def test_fisher_two_sided_counts_exact_ties() -> None:
    # [[1, 3], [3, 1]]: tables n11 = 0..4 have probabilities 1, 16, 36, 16, 1 over 70; the
    # observed n11 = 1 ties with n11 = 3, so p = (1 + 16 + 16 + 1) / 70 (hand computation)
    assert fisher_exact(1, 4, 3, 4).p_value == pytest.approx(34 / 70, rel=1e-12)
    # the most probable table has p = 1
    assert fisher_exact(2, 4, 2, 4).p_value == 1.0


def test_fisher_large_table_is_exact_in_the_tail() -> None:
    # a very small p stays accurate (scipy.stats.fisher_exact, 1e-12 relative)
    ref = scipy.stats.fisher_exact([[900, 100], [700, 300]]).pvalue
    assert 0 < ref < 1e-20
    assert fisher_exact(900, 1000, 700, 1000).p_value == pytest.approx(ref, rel=1e-12)


def test_chi_square_k_groups_equal_proportions_is_zero() -> None:
    result = pearson_chi_square([2, 4, 6], [10, 20, 30])
    assert result.statistic == pytest.approx(0.0, abs=1e-12)
    assert result.p_value == pytest.approx(1.0)
    assert result.df == 2


# --- likelihood ratio (G²) -------------------------------------------------------------------


def test_likelihood_ratio_result_and_refusals() -> None:
    result = likelihood_ratio([12, 30, 7], [40, 60, 30])
    assert (result.method, result.df, result.alternative) == ("likelihood-ratio", 2, "two-sided")
    assert type(result.statistic) is float and type(result.p_value) is float
    json.dumps(result.__dict__)
    for bad in ("greater", "less"):
        with pytest.raises(
            ValueError, match=f"likelihood-ratio test is two-sided only, got '{bad}'"
        ):
            likelihood_ratio([1, 2], [3, 4], alternative=bad)
    with pytest.raises(ValueError, match="alternative must be one of"):
        likelihood_ratio([1, 2], [3, 4], alternative="both")
    with pytest.raises(ValueError, match="at least 2 groups"):
        likelihood_ratio([1], [3])
    with pytest.raises(ValueError, match=r"events\[1\] \(5\) must not exceed totals\[1\] \(4\)"):
        likelihood_ratio([1, 5], [3, 4])


@pytest.mark.parametrize(
    "events, totals", [([0, 0], [5, 7]), ([5, 7], [5, 7]), ([0, 0, 0], [1, 2, 3])]
)
def test_likelihood_ratio_zero_margin_is_nan(events: list[int], totals: list[int]) -> None:
    # as for Pearson's X^2: a zero column margin leaves the test undefined
    result = likelihood_ratio(events, totals)
    assert math.isnan(result.statistic) and math.isnan(result.p_value)  # type: ignore[arg-type]
    assert result.df == len(events) - 1


def test_likelihood_ratio_zero_cells_and_single_participants() -> None:
    # [[1, 0], [0, 1]]: E = 1/2 in every cell; the two observed ones give 2 * 2 * ln 2 and the
    # zero cells contribute 0 (0 ln 0 = 0). # by hand
    result = likelihood_ratio([1, 0], [1, 1])
    assert result.statistic == pytest.approx(4 * math.log(2), rel=1e-12)
    assert result.p_value == pytest.approx(scipy.stats.chi2.sf(4 * math.log(2), 1), rel=1e-12)
    flat = likelihood_ratio([2, 4, 6], [10, 20, 30])
    assert flat.statistic == 0.0 and flat.p_value == 1.0  # O = E: never a negative G^2


def test_likelihood_ratio_ignores_group_order_and_outcome_coding() -> None:
    base = likelihood_ratio([3, 11, 0, 7], [20, 25, 9, 7])
    moved = likelihood_ratio([7, 0, 11, 3], [7, 9, 25, 20])
    flipped = likelihood_ratio([17, 14, 9, 0], [20, 25, 9, 7])
    assert moved.statistic == pytest.approx(base.statistic, rel=1e-12)
    assert flipped.statistic == pytest.approx(base.statistic, rel=1e-12)
