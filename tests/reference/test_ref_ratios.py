"""Reference checks of the ratio and odds-ratio intervals against published values, statsmodels
and scipy.

Published values are ``# from memory``: recalled, not looked up. Library checks name the
function; where a library and we disagree, the test says which is right and why.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.stats
from scipy.stats.contingency import odds_ratio
from statsmodels.stats import proportion as sm_proportion
from statsmodels.stats.proportion import confint_proportions_2indep

from prespec.stats.ratios import (
    exact_conditional_odds_ratio,
    katz_ratio,
    koopman_ratio,
    miettinen_nurminen_odds_ratio,
    woolf_odds_ratio,
)

LEVELS = (0.80, 0.90, 0.95, 0.99)

# statsmodels divides by zero on tables with a zero cell before it gives its (checked) answer
pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")


def _random_pairs(seed: int, count: int, max_n: int = 500) -> list[tuple[int, int, int, int]]:
    """(x1, n1, x2, n2) with small and large n, a quarter with 0 or n events in a group."""
    rng = np.random.default_rng(seed)
    pairs = []
    for i in range(count):
        n1 = int(rng.integers(1, 30 if i % 2 else max_n))
        n2 = int(rng.integers(1, 30 if i % 3 else max_n))
        x1 = int(rng.integers(0, n1 + 1))
        x2 = int(rng.integers(0, n2 + 1))
        if i % 4 == 0:
            x1 = (0, n1)[i % 8 == 0]
        if i % 5 == 0:
            x2 = (0, n2)[i % 10 == 0]
        pairs.append((x1, n1, x2, n2))
    return pairs


def _no_zero_cell(x1: int, n1: int, x2: int, n2: int) -> bool:
    return 0 < x1 < n1 and 0 < x2 < n2


def _close(ours: float, ref: float, rel: float = 1e-9) -> bool:
    return ours == pytest.approx(float(ref), rel=rel, abs=1e-300)


# --- published examples ----------------------------------------------------------------------


def test_aspirin_myocardial_infarction() -> None:
    # Agresti, Categorical Data Analysis (2nd ed. 2002, chapter 3) and An Introduction to
    # Categorical Data Analysis: Physicians' Health Study, myocardial infarction in 189 of
    # 11034 on placebo and 104 of 11037 on aspirin. Sample odds ratio 1.83 with 95 per cent
    # Woolf interval (1.44, 2.33); relative risk 1.82. # from memory
    w = woolf_odds_ratio(189, 11034, 104, 11037, 0.95)
    assert (round(w.value, 2), round(w.low, 2), round(w.high, 2)) == (1.83, 1.44, 2.33)
    assert round(katz_ratio(189, 11034, 104, 11037, 0.95).value, 2) == 1.82


def test_koopman_1984_example() -> None:
    # Koopman PAR. Biometrics 1984;40:513-517: 36/40 vs 16/80, 95 per cent score interval
    # for the ratio (2.94, 7.15). # from memory
    e = koopman_ratio(36, 40, 16, 80, 0.95)
    assert e.value == 4.5
    assert (round(e.low, 2), round(e.high, 2)) == (2.94, 7.15)


# --- Katz and Woolf against statsmodels --------------------------------------------------


@pytest.mark.parametrize("level", LEVELS)
def test_katz_matches_statsmodels_after_the_same_adjustment(level: float) -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(..., compare="ratio",
    # method="log") on the counts after our adjustment (x + 0.5, n + 1 when a cell is 0).
    # Its own method="log-adjusted" adds 0.5 to the counts and only 0.5 to the totals, a
    # different rule from docs/files.md's "0.5 to every cell", so it is not the reference here.
    for x1, n1, x2, n2 in _random_pairs(seed=71, count=300):
        e = katz_ratio(x1, n1, x2, n2, level)
        c1, m1, c2, m2 = (
            (x1, n1, x2, n2) if e.note is None else (x1 + 0.5, n1 + 1, x2 + 0.5, n2 + 1)
        )
        low, high = confint_proportions_2indep(
            c1, m1, c2, m2, compare="ratio", method="log", alpha=1 - level
        )
        assert _close(e.low, low) and _close(e.high, high), (x1, n1, x2, n2)
        assert _close(e.value, (c1 / m1) / (c2 / m2), rel=1e-12)


@pytest.mark.parametrize("level", LEVELS)
def test_woolf_matches_statsmodels_after_the_same_adjustment(level: float) -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(..., compare="odds-ratio",
    # method="logit") on the adjusted counts; here its "logit-adjusted" (0.5 to each count, 1
    # to each total, always) is the same rule, applied only when a cell is zero by us.
    for x1, n1, x2, n2 in _random_pairs(seed=73, count=300):
        e = woolf_odds_ratio(x1, n1, x2, n2, level)
        if e.note is None:
            low, high = confint_proportions_2indep(
                x1, n1, x2, n2, compare="odds-ratio", method="logit", alpha=1 - level
            )
        else:
            low, high = confint_proportions_2indep(
                x1, n1, x2, n2, compare="odds-ratio", method="logit-adjusted", alpha=1 - level
            )
            low2, high2 = confint_proportions_2indep(
                x1 + 0.5,
                n1 + 1,
                x2 + 0.5,
                n2 + 1,
                compare="odds-ratio",
                method="logit",
                alpha=1 - level,
            )
            assert _close(low, low2) and _close(high, high2)
        assert _close(e.low, low) and _close(e.high, high), (x1, n1, x2, n2)


# --- Koopman against statsmodels ---------------------------------------------------------


def _statsmodels_score_p(
    counts: tuple[int, int, int, int], value: float, compare: str, correction: bool
) -> float:
    """statsmodels.stats.proportion.test_proportions_2indep(method="score") two-sided p."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return float(
            sm_proportion.test_proportions_2indep(
                *counts, value=value, compare=compare, method="score", correction=correction
            ).pvalue
        )


@pytest.mark.parametrize("level", LEVELS)
def test_koopman_matches_statsmodels(level: float) -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(..., compare="ratio",
    # method="score", correction=False), which solves Nam's cubic (np.roots), an algorithm
    # independent of our root search. Where the two differ by more than 1e-9 relative (a few
    # tables with 1 event in a small group, where np.roots loses digits, and tables where a
    # group has all events, where statsmodels picks the wrong root: for 7/482 vs 22/22 its
    # lower limit 0.0575 lies above the estimate 0.0145, and some limits are nan), statsmodels' own score test
    # test_proportions_2indep(compare="ratio", method="score", correction=False), whose
    # statistic is ours, decides: its p-value at our limit is 1 - level, and is further off
    # at statsmodels' limit.
    alpha = 1 - level
    agreed = settled = 0
    for counts in _random_pairs(seed=79, count=300):
        x1, n1, x2, n2 = counts
        if x1 == 0 or x2 == 0 or (x1 == n1 and x2 == n2):
            continue  # limits 0 or inf, or a degenerate cubic: next test
        e = koopman_ratio(*counts, level)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            theirs = confint_proportions_2indep(
                *counts, compare="ratio", method="score", correction=False, alpha=alpha
            )
        for ours, ref in zip((e.low, e.high), theirs):
            if _close(ours, ref):
                agreed += 1
                continue
            gap_ours = abs(_statsmodels_score_p(counts, ours, "ratio", False) - alpha)
            gap_theirs = abs(_statsmodels_score_p(counts, float(ref), "ratio", False) - alpha)
            gap_theirs = math.inf if math.isnan(gap_theirs) else gap_theirs  # a nan limit
            assert gap_ours < 1e-10 and gap_ours < gap_theirs, counts
            settled += 1
    assert agreed > 300 and settled < agreed / 5


def test_koopman_where_statsmodels_is_wrong() -> None:
    # With all events in both groups, or none in one, statsmodels' cubic gives wrong
    # limits: on 0/1 vs 1/1 the lower limit 0.5 and on 1/1 vs 1/1 the lower limit
    # 1.0000000214; the correct lower limits are 0 (no events in the first group) and
    # n1/(n1 + z^2) = 0.2065 (closed form for all events; test_stats_ratios). statsmodels'
    # own score test (test_proportions_2indep, compare="ratio", method="score",
    # correction=False, whose statistic equals ours) does not reject ratios below its
    # limit, so its interval leaves out values its own test accepts: ours is right.
    for counts, theirs in [((0, 1, 1, 1), 0.5), ((1, 1, 1, 1), 1.0), ((10, 10, 20, 20), 1.0)]:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            low, _ = confint_proportions_2indep(
                *counts, compare="ratio", method="score", correction=False
            )
        assert low == pytest.approx(theirs, rel=1e-6)
        e = koopman_ratio(*counts, 0.95)
        assert e.low < 0.9 * theirs
        inside = (e.low + theirs) / 2
        assert _statsmodels_score_p(counts, inside, "ratio", False) > 0.05
        if e.low > 0:
            assert _statsmodels_score_p(counts, e.low, "ratio", False) == pytest.approx(0.05)


@pytest.mark.parametrize("level", (0.9, 0.95))
def test_koopman_limits_are_where_statsmodels_score_test_has_p_alpha(level: float) -> None:
    # every finite positive limit, zero cells included, is where statsmodels'
    # test_proportions_2indep(compare="ratio", method="score", correction=False) gives
    # p = 1 - level
    for x1, n1, x2, n2 in _random_pairs(seed=83, count=80):
        e = koopman_ratio(x1, n1, x2, n2, level)
        for limit in (e.low, e.high):
            if 0.0 < limit < math.inf:
                p = _statsmodels_score_p((x1, n1, x2, n2), limit, "ratio", False)
                assert p == pytest.approx(1 - level, rel=1e-7), (x1, n1, x2, n2)


# --- Miettinen-Nurminen odds ratio against statsmodels -----------------------------------


@pytest.mark.parametrize("level", LEVELS)
def test_mn_odds_ratio_matches_statsmodels(level: float) -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(..., compare="odds-ratio",
    # method="score", correction=True), on tables without a zero cell (with one it raises
    # ZeroDivisionError: its starting bracket is the unadjusted Woolf interval)
    checked = 0
    for x1, n1, x2, n2 in _random_pairs(seed=89, count=300):
        if not _no_zero_cell(x1, n1, x2, n2):
            continue
        e = miettinen_nurminen_odds_ratio(x1, n1, x2, n2, level)
        low, high = confint_proportions_2indep(
            x1, n1, x2, n2, compare="odds-ratio", method="score", correction=True, alpha=1 - level
        )
        assert _close(e.low, low) and _close(e.high, high), (x1, n1, x2, n2)
        checked += 1
    assert checked > 100


def test_mn_odds_ratio_zero_cell_limits_against_statsmodels_score_test() -> None:
    # With a zero cell statsmodels' interval fails, but its score test (compare="odds-ratio",
    # method="score", correction=True) still works away from 0 and inf; at our finite
    # positive limits it gives p = 0.05
    tables = [(0, 10, 4, 20), (10, 10, 4, 20), (5, 56, 0, 29), (3, 10, 20, 20), (1, 2, 0, 3)]
    for counts in tables:
        e = miettinen_nurminen_odds_ratio(*counts, 0.95)
        finite = [limit for limit in (e.low, e.high) if 0.0 < limit < math.inf]
        assert len(finite) == 1
        p = _statsmodels_score_p(counts, finite[0], "odds-ratio", True)
        assert p == pytest.approx(0.05, rel=1e-6), counts


# --- exact conditional against scipy -----------------------------------------------------


def _scipy_conditional(counts: tuple[int, int, int, int], level: float) -> tuple[float, ...]:
    x1, n1, x2, n2 = counts
    result = odds_ratio([[x1, n1 - x1], [x2, n2 - x2]], kind="conditional")
    ci = result.confidence_interval(confidence_level=level)
    return float(result.statistic), float(ci.low), float(ci.high)


def _tail_gap(counts: tuple[int, int, int, int], psi: float, upper: bool, level: float) -> float:
    """|P(tail; psi) - (1 - level)/2| by scipy.stats.nchypergeom_fisher."""
    x1, n1, x2, n2 = counts
    law = scipy.stats.nchypergeom_fisher(n1 + n2, n1, x1 + x2, psi)
    tail = law.sf(x1 - 1) if upper else law.cdf(x1)
    return abs(float(tail) - (1 - level) / 2)


@pytest.mark.parametrize("level", (0.90, 0.95, 0.99))
def test_exact_conditional_matches_scipy(level: float) -> None:
    # scipy.stats.contingency.odds_ratio(table, kind="conditional") and its
    # .confidence_interval(confidence_level=level), to 1e-8 relative. scipy solves on the
    # odds ratio itself with brentq's default absolute tolerance (2e-12), so a limit below
    # about 1e-4 can differ from ours by more than 1e-8 relative; there the tail probability
    # (scipy.stats.nchypergeom_fisher) at each value decides, and ours is never further
    # from (1 - level)/2 than scipy's.
    settled_by_tail = 0
    for counts in _random_pairs(seed=97, count=80, max_n=120):
        e = exact_conditional_odds_ratio(*counts, level)
        value, low, high = _scipy_conditional(counts, level)
        if math.isnan(value):
            assert math.isnan(e.value)
        else:
            assert _close(e.value, value, rel=1e-8), counts
        for ours, theirs, upper in ((e.low, low, True), (e.high, high, False)):
            if ours == theirs or _close(ours, theirs, rel=1e-8):
                continue
            assert 0.0 < theirs < 1e-4, counts
            assert _tail_gap(counts, ours, upper, level) <= _tail_gap(
                counts, theirs, upper, level
            ), counts
            settled_by_tail += 1
    assert settled_by_tail < 20
