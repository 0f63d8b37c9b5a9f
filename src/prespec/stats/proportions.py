"""Tests of equal proportions in two or more independent groups.

Every function takes counts (events and group totals), validates them, and returns a
:class:`~prespec.stats.results.TestResult`. One-sided alternatives refer to the first group's
proportion: ``greater`` means p1 > p2, ``less`` means p1 < p2.

Each test is written once, on arrays of tables (``*_many``: one table per row, every table with
the same group totals, as the design simulation and the tipping-point grid hold them); the
scalar function validates one table and is the one-row case. Fisher's exact test is
:func:`prespec.stats.fisherarray.fisher_p_values`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from prespec.stats import _checks
from prespec.stats._normal import chi_square_p_values, normal_p_values
from prespec.stats.fisherarray import fisher_p_values
from prespec.stats.results import TestResult

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
    x2, p = pearson_many(np.asarray([ev]), np.asarray(tot), continuity=continuity,
                         alternative=alt)
    return TestResult("pearson-chi-square", float(x2[0]), k - 1, float(p[0]), alt)


def _exact_integers(totals: np.ndarray) -> type:
    """The dtype in which products of counts of these totals are exact: int64 while the grand
    total is below 2^31, Python integers beyond."""
    return np.int64 if int(np.sum(totals)) < 2**31 else object


def pearson_many(events: np.ndarray, totals: np.ndarray, *, continuity: bool,
                 alternative: str) -> tuple[np.ndarray, np.ndarray]:
    """(X², p) of :func:`pearson_chi_square` for each table: ``events`` T × k, ``totals`` k.

    Expected counts are row × column / grand total, the statistic sums (|O − E| − 0.5·Yates)²/E
    over the 2k cells; both are ``nan`` where an expected count is 0. A one-sided alternative
    (k = 2) refers sign(p1 − p2)·sqrt(X²) to the standard normal. Not validated.
    """
    events = np.asarray(events)
    totals = np.asarray(totals)
    rows = totals.astype(float)
    grand = float(totals.sum())
    column_events = events.sum(axis=1).astype(float)
    column_other = grand - column_events
    e_ev = rows[None, :] * column_events[:, None] / grand
    e_non = rows[None, :] * column_other[:, None] / grand
    d_ev = np.abs(events.astype(float) - e_ev)
    d_non = np.abs((totals[None, :] - events).astype(float) - e_non)
    if continuity:
        d_ev, d_non = np.maximum(d_ev - 0.5, 0.0), np.maximum(d_non - 0.5, 0.0)
    undefined = (e_ev == 0.0).any(axis=1) | (e_non == 0.0).any(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.stack([d_ev**2 / e_ev, d_non**2 / e_non], axis=2)
    x2 = np.where(undefined, np.nan, terms.reshape(terms.shape[0], -1).sum(axis=1))
    if alternative == "two-sided":
        return x2, chi_square_p_values(x2, totals.size - 1)
    # the sign of p1 − p2, exactly, from the integer cross product
    exact = _exact_integers(totals)
    first, second = events[:, 0].astype(exact), events[:, 1].astype(exact)
    cross = first * int(totals[1]) - second * int(totals[0])
    sign = np.sign(cross.astype(float))
    return x2, normal_p_values(sign * np.sqrt(x2), alternative)


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
    z, p = two_proportion_z_many(np.asarray([[x1, x2]]), np.asarray([n1, n2]), alt)
    return TestResult("two-proportion-z", float(z[0]), None, float(p[0]), alt)


def two_proportion_z_many(events: np.ndarray, totals: np.ndarray,
                          alternative: str) -> tuple[np.ndarray, np.ndarray]:
    """(z, p) of :func:`two_proportion_z` for each table: ``events`` T × 2, ``totals`` 2;
    ``nan`` where the pooled standard error is 0. Not validated."""
    events = np.asarray(events)
    x1, x2 = events[:, 0].astype(float), events[:, 1].astype(float)
    n1, n2 = float(totals[0]), float(totals[1])
    pooled = (x1 + x2) / (n1 + n2)
    variance = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0.0, (x1 / n1 - x2 / n2) / np.sqrt(variance), np.nan)
    return z, normal_p_values(z, alternative)


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
    p = fisher_p_values(x1, n1 - x1, x2, n2 - x2, alternative=alt,
                        tie_tolerance=FISHER_TIE_TOLERANCE)
    return TestResult("fisher-exact", None, None, float(p), alt)


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
    g2, p = likelihood_ratio_many(np.asarray([ev]), np.asarray(tot))
    return TestResult("likelihood-ratio", float(g2[0]), len(ev) - 1, float(p[0]), alt)


def likelihood_ratio_many(events: np.ndarray, totals: np.ndarray
                          ) -> tuple[np.ndarray, np.ndarray]:
    """(G², p) of :func:`likelihood_ratio` for each table: ``events`` T × k, ``totals`` k,
    the cells' shares summed as the non-negative :func:`deviance_terms`; ``nan`` at a zero
    column margin. Not validated."""
    exact = _exact_integers(totals)
    events = np.asarray(events).astype(exact)
    totals = np.asarray(totals).astype(exact)
    grand = int(totals.sum())
    column = events.sum(axis=1)[:, None]
    undefined = np.asarray((column[:, 0] == 0) | (column[:, 0] == grand), dtype=bool)
    safe = np.where(undefined[:, None], 1, column)  # a margin of 0 or all: any valid value
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = (deviance_terms(events, totals[None, :], safe, grand)
                 + deviance_terms(totals[None, :] - events, totals[None, :], grand - safe,
                                  grand))
    g2 = np.where(undefined, np.nan, terms.sum(axis=1).astype(float))
    return g2, chi_square_p_values(g2, totals.size - 1)
