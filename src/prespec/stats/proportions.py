"""Tests of equal proportions in two or more independent groups.

Every function takes counts (events and group totals), validates them, and returns a
:class:`~prespec.stats.results.TestResult`. One-sided alternatives refer to the first group's
proportion: ``greater`` means p1 > p2, ``less`` means p1 < p2.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy import stats

from prespec.stats import _checks
from prespec.stats._normal import normal_p_value
from prespec.stats.results import TestResult
from prespec.stats.tables import expected_counts
from prespec.stats.tails import hypergeometric_tail

#: Relative tolerance for tables as probable as the observed one in the two-sided Fisher test.
FISHER_TIE_TOLERANCE = 1e-7



def pearson_chi_square(
    events: Sequence[int],
    totals: Sequence[int],
    *,
    continuity: bool = False,
    alternative: str = "two-sided",
) -> TestResult:
    """Pearson's chi-square test of equal proportions in a k×2 table, with k − 1 df.

    ``continuity=True`` applies Yates' correction (2×2 only): each |O − E| is reduced by 0.5,
    never below 0. A one-sided alternative (2×2 only) refers the signed square root of X²
    (the sign of p1 − p2) to the standard normal distribution. A zero expected count (a zero
    column margin) leaves the test undefined: statistic and p-value are ``nan``.

    References
    ----------
    Pearson K. On the criterion that a given system of deviations from the probable in the
    case of a correlated system of variables is such that it can be reasonably supposed to
    have arisen from random sampling. Philosophical Magazine, Series 5, 1900;50:157–175.
    Yates F. Contingency tables involving small numbers and the chi-square test. Supplement to
    the Journal of the Royal Statistical Society 1934;1:217–235.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3.
    """
    ev, tot = _checks.table(events, totals)
    alt = _checks.alternative(alternative)
    if not isinstance(continuity, bool):
        raise ValueError(f"continuity must be true or false, got {continuity!r}")  # noqa: TRY004 (the interface raises ValueError)
    k = len(ev)
    if continuity and k != 2:
        raise ValueError(f"the continuity correction applies to 2 groups only, got {k}")
    if alt != "two-sided" and k != 2:
        raise ValueError(f"a one-sided alternative needs exactly 2 groups, got {k}")
    df = k - 1
    method = "pearson-chi-square"
    expected = expected_counts(ev, tot)
    if np.any(expected == 0.0):
        return TestResult(method, math.nan, df, math.nan, alt)
    observed = np.column_stack([np.asarray(ev, float), np.asarray(tot, float) - ev])
    deviation = np.abs(observed - expected)
    if continuity:
        deviation = np.maximum(deviation - 0.5, 0.0)
    x2 = float(np.sum(deviation**2 / expected))
    if alt == "two-sided":
        p = float(stats.chi2.sf(x2, df))
    else:
        # sign of p1 - p2, exactly, from the integer cross product
        sign = float(np.sign(ev[0] * tot[1] - ev[1] * tot[0]))
        p = normal_p_value(sign * math.sqrt(x2), alt)
    return TestResult(method, x2, df, p, alt)


def two_proportion_z(
    x1: int, n1: int, x2: int, n2: int, *, alternative: str = "two-sided"
) -> TestResult:
    """The two-proportion z test with the pooled standard error.

    The statistic is z = (p1 − p2) / sqrt(p(1 − p)(1/n1 + 1/n2)), p the pooled proportion;
    z² equals the uncorrected Pearson X² of the same 2×2 table. When no group has an event,
    or every participant has one, the standard error is 0 and z and p are ``nan``.

    References
    ----------
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3 (z² = X²).
    Fleiss JL, Levin B, Paik MC. Statistical Methods for Rates and Proportions, 3rd ed. Wiley,
    2003.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    alt = _checks.alternative(alternative)
    method = "two-proportion-z"
    pooled = (x1 + x2) / (n1 + n2)
    variance = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2)
    if variance <= 0.0:
        return TestResult(method, math.nan, None, math.nan, alt)
    z = (x1 / n1 - x2 / n2) / math.sqrt(variance)
    return TestResult(method, z, None, normal_p_value(z, alt), alt)


def fisher_exact(
    x1: int, n1: int, x2: int, n2: int, *, alternative: str = "two-sided"
) -> TestResult:
    """Fisher's exact test on the 2×2 table [[x1, n1 − x1], [x2, n2 − x2]].

    Conditional on both margins, x1 is hypergeometric. ``greater`` (p1 > p2, odds ratio > 1)
    sums the upper tail P(X >= x1), ``less`` the lower tail. The two-sided p-value sums the
    probabilities of all tables no more probable than the observed one, counting a table as
    tied when its probability is within a relative 1e-7 of the observed one (so that rounding
    cannot drop a table that is mathematically as probable). With a zero column margin only
    one table is possible and p = 1. The statistic is ``None``.

    References
    ----------
    Fisher RA. On the interpretation of chi-square from contingency tables, and the
    calculation of P. Journal of the Royal Statistical Society 1922;85:87–94.
    Agresti A. A survey of exact inference for contingency tables. Statistical Science
    1992;7:131–177 (the two-sided rule by probability ordering).
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    alt = _checks.alternative(alternative)
    method = "fisher-exact"
    population, events = n1 + n2, x1 + x2
    law = stats.hypergeom(population, events, n1)
    if alt == "greater":
        p = hypergeometric_tail(x1, population, events, n1, upper=True)
    elif alt == "less":
        p = hypergeometric_tail(x1, population, events, n1, upper=False)
    else:
        p = _fisher_two_sided(x1, law, max(0, events - n2), min(events, n1))
    return TestResult(method, None, None, min(1.0, p), alt)


def _fisher_two_sided(x1: int, law: stats.rv_discrete, low: int, high: int) -> float:
    """Sum of the probabilities of tables no more probable than x1, over support [low, high]."""
    support = np.arange(low, high + 1)
    log_p = law.logpmf(support)
    limit = log_p[x1 - low] + math.log1p(FISHER_TIE_TOLERANCE)
    counted = log_p <= limit
    mode = int(np.argmax(log_p))
    if counted[mode]:
        return 1.0  # the observed table is as probable as the most probable one
    # The hypergeometric law is unimodal, so the counted tables are the two tails.
    below = np.flatnonzero(counted[:mode])
    above = np.flatnonzero(counted[mode + 1 :])
    population, events, drawn = (int(v) for v in law.args)
    p = 0.0
    if below.size:
        p += hypergeometric_tail(int(support[below[-1]]), population, events, drawn, upper=False)
    if above.size:
        p += hypergeometric_tail(int(support[mode + 1 + above[0]]), population, events, drawn,
                                 upper=True)
    return p


def deviance_terms(observed: Any, row: Any, column: Any, total: Any) -> np.ndarray:
    """2[O ln(O/E) − (O − E)] for each cell, E = row·column/total: the cell's share of G².

    The terms sum to G² = 2 Σ O ln(O/E) (the (O − E) sum to zero over a table with fixed
    margins) and each is >= 0, so their sum does not cancel when G² is tiny. Each is
    E·h(d), h(d) = (1 + d)ln(1 + d) − d, d = (O − E)/E = (O·total − row·column)/(row·column)
    formed from the integer counts (exactly: Python integers once total reaches 2^31), h by its series Σ (−d)^k/(k(k − 1)),
    k >= 2, for |d| < 0.1, and 1 at O = 0 (the limit of O ln O). Arrays broadcast; the cells'
    expected counts must be > 0.
    """
    exact = np.int64 if int(total) < 2**31 else object
    observed, row, column = (np.asarray(v).astype(exact) for v in (observed, row, column))
    product = row * column
    scale = np.int64(total) if exact is np.int64 else int(total)
    d = (observed * scale - product).astype(float) / product.astype(float)
    series = np.zeros(d.shape)
    power = d * d
    for k in range(2, 20):  # |d| < 0.1: the 19th term is below 1e-18 of the first
        series = series + power / (k * (k - 1))
        power = -power * d
    with np.errstate(divide="ignore", invalid="ignore"):
        direct = (1.0 + d) * np.log1p(d) - d
    h = np.where(observed == 0, 1.0, np.where(np.abs(d) < 0.1, series, direct))
    return 2.0 * (product.astype(float) / float(total)) * h


def likelihood_ratio(
    events: Sequence[int], totals: Sequence[int], *, alternative: str = "two-sided"
) -> TestResult:
    """The likelihood-ratio (G²) test of equal proportions in a k×2 table, with k − 1 df.

    G² = 2 Σ O ln(O / E) over the 2k cells of events and non-events, a cell with O = 0
    contributing 0 (the limit of O ln O). Two-sided only: any other ``alternative`` is a
    ValueError. As for Pearson's X², a zero expected count (a zero column margin: no events or
    only events) leaves the test undefined, and statistic and p-value are ``nan``.

    References
    ----------
    Wilks SS. The large-sample distribution of the likelihood ratio for testing composite
    hypotheses. Annals of Mathematical Statistics 1938;9:60–62.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3 (G² for independence).
    """
    ev, tot = _checks.table(events, totals)
    alt = _checks.alternative(alternative)
    if alt != "two-sided":
        raise ValueError(f"the likelihood-ratio test is two-sided only, got {alt!r}")
    df = len(ev) - 1
    method = "likelihood-ratio"
    expected = expected_counts(ev, tot)
    if np.any(expected == 0.0):
        return TestResult(method, math.nan, df, math.nan, alt)
    events_total, grand = sum(ev), sum(tot)
    rows = [[t, t] for t in tot]
    observed = [[e, t - e] for e, t in zip(ev, tot, strict=True)]
    columns = [[events_total, grand - events_total]] * len(ev)
    g2 = math.fsum(deviance_terms(observed, rows, columns, grand).ravel())
    return TestResult(method, g2, df, float(stats.chi2.sf(g2, df)), alt)
