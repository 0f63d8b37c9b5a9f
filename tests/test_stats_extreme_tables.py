"""Tails that underflow or cancel on extreme tables, against exact fractions and 50-digit decimals.

Each reference is computed here, in arithmetic we did not write the library for: exact binomial
and hypergeometric tails as Python fractions of big integers (math.comb), and the
Breslow–Day–Tarone and likelihood-ratio statistics in 60-digit decimal arithmetic.
"""

from __future__ import annotations

import math
from decimal import Decimal, getcontext
from fractions import Fraction
from types import SimpleNamespace

import numpy as np
import pytest

from prespec.design.exactpower import FisherTables
from prespec.stats.fisherarray import fisher_many, fisher_p_values
from prespec.stats.proportions import fisher_exact, likelihood_ratio, likelihood_ratio_many
from prespec.stats.single import BINOMIAL_TIE_TOLERANCE, binomial_exact
from prespec.stats.stratified import breslow_day_tarone
from prespec.stats.tails import binomial_tail

# --- exact references ------------------------------------------------------------------------


def _binomial_counts(n: int, rate: float) -> tuple[list[int], int]:
    """(C(n, j)·u^j·v^(n − j) for j = 0..n, w^n): exact integers with P(X = j) their ratio,
    for the float rate's exact value u/w and v = w − u."""
    p = Fraction(rate)
    u, w = p.numerator, p.denominator
    v = w - u
    u_powers, v_powers = [1], [1]
    for _ in range(n):
        u_powers.append(u_powers[-1] * u)
        v_powers.append(v_powers[-1] * v)
    counts, choose = [], 1
    for j in range(n + 1):
        counts.append(choose * u_powers[j] * v_powers[n - j])
        choose = choose * (n - j) // (j + 1)
    return counts, w**n


def _binomial_reference(x: int, n: int, rate: float, alternative: str) -> float:
    counts, whole = _binomial_counts(n, rate)
    if alternative == "greater":
        return sum(counts[x:]) / whole
    if alternative == "less":
        return sum(counts[: x + 1]) / whole
    # the method of small p-values, with the library's relative tie tolerance
    tolerance = Fraction(BINOMIAL_TIE_TOLERANCE)
    limit = counts[x] * (tolerance.denominator + tolerance.numerator)
    counted = sum(c for c in counts if c * tolerance.denominator <= limit)
    return min(1.0, counted / whole)


def _hypergeometric_counts(total: int, events: int, drawn: int) -> tuple[int, list[int], int]:
    """(lowest value, C(K, k)C(N − K, n − k) over the support, C(N, n)): exact integers, the
    k-th term from the one before by the exact ratio (K − k)(n − k)/((k + 1)(N − K − n + k + 1))."""
    low, high = max(0, drawn - (total - events)), min(drawn, events)
    term = math.comb(events, low) * math.comb(total - events, drawn - low)
    counts = [term]
    for k in range(low, high):
        term = term * (events - k) * (drawn - k) // ((k + 1) * (total - events - drawn + k + 1))
        counts.append(term)
    return low, counts, math.comb(total, drawn)


def _fisher_reference(x1: int, n1: int, x2: int, n2: int, alternative: str) -> float:
    low, counts, whole = _hypergeometric_counts(n1 + n2, x1 + x2, n1)
    at = x1 - low
    if alternative == "greater":
        return sum(counts[at:]) / whole
    if alternative == "less":
        return sum(counts[: at + 1]) / whole
    # the library's tie tolerance, 1e-7: count <= observed·(1 + 1e-7), in integers
    counted = sum(c for c in counts if c * 10**7 <= counts[at] * (10**7 + 1))
    return min(1.0, counted / whole)


# --- the exact binomial test -----------------------------------------------------------------


@pytest.mark.parametrize("x, n, rate, alternative", [
    (682, 713, 1 / 3, "greater"),  # 2.5e-277: scipy.stats.binom.sf returns 0.0
    (31, 713, 2 / 3, "less"),
    (682, 713, 1 / 3, "two-sided"),
    (0, 1000, 0.5, "less"),
    (7, 20, 0.3, "greater"), (7, 20, 0.3, "less"), (7, 20, 0.3, "two-sided"),
    (980, 1000, 0.9, "greater"), (3, 600, 0.01, "two-sided"), (12, 40, 0.05, "two-sided"),
])
def test_binomial_exact_tails_match_exact_fractions(
        x: int, n: int, rate: float, alternative: str) -> None:
    want = _binomial_reference(x, n, rate, alternative)
    got = binomial_exact(x, n, rate, alternative=alternative).p_value
    assert want > 0.0
    assert got == pytest.approx(want, rel=1e-12, abs=0.0)


def test_binomial_tail_helper_reaches_deep_tails_and_the_mode() -> None:
    """Both sides of the mode and the support's ends, against exact fractions."""
    counts, whole = _binomial_counts(300, 0.2)
    for x in (0, 1, 30, 59, 60, 61, 90, 200, 299, 300):
        assert binomial_tail(x, 300, 0.2, upper=True) == pytest.approx(
            sum(counts[x:]) / whole, rel=1e-13, abs=0.0)
        assert binomial_tail(x, 300, 0.2, upper=False) == pytest.approx(
            sum(counts[: x + 1]) / whole, rel=1e-13, abs=0.0)
    assert binomial_tail(301, 300, 0.2, upper=True) == 0.0
    assert binomial_tail(-1, 300, 0.2, upper=False) == 0.0


# --- Fisher's exact test, N > 1e5 ------------------------------------------------------------


FISHER_LARGE = [
    (7457, 494100, 10, 1812, "greater"),  # scipy.stats.hypergeom.sf: 1.2295849314e-4
    (7457, 494100, 10, 1812, "less"),
    (7457, 494100, 10, 1812, "two-sided"),
    (40, 150000, 2, 900, "greater"),
    (9, 1300, 3, 120000, "two-sided"),
]


@pytest.mark.parametrize("x1, n1, x2, n2, alternative", FISHER_LARGE)
def test_fisher_on_large_tables_matches_exact_fractions(
        x1: int, n1: int, x2: int, n2: int, alternative: str) -> None:
    want = _fisher_reference(x1, n1, x2, n2, alternative)
    assert fisher_exact(x1, n1, x2, n2, alternative=alternative).p_value == pytest.approx(
        want, rel=1e-12, abs=0.0)
    # the array twin (safety tables) agrees on the same tables
    many = fisher_many([x1], [n1 - x1], [x2], [n2 - x2], alternative=alternative)
    assert float(many.p_value[0]) == pytest.approx(want, rel=1e-12, abs=0.0)


def test_fisher_one_sided_tails_on_both_sides_of_the_mode() -> None:
    """The hypergeometric tails of the one Fisher kernel (70 events among 200, 90 of them in
    the first group), on the whole support at once, against exact fractions."""
    low, counts, whole = _hypergeometric_counts(200, 70, 90)
    x1 = np.arange(low, low + len(counts))
    cells = (x1, 90 - x1, 70 - x1, 40 + x1)
    upper = fisher_p_values(*cells, alternative="greater", tie_tolerance=1e-7)
    lower = fisher_p_values(*cells, alternative="less", tie_tolerance=1e-7)
    for at in range(len(counts)):
        assert upper[at] == pytest.approx(sum(counts[at:]) / whole, rel=1e-13, abs=0.0)
        assert lower[at] == pytest.approx(sum(counts[: at + 1]) / whole, rel=1e-13, abs=0.0)


# --- Breslow–Day–Tarone near the edge of the support -----------------------------------------


def _breslow_day_tarone_60_digits(strata: list[tuple[int, int, int, int]]) -> float:
    """The statistic by its textbook formulas (Breslow and Day 1980, section 4.4; Tarone 1985)
    in 60-digit decimals: the Mantel–Haenszel ψ, E the root of (1 − ψ)E² + (n2 − m1 + ψ(n1 +
    m1))E − ψn1m1 = 0 inside the support, V from the four expected cells."""
    getcontext().prec = 60
    rows = [s for s in strata if s[1] > 0 and s[3] > 0 and 0 < s[0] + s[2] < s[1] + s[3]]
    r = sum(Decimal(x1 * (n2 - x2)) / (n1 + n2) for x1, n1, x2, n2 in rows)
    s = sum(Decimal((n1 - x1) * x2) / (n1 + n2) for x1, n1, x2, n2 in rows)
    psi = r / s
    residuals, variances = [], []
    for x1, n1, x2, n2 in rows:
        m1 = x1 + x2
        b = n2 - m1 + psi * (n1 + m1)
        root = (b * b + 4 * (1 - psi) * psi * n1 * m1).sqrt()
        e = 2 * psi * n1 * m1 / (b + root)
        variances.append(1 / (1 / e + 1 / (n1 - e) + 1 / (m1 - e) + 1 / (n2 - m1 + e)))
        residuals.append(x1 - e)
    statistic = sum(d * d / v for d, v in zip(residuals, variances, strict=True))
    return float(statistic - sum(residuals) ** 2 / sum(variances))


@pytest.mark.parametrize("strata", [
    # every stratum near an edge of its support: 92276.3466 against 92276.3210 before
    [(1, 5, 2, 2), (0, 7215, 8010, 8010), (0, 4, 2, 2), (2334, 2945, 0, 5),
     (1, 27245, 35998, 35998), (0, 0, 1, 3)],
    [(0, 100000, 99999, 100000), (5, 10, 3, 10), (1, 2, 0, 3)],
    [(12, 40, 5, 38), (9, 35, 8, 41), (20, 50, 4, 45)],
])
def test_breslow_day_tarone_matches_60_digits(strata: list[tuple[int, int, int, int]]) -> None:
    want = _breslow_day_tarone_60_digits(strata)
    assert breslow_day_tarone(strata).statistic == pytest.approx(want, rel=1e-11, abs=0.0)


# --- the likelihood-ratio statistic when it is tiny ------------------------------------------


def _g2_60_digits(events: list[int], totals: list[int]) -> Decimal:
    """G² = 2 Σ O ln(O/E) (Agresti 2013, chapter 3) in 60-digit decimals, 0 ln 0 = 0."""
    getcontext().prec = 60
    grand, event_total = sum(totals), sum(events)
    g2 = Decimal(0)
    for e, t in zip(events, totals, strict=True):
        for observed, column in ((e, event_total), (t - e, grand - event_total)):
            if observed:
                g2 += observed * (Decimal(observed) * grand / (Decimal(t) * column)).ln()
    return 2 * g2


LIKELIHOOD_TABLES = [
    ([0, 1], [2, 100000]),  # 3.9999796e-5 before, 3.9999800e-5 in 60 digits
    ([5000, 4999], [10000, 10000]),
    ([1, 2], [3_000_000_000, 4_000_000_000]),  # products beyond 2^63: exact Python integers
    ([3, 5], [10, 12]),
    ([0, 1, 2], [3, 4, 5]),
]


@pytest.mark.parametrize("events, totals", LIKELIHOOD_TABLES)
def test_likelihood_ratio_matches_60_digits(events: list[int], totals: list[int]) -> None:
    want = _g2_60_digits(events, totals)
    assert likelihood_ratio(events, totals).statistic == pytest.approx(float(want), rel=1e-13, abs=0.0)


@pytest.mark.parametrize("events, totals", [t for t in LIKELIHOOD_TABLES if len(t[0]) == 2
                                             and max(t[1]) < 2**31])
def test_likelihood_ratio_twins_agree_on_extreme_tables(
        events: list[int], totals: list[int]) -> None:
    """The array kernel (used by the power simulation and the tipping-point grid) gives the
    scalar p, of which it is the one-table case."""
    from prespec.analysis import sensitivity

    want = likelihood_ratio(events, totals).p_value
    design = likelihood_ratio_many(np.array([events]), np.array(totals))[1]
    assert float(design[0]) == pytest.approx(want, rel=1e-13, abs=0.0)
    grid = sensitivity._likelihood_ratio(
        np.array([events[0]]), totals[0], np.array([events[1]]), totals[1],
        SimpleNamespace(alternative="two-sided"))
    assert float(grid[0]) == pytest.approx(want, rel=1e-13, abs=0.0)


@pytest.mark.parametrize("x1, n1, x2, n2, alternative", FISHER_LARGE)
def test_design_fisher_twin_agrees_on_large_tables(
        x1: int, n1: int, x2: int, n2: int, alternative: str) -> None:
    """The exact-power enumeration's p-values (design.exactpower.FisherTables) are the scalar
    test's on the same tables (they were 5e-10 apart for N > 1e5, log-gamma based)."""
    low, p = FisherTables(n1, n2, alternative).row(x1 + x2)
    want = fisher_exact(x1, n1, x2, n2, alternative=alternative).p_value
    assert float(p[x1 - low]) == pytest.approx(want, rel=1e-12, abs=0.0)
