"""Confidence intervals for the risk ratio p1/p2 and the odds ratio of two proportions.

Each function takes (x1, n1, x2, n2, level) and returns an
:class:`~prespec.stats.results.Estimate`; ``level`` is the two-sided confidence level. The
2×2 table is [[x1, n1 − x1], [x2, n2 − x2]]. An unbounded upper limit is ``inf``; an estimate
that the data leave undefined (0/0, e.g. a ratio with no events in either group) is ``nan``
with the interval [0, inf].
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy import special

from prespec.stats import _checks
from prespec.stats._lazy import brentq
from prespec.stats._normal import upper_quantile
from prespec.stats.results import Estimate

#: The note of the Katz and Woolf intervals when a zero cell made them add 0.5 to every cell.
HALF_ADDED = "0.5 added to every cell because a cell is zero"

_RTOL = 4 * float(np.finfo(float).eps)


def _validated(
    x1: object, n1: object, x2: object, n2: object, level: object
) -> tuple[int, int, int, int, float]:
    a, m = _checks.events_of_total("x1", x1, "n1", n1)
    b, n = _checks.events_of_total("x2", x2, "n2", n2)
    return a, m, b, n, _checks.level(level)


def _critical(level: float) -> float:
    return float(upper_quantile((1.0 - level) / 2.0))


def _cells(x1: int, n1: int, x2: int, n2: int) -> tuple[list[float], str | None]:
    """The four cells, with 0.5 added to each if any is zero, and the note that says so."""
    cells = [float(x1), float(n1 - x1), float(x2), float(n2 - x2)]
    if min(cells) == 0.0:
        return [c + 0.5 for c in cells], HALF_ADDED
    return cells, None


def _ratio(numerator: float, denominator: float) -> float:
    """numerator/denominator with 0/0 = nan and positive/0 = inf."""
    if denominator == 0.0:
        return math.nan if numerator == 0.0 else math.inf
    return numerator / denominator


def katz_ratio(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Katz log interval for the risk ratio p1/p2.

    exp(log(p1/p2) ± z·sqrt(1/x1 − 1/n1 + 1/x2 − 1/n2)). When any cell of the 2×2 table is
    zero, 0.5 is added to every cell (so each group total grows by 1) for both the estimate and
    the interval, and ``note`` says so.

    References
    ----------
    Katz D, Baptista J, Azen SP, Pike MC. Obtaining confidence intervals for the risk ratio in
    cohort studies. Biometrics 1978;34:469–474.
    """
    x1, n1, x2, n2, lvl = _validated(x1, n1, x2, n2, level)
    (a, b, c, d), note = _cells(x1, n1, x2, n2)
    m1, m2 = a + b, c + d
    value = (a * m2) / (m1 * c)
    se = math.sqrt(1.0 / a - 1.0 / m1 + 1.0 / c - 1.0 / m2)
    half = _critical(lvl) * se
    centre = math.log(a) - math.log(m1) - math.log(c) + math.log(m2)
    return Estimate(
        "risk-ratio", value, math.exp(centre - half), math.exp(centre + half), "katz", lvl, note
    )


def woolf_odds_ratio(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Woolf logit interval for the odds ratio.

    exp(log(ad/(bc)) ± z·sqrt(1/a + 1/b + 1/c + 1/d)) for the cells a, b, c, d of
    [[x1, n1 − x1], [x2, n2 − x2]]. When any cell is zero, 0.5 is added to every cell for both
    the estimate and the interval, and ``note`` says so.

    References
    ----------
    Woolf B. On estimating the relation between blood group and disease. Annals of Human
    Genetics 1955;19:251–253.
    """
    x1, n1, x2, n2, lvl = _validated(x1, n1, x2, n2, level)
    (a, b, c, d), note = _cells(x1, n1, x2, n2)
    value = (a * d) / (b * c)
    half = _critical(lvl) * math.sqrt(1.0 / a + 1.0 / b + 1.0 / c + 1.0 / d)
    centre = math.log(a) + math.log(d) - math.log(b) - math.log(c)
    return Estimate(
        "odds-ratio", value, math.exp(centre - half), math.exp(centre + half), "woolf", lvl, note
    )


# --- score intervals ---------------------------------------------------------------------


def _positive(name: str, value: object, allow_zero: bool) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"{name} must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = float(value)
    if not (math.isfinite(number) and (number > 0.0 or (allow_zero and number == 0.0))):
        bound = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"{name} must be finite and {bound}, got {number!r}")
    return number


def ratio_constrained_mle(x1: int, n1: int, x2: int, n2: int, ratio: float) -> tuple[float, float]:
    """Maximum likelihood estimates (p̃1, p̃2) with p1 = ratio·p2, validated; see
    ``ratio_mle`` for the closed form.

    References
    ----------
    Miettinen O, Nurminen M. Statistics in Medicine 1985;4:213–226.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    return ratio_mle(x1, n1, x2, n2, _positive("ratio", ratio, allow_zero=True))


def odds_ratio_constrained_mle(
    x1: int, n1: int, x2: int, n2: int, odds_ratio: float
) -> tuple[float, float]:
    """Maximum likelihood estimates (p̃1, p̃2) with the given odds ratio, validated; see
    ``_odds_ratio_mle`` for the closed form.

    References
    ----------
    Miettinen O, Nurminen M. Statistics in Medicine 1985;4:213–226.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    return _odds_ratio_mle(x1, n1, x2, n2, _positive("odds_ratio", odds_ratio, allow_zero=False))


def ratio_mle(x1: int, n1: int, x2: int, n2: int, ratio: float) -> tuple[float, float]:
    """Maximum likelihood estimates (p̃1, p̃2) of two proportions with p1 = ratio·p2.

    p̃2 is the smaller root of N·φ p² − (n1φ + x1 + n2 + x2φ) p + (x1 + x2) = 0 (Miettinen and
    Nurminen 1985; Farrington and Manning 1990), computed in the cancellation-free form
    2c/(−b + sqrt(b² − 4ac)); p̃1 = φ p̃2. The discriminant is formed as the sum of two
    non-negative terms, (φ(n1 + x2) − (x1 + n2))² + 4φ(n1 − x1)(n2 − x2), which equals
    b² − 4ac exactly in algebra but does not cancel near a double root (both proportions
    near 1 and φ near 1, where b² − 4ac loses half its digits). ratio must be >= 0 and
    finite.

    References
    ----------
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    Farrington CP, Manning G. Statistics in Medicine 1990;9:1447–1454.
    """
    b = -(n1 * ratio + x1 + n2 + x2 * ratio)
    c = float(x1 + x2)
    root = 2.0 * c / (-b + math.sqrt(ratio_discriminant(x1, n1, x2, n2, ratio)))
    p2 = min(1.0, root, math.inf if ratio == 0.0 else 1.0 / ratio)
    return min(1.0, ratio * p2), p2


def ratio_discriminant(x1: Any, n1: Any, x2: Any, n2: Any, ratio: float) -> Any:
    """b² − 4ac of ``ratio_mle``'s quadratic as (φ(n1 + x2) − (x1 + n2))² + 4φ(n1 − x1)(n2 − x2),
    a sum of non-negative terms; plain arithmetic, so numbers or numpy arrays alike."""
    spread = ratio * (n1 + x2) - (x1 + n2)
    return spread * spread + 4.0 * ratio * (n1 - x1) * (n2 - x2)


def ratio_mle_many(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int,
                   ratio: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`ratio_mle` on arrays of events (x1, x2 broadcast; n1, n2 and ratio fixed): the
    quadratic's smaller root with the discriminant of :func:`ratio_discriminant` (a sum that
    does not cancel); the scalar's array twin, held to it by a test."""
    b = -(n1 * ratio + x1 + n2 + x2 * ratio)
    c = (x1 + x2).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        root = 2.0 * c / (-b + np.sqrt(ratio_discriminant(x1, n1, x2, n2, ratio)))
    p2 = np.minimum(np.minimum(1.0, root), math.inf if ratio == 0.0 else 1.0 / ratio)
    return np.minimum(1.0, ratio * p2), p2


def _odds_ratio_mle(x1: int, n1: int, x2: int, n2: int, odds_ratio: float) -> tuple[float, float]:
    """Maximum likelihood estimates (p̃1, p̃2) of two proportions with odds ratio ψ; see
    ``odds_ratio_cells``."""
    p1, _, p2, _ = odds_ratio_cells(x1, n1, x2, n2, odds_ratio)
    return p1, p2


def odds_ratio_cells(
    x1: int, n1: int, x2: int, n2: int, odds_ratio: float
) -> tuple[float, float, float, float]:
    """(p̃1, 1 − p̃1, p̃2, 1 − p̃2), the maximum likelihood estimates with odds ratio ψ and
    their complements, each to full relative precision.

    p̃2 is the root in [0, 1] of n2(ψ − 1)p² + bp − m = 0, b = n1ψ + n2 − m(ψ − 1),
    m = x1 + x2 (Miettinen and Nurminen 1985), and q̃2 = 1 − p̃2 the matching root of
    n2(ψ − 1)q² − b'q + ψ(N − m) = 0, b' = ψ(n1 + 2n2 − m) + (m − n2), the same quadratic
    in q = 1 − p. Both share the discriminant b² + 4n2(ψ − 1)m, formed here as the sum of two
    non-negative terms, (ψ(n1 − m) + (n2 − m))² + 4ψm(N − m): equal in algebra but free of
    the cancellation near a double root (ψ far below 1 with m near n2, e.g. one event in a
    small first group against all but one in a large second). Each root is taken in the form
    that adds numbers of one sign: 2m/(b + √disc) while b >= 0 (always so for ψ <= 1, and ψ
    = 1, where the quadratic is linear, needs no special case), else (√disc − b)/(2n2(ψ − 1));
    likewise for q̃2. Then 1 + p̃2(ψ − 1) = q̃2 + ψp̃2, so p̃1 = ψp̃2/(q̃2 + ψp̃2) and
    q̃1 = q̃2/(q̃2 + ψp̃2), with no difference taken. odds_ratio must be > 0 and finite.

    References
    ----------
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    """
    m = x1 + x2
    total = n1 + n2
    psi = odds_ratio
    spread = psi * (n1 - m) + (n2 - m)
    root_disc = math.sqrt(spread * spread + 4.0 * psi * m * (total - m))
    b = psi * (n1 - m) + (n2 + m)
    if b >= 0.0:
        p2 = 2.0 * m / (b + root_disc)
    else:  # then ψ > 1
        p2 = (root_disc - b) / (2.0 * n2 * (psi - 1.0))
    b_complement = psi * (n1 + 2 * n2 - m) + (m - n2)
    if b_complement >= 0.0:
        q2 = 2.0 * psi * (total - m) / (b_complement + root_disc)
    else:  # then ψ < 1
        q2 = (b_complement - root_disc) / (2.0 * n2 * (psi - 1.0))
    p2, q2 = min(1.0, max(0.0, p2)), min(1.0, max(0.0, q2))
    scale = q2 + psi * p2
    p1, q1 = psi * p2 / scale, q2 / scale
    return min(1.0, max(0.0, p1)), min(1.0, max(0.0, q1)), p2, q2


def _koopman_share(x1: int, n1: int, x2: int, n2: int, ratio: float) -> float:
    """Z/sqrt(1 + Z²) for the score statistic Z = (p̂1 − φp̂2)/sqrt(V) at p1/p2 = φ,
    V = p̃1(1 − p̃1)/n1 + φ²p̃2(1 − p̃2)/n2 (no variance correction)."""
    numerator = (x1 * n2 - ratio * x2 * n1) / (n1 * n2)
    t1, t2 = ratio_mle(x1, n1, x2, n2, ratio)
    variance = t1 * (1.0 - t1) / n1 + ratio * ratio * t2 * (1.0 - t2) / n2
    denominator = math.sqrt(numerator * numerator + variance)
    return 0.0 if denominator == 0.0 else numerator / denominator


def _mn_odds_share(x1: int, n1: int, x2: int, n2: int, odds_ratio: float) -> float:
    """Z/sqrt(1 + Z²) for the Miettinen–Nurminen odds-ratio statistic at odds ratio ψ.

    Z = (x1 − n1p̃1)·sqrt((1/v1 + 1/v2)(N − 1)/N), vi = ni p̃i(1 − p̃i); the bounded form is
    D/sqrt(D² + N/(N − 1)·v1v2/(v1 + v2)), D = x1 − n1p̃1, finite where v1 or v2 is 0. At ψ = 0
    it is 1, its limit, when x1 > 0 and x2 < n2.
    """
    if odds_ratio == 0.0:
        return 1.0
    t1, u1, t2, u2 = odds_ratio_cells(x1, n1, x2, n2, odds_ratio)
    # x1 − n1p̃1 = n1q̃1 − (n1 − x1): the form with the smaller numbers loses fewer digits
    difference = x1 - n1 * t1 if t1 <= u1 else n1 * u1 - (n1 - x1)
    v1, v2 = n1 * t1 * u1, n2 * t2 * u2
    total = n1 + n2
    harmonic = 0.0 if v1 + v2 == 0.0 else v1 * v2 / (v1 + v2)
    denominator = math.sqrt(difference * difference + harmonic * total / (total - 1))
    return 0.0 if denominator == 0.0 else difference / denominator


def _lower_ratio_limit(
    share: Callable[[float], float], estimate: float, fallback: float, target: float
) -> float:
    """The lower limit of a score interval for a ratio measure: the φ in [0, estimate] where
    the bounded statistic share(φ) = Z/sqrt(1 + Z²) falls to target = z/sqrt(1 + z²).

    The search runs over t in φ = s·t/(1 − t). With a finite estimate, s = estimate and the
    bracket is t in [0, 1/2] (φ from 0 to the estimate): share(0) = 1 > target and
    share(estimate) = 0 < target. With an infinite estimate, s = ``fallback`` (a finite
    estimate of the same scale) and t runs over [0, 1], where share tends to 0 as φ → ∞. The
    map keeps the relative precision of φ at both ends; brentq then needs only continuity.
    """
    if estimate == 0.0:
        return 0.0
    finite = math.isfinite(estimate)
    scale = estimate if finite else fallback
    top = 0.5 if finite else 1.0

    def excess(t: float) -> float:
        if t >= top:
            return -target
        if t <= 0.0:
            return 1.0 - target
        return share(scale * t / (1.0 - t)) - target

    t = brentq(excess, 0.0, top, xtol=1e-300, rtol=_RTOL, maxiter=500)
    return float(scale * t / (1.0 - t))


def _score_interval(
    x1: int,
    n1: int,
    x2: int,
    n2: int,
    level: float,
    share: Callable[[int, int, int, int, float], float],
    estimate: Callable[[int, int, int, int], float],
    fallback: Callable[[int, int, int, int], float],
) -> tuple[float, float, float]:
    """Estimate and score limits for a ratio measure; the upper limit is 1/(the lower limit of
    the swapped table), since swapping the groups maps the measure to its reciprocal and the
    statistic to its negative."""
    value = estimate(x1, n1, x2, n2)
    if math.isnan(value):
        return value, 0.0, math.inf
    z = _critical(level)
    target = z / math.sqrt(1.0 + z * z)
    low = _lower_ratio_limit(
        lambda r: share(x1, n1, x2, n2, r), value, fallback(x1, n1, x2, n2), target
    )
    swapped_low = _lower_ratio_limit(
        lambda r: share(x2, n2, x1, n1, r),
        estimate(x2, n2, x1, n1),
        fallback(x2, n2, x1, n1),
        target,
    )
    high = math.inf if swapped_low == 0.0 else 1.0 / swapped_low
    return value, low, high


def _risk_ratio(x1: int, n1: int, x2: int, n2: int) -> float:
    return _ratio(float(x1 * n2), float(x2 * n1))


def _odds_ratio(x1: int, n1: int, x2: int, n2: int) -> float:
    return _ratio(float(x1 * (n2 - x2)), float((n1 - x1) * x2))


def _half_risk_ratio(x1: int, n1: int, x2: int, n2: int) -> float:
    return ((x1 + 0.5) * (n2 + 1)) / ((n1 + 1) * (x2 + 0.5))


def _half_odds_ratio(x1: int, n1: int, x2: int, n2: int) -> float:
    return ((x1 + 0.5) * (n2 - x2 + 0.5)) / ((n1 - x1 + 0.5) * (x2 + 0.5))


def koopman_ratio(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Koopman's score interval for the risk ratio p1/p2.

    The set of φ with |Z(φ)| <= z, Z(φ) = (p̂1 − φp̂2)/sqrt(p̃1(1 − p̃1)/n1 + φ²p̃2(1 − p̃2)/n2),
    (p̃1, p̃2) the maximum likelihood estimates under p1 = φp2 (:func:`ratio_constrained_mle`),
    with no N/(N − 1) factor. No events in the first group: lower limit 0; none in the second:
    upper limit ``inf``; none in either: estimate ``nan`` and interval [0, inf].

    References
    ----------
    Koopman PAR. Confidence intervals for the ratio of two binomial proportions. Biometrics
    1984;40:513–517.
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226 (the same interval without their variance factor).
    """
    x1, n1, x2, n2, lvl = _validated(x1, n1, x2, n2, level)
    value, low, high = _score_interval(
        x1, n1, x2, n2, lvl, _koopman_share, _risk_ratio, _half_risk_ratio
    )
    return Estimate("risk-ratio", value, low, high, "koopman", lvl)


def miettinen_nurminen_odds_ratio(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Miettinen–Nurminen score interval for the odds ratio.

    The set of ψ with |Z(ψ)| <= z, Z(ψ)² = (x1 − n1p̃1)²(1/(n1p̃1q̃1) + 1/(n2p̃2q̃2))(N − 1)/N,
    (p̃1, p̃2) the maximum likelihood estimates under odds ratio ψ
    (:func:`odds_ratio_constrained_mle`). An estimate of 0 (x1 = 0 or x2 = n2) has lower
    limit 0; an infinite one (x1 = n1 or x2 = 0) has upper limit ``inf``; with no events, or
    only events, in both groups the estimate is ``nan`` and the interval [0, inf].

    References
    ----------
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    """
    x1, n1, x2, n2, lvl = _validated(x1, n1, x2, n2, level)
    value, low, high = _score_interval(
        x1, n1, x2, n2, lvl, _mn_odds_share, _odds_ratio, _half_odds_ratio
    )
    return Estimate("odds-ratio", value, low, high, "miettinen-nurminen", lvl)


# --- exact conditional -------------------------------------------------------------------


class _Conditional:
    """Fisher's noncentral hypergeometric law of x1 given both margins, on the log odds ratio."""

    def __init__(self, x1: int, n1: int, x2: int, n2: int) -> None:
        m = x1 + x2
        self.low, self.high = max(0, m - n2), min(n1, m)
        self.support = np.arange(self.low, self.high + 1, dtype=float)
        self.base = (
            special.gammaln(n1 + 1)
            - special.gammaln(self.support + 1)
            - special.gammaln(n1 - self.support + 1)
            + special.gammaln(n2 + 1)
            - special.gammaln(m - self.support + 1)
            - special.gammaln(n2 - m + self.support + 1)
        )

    def _log_weights(self, log_psi: float) -> np.ndarray:
        w = self.base + self.support * log_psi
        return w - special.logsumexp(w)

    def mean(self, log_psi: float) -> float:
        return float(np.dot(np.exp(self._log_weights(log_psi)), self.support))

    def log_upper_tail(self, k: int, log_psi: float) -> float:
        """log P(X >= k)."""
        return float(special.logsumexp(self._log_weights(log_psi)[k - self.low :]))

    def log_lower_tail(self, k: int, log_psi: float) -> float:
        """log P(X <= k)."""
        return float(special.logsumexp(self._log_weights(log_psi)[: k - self.low + 1]))


def _increasing_root(function: Callable[[float], float], start: float) -> float:
    """The root of an increasing function of the log odds ratio that changes sign on the real
    line: the bracket is widened by doubling steps from ``start`` until the signs differ (each
    end checked before brentq is called), then solved to full precision."""
    step = 1.0
    low, high = start - step, start + step
    while function(low) > 0.0:
        step *= 2.0
        low = start - step
        if step > 1e4:
            raise ArithmeticError("no sign change below the start")  # pragma: no cover
    while function(high) < 0.0:
        step *= 2.0
        high = start + step
        if step > 1e4:
            raise ArithmeticError("no sign change above the start")  # pragma: no cover
    return float(brentq(function, low, high, xtol=1e-14, rtol=_RTOL, maxiter=500))


def exact_conditional_odds_ratio(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Conditional maximum likelihood estimate of the odds ratio with Cornfield's exact interval.

    Given both margins, x1 follows Fisher's noncentral hypergeometric law with parameter ψ. The
    estimate solves E(X; ψ) = x1; the limits solve P(X >= x1; ψL) = α/2 and
    P(X <= x1; ψU) = α/2, α = 1 − level, all on the log scale where the mean and the tail
    probabilities are strictly increasing. x1 at the bottom of its support gives estimate 0 and
    lower limit 0, at the top estimate ``inf`` and upper limit ``inf``; a zero margin (a single
    possible table) gives estimate ``nan`` and the interval [0, inf].

    References
    ----------
    Cornfield J. A statistical problem arising from retrospective studies. Proceedings of the
    Third Berkeley Symposium on Mathematical Statistics and Probability 1956;4:135–148.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 16 (conditional
    inference for the odds ratio).
    """
    x1, n1, x2, n2, lvl = _validated(x1, n1, x2, n2, level)
    law = _Conditional(x1, n1, x2, n2)
    method = "exact-conditional"
    if law.low == law.high:
        return Estimate("odds-ratio", math.nan, 0.0, math.inf, method, lvl)
    start = math.log(_half_odds_ratio(x1, n1, x2, n2))
    log_tail = math.log((1.0 - lvl) / 2.0)
    if x1 == law.low:
        value, low = 0.0, 0.0
    else:
        low = math.exp(_increasing_root(lambda u: law.log_upper_tail(x1, u) - log_tail, start))
    if x1 == law.high:
        value, high = math.inf, math.inf
    else:
        high = math.exp(_increasing_root(lambda u: log_tail - law.log_lower_tail(x1, u), start))
    if law.low < x1 < law.high:
        value = math.exp(_increasing_root(lambda u: law.mean(u) - x1, start))
    return Estimate("odds-ratio", value, low, high, method, lvl)
