"""Sample size and power against published values, statsmodels' power functions, and exact
enumeration with scipy's own tests."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.power import GofChisquarePower, NormalIndPower, normal_power_het
from statsmodels.stats.proportion import (
    power_proportions_2indep,
    proportion_effectsize,
    samplesize_proportions_2indep_onetail,
)

from prespec.design import exactpower, samplesize
from prespec.stats import margins, single, trend

# --- two proportions: Fleiss, Levin and Paik --------------------------------------------------


@pytest.mark.parametrize(("p1", "p2", "plain", "corrected"), [
    # Fleiss, Levin and Paik 2003, the table of sample sizes per group for two proportions,
    # alpha 0.05 two-sided, power 0.80 (from memory; the corrected values are the table's)
    (0.05, 0.10, 435, 474),
    (0.10, 0.20, 199, 219),
])
def test_two_proportions_match_the_published_table(p1: float, p2: float, plain: int,
                                                   corrected: int) -> None:
    assert samplesize.two_proportion_n(p1, p2, 0.025, 0.80).n == (plain, plain)
    assert samplesize.two_proportion_n(p1, p2, 0.025, 0.80, continuity=True).n == \
        (corrected, corrected)


@pytest.mark.parametrize(("p1", "p2", "ratio", "power"), [
    (0.10, 0.20, 1.0, 0.80), (0.20, 0.10, 2.0, 0.90), (0.30, 0.50, 0.5, 0.85),
    (0.02, 0.06, 3.0, 0.80),
])
def test_two_proportion_size_equals_statsmodels(p1: float, p2: float, ratio: float,
                                                power: float) -> None:
    # statsmodels.stats.proportion.samplesize_proportions_2indep_onetail: the same formula
    # (pooled variance under the null, unpooled under the alternative, one tail at alpha/2)
    expected = samplesize_proportions_2indep_onetail(p1 - p2, p2, power, ratio=ratio, alpha=0.05,
                                                     alternative="two-sided")
    got = samplesize.two_proportion_n(p1, p2, 0.025, power, ratio=ratio)
    assert got.solution == pytest.approx(expected, rel=1e-9)
    assert got.n == (math.ceil(expected), math.ceil(ratio * expected))
    assert got.power >= power


@pytest.mark.parametrize(("p1", "p2", "n1", "ratio"), [
    (0.10, 0.20, 100, 1.5), (0.30, 0.22, 250, 1.0), (0.05, 0.01, 400, 0.5),
])
def test_two_proportion_power_equals_statsmodels_one_sided(p1: float, p2: float, n1: int,
                                                           ratio: float) -> None:
    # statsmodels.stats.proportion.power_proportions_2indep, one-sided in the direction of
    # the difference (its two-sided power adds the far tail, which the formula leaves out)
    side = "larger" if p1 > p2 else "smaller"
    expected = power_proportions_2indep(p1 - p2, p2, n1, ratio=ratio, alpha=0.025,
                                        alternative=side).power
    got = samplesize.two_proportion_power(p1, p2, n1, ratio * n1, 0.025)
    assert got == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(("p1", "p2", "n1", "ratio", "alpha"), [
    (0.10, 0.20, 100, 1.5, 0.05), (0.30, 0.22, 250, 1.0, 0.05), (0.05, 0.01, 400, 0.5, 0.05),
    (0.20, 0.21, 30, 1.0, 0.05 / 3), (0.15, 0.25, 20, 2.0, 0.01),
])
def test_two_sided_power_counts_both_tails_as_statsmodels(p1: float, p2: float, n1: int,
                                                          ratio: float, alpha: float) -> None:
    # statsmodels.stats.proportion.power_proportions_2indep(alternative="two-sided"): the near
    # tail at alpha/2 plus the far one (a rejection in the direction opposite to the rates)
    expected = power_proportions_2indep(p1 - p2, p2, n1, ratio=ratio, alpha=alpha,
                                        alternative="two-sided").power
    got = samplesize.two_proportion_power(p1, p2, n1, ratio * n1, alpha / 2, two_sided=True)
    assert got == pytest.approx(expected, rel=1e-9)
    assert got > samplesize.two_proportion_power(p1, p2, n1, ratio * n1, alpha / 2)


@pytest.mark.parametrize("alpha", [0.05, 0.05 / 3, 0.01])
def test_two_sided_power_under_equal_rates_is_the_whole_level(alpha: float) -> None:
    # common practice: a test of level alpha rejects a true null with probability alpha; and
    # statsmodels.stats.proportion.power_proportions_2indep(diff=0, alternative="two-sided")
    got = samplesize.two_proportion_power(0.2, 0.2, 90, 120, alpha / 2, two_sided=True)
    assert got == pytest.approx(alpha, rel=1e-12)
    expected = power_proportions_2indep(0.0, 0.2, 90, ratio=120 / 90, alpha=alpha,
                                        alternative="two-sided").power
    assert got == pytest.approx(expected, rel=1e-9)
    assert samplesize.one_proportion_power(0.3, 0.3, 50, alpha / 2, two_sided=True) == \
        pytest.approx(alpha, rel=1e-12)
    assert samplesize.trend_power([0.2, 0.2, 0.2], [40, 40, 40], [0, 1, 2], alpha / 2,
                                  two_sided=True) == pytest.approx(alpha, rel=1e-12)


@pytest.mark.parametrize(("p", "p0", "n"), [(0.45, 0.30, 60), (0.10, 0.20, 150), (0.5, 0.52, 40)])
def test_one_proportion_two_sided_power_equals_statsmodels(p: float, p0: float, n: int) -> None:
    # statsmodels.stats.power.normal_power_het: the null sd in the critical value, the
    # alternative one in the power, both tails at alpha/2
    expected = normal_power_het(abs(p - p0), n, 0.05, std_null=math.sqrt(p0 * (1 - p0)),
                                std_alternative=math.sqrt(p * (1 - p)), alternative="two-sided")
    got = samplesize.one_proportion_power(p, p0, n, 0.025, two_sided=True)
    assert got == pytest.approx(float(expected), rel=1e-9)


def test_trend_two_sided_power_with_two_groups_equals_statsmodels() -> None:
    # for k = 2 and scores (0, 1) the trend test is the two-proportion z test:
    # statsmodels.stats.proportion.power_proportions_2indep(alternative="two-sided")
    got = samplesize.trend_power([0.10, 0.13], [100, 150], [0, 1], 0.025, two_sided=True)
    expected = power_proportions_2indep(0.03, 0.1, 150, ratio=100 / 150, alpha=0.05,
                                        alternative="two-sided").power
    assert got == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(("p1", "p2"), [(0.05, 0.10), (0.10, 0.20), (0.20, 0.14)])
def test_the_arcsine_formula_of_normal_ind_power_differs(p1: float, p2: float) -> None:
    # statsmodels.stats.power.NormalIndPower with proportion_effectsize is Cohen's h, the
    # arcsine transform: one variance (1/n on the arcsine scale) under the null and the
    # alternative alike, where Fleiss, Levin and Paik use the pooled variance under the null
    # and the unpooled one under the alternative. So the sizes are close but not the same;
    # the arcsine one is smaller at these rates.
    h = abs(proportion_effectsize(p1, p2))
    arcsine = NormalIndPower().solve_power(effect_size=h, alpha=0.05, power=0.8, ratio=1.0)
    ours = samplesize.two_proportion_n(p1, p2, 0.025, 0.8).solution
    assert ours is not None
    assert arcsine < ours < arcsine * 1.03


def test_continuity_corrected_size_solves_the_corrected_power_equation() -> None:
    # Fleiss, Levin and Paik 2003, §4.2: the corrected formula is the exact solution of
    # |p1 − p2| − (1/n1 + 1/n2)/2 = z_a sd0 + z_b sd1, so the power at the real-valued n is
    # the target exactly (common practice: Casagrande, Pike and Smith 1978)
    got = samplesize.two_proportion_n(0.15, 0.30, 0.025, 0.9, ratio=2.0, continuity=True)
    assert got.solution is not None
    power = samplesize.two_proportion_power(0.15, 0.30, got.solution, 2.0 * got.solution,
                                            0.025, continuity=True)
    assert power == pytest.approx(0.9, abs=1e-12)


# --- margins ----------------------------------------------------------------------------------


def test_farrington_manning_at_a_zero_margin_is_the_pooled_formula() -> None:
    # at δ0 = 0 the restricted maximum likelihood rates are the pooled rate (Farrington and
    # Manning 1990, section 2), so the size is Fleiss, Levin and Paik's (statsmodels above)
    fm = samplesize.margin_n(0.30, 0.18, 0.025, 0.8, margin=0.0, measure="risk-difference",
                             alternative="greater", ratio=1.5)
    expected = samplesize_proportions_2indep_onetail(0.12, 0.18, 0.8, ratio=1.5, alpha=0.025,
                                                     alternative="larger")
    assert fm.solution == pytest.approx(expected, rel=1e-9)


def test_wald_non_inferiority_size_is_the_textbook_formula() -> None:
    # Chow, Shao and Wang, Sample Size Calculations in Clinical Research, 2nd ed., 2008, §4.2
    # (common practice): n = (z_a + z_b)² (p1q1 + p2q2) / (p1 − p2 − δ)², one-sided alpha
    z = stats.norm.isf(0.025) + stats.norm.isf(0.2)
    expected = z * z * (0.8 * 0.2 + 0.8 * 0.2) / 0.1**2
    got = samplesize.margin_n(0.8, 0.8, 0.025, 0.8, margin=-0.1, measure="risk-difference",
                              alternative="greater", score=False)
    assert got.solution == pytest.approx(expected, rel=1e-12)
    assert got.n == (252, 252)


def _enumerated_power(test: object, p1: float, p2: float, n1: int, n2: int,
                      level: float) -> float:
    """Power of a test function by summing scipy.stats.binom probabilities over the tables
    it rejects (beyond 1e-12 in the tails left out)."""
    assert callable(test)
    x1 = np.arange(int(stats.binom.ppf(1e-12, n1, p1)), int(stats.binom.isf(1e-12, n1, p1)) + 1)
    x2 = np.arange(int(stats.binom.ppf(1e-12, n2, p2)), int(stats.binom.isf(1e-12, n2, p2)) + 1)
    f1, f2 = stats.binom.pmf(x1, n1, p1), stats.binom.pmf(x2, n2, p2)
    return sum(float(a * b) for i, a in zip(x1, f1, strict=True)
               for j, b in zip(x2, f2, strict=True) if test(int(i), int(j)) <= level)


@pytest.mark.parametrize("measure", ["risk-difference", "risk-ratio"])
def test_farrington_manning_power_is_close_to_the_exact_power_of_the_test(measure: str) -> None:
    # the approximation against the real score test's rejection region, enumerated with
    # scipy.stats.binom probabilities (an approximation: agreement to 0.02 at n = 150)
    margin = -0.12 if measure == "risk-difference" else 0.85
    approx = samplesize.margin_power(0.75, 0.75, 150, 150, 0.025, margin=margin,
                                     measure=measure, alternative="greater")

    def p_value(x1: int, x2: int) -> float:
        return margins.farrington_manning(x1, 150, x2, 150, margin=margin, measure=measure,
                                          alternative="greater").p_value

    exact = _enumerated_power(p_value, 0.75, 0.75, 150, 150, 0.025)
    assert 0.5 < approx < 0.95
    assert approx == pytest.approx(exact, abs=0.02)


# --- one group, k groups, trend ---------------------------------------------------------------


def test_one_proportion_size_is_the_closed_form_and_close_to_the_exact_power() -> None:
    # common practice: n = [z_a sqrt(p0 q0) + z_b sqrt(p q)]² / (p − p0)²
    za, zb = stats.norm.isf(0.025), stats.norm.isf(0.2)
    expected = ((za * math.sqrt(0.3 * 0.7) + zb * math.sqrt(0.45 * 0.55)) / 0.15) ** 2
    got = samplesize.one_proportion_n(0.45, 0.3, 0.025, 0.8)
    assert got.solution == pytest.approx(expected, rel=1e-12)
    n = got.n[0]
    # the real score test's power, enumerated with scipy.stats.binom (two-sided at 0.05)
    x = np.arange(n + 1)
    reject = [single.one_proportion_z(int(k), n, 0.3, alternative="two-sided").p_value <= 0.05
              for k in x]
    exact = float(np.sum(stats.binom.pmf(x, n, 0.45)[reject]))
    assert exact == pytest.approx(got.power, abs=0.03)


@pytest.mark.parametrize(("rates", "sizes"), [
    ([0.20, 0.14, 0.10], [200, 200, 200]), ([0.3, 0.3, 0.4, 0.5], [50, 80, 80, 120]),
])
def test_k_group_power_equals_statsmodels_chi_square_power(rates: list[float],
                                                           sizes: list[int]) -> None:
    # statsmodels.stats.power.GofChisquarePower: noncentral chi-square with nc = N·w², df =
    # n_bins − 1; Cohen's w² for a k×2 table is Σ w_i (p_i − p̄)² / (p̄ q̄) (Cohen 1988, ch. 7)
    total = sum(sizes)
    w = [n / total for n in sizes]
    mean = sum(a * p for a, p in zip(w, rates, strict=True))
    effect = math.sqrt(sum(a * (p - mean) ** 2 for a, p in zip(w, rates, strict=True))
                       / (mean * (1 - mean)))
    expected = GofChisquarePower().power(effect_size=effect, nobs=total, alpha=0.05,
                                         n_bins=len(rates))
    assert samplesize.k_group_power(rates, sizes, 0.05) == pytest.approx(expected, rel=1e-9)


def test_k_group_size_reaches_the_power_by_statsmodels() -> None:
    got = samplesize.k_group_n([0.20, 0.14, 0.10], 0.05, 0.8)
    assert got.n == (238, 238, 238)
    mean = (0.20 + 0.14 + 0.10) / 3
    effect = math.sqrt(sum((p - mean) ** 2 for p in (0.20, 0.14, 0.10)) / 3
                       / (mean * (1 - mean)))
    # statsmodels.stats.power.GofChisquarePower.solve_power for the total N
    total = GofChisquarePower().solve_power(effect_size=effect, nobs=None, alpha=0.05,
                                            power=0.8, n_bins=3)
    assert got.solution == pytest.approx(total / 3, rel=1e-6)


def test_trend_with_two_groups_is_the_two_proportion_formula() -> None:
    # Nam 1987: for k = 2 and scores (0, 1) the trend test is the two-proportion z test, so
    # the power is Fleiss, Levin and Paik's (equal to statsmodels above)
    got = samplesize.trend_power([0.10, 0.20], [100, 150], [0, 1], 0.025)
    expected = power_proportions_2indep(0.1, 0.1, 150, ratio=100 / 150, alpha=0.025,
                                        alternative="larger").power
    assert got == pytest.approx(expected, rel=1e-9)


def test_trend_power_is_close_to_the_exact_power_of_the_test() -> None:
    # the real Cochran–Armitage test's rejection region over all 3-group tables, weighted by
    # scipy.stats.binom probabilities (an approximation: agreement to 0.02 at 40 per group)
    n, rates = 40, [0.10, 0.20, 0.35]
    approx = samplesize.trend_power(rates, [n] * 3, [0, 1, 2], 0.025)
    pmf = [stats.binom.pmf(np.arange(n + 1), n, p) for p in rates]
    grid = np.stack(np.meshgrid(*[np.arange(n + 1)] * 3, indexing="ij"), axis=-1).reshape(-1, 3)
    weight = pmf[0][grid[:, 0]] * pmf[1][grid[:, 1]] * pmf[2][grid[:, 2]]
    keep = weight > 1e-10
    reject = [trend.cochran_armitage(list(map(int, row)), [n] * 3).p_value <= 0.05
              for row in grid[keep]]
    exact = float(np.sum(weight[keep][reject]))
    assert approx == pytest.approx(exact, abs=0.02)


# --- exact power by enumeration ---------------------------------------------------------------


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_fisher_power_equals_enumeration_with_scipy(alternative: str) -> None:
    # scipy.stats.fisher_exact on every table, weighted by scipy.stats.binom probabilities
    n1, n2, p1, p2 = 12, 15, 0.6, 0.2
    if alternative == "less":
        p1, p2 = p2, p1
    expected = 0.0
    for x1 in range(n1 + 1):
        for x2 in range(n2 + 1):
            p = stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]], alternative=alternative).pvalue
            if p <= 0.05:
                expected += stats.binom.pmf(x1, n1, p1) * stats.binom.pmf(x2, n2, p2)
    got = exactpower.fisher_power(p1, p2, n1, n2, 0.05, alternative)
    assert got == pytest.approx(expected, abs=1e-11)


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_binomial_power_equals_enumeration_with_scipy(alternative: str) -> None:
    # scipy.stats.binomtest on every outcome, weighted by scipy.stats.binom probabilities
    n, p0, p = 30, 0.3, 0.55 if alternative != "less" else 0.1
    expected = sum(stats.binom.pmf(x, n, p) for x in range(n + 1)
                   if stats.binomtest(x, n, p0, alternative=alternative).pvalue <= 0.05)
    assert exactpower.binomial_power(p, p0, n, 0.05, alternative) == \
        pytest.approx(expected, abs=1e-12)


def test_fisher_size_is_the_smallest_n_by_a_scan_with_scipy() -> None:
    # the first n from 2 up whose exact power (scipy.stats.fisher_exact enumerated) reaches
    # 0.8; the search starts near the corrected normal size and must land on the same n
    def power(n: int) -> float:
        return sum(stats.binom.pmf(a, n, 0.8) * stats.binom.pmf(b, n, 0.2)
                   for a in range(n + 1) for b in range(n + 1)
                   if stats.fisher_exact([[a, n - a], [b, n - b]]).pvalue <= 0.05)

    first = next(n for n in range(2, 60) if power(n) >= 0.8)
    guess = samplesize.two_proportion_n(0.8, 0.2, 0.025, 0.8, continuity=True).n[0]
    got = exactpower.fisher_n(0.8, 0.2, 0.05, 0.8, "two-sided", guess=guess)
    assert got.n == (first, first)
    assert got.power == pytest.approx(power(first), abs=1e-11)


def test_binomial_size_is_the_smallest_n_and_the_saw_tooth_is_reported() -> None:
    # scipy.stats.binomtest scanned from n = 1: the smallest n with exact power >= 0.8, and
    # the larger n (up to the checked size) whose power falls below it again
    def power(n: int) -> float:
        return sum(stats.binom.pmf(x, n, 0.5) for x in range(n + 1)
                   if stats.binomtest(x, n, 0.3).pvalue <= 0.05)

    got = exactpower.binomial_n(0.5, 0.3, 0.05, 0.8, "two-sided")
    first = next(n for n in range(1, 200) if power(n) >= 0.8)
    assert got.n == (first,)
    dips = tuple(n for n in range(first + 1, got.checked_to + 1) if power(n) < 0.8)
    assert got.dips == dips
    assert dips  # exact power is saw-toothed here: some larger n fall below the target
