"""Confidence intervals for one proportion and for the difference of two proportions.

Each function returns an :class:`~prespec.stats.results.Estimate`; ``level`` is the two-sided
confidence level (e.g. 0.95) and the critical value is the normal quantile 1 − (1 − level)/2.
"""

from __future__ import annotations

import math

import numpy as np

from prespec.stats import _checks
from prespec.stats._lazy import brentq
from prespec.stats._normal import upper_quantile
from prespec.stats.results import Estimate


def _critical(level: float) -> float:
    """Two-sided standard normal critical value for a confidence level."""
    return float(upper_quantile((1.0 - level) / 2.0))


def _difference(x1: int, n1: int, x2: int, n2: int) -> float:
    """p1 − p2 from one rounding of the exact integer fraction (0.8 − 0.6 gives 0.2)."""
    return (x1 * n2 - x2 * n1) / (n1 * n2)


def _wilson_limits(x: int, n: int, z: float) -> tuple[float, float]:
    """Wilson score limits for x events out of n, exact 0 at x = 0 and 1 at x = n."""
    p = x / n
    z2 = z * z
    denominator = 1.0 + z2 / n
    centre = (p + z2 / (2.0 * n)) / denominator
    half = z * math.sqrt(p * (1.0 - p) / n + z2 / (4.0 * n * n)) / denominator
    low = 0.0 if x == 0 else max(0.0, centre - half)
    high = 1.0 if x == n else min(1.0, centre + half)
    return low, high


def wilson(x: int, n: int, level: float) -> Estimate:
    """Wilson score interval for a single proportion x / n.

    The limits are the roots in p of (x/n − p)² = z² p(1 − p)/n. They lie in [0, 1] and, unlike
    the Wald interval, do not collapse at x = 0 or x = n.

    References
    ----------
    Wilson EB. Probable inference, the law of succession, and statistical inference. Journal of
    the American Statistical Association 1927;22:209–212.
    Newcombe RG. Two-sided confidence intervals for the single proportion: comparison of seven
    methods. Statistics in Medicine 1998;17:857–872 (method 3).
    """
    x, n = _checks.events_of_total("x", x, "n", n)
    lvl = _checks.level(level)
    low, high = _wilson_limits(x, n, _critical(lvl))
    return Estimate("proportion", x / n, low, high, "wilson", lvl)


def wald_difference(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Wald interval for the risk difference p1 − p2, clipped to [−1, 1].

    d ± z·sqrt(p1(1 − p1)/n1 + p2(1 − p2)/n2). When both proportions are 0 or 1 the standard
    error is 0 and so is the width: that is what the method gives, and it is kept.

    References
    ----------
    Newcombe RG. Interval estimation for the difference between independent proportions:
    comparison of eleven methods. Statistics in Medicine 1998;17:873–890 (method 1).
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    lvl = _checks.level(level)
    p1, p2 = x1 / n1, x2 / n2
    difference = _difference(x1, n1, x2, n2)
    half = _critical(lvl) * math.sqrt(p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    low = max(-1.0, difference - half)
    high = min(1.0, difference + half)
    return Estimate("risk-difference", difference, low, high, "wald", lvl)


def newcombe_difference(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Newcombe's hybrid score interval for the risk difference p1 − p2.

    With Wilson limits (l1, u1) for p1 and (l2, u2) for p2, the interval is
    d − sqrt((p1 − l1)² + (u2 − p2)²) to d + sqrt((u1 − p1)² + (p2 − l2)²), d = p1 − p2.
    It always lies within [−1, 1].

    References
    ----------
    Newcombe RG. Interval estimation for the difference between independent proportions:
    comparison of eleven methods. Statistics in Medicine 1998;17:873–890 (method 10).
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    lvl = _checks.level(level)
    z = _critical(lvl)
    p1, p2 = x1 / n1, x2 / n2
    l1, u1 = _wilson_limits(x1, n1, z)
    l2, u2 = _wilson_limits(x2, n2, z)
    difference = _difference(x1, n1, x2, n2)
    low = difference - math.hypot(p1 - l1, u2 - p2)
    high = difference + math.hypot(u1 - p1, p2 - l2)
    return Estimate("risk-difference", difference, max(-1.0, low), min(1.0, high), "newcombe", lvl)


def agresti_caffo_difference(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Agresti–Caffo interval for the risk difference p1 − p2, clipped to [−1, 1].

    One event and one non-event are added to each group, p̃i = (xi + 1)/(ni + 2), and the Wald
    interval is formed on the adjusted proportions: p̃1 − p̃2 ± z·sqrt(Σ p̃i(1 − p̃i)/(ni + 2)).
    The reported value stays the observed difference x1/n1 − x2/n2. The interval is centred on
    the adjusted difference, so at low confidence levels in very small groups it can exclude
    the observed difference (0/1 vs 1/1 at 90 per cent: [−0.967, 0.300] against −1); from
    95 per cent up it contains it.

    References
    ----------
    Agresti A, Caffo B. Simple and effective confidence intervals for proportions and
    differences of proportions result from adding two successes and two failures. The American
    Statistician 2000;54:280–288.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    lvl = _checks.level(level)
    q1, q2 = (x1 + 1) / (n1 + 2), (x2 + 1) / (n2 + 2)
    centre = ((x1 + 1) * (n2 + 2) - (x2 + 1) * (n1 + 2)) / ((n1 + 2) * (n2 + 2))
    half = _critical(lvl) * math.sqrt(q1 * (1.0 - q1) / (n1 + 2) + q2 * (1.0 - q2) / (n2 + 2))
    low = max(-1.0, centre - half)
    high = min(1.0, centre + half)
    return Estimate("risk-difference", _difference(x1, n1, x2, n2), low, high, "agresti-caffo", lvl)


def difference_constrained_mle(
    x1: int, n1: int, x2: int, n2: int, delta: float
) -> tuple[float, float]:
    """Maximum likelihood estimates (p̃1, p̃2) with p1 − p2 = delta, validated; see
    ``difference_mle`` for the closed form.

    References
    ----------
    Farrington CP, Manning G. Statistics in Medicine 1990;9:1447–1454.
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    if isinstance(delta, bool) or not isinstance(delta, (int, float)) or not -1 <= delta <= 1:
        raise ValueError(f"delta must be a number in [-1, 1], got {delta!r}")
    return difference_mle(x1, n1, x2, n2, float(delta))


def difference_mle(x1: int, n1: int, x2: int, n2: int, delta: float) -> tuple[float, float]:
    """Maximum likelihood estimates (p̃1, p̃2) of two binomial proportions with p1 − p2 = delta.

    The closed form of Farrington and Manning (1990, section 2; also Miettinen and Nurminen
    1985): p̃1 is the root in the admissible range of the cubic a p³ + b p² + c p + d = 0 with
    θ = n2/n1, a = 1 + θ, b = −(1 + θ + p̂1 + θp̂2 + δ(θ + 2)),
    c = δ² + δ(2p̂1 + θ + 1) + p̂1 + θp̂2 and d = −p̂1δ(1 + δ), taken by the trigonometric
    solution; p̃2 = p̃1 − δ. The log-likelihood is strictly concave in p2 on the admissible
    interval max(0, −δ) <= p2 <= min(1, 1 − δ), so the root is its unique maximiser; it is
    clipped into that interval and refined by Newton steps against rounding (``_polish``).
    delta must lie in [−1, 1].

    References
    ----------
    Farrington CP, Manning G. Test statistics and sample size formulae for comparative
    binomial trials with null hypothesis of non-zero risk difference or non-unity relative
    risk. Statistics in Medicine 1990;9:1447–1454.
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    """
    if delta <= -1.0:
        return 0.0, 1.0
    if delta >= 1.0:
        return 1.0, 0.0
    p1, p2 = x1 / n1, x2 / n2
    theta = n2 / n1
    a = 1.0 + theta
    b = -(1.0 + theta + p1 + theta * p2 + delta * (theta + 2.0))
    c = delta * delta + delta * (2.0 * p1 + theta + 1.0) + p1 + theta * p2
    d = -p1 * delta * (1.0 + delta)
    shift = b / (3.0 * a)
    v = shift**3 - b * c / (6.0 * a * a) + d / (2.0 * a)
    radicand = max(0.0, shift * shift - c / (3.0 * a))
    u = math.copysign(math.sqrt(radicand), v)
    if u == 0.0:
        root = -shift  # a triple root: the depressed cubic is t³ = 0
    else:
        cosine = min(1.0, max(-1.0, v / u**3))
        root = 2.0 * u * math.cos((math.pi + math.acos(cosine)) / 3.0) - shift
    root = min(min(1.0, 1.0 + delta), max(max(0.0, delta), root))
    p2 = _polish(x1, n1, x2, n2, delta, min(1.0, max(0.0, root - delta)))
    return min(1.0, max(0.0, p2 + delta)), p2


def _log_likelihood(x1: int, n1: int, x2: int, n2: int, p1: float, p2: float) -> float:
    """Binomial log-likelihood with 0·log 0 = 0 (−inf where an observed count has p = 0)."""
    total = 0.0
    for count, p in ((x1, p1), (n1 - x1, 1.0 - p1), (x2, p2), (n2 - x2, 1.0 - p2)):
        if count:
            total += count * math.log(p) if p > 0.0 else -math.inf
    return total


def _polish(x1: int, n1: int, x2: int, n2: int, delta: float, p2: float) -> float:
    """Refine the closed-form p̃2 by up to four Newton steps on the log-likelihood in p2,
    clipped to the admissible interval and kept only when the likelihood does not fall.

    Where the admissible root of the cubic is close to a multiple root (e.g. every participant
    an event, delta near 0) the trigonometric solution loses about half the digits; the
    likelihood is strictly concave in p2, so Newton steps restore them.
    """
    low, high = max(0.0, -delta), min(1.0, 1.0 - delta)
    best = _log_likelihood(x1, n1, x2, n2, p2 + delta, p2)
    for _ in range(4):
        p1 = p2 + delta
        terms = ((x1, p1, 1.0), (n1 - x1, 1.0 - p1, -1.0), (x2, p2, 1.0), (n2 - x2, 1.0 - p2, -1.0))
        if any(count and p <= 0.0 for count, p, _ in terms):
            break
        gradient = sum(sign * count / p for count, p, sign in terms if count)
        curvature = -sum(count / (p * p) for count, p, _ in terms if count)
        if gradient == 0.0 or curvature == 0.0:
            break
        step = min(high, max(low, p2 - gradient / curvature))
        value = _log_likelihood(x1, n1, x2, n2, step + delta, step)
        if step == p2 or value < best:
            break
        p2, best = step, value
    return p2


def difference_mle_many(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int,
                        delta: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`difference_mle` on arrays of events (x1, x2 broadcast; n1, n2 and delta fixed):
    the closed-form cubic root of Farrington and Manning (1990) and Newton steps against
    rounding, the same arithmetic as the scalar (its array twin; a test holds them together).
    """
    if delta <= -1.0 or delta >= 1.0:
        shape = np.broadcast(x1, x2).shape
        return np.full(shape, 0.0 if delta <= -1.0 else 1.0), \
            np.full(shape, 1.0 if delta <= -1.0 else 0.0)
    p1, p2 = x1 / n1, x2 / n2
    theta = n2 / n1
    a = 1.0 + theta
    b = -(1.0 + theta + p1 + theta * p2 + delta * (theta + 2.0))
    c = delta * delta + delta * (2.0 * p1 + theta + 1.0) + p1 + theta * p2
    d = -p1 * delta * (1.0 + delta)
    shift = b / (3.0 * a)
    v = shift**3 - b * c / (6.0 * a * a) + d / (2.0 * a)
    u = np.copysign(np.sqrt(np.maximum(0.0, shift * shift - c / (3.0 * a))), v)
    with np.errstate(divide="ignore", invalid="ignore"):
        cosine = np.clip(v / u**3, -1.0, 1.0)
        root = np.where(u == 0.0, -shift,
                        2.0 * u * np.cos((math.pi + np.arccos(cosine)) / 3.0) - shift)
    root = np.minimum(min(1.0, 1.0 + delta), np.maximum(max(0.0, delta), root))
    t2 = _polish_many(x1, n1, x2, n2, delta, np.clip(root - delta, 0.0, 1.0))
    return np.clip(t2 + delta, 0.0, 1.0), t2


def _log_likelihood_many(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, p1: np.ndarray,
                         p2: np.ndarray) -> np.ndarray:
    total = np.zeros(np.broadcast(x1, x2, p1).shape)
    for count, p in ((x1, p1), (n1 - x1, 1.0 - p1), (x2, p2), (n2 - x2, 1.0 - p2)):
        with np.errstate(divide="ignore", invalid="ignore"):
            term = np.where(p > 0.0, count * np.log(np.where(p > 0.0, p, 1.0)), -np.inf)
        total = total + np.where(count > 0, term, 0.0)
    return total


def _polish_many(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, delta: float,
                 p2: np.ndarray) -> np.ndarray:
    """Up to four Newton steps on the log-likelihood in p2, each kept only while the
    likelihood does not fall (:func:`_polish`, on arrays)."""
    low, high = max(0.0, -delta), min(1.0, 1.0 - delta)
    best = _log_likelihood_many(x1, n1, x2, n2, p2 + delta, p2)
    active = np.ones(best.shape, dtype=bool)
    x1, x2 = np.broadcast_to(x1, best.shape), np.broadcast_to(x2, best.shape)
    for _ in range(4):
        p1 = p2 + delta
        terms = ((x1, p1, 1.0), (n1 - x1, 1.0 - p1, -1.0), (x2, p2, 1.0),
                 (n2 - x2, 1.0 - p2, -1.0))
        blocked = np.zeros(best.shape, dtype=bool)
        gradient = np.zeros(best.shape)
        curvature = np.zeros(best.shape)
        for count, p, sign in terms:
            blocked |= (count > 0) & (p <= 0.0)
            safe = np.where(p > 0.0, p, 1.0)
            gradient = gradient + np.where(count > 0, sign * count / safe, 0.0)
            curvature = curvature - np.where(count > 0, count / (safe * safe), 0.0)
        active &= ~blocked & (gradient != 0.0) & (curvature != 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.clip(p2 - gradient / np.where(curvature != 0.0, curvature, 1.0),
                           low, high)
        value = _log_likelihood_many(x1, n1, x2, n2, step + delta, step)
        active &= (step != p2) & ~(value < best)
        if not active.any():
            break
        p2 = np.where(active, step, p2)
        best = np.where(active, value, best)
    return p2


def _mn_difference_share(x1: int, n1: int, x2: int, n2: int, delta: float) -> float:
    """Z/sqrt(1 + Z²) for the Miettinen–Nurminen score statistic Z at p1 − p2 = delta.

    Z = (p̂1 − p̂2 − δ)/sqrt(V), V = (p̃1(1 − p̃1)/n1 + p̃2(1 − p̃2)/n2)·N/(N − 1). The bounded
    form (d̂ − δ)/sqrt((d̂ − δ)² + V) is finite and continuous on all of [−1, 1], including
    δ = −1 and δ = 1 where V = 0; at the single point where numerator and V are both 0 (δ = d̂
    with each p̂ equal to 0 or 1) it is 0, its limit.
    """
    numerator = _difference(x1, n1, x2, n2) - delta
    t1, t2 = difference_mle(x1, n1, x2, n2, delta)
    total = n1 + n2
    variance = (t1 * (1.0 - t1) / n1 + t2 * (1.0 - t2) / n2) * total / (total - 1)
    denominator = math.sqrt(numerator * numerator + variance)
    return 0.0 if denominator == 0.0 else numerator / denominator


def _mn_difference_lower(x1: int, n1: int, x2: int, n2: int, share: float) -> float:
    """Lower Miettinen–Nurminen limit: the δ in [−1, d̂] where Z(δ) = z, i.e. the share is
    z/sqrt(1 + z²).

    The bracket [−1, d̂] is valid: at δ = −1 the constrained estimates are (0, 1), V = 0 and
    the share is exactly 1 > target whenever d̂ > −1; at δ = d̂ the numerator is 0 and the share
    0 < target. The share is continuous in δ (the constrained estimates are), so brentq finds
    the crossing. At d̂ = −1 the limit is −1.
    """
    estimate = _difference(x1, n1, x2, n2)
    if estimate <= -1.0:
        return -1.0
    return float(
        brentq(
            lambda delta: _mn_difference_share(x1, n1, x2, n2, delta) - share,
            -1.0,
            estimate,
            xtol=1e-15,
            rtol=4 * np.finfo(float).eps,
            maxiter=500,
        )
    )


def miettinen_nurminen_difference(x1: int, n1: int, x2: int, n2: int, level: float) -> Estimate:
    """Miettinen–Nurminen score interval for the risk difference p1 − p2.

    The interval is the set of δ with |Z(δ)| <= z, where
    Z(δ) = (p̂1 − p̂2 − δ)/sqrt((p̃1(1 − p̃1)/n1 + p̃2(1 − p̃2)/n2)·N/(N − 1)), N = n1 + n2, and
    (p̃1, p̃2) are the maximum likelihood estimates under p1 − p2 = δ in closed form
    (:func:`difference_constrained_mle`). Each limit is found by brentq on a bracket proved to
    hold a sign change (see ``_mn_difference_lower``); the upper limit is minus the lower limit
    of the swapped table, so swapping the groups mirrors the interval exactly. The limits can
    be exactly −1 or 1 (0/n1 vs all events, and the reverse).

    References
    ----------
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    Newcombe RG. Interval estimation for the difference between independent proportions:
    comparison of eleven methods. Statistics in Medicine 1998;17:873–890 (method 6).
    Farrington CP, Manning G. Statistics in Medicine 1990;9:1447–1454 (the constrained
    estimates).
    """
    x1, n1 = _checks.events_of_total("x1", x1, "n1", n1)
    x2, n2 = _checks.events_of_total("x2", x2, "n2", n2)
    lvl = _checks.level(level)
    z = _critical(lvl)
    share = z / math.sqrt(1.0 + z * z)
    low = _mn_difference_lower(x1, n1, x2, n2, share)
    high = -_mn_difference_lower(x2, n2, x1, n1, share)
    return Estimate(
        "risk-difference", _difference(x1, n1, x2, n2), low, high, "miettinen-nurminen", lvl
    )
