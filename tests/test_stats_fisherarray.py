"""Tests of prespec.stats.fisherarray: Fisher's exact test and the exact conditional odds-ratio
interval for many 2×2 tables at once.

References: scipy.stats.fisher_exact (p-values, 1e-12 relative), scipy.stats.contingency
.odds_ratio(kind="conditional") (the conditional MLE and its confidence_interval, 1e-8 where
scipy's own root search is precise enough, see test_interval_agrees_with_scipy), exact
fractions from math.comb for the definition of the test (common practice), and Fisher's
tea-tasting table.
"""

from __future__ import annotations

import math
from decimal import Decimal, localcontext
from fractions import Fraction

import numpy as np
import pytest
from scipy.stats import fisher_exact
from scipy.stats.contingency import odds_ratio

from prespec.stats import fisherarray
from prespec.stats.fisherarray import FisherMany, conditional_or_ci_many, fisher_many
from prespec.stats.proportions import fisher_exact as prespec_fisher_exact
from prespec.stats.ratios import exact_conditional_odds_ratio

ALTERNATIVES = ("two-sided", "less", "greater")


def _random_tables(seed: int, size: int, largest: int) -> tuple[np.ndarray, ...]:
    """Tables with arms of 0..largest (some empty), uniform events, and some duplicates."""
    rng = np.random.default_rng(seed)
    n1 = rng.integers(0, largest + 1, size)
    n2 = rng.integers(0, largest + 1, size)
    a = (rng.random(size) * (n1 + 1)).astype(np.int64)
    c = (rng.random(size) * (n2 + 1)).astype(np.int64)
    return a, n1 - a, c, n2 - c


def _safety_tables(seed: int, size: int) -> tuple[np.ndarray, ...]:
    """Arms of 500 with 0–60 events, as in bench/fisher_many.py (many shared margins)."""
    rng = np.random.default_rng(seed)
    a, c = rng.integers(0, 61, size), rng.integers(0, 61, size)
    return a, 500 - a, c, 500 - c


def _scipy_p(tables: tuple[np.ndarray, ...], alternative: str) -> np.ndarray:
    a, b, c, d = tables
    return np.array(
        [
            fisher_exact([[a[i], b[i]], [c[i], d[i]]], alternative=alternative).pvalue
            for i in range(a.size)
        ]
    )


# --- p-values -------------------------------------------------------------------------------


@pytest.mark.parametrize("alternative", ALTERNATIVES)
@pytest.mark.parametrize(
    ("seed", "size", "largest"), [(1, 800, 40), (2, 400, 400), (3, 150, 3000)]
)
def test_p_values_equal_scipy(alternative: str, seed: int, size: int, largest: int) -> None:
    tables = _random_tables(seed, size, largest)
    ours = fisher_many(*tables, alternative=alternative).p_value
    ref = _scipy_p(tables, alternative)  # scipy.stats.fisher_exact
    normal = ref > 1e-300  # below, scipy's p-values are subnormal and lose relative precision
    assert normal.sum() > 0.8 * ref.size
    np.testing.assert_allclose(ours[normal], ref[normal], rtol=1e-12, atol=0.0)
    np.testing.assert_allclose(ours[~normal], ref[~normal], rtol=0.0, atol=1e-300)
    assert ours.min() < 1e-6 and np.any(ours == 1.0)  # the grid reaches both ends


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_p_values_equal_scipy_on_a_safety_table(alternative: str) -> None:
    tables = _safety_tables(4, 800)
    ours = fisher_many(*tables, alternative=alternative).p_value
    # scipy.stats.fisher_exact; equal arms make every table tie with its mirror image
    np.testing.assert_allclose(ours, _scipy_p(tables, alternative), rtol=1e-12, atol=0.0)


def _exact_p(a: int, n1: int, c: int, n2: int) -> Fraction:
    """Two-sided Fisher p-value by exact fractions: the tables no more probable (common
    practice: Agresti, Statistical Science 1992, the ordering by probability)."""
    m, total = a + c, n1 + n2
    low, high = max(0, m - n2), min(n1, m)
    prob = {x: Fraction(math.comb(n1, x) * math.comb(n2, m - x), math.comb(total, m))
            for x in range(low, high + 1)}
    return sum((q for q in prob.values() if q <= prob[a]), Fraction(0))


@pytest.mark.parametrize(
    ("a", "n1", "c", "n2"),
    [(2, 10, 5, 10), (0, 20, 6, 20), (3, 12, 9, 12), (1, 7, 6, 7), (4, 9, 4, 9), (3, 8, 5, 10)],
)
def test_exact_ties_are_counted(a: int, n1: int, c: int, n2: int) -> None:
    # with equal arms P(x) = P(m − x) exactly: the mirror table must be counted
    p = float(fisher_many([a], [n1 - a], [c], [n2 - c]).p_value[0])
    assert p == pytest.approx(float(_exact_p(a, n1, c, n2)), rel=1e-14)
    ref = fisher_exact([[a, n1 - a], [c, n2 - c]]).pvalue  # scipy.stats.fisher_exact
    assert p == pytest.approx(ref, rel=1e-12)


def _decimal_p(a: int, n1: int, c: int, n2: int, alternative: str) -> float:
    """Fisher's p-value from the probability ratios summed in 50-digit decimal arithmetic."""
    with localcontext() as context:
        context.prec = 50
        m = a + c
        low, high = max(0, m - n2), min(n1, m)
        w = [Decimal(1)]
        for x in range(low, high):
            w.append(w[-1] * Decimal((n1 - x) * (m - x)) / Decimal((x + 1) * (n2 - m + x + 1)))
        at = w[a - low]
        if alternative == "less":
            part = sum(w[: a - low + 1])
        elif alternative == "greater":
            part = sum(w[a - low :])
        else:
            part = sum(v for v in w if v <= at * (1 + Decimal(fisherarray.SCIPY_TIE_TOLERANCE)))
        return float(part / sum(w))


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_large_tables_equal_a_decimal_sum(alternative: str) -> None:
    # arms of 50,000–100,000: scipy.stats.fisher_exact's tails drift there (about 1e-11
    # relative), so the reference is the definition summed in 50-digit decimals (common
    # practice: the hypergeometric law given both margins)
    rng = np.random.default_rng(13)
    n1, n2 = rng.integers(50_000, 100_001, 6), rng.integers(50_000, 100_001, 6)
    a, c = rng.integers(1000, 2500, 6), rng.integers(1000, 2500, 6)
    ours = fisher_many(a, n1 - a, c, n2 - c, alternative=alternative).p_value
    for i in range(6):
        ref = _decimal_p(int(a[i]), int(n1[i]), int(c[i]), int(n2[i]), alternative)
        assert ours[i] == pytest.approx(ref, rel=1e-13)


def test_tea_tasting() -> None:
    # Fisher's tea-tasting table [[3, 1], [1, 3]] (Fisher RA, The Design of Experiments, 1935,
    # chapter II; from memory): P(X = 3) = 16/70 and P(X = 4) = 1/70 given the margins, so
    # P(X >= 3) = 17/70 and the two-sided p-value (tables with X = 0, 1, 3, 4) is 34/70.
    result = fisher_many([3], [1], [1], [3], alternative="greater")
    assert result.p_value[0] == pytest.approx(17 / 70, rel=1e-14)
    assert fisher_many([3], [1], [1], [3]).p_value[0] == pytest.approx(34 / 70, rel=1e-14)
    assert fisher_many([3], [1], [1], [3], alternative="less").p_value[0] == pytest.approx(
        69 / 70, rel=1e-14
    )
    # scipy.stats.contingency.odds_ratio, conditional MLE of the same table
    expected = odds_ratio([[3, 1], [1, 3]]).statistic
    assert result.odds_ratio[0] == pytest.approx(expected, rel=1e-8)


def test_tie_tolerance_of_prespec_fisher_exact() -> None:
    # prespec.stats.fisher_exact counts ties within a relative 1e-7 (its own rule, itself
    # checked against scipy in tests/test_stats_proportions.py)
    a, b, c, d = _random_tables(5, 300, 60)
    ours = fisher_many(a, b, c, d, tie_tolerance=1e-7).p_value
    for i in range(a.size):
        if a[i] + b[i] == 0 or c[i] + d[i] == 0:
            continue
        ref = prespec_fisher_exact(int(a[i]), int(a[i] + b[i]), int(c[i]), int(c[i] + d[i]))
        assert ours[i] == pytest.approx(ref.p_value, rel=1e-12)


def test_zero_margins_as_scipy() -> None:
    # a zero row or column total: one possible table; scipy gives p = 1 and a nan odds ratio
    tables = ([0, 0, 3, 0], [0, 4, 0, 0], [2, 0, 5, 0], [3, 5, 0, 0])
    result = fisher_many(*tables)
    assert list(result.p_value) == [1.0, 1.0, 1.0, 1.0]
    assert np.all(np.isnan(result.odds_ratio))
    for i in range(4):
        table = [[tables[0][i], tables[1][i]], [tables[2][i], tables[3][i]]]
        assert fisher_exact(table).pvalue == 1.0  # scipy.stats.fisher_exact
        assert np.isnan(odds_ratio(table).statistic)  # scipy.stats.contingency.odds_ratio
    low, high = conditional_or_ci_many(*tables)
    assert list(low) == [0.0] * 4 and list(high) == [math.inf] * 4


# --- the conditional MLE -------------------------------------------------------------------


@pytest.mark.parametrize(("seed", "size", "largest"), [(6, 500, 40), (7, 120, 600)])
def test_conditional_mle_equals_scipy(seed: int, size: int, largest: int) -> None:
    tables = _random_tables(seed, size, largest)
    ours = fisher_many(*tables).odds_ratio
    a, b, c, d = tables
    ref = np.array(
        [odds_ratio([[a[i], b[i]], [c[i], d[i]]]).statistic for i in range(a.size)], dtype=float
    )  # scipy.stats.contingency.odds_ratio(kind="conditional")
    same_edge = (ref == 0) | np.isinf(ref) | np.isnan(ref)
    np.testing.assert_array_equal(ours[same_edge], ref[same_edge])
    assert np.sum(ref == 0) > 0 and np.sum(np.isinf(ref)) > 0  # both ends of the support met
    inner = ~same_edge
    # scipy's brentq stops at an absolute 1e-13 on the odds ratio, coarse below about 1e-4
    np.testing.assert_allclose(ours[inner], ref[inner], rtol=1e-8, atol=1e-12)


def test_conditional_mle_solved_by_hand() -> None:
    # [[999, 1], [2, 1]]: given the margins x is 998, 999 or 1000 with central weights
    # C(1000, x)·C(3, 1001 − x) = 499500, 3000, 3. E[X; ψ] = 999 reads
    # 499500·(998 − 999) + 3000·0·ψ + 3·(1000 − 999)·ψ² = 0, so ψ = sqrt(166500) (common
    # practice: the conditional likelihood equation); scipy.stats.contingency.odds_ratio gives
    # 408.044115262161, within its root search's tolerance.
    estimate = fisher_many([999], [1], [2], [1]).odds_ratio[0]
    assert estimate == pytest.approx(math.sqrt(166500), rel=1e-13)
    assert estimate == pytest.approx(odds_ratio([[999, 1], [2, 1]]).statistic, rel=1e-8)


def _decimal_mle(a: int, n1: int, c: int, n2: int) -> float:
    """The conditional MLE by bisection on ψ in 40-digit decimals, for a near the bottom of
    its support (the terms are summed upwards until they no longer count)."""
    m = a + c
    low, high = max(0, m - n2), min(n1, m)

    def mean(psi: Decimal) -> Decimal:
        term, total, first, x = Decimal(1), Decimal(0), Decimal(0), low
        while True:
            total += term
            first += term * x
            if x == high or (x > a + 5 and term < total * Decimal("1e-45")):
                return first / total
            term = term * psi * (n1 - x) * (m - x) / ((x + 1) * (n2 - m + x + 1))
            x += 1

    with localcontext() as context:
        context.prec = 40
        below, above = Decimal("1e-12"), Decimal(1)
        for _ in range(140):
            middle = (below * above).sqrt()
            below, above = (middle, above) if mean(middle) < a else (below, middle)
        return float(below)


def test_far_tails_of_very_large_tables() -> None:
    # [[1, 99999], [40000, 60000]]: P(0)/P(mode) is far below even the extended-precision
    # range (about 1e-4900), so the log weights are summed from the ratios instead
    s = fisherarray._supports(np.array([100_000]), np.array([100_000]), np.array([40_001]))
    assert s.w[0, 0] == 0 and np.isfinite(s.log_w[0, 0])
    result = fisher_many([1, 2], [99_999, 199_998], [40_000, 30_000], [60_000, 170_000])
    assert list(result.p_value) == [0.0, 0.0]  # as scipy.stats.fisher_exact: below 1e-308
    for i, table in enumerate([(1, 100_000, 40_000, 100_000), (2, 200_000, 30_000, 200_000)]):
        assert result.odds_ratio[i] == pytest.approx(_decimal_mle(*table), rel=1e-10)
    low, high = conditional_or_ci_many([1], [99_999], [40_000], [60_000])
    one = exact_conditional_odds_ratio(1, 100_000, 40_000, 100_000, 0.95)
    # the single-table method's gammaln weights lose about 1e-10 at this size
    assert low[0] == pytest.approx(one.low, rel=1e-9)
    assert high[0] == pytest.approx(one.high, rel=1e-9)


# --- the exact conditional interval ------------------------------------------------------


def _scipy_interval(table: list[list[int]], level: float, alternative: str
                    ) -> tuple[float, float]:
    ci = odds_ratio(table).confidence_interval(level, alternative)
    return float(ci.low), float(ci.high)


@pytest.mark.parametrize(
    ("alternative", "level"), [("two-sided", 0.95), ("two-sided", 0.8), ("less", 0.9),
                               ("greater", 0.975)]
)
def test_interval_agrees_with_scipy(alternative: str, level: float) -> None:
    # random tables, and some so unbalanced that their lower limits fall below 1e-4
    extreme = np.array([(1, 48, 31, 1), (1, 13, 44, 4), (0, 50, 50, 1), (1, 60, 60, 1),
                        (2, 58, 57, 1), (0, 300, 2, 0), (3, 400, 1, 1)]).T
    a, b, c, d = (np.concatenate([r, e]) for r, e in zip(_random_tables(8, 150, 50), extreme))
    low, high = conditional_or_ci_many(a, b, c, d, level=level, alternative=alternative)
    tail_level = level if alternative == "two-sided" else 2.0 * level - 1.0
    coarse = 0
    for i in range(a.size):
        table = [[int(a[i]), int(b[i])], [int(c[i]), int(d[i])]]
        ref = _scipy_interval(table, level, alternative)
        for ours, theirs, side in ((low[i], ref[0], "low"), (high[i], ref[1], "high")):
            if theirs == 0.0 or math.isinf(theirs):
                assert ours == theirs
            elif theirs >= 1e-4:
                # scipy.stats.contingency.odds_ratio(...).confidence_interval
                assert ours == pytest.approx(theirs, rel=1e-8)
            else:
                # scipy's root search stops at an absolute 1e-13 on the odds ratio, so below
                # about 1e-4 it is coarser than 1e-8 relative: there scipy agrees only to that
                # absolute tolerance, and our single-table exact_conditional_odds_ratio (a
                # brentq on the log odds ratio to full precision) is the reference
                coarse += 1
                assert ours == pytest.approx(theirs, rel=0.0, abs=5e-13)
                one = exact_conditional_odds_ratio(
                    table[0][0], sum(table[0]), table[1][0], sum(table[1]), tail_level
                )
                assert ours == pytest.approx(one.low if side == "low" else one.high, rel=1e-10)
    if alternative != "less":
        assert np.any(low > 0) and np.any(low == 0)
    else:
        assert np.all(low == 0.0)
    if alternative != "greater":
        assert np.any(np.isfinite(high)) and np.any(np.isinf(high))
    else:
        assert np.all(np.isinf(high))
    assert coarse < a.size / 10  # the precise region is the main one
    assert coarse > 0 or alternative == "less"  # the other is met (lower limits only)


def test_interval_on_a_safety_table_equals_scipy() -> None:
    a, b, c, d = _safety_tables(9, 60)
    low, high = conditional_or_ci_many(a, b, c, d)
    for i in range(a.size):
        ref = _scipy_interval([[int(a[i]), int(b[i])], [int(c[i]), int(d[i])]], 0.95,
                              "two-sided")
        for ours, theirs in ((low[i], ref[0]), (high[i], ref[1])):
            if theirs == 0.0 or math.isinf(theirs):
                assert ours == theirs
            else:
                assert ours == pytest.approx(theirs, rel=1e-8, abs=5e-13)


def test_interval_of_large_tables_equals_the_single_table_method() -> None:
    # arms of several thousand: supports of a thousand points and more
    a, b, c, d = _random_tables(10, 30, 5000)
    low, high = conditional_or_ci_many(a, b, c, d, level=0.9)
    mle = fisher_many(a, b, c, d).odds_ratio
    for i in range(a.size):
        if a[i] + b[i] == 0 or c[i] + d[i] == 0:
            continue
        one = exact_conditional_odds_ratio(
            int(a[i]), int(a[i] + b[i]), int(c[i]), int(c[i] + d[i]), 0.9
        )
        assert low[i] == pytest.approx(one.low, rel=1e-9)
        assert high[i] == pytest.approx(one.high, rel=1e-9)
        assert mle[i] == pytest.approx(one.value, rel=1e-9)


def test_interval_covers_the_estimate_and_narrows_with_level() -> None:
    a, b, c, d = _random_tables(11, 300, 80)
    mle = fisher_many(a, b, c, d).odds_ratio
    low95, high95 = conditional_or_ci_many(a, b, c, d, level=0.95)
    low80, high80 = conditional_or_ci_many(a, b, c, d, level=0.8)
    known = ~np.isnan(mle)
    assert np.all(low95[known] <= mle[known]) and np.all(mle[known] <= high95[known])
    assert np.all(low95 <= low80) and np.all(high80 <= high95)


def test_the_root_search_widens_then_bisects() -> None:
    # tanh(u − r) is flat far from its root: Newton alone would leap away, so the bracket is
    # widened by doubling steps and then closed by bisection and Newton (common practice:
    # a safeguarded Newton method)
    roots = np.array([-60.0, -7.3, 0.0, 1e-3, 2.5, 33.3, 300.0])

    def function(u: np.ndarray, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        t = np.tanh(u - roots[idx])
        return t, 1.0 - t * t

    found = fisherarray._increasing_root(function, np.zeros(roots.size))
    np.testing.assert_allclose(found, roots, rtol=0.0, atol=1e-11)


# --- shapes, duplicates, chunks ----------------------------------------------------------


def test_shape_kept_results_read_only_and_duplicates_equal() -> None:
    a = np.array([[3, 0, 3], [12, 3, 7]])
    b = np.array([[97, 100, 97], [88, 97, 93]])
    c = np.array([[8, 2, 8], [4, 8, 7]])
    d = np.array([[92, 98, 92], [96, 92, 93]])
    result = fisher_many(a, b, c, d)
    assert isinstance(result, FisherMany)
    assert result.p_value.shape == (2, 3) and result.odds_ratio.shape == (2, 3)
    assert result.p_value[0, 0] == result.p_value[0, 2] == result.p_value[1, 1]
    with pytest.raises(ValueError, match="read-only"):
        result.p_value[0, 0] = 0.5
    flat = fisher_many(a.ravel(), b.ravel(), c.ravel(), d.ravel())
    np.testing.assert_array_equal(flat.p_value, result.p_value.ravel())
    low, high = conditional_or_ci_many(a, b, c, d)
    assert low.shape == high.shape == (2, 3) and not low.flags.writeable
    # the same table on its own gives the same values: the grouping changes nothing
    alone = fisher_many([12], [88], [4], [96])
    assert alone.p_value[0] == result.p_value[1, 0]
    assert alone.odds_ratio[0] == pytest.approx(result.odds_ratio[1, 0], rel=1e-12)
    assert fisher_many(12, 88, 4, 96).p_value.shape == ()


def test_empty_input() -> None:
    result = fisher_many([], [], [], [])
    assert result.p_value.shape == (0,) and result.odds_ratio.shape == (0,)
    low, high = conditional_or_ci_many([], [], [], [])
    assert low.shape == high.shape == (0,)


def test_small_chunks_give_the_same_values(monkeypatch: pytest.MonkeyPatch) -> None:
    tables = _random_tables(12, 400, 120)
    whole = fisher_many(*tables)
    whole_ci = conditional_or_ci_many(*tables)
    monkeypatch.setattr(fisherarray, "CHUNK_POINTS", 300)
    chunked = fisher_many(*tables)
    np.testing.assert_array_equal(chunked.p_value, whole.p_value)
    np.testing.assert_allclose(chunked.odds_ratio, whole.odds_ratio, rtol=1e-11)
    for ours, theirs in zip(conditional_or_ci_many(*tables), whole_ci):
        np.testing.assert_allclose(ours, theirs, rtol=1e-11)


def test_float_counts_that_are_whole_numbers() -> None:
    as_float = fisher_many([3.0], [97.0], [9.0], [91.0]).p_value
    assert as_float[0] == fisher_many([3], [97], [9], [91]).p_value[0]


# --- bad input ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("cells", "keywords", "message"),
    [
        (([1, -1], [2, 3], [4, 5], [6, 7]), {}, "a must hold counts >= 0, got -1"),
        (([1], [2], [-4], [6]), {}, "c must hold counts >= 0"),
        (([1, 2], [2, 3], [4], [6, 7]), {}, "must have the same shape"),
        (([1.5], [2], [4], [6]), {}, "a must hold whole numbers"),
        (([np.nan], [2], [4], [6]), {}, "a must hold whole numbers"),
        (([True], [2], [4], [6]), {}, "a must be an array of integer counts"),
        ((["3"], [2], [4], [6]), {}, "a must be an array of integer counts"),
        (([1], [2], [4], [6]), {"alternative": "two"}, "alternative must be one of"),
        (([1], [2], [4], [6]), {"tie_tolerance": -1.0}, "tie_tolerance must be in"),
        (([2**62], [2**62], [1], [1]), {}, "a holds 4611686018427387904, more than"),
        (([1_500_000], [600_000], [1], [1]), {}, "a table of 2100002 is larger than"),
    ],
)
def test_bad_input_fisher(cells: tuple[list[object], ...], keywords: dict[str, object],
                          message: str) -> None:
    with pytest.raises(ValueError, match=message) as caught:
        fisher_many(*cells, **keywords)  # type: ignore[arg-type]
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize(
    ("keywords", "message"),
    [
        ({"level": 1.0}, "level must be strictly between 0 and 1"),
        ({"level": 0.0}, "level must be strictly between 0 and 1"),
        ({"level": "0.95"}, "level must be a number"),
        ({"alternative": "both"}, "alternative must be one of"),
    ],
)
def test_bad_input_interval(keywords: dict[str, object], message: str) -> None:
    with pytest.raises(ValueError, match=message) as caught:
        conditional_or_ci_many([1], [2], [3], [4], **keywords)  # type: ignore[arg-type]
    assert "\n" not in str(caught.value)
    with pytest.raises(ValueError, match="same shape"):
        conditional_or_ci_many([1], [2], [3, 4], [4])
