"""Reference checks of the tests of equal proportions against published values and libraries.

Published values are marked ``# from memory`` where they were recalled rather than looked up.
Library checks name the function that computed the reference value.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats
from statsmodels.stats.proportion import proportions_ztest

from prespec.stats import (
    expected_counts,
    fisher_exact,
    pearson_chi_square,
    smallest_expected,
    two_proportion_z,
)
from prespec.stats.proportions import likelihood_ratio

ALTERNATIVES = ("two-sided", "greater", "less")


def _random_tables(seed: int, count: int, max_n: int) -> list[tuple[int, int, int, int]]:
    """2×2 tables (x1, n1, x2, n2), a third of them sparse (at most 2 events per group)."""
    rng = np.random.default_rng(seed)
    tables = []
    for i in range(count):
        n1 = int(rng.integers(1, max_n + 1))
        n2 = int(rng.integers(1, max_n + 1))
        if i % 3 == 0:
            x1 = int(rng.integers(0, min(2, n1) + 1))
            x2 = int(rng.integers(0, min(2, n2) + 1))
        else:
            x1 = int(rng.integers(0, n1 + 1))
            x2 = int(rng.integers(0, n2 + 1))
        tables.append((x1, n1, x2, n2))
    return tables


# --- Fisher's exact test: published tables -------------------------------------------------


def test_fisher_tea_tasting() -> None:
    # Agresti, Categorical Data Analysis (2nd ed. 2002, section 3.5.2), Fisher's tea-tasting
    # table [[3, 1], [1, 3]]: one-sided P = 0.243, two-sided P = 0.486. # from memory
    assert round(fisher_exact(3, 4, 1, 4, alternative="greater").p_value, 3) == 0.243
    assert round(fisher_exact(3, 4, 1, 4).p_value, 3) == 0.486
    # Same source: the hypergeometric probabilities of n11 = 0..4 are 0.014, 0.229, 0.514,
    # 0.229, 0.014 (= 1, 16, 36, 16, 1 over 70); so P(n11 <= 3) = 69/70. # from memory
    assert fisher_exact(3, 4, 1, 4, alternative="less").p_value == pytest.approx(69 / 70, rel=1e-12)
    assert fisher_exact(4, 4, 0, 4, alternative="greater").p_value == pytest.approx(1 / 70)
    assert fisher_exact(4, 4, 0, 4).p_value == pytest.approx(2 / 70)


def test_fisher_twins_convictions() -> None:
    # Agresti, A survey of exact inference for contingency tables, Statistical Science
    # 1992;7:131-177, Fisher's (1935) twins table [[10, 3], [2, 15]]: one-sided P = 0.000465.
    # from memory
    p = fisher_exact(10, 13, 2, 17, alternative="greater").p_value
    assert round(p, 6) == 0.000465


# --- Fisher's exact test: scipy ------------------------------------------------------------


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_fisher_matches_scipy_on_random_tables(alternative: str) -> None:
    # scipy.stats.fisher_exact, 1e-12 relative, 400 tables of which a third are sparse.
    # scipy counts a table as tied with the observed one within a relative 1e-14; we use the
    # wider 1e-7. The two differ only for a table whose probability lies within (1e-14, 1e-7]
    # of the observed one without being equal to it; none of these tables has one.
    tables = _random_tables(seed=31, count=300, max_n=40) + _random_tables(41, 100, 400)
    for x1, n1, x2, n2 in tables:
        ours = fisher_exact(x1, n1, x2, n2, alternative=alternative).p_value
        ref = scipy.stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]], alternative=alternative)
        assert ours == pytest.approx(ref.pvalue, rel=1e-12, abs=0.0), (x1, n1, x2, n2)


@pytest.mark.parametrize(
    "x1, n1, x2, n2",
    [(0, 1, 0, 1), (1, 1, 0, 1), (0, 5, 0, 7), (5, 5, 7, 7), (0, 1, 1, 1), (2, 4, 2, 4)],
)
@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_fisher_matches_scipy_at_the_edges(
    x1: int, n1: int, x2: int, n2: int, alternative: str
) -> None:
    # scipy.stats.fisher_exact: zero margins give p = 1 (only one table is possible).
    ours = fisher_exact(x1, n1, x2, n2, alternative=alternative).p_value
    ref = scipy.stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]], alternative=alternative)
    assert ours == pytest.approx(ref.pvalue, rel=1e-12)


# --- Pearson's chi-square: scipy -----------------------------------------------------------


@pytest.mark.parametrize("continuity", [False, True])
def test_chi_square_2x2_matches_scipy(continuity: bool) -> None:
    # scipy.stats.chi2_contingency(correction=continuity), 1e-9 relative. scipy raises on a
    # zero expected count, where we return nan (tested in tests/test_stats_proportions.py), so
    # tables with a zero column margin are skipped here.
    for x1, n1, x2, n2 in _random_tables(seed=7, count=300, max_n=200):
        if x1 + x2 == 0 or x1 + x2 == n1 + n2:
            continue
        ours = pearson_chi_square([x1, x2], [n1, n2], continuity=continuity)
        ref = scipy.stats.chi2_contingency([[x1, n1 - x1], [x2, n2 - x2]], correction=continuity)
        assert ours.statistic == pytest.approx(ref.statistic, rel=1e-9, abs=1e-12)
        assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-9)
        assert ours.df == ref.dof == 1


def test_chi_square_kx2_matches_scipy() -> None:
    # scipy.stats.chi2_contingency (no correction is applied there when df > 1), 1e-9 relative.
    rng = np.random.default_rng(11)
    for _ in range(200):
        k = int(rng.integers(3, 7))
        totals = rng.integers(1, 150, size=k)
        events = [int(rng.integers(0, n + 1)) for n in totals]
        if sum(events) in (0, int(totals.sum())):
            continue
        table = [[e, int(n) - e] for e, n in zip(events, totals)]
        ours = pearson_chi_square(events, [int(n) for n in totals])
        ref = scipy.stats.chi2_contingency(table, correction=False)
        assert ours.statistic == pytest.approx(ref.statistic, rel=1e-9, abs=1e-12)
        assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-9)
        assert ours.df == ref.dof == k - 1


@pytest.mark.parametrize("continuity", [False, True])
def test_chi_square_one_sided_is_the_signed_root_on_the_normal(continuity: bool) -> None:
    # common practice: for a 2x2 table the signed root of X^2 (sign of p1 - p2) is standard
    # normal under the null; X^2 from scipy.stats.chi2_contingency, tails from scipy.stats.norm.
    for x1, n1, x2, n2 in _random_tables(seed=5, count=100, max_n=80):
        if x1 + x2 == 0 or x1 + x2 == n1 + n2:
            continue
        ref = scipy.stats.chi2_contingency([[x1, n1 - x1], [x2, n2 - x2]], correction=continuity)
        root = math.copysign(math.sqrt(ref.statistic), x1 / n1 - x2 / n2)
        if x1 * n2 == x2 * n1:
            root = 0.0
        greater = pearson_chi_square(
            [x1, x2], [n1, n2], continuity=continuity, alternative="greater"
        )
        less = pearson_chi_square([x1, x2], [n1, n2], continuity=continuity, alternative="less")
        assert greater.p_value == pytest.approx(scipy.stats.norm.sf(root), rel=1e-9)
        assert less.p_value == pytest.approx(scipy.stats.norm.cdf(root), rel=1e-9)


# --- two-proportion z: statsmodels -----------------------------------------------------------


@pytest.mark.parametrize(
    "alternative, statsmodels_name",
    [("two-sided", "two-sided"), ("greater", "larger"), ("less", "smaller")],
)
def test_z_matches_statsmodels(alternative: str, statsmodels_name: str) -> None:
    # statsmodels.stats.proportion.proportions_ztest(count=[x1, x2], nobs=[n1, n2]), 1e-9.
    # Its sign convention is ours: z = (p1 - p2) / se with the pooled se, and "larger" means
    # p1 > p2 (our "greater"), "smaller" p1 < p2 (our "less").
    for x1, n1, x2, n2 in _random_tables(seed=3, count=300, max_n=300):
        if x1 + x2 == 0 or x1 + x2 == n1 + n2:
            continue
        ours = two_proportion_z(x1, n1, x2, n2, alternative=alternative)
        z, p = proportions_ztest([x1, x2], [n1, n2], alternative=statsmodels_name)
        assert ours.statistic == pytest.approx(z, rel=1e-9, abs=1e-12)
        assert ours.p_value == pytest.approx(p, rel=1e-9)


def test_z_squared_equals_uncorrected_chi_square() -> None:
    # common practice (Agresti, Categorical Data Analysis, 2013, chapter 3): for a 2x2
    # table the squared pooled z statistic is Pearson's X^2, and their two-sided p agree.
    for x1, n1, x2, n2 in _random_tables(seed=13, count=300, max_n=500):
        if x1 + x2 == 0 or x1 + x2 == n1 + n2:
            continue
        z = two_proportion_z(x1, n1, x2, n2)
        x2_test = pearson_chi_square([x1, x2], [n1, n2])
        assert z.statistic is not None and x2_test.statistic is not None
        assert z.statistic**2 == pytest.approx(x2_test.statistic, rel=1e-9, abs=1e-12)
        assert z.p_value == pytest.approx(x2_test.p_value, rel=1e-9)


# --- expected counts -----------------------------------------------------------------------


def test_expected_counts_row_times_column_over_total() -> None:
    # common practice: expected = row total x column total / grand total. By hand for events
    # [12, 30] of totals [40, 60]: 42 events, 58 non-events, 100 in all, so
    # row 1: 40*42/100 = 16.8, 40*58/100 = 23.2; row 2: 60*42/100 = 25.2, 60*58/100 = 34.8.
    expected = expected_counts([12, 30], [40, 60])
    assert expected.shape == (2, 2)
    np.testing.assert_allclose(expected, [[16.8, 23.2], [25.2, 34.8]], rtol=1e-12)
    assert smallest_expected([12, 30], [40, 60]) == pytest.approx(16.8, rel=1e-12)


def test_expected_counts_match_scipy() -> None:
    # scipy.stats.contingency.expected_freq on k x 2 tables, 1e-12 relative.
    rng = np.random.default_rng(17)
    for _ in range(100):
        k = int(rng.integers(2, 6))
        totals = [int(n) for n in rng.integers(1, 90, size=k)]
        events = [int(rng.integers(0, n + 1)) for n in totals]
        table = [[e, n - e] for e, n in zip(events, totals)]
        np.testing.assert_allclose(
            expected_counts(events, totals),
            scipy.stats.contingency.expected_freq(table),
            rtol=1e-12,
        )


# --- likelihood ratio (G²) -------------------------------------------------------------------


def test_likelihood_ratio_party_identification() -> None:
    # Agresti, Categorical Data Analysis (2nd ed. 2002, Table 3.2), party identification by
    # gender: females 762 Democrat, 327 Independent, 468 Republican; males 484, 239, 477.
    # G^2 = 30.0 and X^2 = 30.1 with df 2, P < 0.001. # from memory
    # As a k x 2 table: the parties are the groups and "female" the event.
    events, totals = [762, 327, 468], [762 + 484, 327 + 239, 468 + 477]
    g2 = likelihood_ratio(events, totals)
    assert round(g2.statistic, 1) == 30.0  # type: ignore[arg-type]
    assert round(pearson_chi_square(events, totals).statistic, 1) == 30.1  # type: ignore[arg-type]
    assert g2.df == 2 and g2.p_value < 0.001


def test_likelihood_ratio_matches_scipy() -> None:
    # scipy.stats.chi2_contingency(table, correction=False, lambda_="log-likelihood"), 1e-9
    # relative, on k x 2 tables with zero cells, single participants and large totals. scipy
    # raises on a zero column margin, where we return nan (tests/test_stats_proportions.py).
    rng = np.random.default_rng(59)
    checked = 0
    for i in range(300):
        k = int(rng.integers(2, 7))
        high = [1, 4, 60, 5000][i % 4]
        totals = [int(n) for n in rng.integers(1, high + 1, size=k)]
        events = [int(rng.integers(0, n + 1)) for n in totals]
        if i % 5 == 0:
            events[0] = 0
        if sum(events) in (0, sum(totals)):
            continue
        table = [[e, n - e] for e, n in zip(events, totals)]
        ref = scipy.stats.chi2_contingency(table, correction=False, lambda_="log-likelihood")
        ours = likelihood_ratio(events, totals)
        assert ours.statistic == pytest.approx(ref.statistic, rel=1e-9, abs=1e-12), table
        assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-9), table
        assert ours.df == ref.dof == k - 1
        checked += 1
    assert checked > 200
