"""Tests against a margin: non-inferiority (one-sided) and equivalence (two one-sided tests).

Each scalar test has its array twin beside it (``*_many``: events as arrays, for the
tipping-point grid and the design simulation), the same arithmetic, held together by a test.

The null hypothesis is p1 − p2 = margin (measure ``risk-difference``) or p1/p2 = margin
(``risk-ratio``). ``greater`` means H1: p1 − p2 > margin (or p1/p2 > margin), ``less`` the
reverse, ``two-sided`` either. Odds-ratio margins are not supported.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from prespec.stats import _checks
from prespec.stats._normal import normal_p_value, normal_p_values
from prespec.stats.intervals import difference_constrained_mle, difference_mle_many
from prespec.stats.ratios import ratio_constrained_mle, ratio_mle_many
from prespec.stats.results import TestResult

MEASURES: tuple[str, ...] = ("risk-difference", "risk-ratio")


def _margin(measure: object, margin: object) -> tuple[str, float]:
    """Validate the measure and its margin: a difference in (−1, 1), a ratio in (0, inf)."""
    if measure == "odds-ratio":
        raise ValueError("odds-ratio margins are not supported; use risk-difference or risk-ratio")
    if measure not in MEASURES:
        raise ValueError(f"measure must be one of {', '.join(MEASURES)}; got {measure!r}")
    if isinstance(margin, bool) or not isinstance(margin, (int, float)):
        raise ValueError(f"margin must be a number, got {margin!r}")  # noqa: TRY004 (the interface raises ValueError)
    value = float(margin)
    if measure == "risk-difference" and not -1.0 < value < 1.0:
        raise ValueError(
            f"a risk-difference margin must lie strictly between -1 and 1, got {value!r}"
        )
    if measure == "risk-ratio" and not (math.isfinite(value) and value > 0.0):
        raise ValueError(f"a risk-ratio margin must be a finite number above 0, got {value!r}")
    return str(measure), value



def _z(numerator: float, variance: float) -> float:
    """numerator/sqrt(variance); nan when the variance is 0 (the statistic is undefined)."""
    if not variance > 0.0:
        return math.nan
    return numerator / math.sqrt(variance)


def farrington_manning(
    x1: int, n1: int, x2: int, n2: int, *, margin: float, measure: str, alternative: str
) -> TestResult:
    """Farrington–Manning score test of p1 − p2 = margin or p1/p2 = margin.

    Difference: z = (p̂1 − p̂2 − δ0)/sqrt(p̃1(1 − p̃1)/n1 + p̃2(1 − p̃2)/n2); ratio:
    z = (p̂1 − φ0p̂2)/sqrt(p̃1(1 − p̃1)/n1 + φ0²p̃2(1 − p̃2)/n2), where (p̃1, p̃2) are the maximum
    likelihood estimates under the null in closed form (a cubic for the difference, a quadratic
    for the ratio) and no N/(N − 1) factor is applied. The statistic is the signed z; it and
    the p-value are ``nan`` where the null variance is 0 (a difference margin of 0 with no
    events or only events in both groups; a ratio margin with no events in either group).

    References
    ----------
    Farrington CP, Manning G. Test statistics and sample size formulae for comparative
    binomial trials with null hypothesis of non-zero risk difference or non-unity relative
    risk. Statistics in Medicine 1990;9:1447–1454.
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    kind, value = _margin(measure, margin)
    alt = _checks.alternative(alternative)
    if kind == "risk-difference":
        t1, t2 = difference_constrained_mle(x1, n1, x2, n2, value)
        numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - value
        variance = t1 * (1.0 - t1) / n1 + t2 * (1.0 - t2) / n2
    else:
        t1, t2 = ratio_constrained_mle(x1, n1, x2, n2, value)
        numerator = (x1 * n2 - value * x2 * n1) / (n1 * n2)
        variance = t1 * (1.0 - t1) / n1 + value * value * t2 * (1.0 - t2) / n2
    z = _z(numerator, variance)
    return TestResult("farrington-manning", z, None, normal_p_value(z, alt), alt)


def wald_margin_z(
    x1: int, n1: int, x2: int, n2: int, *, margin: float, measure: str, alternative: str
) -> TestResult:
    """Wald z test of p1 − p2 = margin or p1/p2 = margin with the unpooled variance.

    Difference: z = (p̂1 − p̂2 − δ0)/sqrt(p̂1(1 − p̂1)/n1 + p̂2(1 − p̂2)/n2). Ratio, on the log
    scale: z = (log(p̂1/p̂2) − log φ0)/sqrt(1/x1 − 1/n1 + 1/x2 − 1/n2) (the Katz standard error).
    Where the standard error is 0 (each proportion 0 or 1 for the difference; both groups all
    events for the ratio) or the log ratio is undefined (no events in a group) the statistic
    and the p-value are ``nan``: the Wald test is not defined there, and no cells are adjusted.

    References
    ----------
    Blackwelder WC. "Proving the null hypothesis" in clinical trials. Controlled Clinical
    Trials 1982;3:345–353.
    Katz D, Baptista J, Azen SP, Pike MC. Obtaining confidence intervals for the risk ratio in
    cohort studies. Biometrics 1978;34:469–474.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    kind, value = _margin(measure, margin)
    alt = _checks.alternative(alternative)
    method = "two-proportion-z"
    if kind == "risk-difference":
        p1, p2 = x1 / n1, x2 / n2
        numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - value
        z = _z(numerator, p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    elif x1 == 0 or x2 == 0:
        z = math.nan
    else:
        log_ratio = math.log(x1) - math.log(n1) - math.log(x2) + math.log(n2)
        z = _z(log_ratio - math.log(value), 1.0 / x1 - 1.0 / n1 + 1.0 / x2 - 1.0 / n2)
    return TestResult(method, z, None, normal_p_value(z, alt), alt)


def tost(lower: TestResult, upper: TestResult) -> TestResult:
    """Two one-sided tests for equivalence: the margin is [low, high] and both nulls must fall.

    ``lower`` tests H1: measure > low (alternative ``greater``), ``upper`` tests
    H1: measure < high (``less``), both by the same method. Equivalence is shown at level α
    when both are rejected at α, so p = max(p_lower, p_upper) (``nan`` if either is). The
    statistic is ``None`` (two statistics, no single one), the alternative ``two-sided``.

    References
    ----------
    Schuirmann DJ. A comparison of the two one-sided tests procedure and the power approach
    for assessing the equivalence of average bioavailability. Journal of Pharmacokinetics and
    Biopharmaceutics 1987;15:657–680.
    """
    for name, part in (("lower", lower), ("upper", upper)):
        if not isinstance(part, TestResult):
            raise ValueError(f"{name} must be a TestResult, got {type(part).__name__}")  # noqa: TRY004 (the interface raises ValueError)
    if lower.alternative != "greater":
        raise ValueError(
            f"the lower test must have alternative 'greater', got {lower.alternative!r}"
        )
    if upper.alternative != "less":
        raise ValueError(f"the upper test must have alternative 'less', got {upper.alternative!r}")
    if lower.method != upper.method:
        raise ValueError(
            f"both one-sided tests must use the same method, got {lower.method!r} and {upper.method!r}"
        )
    p_values = (lower.p_value, upper.p_value)
    p = math.nan if any(math.isnan(v) for v in p_values) else max(p_values)
    return TestResult(lower.method, None, None, p, "two-sided")


# --- the array twins: x1, x2 broadcastable integer arrays, n1, n2 fixed totals -------------

#: An array z statistic at a margin: (x1, n1, x2, n2, margin, measure) -> z.
MarginStatistic = Callable[[np.ndarray, int, np.ndarray, int, float, str], np.ndarray]


def _z_many(numerator: np.ndarray, variance: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(variance > 0.0, numerator / np.sqrt(variance), np.nan)


def farrington_manning_z_many(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, margin: float,
                              measure: str) -> np.ndarray:
    """The z of :func:`farrington_manning` on arrays of tables (not validated)."""
    x1, x2 = np.asarray(x1), np.asarray(x2)
    if measure == "risk-difference":
        t1, t2 = difference_mle_many(x1, n1, x2, n2, margin)
        numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - margin
        variance = t1 * (1.0 - t1) / n1 + t2 * (1.0 - t2) / n2
    else:
        t1, t2 = ratio_mle_many(x1, n1, x2, n2, margin)
        numerator = (x1 * n2 - margin * x2 * n1) / (n1 * n2)
        variance = t1 * (1.0 - t1) / n1 + margin * margin * t2 * (1.0 - t2) / n2
    return _z_many(numerator, variance)


def wald_margin_z_many(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, margin: float,
                       measure: str) -> np.ndarray:
    """The z of :func:`wald_margin_z` on arrays of tables (not validated)."""
    x1, x2 = np.asarray(x1), np.asarray(x2)
    if measure == "risk-difference":
        p1, p2 = x1 / n1, x2 / n2
        numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - margin
        return _z_many(numerator, p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.log(x1) - math.log(n1) - np.log(x2) + math.log(n2)
        variance = 1.0 / x1 - 1.0 / n1 + 1.0 / x2 - 1.0 / n2
    z = _z_many(log_ratio - math.log(margin), variance)
    return np.where((x1 == 0) | (x2 == 0), np.nan, z)


def margin_p_values(statistic: MarginStatistic, x1: np.ndarray, n1: int, x2: np.ndarray,
                    n2: int, *, comparison: str, margin: float | tuple[float, float],
                    measure: str, alternative: str) -> np.ndarray:
    """P-values of a test at the margin on arrays of tables: one-sided for non-inferiority
    (``alternative``), and for equivalence (margin (low, high)) the two one-sided tests of
    :func:`tost`, the larger p-value (nan if either is)."""
    if comparison == "equivalence":
        low, high = margin  # type: ignore[misc]
        lower = normal_p_values(statistic(x1, n1, x2, n2, low, measure), "greater")
        upper = normal_p_values(statistic(x1, n1, x2, n2, high, measure), "less")
        return np.maximum(lower, upper)  # nan if either is nan
    z = statistic(x1, n1, x2, n2, margin, measure)  # type: ignore[arg-type]
    return normal_p_values(z, alternative)
