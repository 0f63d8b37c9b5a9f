"""Stratified comparison of two proportions: a series of 2×2 tables, one per stratum.

A stratum is given as ``(x1, n1, x2, n2)``: the events and the total of the first group, then
of the second. A stratum with a zero total in either group says nothing about the comparison
and contributes nothing to any statistic here (its terms are zero, or are left out where the
formula would divide by zero). One-sided alternatives refer to the first group: ``greater``
means its proportion (and so its odds and risk) is larger than the second group's.

The tests return :class:`~prespec.stats.results.TestResult`, the pooled measures
:class:`~prespec.stats.results.Estimate` with a two-sided interval at ``level``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from prespec.stats import _checks
from prespec.stats._normal import chi_square_p_value, normal_p_value, upper_quantile
from prespec.stats.ratios import odds_ratio_cells
from prespec.stats.results import Estimate, TestResult

Stratum = tuple[int, int, int, int]


@dataclass(frozen=True)
class _Strata:
    """The informative strata (both groups present) as float arrays, plus exact integers."""

    rows: tuple[Stratum, ...]  # (x1, n1, x2, n2) of each informative stratum, as ints
    a: np.ndarray  # events, first group
    b: np.ndarray  # non-events, first group
    c: np.ndarray  # events, second group
    d: np.ndarray  # non-events, second group
    n1: np.ndarray
    n2: np.ndarray
    n: np.ndarray  # stratum total


def _strata(strata: Sequence[Sequence[int]]) -> _Strata:
    """Validate the strata and keep those in which both groups have at least one member."""
    if isinstance(strata, (str, bytes)):
        raise ValueError("strata must be a sequence of (x1, n1, x2, n2) tables")  # noqa: TRY004 (the interface raises ValueError)
    try:
        given = list(strata)
    except TypeError:
        raise ValueError("strata must be a sequence of (x1, n1, x2, n2) tables") from None
    if not given:
        raise ValueError("strata must hold at least one (x1, n1, x2, n2) table")
    rows: list[Stratum] = []
    for i, stratum in enumerate(given):
        if isinstance(stratum, (str, bytes)) or not isinstance(stratum, Sequence):
            raise ValueError(f"strata[{i}] must be a table (x1, n1, x2, n2), got {stratum!r}")  # noqa: TRY004 (the interface raises ValueError)
        if len(stratum) != 4:
            raise ValueError(f"strata[{i}] must have 4 counts (x1, n1, x2, n2), got {len(stratum)}")
        x1, n1, x2, n2 = (
            _checks.count(f"strata[{i}] {name}", value)
            for name, value in zip(("x1", "n1", "x2", "n2"), stratum)
        )
        for x_name, x, n_name, n in (("x1", x1, "n1", n1), ("x2", x2, "n2", n2)):
            if x > n:
                raise ValueError(f"strata[{i}] {x_name} ({x}) must not exceed {n_name} ({n})")
        if n1 > 0 and n2 > 0:
            rows.append((x1, n1, x2, n2))
    table = np.array(rows, dtype=float).reshape(-1, 4)
    a, n1_, c, n2_ = table.T
    return _Strata(tuple(rows), a, n1_ - a, c, n2_ - c, n1_, n2_, n1_ + n2_)


def _critical(level: float) -> float:
    """Two-sided standard normal critical value for a confidence level."""
    return float(upper_quantile((1.0 - level) / 2.0))



def _ratio_estimate(
    measure: str, method: str, r: float, s: float, variance: float, level: float
) -> Estimate:
    """Pooled ratio r / s with the interval exp(log(r / s) ± z·sqrt(variance)).

    r = s = 0 leaves the ratio undefined (all ``nan``). One of them 0 makes the ratio 0 or
    infinite and its log-scale variance infinite: the interval is then [0, inf].
    """
    if r == 0.0 and s == 0.0:
        return Estimate(
            measure=measure,
            value=math.nan,
            low=math.nan,
            high=math.nan,
            method=method,
            level=level,
        )
    if r == 0.0 or s == 0.0:
        value = 0.0 if r == 0.0 else math.inf
        return Estimate(
            measure=measure, value=value, low=0.0, high=math.inf, method=method, level=level
        )
    log_ratio = math.log(r) - math.log(s)
    half = _critical(level) * math.sqrt(variance)
    return Estimate(
        measure=measure,
        value=r / s,
        low=math.exp(log_ratio - half),
        high=math.exp(log_ratio + half),
        method=method,
        level=level,
    )


def cochran_mantel_haenszel(
    strata: Sequence[Stratum], *, continuity: bool = False, alternative: str = "two-sided"
) -> TestResult:
    """The Cochran–Mantel–Haenszel test of no association in a series of 2×2 tables, 1 df.

    With a the first group's events in a stratum, E(a) = n1·m1/N and
    Var(a) = n1·n2·m1·m0 / (N²(N − 1)) under the hypergeometric law given the margins (m1, m0
    the event and non-event totals, N the stratum total), the statistic is
    (Σ(a − E a))² / Σ Var(a). ``continuity=True`` uses (|Σ(a − E a)| − 0.5)² instead, the
    difference taken as 0 when |Σ(a − E a)| < 0.5 (the correction never makes the statistic
    larger). A one-sided alternative refers the signed square root (the sign of Σ(a − E a),
    positive when the first group has more events than expected) to the standard normal
    distribution. When every stratum has a zero margin the variance is 0 and the statistic
    and p-value are ``nan``. The statistic is the CMH X².

    References
    ----------
    Cochran WG. Some methods for strengthening the common χ² tests. Biometrics
    1954;10:417–451.
    Mantel N, Haenszel W. Statistical aspects of the analysis of data from retrospective
    studies of disease. Journal of the National Cancer Institute 1959;22:719–748.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 6.
    """
    data = _strata(strata)
    alt = _checks.alternative(alternative)
    if not isinstance(continuity, bool):
        raise ValueError(f"continuity must be true or false, got {continuity!r}")  # noqa: TRY004 (the interface raises ValueError)
    method = "cochran-mantel-haenszel"
    # Σ(a − E a) and Σ Var(a) exactly, so that the sign (and a sum of exactly 0) is exact.
    deviation = Fraction(0)
    variance = Fraction(0)
    for x1, n1, x2, n2 in data.rows:
        total, events = n1 + n2, x1 + x2
        deviation += Fraction(x1 * total - n1 * events, total)
        if total > 1:
            variance += Fraction(n1 * n2 * events * (total - events), total * total * (total - 1))
    if variance == 0:
        return TestResult(method, math.nan, 1, math.nan, alt)
    size = abs(deviation)
    if continuity:
        size = max(size - Fraction(1, 2), Fraction(0))
    statistic = float(size * size / variance)
    if alt == "two-sided":
        p = chi_square_p_value(statistic, 1)
    else:
        sign = 1.0 if deviation > 0 else -1.0 if deviation < 0 else 0.0
        p = normal_p_value(sign * math.sqrt(statistic), alt)
    return TestResult(method, statistic, 1, p, alt)


def mantel_haenszel_odds_ratio(strata: Sequence[Stratum], level: float) -> Estimate:
    """The Mantel–Haenszel common odds ratio with the Robins–Breslow–Greenland interval.

    OR = R / S with R = Σ a·d/N and S = Σ b·c/N (a, b the first group's events and
    non-events, c, d the second's). With P = (a + d)/N and Q = (b + c)/N in each stratum,
    Var(log OR) = ΣP·ad/N / (2R²) + Σ(P·bc/N + Q·ad/N) / (2RS) + ΣQ·bc/N / (2S²), and the
    interval is exp(log OR ± z·sqrt(Var)). It is consistent both for many sparse strata and
    for a few large ones. R = S = 0 (no stratum with both an event and a non-event) leaves the
    ratio undefined (``nan``); R = 0 or S = 0 alone gives 0 or inf with the interval [0, inf].

    References
    ----------
    Mantel N, Haenszel W. Statistical aspects of the analysis of data from retrospective
    studies of disease. Journal of the National Cancer Institute 1959;22:719–748.
    Robins J, Breslow N, Greenland S. Estimators of the Mantel–Haenszel variance consistent in
    both sparse data and large-strata limiting models. Biometrics 1986;42:311–323.
    """
    data = _strata(strata)
    lvl = _checks.level(level)
    n = data.n
    ad, bc = data.a * data.d / n, data.b * data.c / n
    p, q = (data.a + data.d) / n, (data.b + data.c) / n
    r, s = math.fsum(ad), math.fsum(bc)
    variance = math.nan
    if r > 0.0 and s > 0.0:
        variance = (
            math.fsum(p * ad) / (2.0 * r * r)
            + math.fsum(p * bc + q * ad) / (2.0 * r * s)
            + math.fsum(q * bc) / (2.0 * s * s)
        )
    return _ratio_estimate("odds-ratio", "robins-breslow-greenland", r, s, variance, lvl)


def mantel_haenszel_risk_ratio(strata: Sequence[Stratum], level: float) -> Estimate:
    """The Mantel–Haenszel common risk ratio with the Greenland–Robins interval.

    RR = R / S with R = Σ a·n2/N and S = Σ c·n1/N, and
    Var(log RR) = Σ(n1·n2·m1 − a·c·N)/N² / (R·S), m1 = a + c the stratum's events; the
    interval is exp(log RR ± z·sqrt(Var)). With one stratum the variance is Katz's
    1/a − 1/n1 + 1/c − 1/n2. R = S = 0 (no events) leaves the ratio undefined (``nan``);
    R = 0 or S = 0 alone gives 0 or inf with the interval [0, inf]. When every participant has
    the event the variance is 0 and the interval is the point 1.

    References
    ----------
    Greenland S, Robins JM. Estimation of a common effect parameter from sparse follow-up
    data. Biometrics 1985;41:55–68.
    Rothman KJ, Greenland S, Lash TL. Modern Epidemiology, 3rd ed. Lippincott Williams &
    Wilkins, 2008, chapter 15.
    """
    data = _strata(strata)
    lvl = _checks.level(level)
    n = data.n
    r, s = math.fsum(data.a * data.n2 / n), math.fsum(data.c * data.n1 / n)
    variance = math.nan
    if r > 0.0 and s > 0.0:
        # n1·n2·m1 − a·c·N = a·n1·d + c·n2·b: written so, every term is >= 0
        numerator = data.a * data.n1 * data.d + data.c * data.n2 * data.b
        variance = math.fsum(numerator / (n * n)) / (r * s)
    return _ratio_estimate("risk-ratio", "greenland-robins", r, s, variance, lvl)


def mantel_haenszel_risk_difference(strata: Sequence[Stratum], level: float) -> Estimate:
    """The Mantel–Haenszel common risk difference with Sato's variance.

    RD = Σ(a·n2 − c·n1)/N / Σ n1·n2/N, the strata weighted by n1·n2/N. Sato's variance is
    (RD·ΣP + ΣQ) / (Σ n1·n2/N)² with P = (n1²·c − n2²·a + n1·n2·(n2 − n1)/2) / N² and
    Q = (a·(n2 − c) + c·(n1 − a)) / (2N); the interval RD ± z·sqrt(Var) is clipped to
    [−1, 1]. With one stratum RD is p1 − p2 and the variance is the unpooled
    p1(1 − p1)/n1 + p2(1 − p2)/n2 of the Wald interval. Without any stratum in which both
    groups are present the estimate is ``nan``.

    References
    ----------
    Sato T. On the variance estimator for the Mantel–Haenszel risk difference. Biometrics
    1989;45:1323–1324.
    Greenland S, Robins JM. Estimation of a common effect parameter from sparse follow-up
    data. Biometrics 1985;41:55–68.
    """
    data = _strata(strata)
    lvl = _checks.level(level)
    measure, method = "risk-difference", "sato"
    if not data.rows:
        return Estimate(
            measure=measure,
            value=math.nan,
            low=math.nan,
            high=math.nan,
            method=method,
            level=lvl,
        )
    # the estimate from exact fractions, so that one stratum gives exactly the rounded p1 - p2
    numerator = sum(
        (Fraction(x1 * n2 - x2 * n1, n1 + n2) for x1, n1, x2, n2 in data.rows), Fraction(0)
    )
    weight = sum((Fraction(n1 * n2, n1 + n2) for _, n1, _, n2 in data.rows), Fraction(0))
    difference = float(numerator / weight)
    a, c, n1, n2, n = data.a, data.c, data.n1, data.n2, data.n
    p = (n1 * n1 * c - n2 * n2 * a + n1 * n2 * (n2 - n1) / 2.0) / (n * n)
    q = (a * (n2 - c) + c * (n1 - a)) / (2.0 * n)
    w = float(weight)
    # Sato's estimator is not negative on any table we have tried; max() guards the rounding
    variance = max(0.0, (difference * math.fsum(p) + math.fsum(q)) / (w * w))
    half = _critical(lvl) * math.sqrt(variance)
    return Estimate(
        measure=measure,
        value=difference,
        low=max(-1.0, difference - half),
        high=min(1.0, difference + half),
        method=method,
        level=lvl,
    )


def breslow_day_tarone(strata: Sequence[Stratum]) -> TestResult:
    """The Breslow–Day test that the odds ratio is the same in every stratum, with Tarone's term.

    With ψ the Mantel–Haenszel common odds ratio, E_k is the first group's expected events in
    stratum k under odds ratio ψ given the margins (the root of a quadratic inside the
    support) and V_k = 1 / (1/E + 1/(n1 − E) + 1/(m1 − E) + 1/(n2 − m1 + E)). The statistic
    is Σ(a − E)²/V − (Σa − ΣE)²/ΣV, with K − 1 df; Tarone's subtracted term makes it
    asymptotically chi-square, since ψ is not the conditional maximum-likelihood estimate.
    Only the K strata with both groups present and both an event and a non-event count: in
    any other stratum the first group's events are fixed by the margins. With fewer than 2
    such strata, or a common odds ratio of 0 or infinity (every such stratum at the edge of
    its support), the test is undefined: statistic and p-value ``nan``.

    References
    ----------
    Breslow NE, Day NE. Statistical Methods in Cancer Research, Volume I: The Analysis of
    Case-Control Studies. IARC Scientific Publications No. 32, Lyon, 1980, section 4.4.
    Tarone RE. On heterogeneity tests based on efficient scores. Biometrika 1985;72:91–95.
    """
    data = _strata(strata)
    method = "breslow-day-tarone"
    m1 = data.a + data.c
    keep = (m1 > 0) & (m1 < data.n)
    k = int(np.count_nonzero(keep))
    df = max(k - 1, 0)
    a, n1, n2, m1, n = data.a[keep], data.n1[keep], data.n2[keep], m1[keep], data.n[keep]
    r = math.fsum(a * (n2 - (m1 - a)) / n)
    s = math.fsum((n1 - a) * (m1 - a) / n)
    if k < 2 or r == 0.0 or s == 0.0:
        return TestResult(method, math.nan, df, math.nan, "two-sided")
    psi = r / s
    # E solves E·(n2 − m1 + E) = ψ·(n1 − E)·(m1 − E): the first group's expected events under
    # odds ratio ψ with both margins kept, n1·p̃1 of the constrained MLEs (p̃1, p̃2); the four
    # expected cells come from the roots for p̃ and 1 − p̃ separately, so that none is a
    # difference of nearly equal numbers near the edge of the support
    cells = np.array([
        odds_ratio_cells(int(x1), int(size1), int(events - x1), int(size2), psi)
        for x1, size1, size2, events in zip(a, n1, n2, m1, strict=True)
    ]).reshape(-1, 4)
    expected, lacking, second, second_lacking = (
        n1 * cells[:, 0], n1 * cells[:, 1], n2 * cells[:, 2], n2 * cells[:, 3]
    )
    variance = 1.0 / (1.0 / expected + 1.0 / lacking + 1.0 / second + 1.0 / second_lacking)
    # a − E = (n1 − E) − (n1 − a): the form with the smaller numbers loses fewer digits
    residual = np.where(cells[:, 0] <= cells[:, 1], a - expected, lacking - (n1 - a))
    statistic = math.fsum(residual**2 / variance) - math.fsum(residual) ** 2 / math.fsum(variance)
    statistic = max(0.0, statistic)  # >= 0 by Cauchy–Schwarz; guard the last rounding
    return TestResult(method, statistic, df, chi_square_p_value(statistic, df), "two-sided")
