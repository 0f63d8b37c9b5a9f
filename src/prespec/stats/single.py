"""One group against a fixed rate: exact binomial and score z tests, exact and Jeffreys intervals.

The tests compare the group's proportion p = x / n with a pre-specified ``null_rate`` p0 in
(0, 1); ``greater`` means p > p0 and ``less`` p < p0. The intervals return an
:class:`~prespec.stats.results.Estimate` of the proportion with ``level`` the two-sided
confidence level.
"""

from __future__ import annotations

import math
from numbers import Real
from typing import Any

import numpy as np

from prespec.stats import _checks
from prespec.stats._lazy import scipy_stats
from prespec.stats._normal import normal_p_values
from prespec.stats.results import Estimate, TestResult
from prespec.stats.tails import binomial_tail

#: Relative tolerance for outcomes as probable as the observed one in the two-sided test.
BINOMIAL_TIE_TOLERANCE = 1e-7


def _null_rate(value: object) -> float:
    """Validate a null rate strictly between 0 and 1."""
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"null_rate must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    rate = float(value)
    if not (math.isfinite(rate) and 0.0 < rate < 1.0):
        raise ValueError(f"null_rate must be strictly between 0 and 1, got {rate!r}")
    return rate


def binomial_exact(x: int, n: int, null_rate: float, *, alternative: str) -> TestResult:
    """The exact binomial test of p = null_rate for x events out of n.

    ``greater`` sums P(X >= x), ``less`` P(X <= x), X ~ Binomial(n, p0). The two-sided p-value
    is the method of small p-values: the sum of P(X = j) over every outcome j no more probable
    than the observed one (within a relative 1e-7, for ties), as scipy.stats.binomtest computes
    it. ``statistic`` and ``df`` are ``None`` (the estimate x / n is reported with the
    interval).

    References
    ----------
    Clopper CJ, Pearson ES. The use of confidence or fiducial limits illustrated in the case of
    the binomial. Biometrika 1934;26:404–413.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 1 (exact inference for
    a binomial parameter; two-sided p-values by the probability ordering).
    """
    x, n = _checks.events_of_total("x", x, "n", n)
    rate = _null_rate(null_rate)
    alt = _checks.alternative(alternative)
    law = scipy_stats().binom(n, rate)
    if alt == "greater":
        p = binomial_tail(x, n, rate, upper=True)
    elif alt == "less":
        p = binomial_tail(x, n, rate, upper=False)
    else:
        p = _binomial_two_sided(x, n, rate, law)
    return TestResult("binomial-exact", None, None, min(1.0, p), alt)


def binomial_exact_all(n: int, null_rate: float, alternative: str) -> np.ndarray:
    """The p-value of :func:`binomial_exact` for every outcome x = 0, …, n at once (the
    exact power of the design sums over them): the tails by scipy.stats.binom.sf and .cdf, and
    for two-sided each outcome's sum of the point probabilities no more probable than its own
    (within the same relative 1e-7, from the same scipy.stats.binom.pmf), 1 at x = n·p0. The
    scalar's array twin, held to it by a test (the scalar sums its tails to full relative
    precision far into them; here the tails are scipy's). Not validated.

    References
    ----------
    Clopper CJ, Pearson ES. Biometrika 1934;26:404–413.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 1.
    """
    x = np.arange(n + 1)
    if alternative == "greater":
        p = scipy_stats().binom.sf(x - 1, n, null_rate)
    elif alternative == "less":
        p = scipy_stats().binom.cdf(x, n, null_rate)
    else:
        prob = scipy_stats().binom.pmf(x, n, null_rate)
        order = np.sort(prob)
        cumulative = np.cumsum(order)
        at = np.searchsorted(order, prob * (1.0 + BINOMIAL_TIE_TOLERANCE), side="right") - 1
        p = cumulative[at]
        p[np.isclose(x, n * null_rate, rtol=0, atol=0)] = 1.0
    return np.minimum(1.0, p)


def _binomial_two_sided(x: int, n: int, rate: float, law: Any) -> float:
    """Method of small p-values: the observed tail plus the far outcomes no more probable."""
    mean = n * rate
    if x == mean:
        return 1.0
    limit = float(law.pmf(x)) * (1.0 + BINOMIAL_TIE_TOLERANCE)
    if x < mean:
        # the far side is [ceil(n p0), n], where the probabilities fall with j
        far = np.arange(math.ceil(mean), n + 1)
        count = int(np.count_nonzero(law.pmf(far) <= limit))
        return binomial_tail(x, n, rate, upper=False) + binomial_tail(
            n - count + 1, n, rate, upper=True)
    # the far side is [0, floor(n p0)], where the probabilities rise with j
    far = np.arange(0, math.floor(mean) + 1)
    count = int(np.count_nonzero(law.pmf(far) <= limit))
    return binomial_tail(count - 1, n, rate, upper=False) + binomial_tail(x, n, rate, upper=True)


def one_proportion_z(x: int, n: int, null_rate: float, *, alternative: str) -> TestResult:
    """The score z test of p = null_rate, with the standard error at the null rate.

    z = (x/n − p0) / sqrt(p0(1 − p0)/n), signed (positive when x/n > p0), referred to the
    standard normal; ``df`` is ``None``. Inverting its two-sided test gives the Wilson interval.

    References
    ----------
    Wilson EB. Probable inference, the law of succession, and statistical inference. Journal of
    the American Statistical Association 1927;22:209–212.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 1 (the score test for a
    binomial parameter).
    """
    x, n = _checks.events_of_total("x", x, "n", n)
    rate = _null_rate(null_rate)
    alt = _checks.alternative(alternative)
    z, p = one_proportion_z_many(np.asarray([x]), n, rate, alt)
    return TestResult("one-proportion-z", float(z[0]), None, float(p[0]), alt)


def one_proportion_z_many(x: np.ndarray, n: int, null_rate: float,
                          alternative: str) -> tuple[np.ndarray, np.ndarray]:
    """(z, p) of :func:`one_proportion_z` for each number of events in ``x`` (of ``n``); the
    scalar is its one-element case. Not validated."""
    z = (np.asarray(x) / n - null_rate) / np.sqrt(null_rate * (1.0 - null_rate) / n)
    return z, normal_p_values(z, alternative)


def _beta_limits(
    x: int, n: int, level: float, low_shape: tuple[float, float], high_shape: tuple[float, float]
) -> tuple[float, float]:
    """Equal-tailed beta quantiles: 0 at x = 0 and 1 at x = n."""
    tail = (1.0 - level) / 2.0
    low = 0.0 if x == 0 else float(scipy_stats().beta.ppf(tail, *low_shape))
    high = 1.0 if x == n else float(scipy_stats().beta.isf(tail, *high_shape))
    return low, high


def clopper_pearson(x: int, n: int, level: float) -> Estimate:
    """The Clopper–Pearson ("exact") interval for a single proportion x / n.

    The limits invert two one-sided exact binomial tests, each at (1 − level)/2: the lower
    limit is the (1 − level)/2 quantile of Beta(x, n − x + 1) (0 at x = 0), the upper the
    (1 + level)/2 quantile of Beta(x + 1, n − x) (1 at x = n). Its coverage is at least
    ``level`` for every true proportion.

    References
    ----------
    Clopper CJ, Pearson ES. The use of confidence or fiducial limits illustrated in the case of
    the binomial. Biometrika 1934;26:404–413.
    Newcombe RG. Two-sided confidence intervals for the single proportion: comparison of seven
    methods. Statistics in Medicine 1998;17:857–872 (method 5).
    """
    x, n = _checks.events_of_total("x", x, "n", n)
    lvl = _checks.level(level)
    low, high = _beta_limits(x, n, lvl, (x, n - x + 1), (x + 1, n - x))
    return Estimate("proportion", x / n, low, high, "clopper-pearson", lvl)


def jeffreys(x: int, n: int, level: float) -> Estimate:
    """The Jeffreys interval for a single proportion x / n, with the boundary modification.

    The equal-tailed interval of the Beta(x + 1/2, n − x + 1/2) posterior (the Jeffreys prior
    Beta(1/2, 1/2)): its (1 − level)/2 and (1 + level)/2 quantiles, except that the lower limit
    is 0 at x = 0 and the upper limit 1 at x = n, as Brown, Cai and DasGupta recommend.

    References
    ----------
    Brown LD, Cai TT, DasGupta A. Interval estimation for a binomial proportion. Statistical
    Science 2001;16:101–133 (the Jeffreys interval and its modification at x = 0 and x = n).
    Jeffreys H. Theory of Probability, 3rd ed. Oxford University Press, 1961.
    """
    x, n = _checks.events_of_total("x", x, "n", n)
    lvl = _checks.level(level)
    shape = (x + 0.5, n - x + 0.5)
    low, high = _beta_limits(x, n, lvl, shape, shape)
    return Estimate("proportion", x / n, low, high, "jeffreys", lvl)
