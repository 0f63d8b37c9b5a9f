"""One kernel per statistic: each array kernel of ``prespec.stats`` and its scalar case agree.

The scalar functions (used by ``prespec run``) are the one-table case of the array kernels
(used by the design simulation and the tipping-point grid), or an array twin stands beside the
scalar in the same module; here they are held together, and to the outside libraries the
scalars are tested against (each named beside its check).
"""

from __future__ import annotations

import itertools
import math
from types import SimpleNamespace

import numpy as np
import pytest
import scipy.stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import proportions_ztest

from prespec.analysis import sensitivity
from prespec.design.exactpower import FisherTables
from prespec.stats import graphical, intervals, margins, multiplicity, ratios, single, tables, trend
from prespec.stats._normal import (
    chi_square_p_value,
    chi_square_p_values,
    lower_tail,
    normal_p_value,
    normal_p_values,
    upper_quantile,
)
from prespec.stats.fisherarray import conditional_or_ci_many, fisher_many, fisher_p_values
from prespec.stats.proportions import (
    FISHER_TIE_TOLERANCE,
    fisher_exact,
    likelihood_ratio,
    likelihood_ratio_many,
    pearson_chi_square,
    pearson_many,
    two_proportion_z,
    two_proportion_z_many,
)

ALTERNATIVES = ("two-sided", "greater", "less")


def _all_tables(n1: int, n2: int) -> np.ndarray:
    """Every 2×2 table of groups of n1 and n2: events, one table per row."""
    return np.array(list(itertools.product(range(n1 + 1), range(n2 + 1))))


# --- the reference distributions ------------------------------------------------------------


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_normal_p_values_are_scipys_and_the_scalar_is_their_one_element_case(
        alternative: str) -> None:
    z = np.array([-40.0, -3.2, -1.0, 0.0, -0.0, 0.3, 1.959963984540054, 8.5, math.nan, 0.3,
                  math.inf, -math.inf, 1e-300, 37.5, -37.5,
                  *np.random.default_rng(7).normal(0.0, 3.0, 500)])
    got = normal_p_values(z, alternative)
    # scipy.stats.norm.sf / .cdf
    want = {"greater": scipy.stats.norm.sf(z), "less": scipy.stats.norm.cdf(z),
            "two-sided": np.minimum(1.0, 2.0 * scipy.stats.norm.sf(np.abs(z)))}[alternative]
    np.testing.assert_array_equal(got, want)
    for value, p in zip(z, got, strict=True):
        scalar = normal_p_value(float(value), alternative)
        assert (math.isnan(scalar) and math.isnan(p)) or scalar == p


def test_chi_square_p_values_are_scipys() -> None:
    x2 = np.array([0.0, 0.5, 3.841458820694124, 0.5, 60.0, math.nan, -1.0, math.inf, 900.0,
                   *np.random.default_rng(8).chisquare(2.0, 500)])
    for df in (1, 2, 3, 7):
        # scipy.stats.chi2.sf, to the bit (both come to scipy.special.chdtrc)
        want = scipy.stats.chi2.sf(x2, df)
        np.testing.assert_array_equal(chi_square_p_values(x2, df), want)
        for value, p in zip(x2[:40], want[:40], strict=True):
            scalar = chi_square_p_value(float(value), df)
            assert (math.isnan(scalar) and math.isnan(p)) or scalar == p


def test_the_normal_quantile_is_scipys_to_the_bit() -> None:
    qs = [0.025, 0.05, 0.005, 0.1, 0.5, 0.975, 1e-12, 1e-300, 0.0, 1.0, math.nan,
          *np.random.default_rng(9).uniform(0.0, 1.0, 500)]
    for q in qs:
        want = scipy.stats.norm.isf(q)  # scipy.stats.norm.isf
        got = upper_quantile(q)
        assert type(got) is type(want) is np.float64
        assert (math.isnan(got) and math.isnan(want)) or got == want, q
    assert round(float(upper_quantile(0.025)), 6) == 1.959964  # common practice: a 95% interval
    for z in [-40.0, -1.5, 0.0, 2.5, math.inf, -math.inf, math.nan,
              *np.random.default_rng(10).normal(0.0, 3.0, 300)]:
        want = scipy.stats.norm.cdf(z)  # scipy.stats.norm.cdf
        got = lower_tail(z)
        assert type(got) is type(want) is np.float64
        assert (math.isnan(got) and math.isnan(want)) or got == want, z


def _loaded_after(code: str) -> list[str]:
    """The heavy modules a fresh interpreter holds after running ``code``."""
    import subprocess
    import sys

    heavy = ("numpy", "scipy.special", "scipy.stats", "scipy.optimize", "nbformat", "pandas",
             "matplotlib")
    done = subprocess.run(
        [sys.executable, "-c", (f"import sys\n{code}\nprint(sorted(m for m in {heavy!r} "
                               "if m in sys.modules))")],
        capture_output=True, text=True, check=True)
    return [line for line in done.stdout.splitlines() if line][-1:]


def test_importing_the_statistics_room_leaves_scipy_stats_and_optimize_unloaded() -> None:
    """The report's kernel imports prespec.stats as it starts; each of scipy.stats and
    scipy.optimize would add about half a second to every report."""
    assert _loaded_after("import prespec.stats") == ["['numpy', 'scipy.special']"]
    # nor does a run's own code before it needs them (the design's planned sizes of z-tests)
    assert _loaded_after("import prespec.design, prespec.workflow.run") == [
        "['numpy', 'pandas', 'scipy.special']"]
    # the functions that need them load them when called
    assert (single.binomial_exact(7, 20, 0.5, alternative="two-sided").p_value
            == scipy.stats.binomtest(7, 20, 0.5).pvalue)  # scipy.stats.binomtest


def test_the_kernel_imports_the_sections_at_once_and_the_statistics_in_a_thread() -> None:
    from prespec.report import warm

    # what the first cells call imports neither numpy nor the notebook machinery
    at_start = "\n".join(f"import {name}" for name in warm.AT_START)
    assert _loaded_after(at_start) == ["[]"]
    # warm() leaves no name and prints nothing; its thread imports the statistics room
    code = ("import prespec.report.warm as w\nbefore = set(globals())\nt = w.warm()\n"
            "t.join()\nassert set(globals()) == before | {'t', 'before'}, set(globals())\n"
            "assert t.name == 'prespec-warm' and t.daemon")
    assert _loaded_after(code) == ["['numpy', 'scipy.special']"]
    # a module that fails in the thread says nothing there (the cell importing it will)
    code = ("import prespec.report.warm as w\nw.IN_BACKGROUND = ('prespec.no_such_room',)\n"
            "w.warm().join()")
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert (done.stdout, done.stderr) == ("", "")


# --- the smallest expected count ----------------------------------------------------------------


@pytest.mark.parametrize("totals", [(7, 9), (12, 5, 30), (1, 1, 1, 2)])
def test_smallest_expected_many_is_the_smallest_expected_cell_of_each_table(
        totals: tuple[int, ...]) -> None:
    rng = np.random.default_rng(15)
    events = np.column_stack([rng.integers(0, t + 1, size=60) for t in totals])
    got = tables.smallest_expected_many(events, np.array(totals))
    for row, value in zip(events.tolist(), got, strict=True):
        assert value == tables.smallest_expected(row, list(totals))
        # exactly the smallest cell of row total × column total / grand total
        assert value == float(tables.expected_counts(row, list(totals)).min())


def test_the_tipping_point_grid_counts_the_smallest_expected_by_the_same_kernel() -> None:
    x1, x2 = np.arange(0, 9)[:, None], np.arange(0, 12)[None, :]
    grid = sensitivity.smallest_expected_grid(x1, 8, x2, 11)
    assert grid.shape == (9, 12)
    for i, j in itertools.product(range(9), range(12)):
        assert grid[i, j] == tables.smallest_expected([i, j], [8, 11])


# --- the tests of two or more proportions ------------------------------------------------------


@pytest.mark.parametrize("continuity", [False, True])
@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_pearson_many_and_its_one_table_case_agree(continuity: bool, alternative: str) -> None:
    events = _all_tables(6, 9)
    x2, p = pearson_many(events, np.array([6, 9]), continuity=continuity,
                         alternative=alternative)
    for (a, b), statistic, value in zip(events.tolist(), x2, p, strict=True):
        scalar = pearson_chi_square([a, b], [6, 9], continuity=continuity,
                                    alternative=alternative)
        np.testing.assert_array_equal([statistic, value], [scalar.statistic, scalar.p_value])
        if alternative == "two-sided" and 0 < a + b < 15:
            # scipy.stats.chi2_contingency (its correction is Yates' on 2×2 tables)
            ref = scipy.stats.chi2_contingency([[a, 6 - a], [b, 9 - b]], correction=continuity)
            assert value == pytest.approx(ref.pvalue, rel=1e-9)


def test_pearson_many_on_three_groups_agrees_with_scipy() -> None:
    totals = [10, 14, 9]
    events = np.array([[1, 7, 5], [0, 0, 3], [10, 0, 9], [4, 6, 4]])
    x2, p = pearson_many(events, np.array(totals), continuity=False, alternative="two-sided")
    for row, statistic, value in zip(events.tolist(), x2, p, strict=True):
        assert pearson_chi_square(row, totals).p_value == value
        table = [[e, t - e] for e, t in zip(row, totals, strict=True)]
        ref = scipy.stats.chi2_contingency(table, correction=False)  # scipy.stats.chi2_contingency
        assert statistic == pytest.approx(ref.statistic, rel=1e-12)


def test_likelihood_ratio_many_and_its_one_table_case_agree() -> None:
    events = _all_tables(7, 5)
    g2, p = likelihood_ratio_many(events, np.array([7, 5]))
    for (a, b), statistic, value in zip(events.tolist(), g2, p, strict=True):
        scalar = likelihood_ratio([a, b], [7, 5])
        np.testing.assert_array_equal([statistic, value], [scalar.statistic, scalar.p_value])
        if 0 < a + b < 12:
            # scipy.stats.chi2_contingency(lambda_="log-likelihood"), without Yates
            ref = scipy.stats.chi2_contingency([[a, 7 - a], [b, 5 - b]], correction=False,
                                               lambda_="log-likelihood")
            assert statistic == pytest.approx(ref.statistic, rel=1e-9, abs=1e-14)


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_two_proportion_z_many_and_its_one_table_case_agree(alternative: str) -> None:
    events = _all_tables(8, 11)
    z, p = two_proportion_z_many(events, np.array([8, 11]), alternative)
    smaller = {"two-sided": "two-sided", "greater": "larger", "less": "smaller"}[alternative]
    for (a, b), statistic, value in zip(events.tolist(), z, p, strict=True):
        scalar = two_proportion_z(a, 8, b, 11, alternative=alternative)
        np.testing.assert_array_equal([statistic, value], [scalar.statistic, scalar.p_value])
        if 0 < a + b < 19:
            # statsmodels.stats.proportion.proportions_ztest (pooled variance)
            ref_z, ref_p = proportions_ztest([a, b], [8, 11], alternative=smaller)
            assert statistic == pytest.approx(ref_z, rel=1e-12, abs=1e-14)
            assert value == pytest.approx(ref_p, rel=1e-9)


# --- Fisher's exact test: one kernel, one ordering rule ----------------------------------------


@pytest.mark.parametrize(("n1", "n2"), [(5, 5), (8, 13), (20, 3)])
@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_fisher_exact_the_grid_and_the_exact_power_are_one_kernel(
        n1: int, n2: int, alternative: str) -> None:
    """The run (fisher_exact), the tipping-point grid and the design's exact power give the
    same p-value, to the last bit: they are one function at one tie rule (1e-7)."""
    events = _all_tables(n1, n2)
    a, b = events[:, 0], events[:, 1]
    many = fisher_p_values(a, n1 - a, b, n2 - b, alternative=alternative,
                           tie_tolerance=FISHER_TIE_TOLERANCE)
    hyp = SimpleNamespace(alternative=alternative)
    grid = sensitivity.grid_p_values("fisher-exact", a, n1, b, n2, hyp)
    power = FisherTables(n1, n2, alternative).p_values(a, b)
    scalar = [fisher_exact(x, n1, y, n2, alternative=alternative).p_value
              for x, y in zip(a.tolist(), b.tolist(), strict=True)]
    np.testing.assert_array_equal(grid, many)
    np.testing.assert_array_equal(power, many)
    np.testing.assert_array_equal(scalar, many)
    for (x, y), value in zip(events.tolist(), many, strict=True):
        # scipy.stats.fisher_exact (its ties within 1e-14; no table here is within 1e-7
        # of the observed one without being as probable in exact arithmetic)
        ref = scipy.stats.fisher_exact([[x, n1 - x], [y, n2 - y]], alternative=alternative)
        assert value == pytest.approx(ref.pvalue, rel=1e-12)


def test_fisher_ties_are_counted_by_the_same_rule_everywhere() -> None:
    """A symmetric table (equal groups): the mirror table is exactly as probable, so both
    tails count, in every caller; scipy.stats.fisher_exact agrees."""
    want = scipy.stats.fisher_exact([[2, 8], [7, 3]]).pvalue
    assert fisher_exact(2, 10, 7, 10).p_value == pytest.approx(want, rel=1e-12)
    grid = sensitivity.grid_p_values("fisher-exact", np.array([2]), 10, np.array([7]), 10,
                                     SimpleNamespace(alternative="two-sided"))
    assert float(grid[0]) == fisher_exact(2, 10, 7, 10).p_value
    assert float(FisherTables(10, 10, "two-sided").p_values([2], [7])[0]) == float(grid[0])


# --- the other tests on arrays ---------------------------------------------------------------


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_cochran_armitage_many_and_its_one_table_case_agree(alternative: str) -> None:
    totals = [9, 12, 7]
    scores = np.array([0.0, 1.0, 3.0])
    rng = np.random.default_rng(3)
    events = np.column_stack([rng.integers(0, t + 1, size=80) for t in totals])
    events[0] = 0  # no events: the variance is 0, z and p are nan
    z, p = trend.cochran_armitage_many(events, np.array(totals), scores, alternative)
    for row, statistic, value in zip(events.tolist(), z, p, strict=True):
        scalar = trend.cochran_armitage(row, totals, scores=[0, 1, 3], alternative=alternative)
        np.testing.assert_array_equal([statistic, value], [scalar.statistic, scalar.p_value])
    assert math.isnan(z[0]) and math.isnan(p[0])


@pytest.mark.parametrize("alternative", ALTERNATIVES)
def test_one_proportion_z_many_and_its_one_table_case_agree(alternative: str) -> None:
    x = np.arange(31)
    z, p = single.one_proportion_z_many(x, 30, 0.35, alternative)
    smaller = {"two-sided": "two-sided", "greater": "larger", "less": "smaller"}[alternative]
    for k in range(31):
        scalar = single.one_proportion_z(k, 30, 0.35, alternative=alternative)
        assert (z[k], p[k]) == (scalar.statistic, scalar.p_value)
        # statsmodels.stats.proportion.proportions_ztest with the variance at the null rate
        ref_z, ref_p = proportions_ztest(k, 30, value=0.35, alternative=smaller, prop_var=0.35)
        assert z[k] == pytest.approx(ref_z, rel=1e-12, abs=1e-14)
        assert p[k] == pytest.approx(ref_p, rel=1e-9)


@pytest.mark.parametrize("alternative", ALTERNATIVES)
@pytest.mark.parametrize(("n", "rate"), [(30, 0.2), (41, 0.5), (12, 0.07)])
def test_binomial_exact_all_is_the_array_twin_of_binomial_exact(
        n: int, rate: float, alternative: str) -> None:
    got = single.binomial_exact_all(n, rate, alternative)
    for x in range(n + 1):
        assert got[x] == pytest.approx(
            single.binomial_exact(x, n, rate, alternative=alternative).p_value, rel=1e-12)
        # scipy.stats.binomtest
        ref = scipy.stats.binomtest(x, n, rate, alternative=alternative).pvalue
        assert got[x] == pytest.approx(ref, rel=1e-9)


# --- the restricted MLEs and the tests at a margin ------------------------------------------------


@pytest.mark.parametrize("delta", [-0.999, -0.3, -0.1, 0.0, 0.05, 0.4, -1.0, 1.0])
def test_difference_mle_many_is_the_twin_of_difference_mle(delta: float) -> None:
    events = _all_tables(9, 14)
    t1, t2 = intervals.difference_mle_many(events[:, 0], 9, events[:, 1], 14, delta)
    for (a, b), u1, u2 in zip(events.tolist(), t1, t2, strict=True):
        want = intervals.difference_mle(a, 9, b, 14, delta)
        assert (u1, u2) == pytest.approx(want, rel=1e-12, abs=1e-15)


@pytest.mark.parametrize("ratio", [0.0, 0.5, 1.0, 1.25, 3.0])
def test_ratio_mle_many_is_the_twin_of_ratio_mle(ratio: float) -> None:
    events = _all_tables(10, 6)
    t1, t2 = ratios.ratio_mle_many(events[:, 0], 10, events[:, 1], 6, ratio)
    for (a, b), u1, u2 in zip(events.tolist(), t1, t2, strict=True):
        want = ratios.ratio_mle(a, 10, b, 6, ratio)
        assert (u1, u2) == pytest.approx(want, rel=1e-12, abs=1e-15)


@pytest.mark.parametrize(("measure", "margin"), [("risk-difference", -0.15),
                                                 ("risk-difference", 0.0),
                                                 ("risk-difference", 0.2),
                                                 ("risk-ratio", 0.8), ("risk-ratio", 1.0)])
def test_the_margin_statistics_on_arrays_are_the_twins_of_the_scalars(
        measure: str, margin: float) -> None:
    events = _all_tables(12, 10)
    a, b = events[:, 0], events[:, 1]
    fm = margins.farrington_manning_z_many(a, 12, b, 10, margin, measure)
    wald = margins.wald_margin_z_many(a, 12, b, 10, margin, measure)
    for i, (x, y) in enumerate(events.tolist()):
        kw = {"margin": margin, "measure": measure, "alternative": "greater"}
        for got, scalar in ((fm[i], margins.farrington_manning(x, 12, y, 10, **kw)),
                            (wald[i], margins.wald_margin_z(x, 12, y, 10, **kw))):
            if math.isnan(scalar.statistic):
                assert math.isnan(got)
            else:
                assert got == pytest.approx(scalar.statistic, rel=1e-12, abs=1e-13)


def test_margin_p_values_of_an_equivalence_are_the_two_one_sided_tests() -> None:
    events = _all_tables(15, 15)
    a, b = events[:, 0], events[:, 1]
    p = margins.margin_p_values(margins.farrington_manning_z_many, a, 15, b, 15,
                                comparison="equivalence", margin=(-0.2, 0.2),
                                measure="risk-difference", alternative="two-sided")
    for i, (x, y) in enumerate(events.tolist()):
        lower = margins.farrington_manning(x, 15, y, 15, margin=-0.2, measure="risk-difference",
                                           alternative="greater")
        upper = margins.farrington_manning(x, 15, y, 15, margin=0.2, measure="risk-difference",
                                           alternative="less")
        want = margins.tost(lower, upper).p_value
        assert (math.isnan(want) and math.isnan(p[i])) or p[i] == pytest.approx(want, rel=1e-9)


# --- multiplicity -------------------------------------------------------------------------------

STATSMODELS_NAMES = {"bonferroni": "bonferroni", "sidak": "sidak", "holm": "holm",
                     "hochberg": "simes-hochberg", "hommel": "hommel",
                     "benjamini-hochberg": "fdr_bh", "benjamini-yekutieli": "fdr_by"}


@pytest.mark.filterwarnings("ignore:divide by zero encountered in log1p:RuntimeWarning")
@pytest.mark.parametrize("method", sorted(multiplicity.ADJUSTMENT_METHODS))
def test_adjust_many_rows_are_adjust(method: str) -> None:
    rng = np.random.default_rng(7)
    p = rng.uniform(0.0, 0.2, size=(40, 5))
    p[0] = [0.01, 0.01, 0.03, 0.03, 0.2]  # ties keep their stable order
    p[1] = [1.0, 0.0, 1.0, 0.5, 0.04]
    rows = multiplicity.adjust_many(p, method)
    for row, got in zip(p, rows, strict=True):
        assert list(got) == multiplicity.adjust(list(row), method)
        if method in STATSMODELS_NAMES:
            # statsmodels.stats.multitest.multipletests
            ref = multipletests(row, method=STATSMODELS_NAMES[method])[1]
            np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-15)


GRAPHS = [
    ([0.5, 0.5, 0.0], [[0, 0.5, 0.5], [0.5, 0, 0.5], [0, 0, 0]]),
    ([1.0, 0.0], [[0, 0], [0, 0]]),  # the second hypothesis's weight stays 0
    ([0.0, 0.0, 1.0], [[0, 1, 0], [1, 0, 0], [0, 0, 0]]),
    ([1.0, 0.0, 0.0], [[0, 1, 0], [0, 0, 1], [0, 0, 0]]),  # a fixed sequence as a graph
]


@pytest.mark.parametrize(("weights", "transitions"), GRAPHS)
def test_graphical_adjust_many_rows_are_graphical_adjust(
        weights: list[float], transitions: list[list[float]]) -> None:
    rng = np.random.default_rng(11)
    p = rng.uniform(0.0, 0.1, size=(50, len(weights)))
    rows = graphical.graphical_adjust_many(p, weights, transitions)
    for row, got in zip(p, rows, strict=True):
        want = graphical.graphical_adjust(list(row), weights, transitions)
        assert list(got) == want
        # the procedure at 0.05 rejects exactly the adjusted p-values at or below it
        assert [v <= 0.05 for v in want] == graphical.graphical_rejections(
            list(row), weights, transitions, 0.05)


def test_a_weight_left_at_zero_does_not_overwrite_an_earlier_adjusted_p() -> None:
    """The design simulation's former array form gave [1, 1] here: once every hypothesis
    left had weight 0 it took an already adjusted one again and set it to 1."""
    got = graphical.graphical_adjust_many(np.array([[0.01, 0.02]]), [1.0, 0.0],
                                          [[0.0, 0.0], [0.0, 0.0]])
    np.testing.assert_array_equal(got, [[0.01, 1.0]])
    assert graphical.graphical_adjust([0.01, 0.02], [1.0, 0.0], [[0, 0], [0, 0]]) == [0.01, 1.0]


# --- the exact conditional odds ratio: a scalar and an array twin in two modules ---------------


@pytest.mark.parametrize(("n1", "n2"), [(6, 9), (25, 18)])
def test_the_exact_conditional_odds_ratio_and_its_array_twin_agree(n1: int, n2: int) -> None:
    """ratios.exact_conditional_odds_ratio (the run: brentq on log-gamma weights) and
    fisherarray's fisher_many / conditional_or_ci_many (the safety families: Newton on
    extended-precision ratios) are two root searches of one law; they agree to 1e-10 relative
    (the estimates of the two differ by up to about 2e-11, the limits by under 1e-12)."""
    events = _all_tables(n1, n2)
    a, c = events[:, 0], events[:, 1]
    estimate = fisher_many(a, n1 - a, c, n2 - c).odds_ratio
    low, high = conditional_or_ci_many(a, n1 - a, c, n2 - c, level=0.95)
    for i, (x, y) in enumerate(events.tolist()):
        e = ratios.exact_conditional_odds_ratio(x, n1, y, n2, 0.95)
        for scalar, array in ((e.value, estimate[i]), (e.low, low[i]), (e.high, high[i])):
            if math.isnan(scalar):
                assert math.isnan(array)
            else:
                assert array == pytest.approx(scalar, rel=1e-10, abs=0.0)
