"""A common risk difference over strata: the stratified score test and interval, and the
stratified Newcombe interval.

A stratum is ``(x1, n1, x2, n2)`` as in :mod:`prespec.stats.stratified`: the events and the
total of the first group, then of the second. A stratum in which either group has no member
says nothing about the difference and contributes nothing (weight 0). One-sided alternatives
refer to the first group: ``greater`` means its risk is larger than the second group's.

What is implemented, exactly
----------------------------
In stratum h, d̂_h = x1h/n1h − x2h/n2h, and (p̃1h, p̃2h) are the maximum likelihood estimates
under p1h − p2h = δ (the closed form of :func:`prespec.stats.intervals.difference_mle`). The
variance of d̂_h at those estimates, with the factor N_h/(N_h − 1) of the one-table
Miettinen–Nurminen interval (N_h = n1h + n2h), is

    Ṽ_h(δ) = (p̃1h(1 − p̃1h)/n1h + p̃2h(1 − p̃2h)/n2h) · N_h/(N_h − 1).

With weights w_h normalised to sum to 1, the score statistic for a common difference δ is

    Z(δ) = Σ_h w_h (d̂_h − δ) / sqrt(Σ_h w_h² Ṽ_h(δ)).

``weights="cmh"``: w_h ∝ n1h·n2h/(n1h + n2h), fixed. ``weights="miettinen-nurminen"``:
w_h ∝ 1/Ṽ_h(δ), the inverse variances at the restricted estimates, which change with δ; then
Z(δ) = Σ_h (d̂_h − δ)/Ṽ_h / sqrt(Σ_h 1/Ṽ_h). That Miettinen and Nurminen (1985) proposed both
the statistic and these two weightings for the stratified risk difference is recalled from
memory, as is the use of the CMH weights in vaccine trials; the formulas above are what this
module computes, whatever the paper's notation.

- The test refers Z(delta) to the standard normal distribution.
- The point estimate is the root of Z(δ) = 0. With the CMH weights it is the weighted mean
  Σ w_h d̂_h (the Mantel–Haenszel risk difference), computed from exact fractions.
- The interval is {δ : |Z(δ)| <= z}, z = z_{(1+level)/2}, or the smallest interval holding it
  where it is not one interval (see below). Its limits are crossings of |Z| = z, found on the
  bounded form S(δ) = T/sqrt(T² + D) (T the numerator, D the variance of Z), which is
  continuous on [−1, 1]: S(−1) = 1 whenever some d̂_h > −1 (every Ṽ_h is 0 there and the
  numerator positive; for the inverse-variance weights, the limit as δ → −1) and
  S(estimate) = 0. The lower limit is searched on a grid of 128 equal steps from −1 up to the
  estimate, to which 0, every d̂_h and every δ where a stratum's restricted estimate reaches 0
  or 1 are added, where they lie in that range (see below); the first grid
  point with S <= z/sqrt(1 + z²) closes a bracket whose left end has S above it, a sign
  change checked, not assumed, and brentq finds the crossing in it. The limits are so the
  outermost crossings, unless a piece of the set falls between two grid points and holds none
  of the added points. The upper limit is minus the lower limit of the swapped strata, so
  swapping the groups mirrors the interval exactly. With one stratum the statistic is the
  one-table Miettinen–Nurminen statistic and the interval is
  :func:`prespec.stats.intervals.miettinen_nurminen_difference`.

Strata with no events or only events. Such a stratum has Ṽ_h(0) = 0 (its restricted estimates
are both 0 or both 1 at δ = 0). If every informative stratum is so, Z(0) is 0/0 and the test
at delta = 0 is undefined (``nan``, as for the two-proportion z-test). With the
``miettinen-nurminen`` weights a single such stratum gets an infinite weight at δ = 0, and
Z(δ) → 0 as δ → 0 from either side (its term (d̂_h − δ)/Ṽ_h stays bounded while Σ 1/Ṽ_h grows
without bound): the statistic at delta = 0 is that limit, 0. The set {|Z| <= z} then always
holds 0, and where the rest of the set lies away from 0 it is two intervals (e.g. 0/8 vs 0/1,
0/24 vs 13/14, 1/3 vs 1/2, 5/8 vs 11/11: about [−0.818, −0.456] and [−0.009, 0.009]); the
interval reported is the smallest one holding the set, here [−0.818, 0.009]. The same happens,
less sharply, wherever a stratum with a zero cell has a small Ṽ_h: near its own d̂_h (with
1/5 vs 14/29, 2/2 vs 30/31, 9/29 vs 16/16 the set is about [−0.654, −0.277] and
[0.025, 0.055], around 2/2 vs 30/31's d̂ = 1/31), and near the δ where its restricted estimate
reaches 0 or 1. The search grid holds all these points, so such a piece is found unless it
holds none of them and is narrower than a grid step (in a trial of 700 random series of 2 to
5 strata, half of them sparse, checked against a grid of 20000 points, 5 had a second piece
and none was missed). That is what the inverse-variance weights give, not a rounding
artefact; the estimate's ``note`` says so where a stratum has no events or only events. The
``cmh`` weights are fixed, and on those 700 series the set was always one interval.

The stratified Newcombe interval (Yan and Su 2010), as recalled from memory: with the same
normalised weights w_h, each group's weighted proportion p̂_i = Σ w_h x_ih/n_ih gets the
stratified Wilson limits, the roots in p of (p̂_i − p)² = z²·p(1 − p)·Σ_h w_h²/n_ih (Wilson's
interval with the effective size 1/Σ_h w_h²/n_ih), and the limits for p̂1 − p̂2 are combined
by Newcombe's square-and-add. The ``miettinen-nurminen`` weights are taken at the stratified
score estimate (they then satisfy Σ w_h d̂_h = estimate); where they are undefined there
(estimate 0 with a stratum of no or only events, or every d̂_h equal to −1 or to 1, with more
than one stratum) the interval is ``nan`` with a note. With one stratum it is
:func:`prespec.stats.intervals.newcombe_difference`.

References
----------
Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
1985;4:213–226.
Yan X, Su XG. Stratified Wilson and Newcombe confidence intervals for multiple binomial
proportions. Statistics in Biopharmaceutical Research 2010;2:329–335.
Newcombe RG. Interval estimation for the difference between independent proportions:
comparison of eleven methods. Statistics in Medicine 1998;17:873–890.
Farrington CP, Manning G. Statistics in Medicine 1990;9:1447–1454 (the restricted estimates).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from fractions import Fraction
from numbers import Real

import numpy as np

from prespec.stats import _checks
from prespec.stats._lazy import brentq
from prespec.stats._normal import normal_p_value, upper_quantile
from prespec.stats.intervals import _wilson_limits, difference_mle
from prespec.stats.results import Estimate, TestResult
from prespec.stats.stratified import _strata

Stratum = tuple[int, int, int, int]

WEIGHTS: tuple[str, ...] = ("cmh", "miettinen-nurminen")

_GRID_STEPS = 128  # grid steps from -1 to the estimate, searched for the outermost crossing
_NEAR_ZERO = 1e-12  # where the sign of Z beside 0 is read, for strata of no or only events
_DEGENERATE_NOTE = (
    "a stratum with no events or only events has zero restricted variance at a difference of"
    " 0: its inverse-variance weight is infinite there, the score statistic at 0 is 0 and the"
    " interval always holds 0"
)
_UNDEFINED_NOTE = (
    "the inverse-variance weights are undefined at the estimate: a stratum's restricted"
    " variance is 0 there"
)


@dataclass(frozen=True)
class _Series:
    """The informative strata and what every evaluation of Z needs of them."""

    rows: tuple[Stratum, ...]
    differences: np.ndarray  # d̂_h
    cmh: np.ndarray  # n1h·n2h/N_h, unnormalised
    edge: bool  # some stratum has no events or only events (Ṽ_h(0) = 0)


def _series(rows: Sequence[Stratum]) -> _Series:
    rows = tuple(rows)
    differences = np.array([(x1 * n2 - x2 * n1) / (n1 * n2) for x1, n1, x2, n2 in rows])
    cmh = np.array([n1 * n2 / (n1 + n2) for _, n1, _, n2 in rows])
    edge = any(x1 + x2 in (0, n1 + n2) for x1, n1, x2, n2 in rows)
    return _Series(rows, differences, cmh, edge)


def _swapped(series: _Series) -> _Series:
    return _series([(x2, n2, x1, n1) for x1, n1, x2, n2 in series.rows])


def _weights_name(weights: object) -> str:
    if weights not in WEIGHTS:
        raise ValueError(f"weights must be one of {', '.join(WEIGHTS)}; got {weights!r}")
    return str(weights)


def _delta(delta: object) -> float:
    if isinstance(delta, bool) or not isinstance(delta, Real):
        raise ValueError(f"delta must be a number, got {delta!r}")  # noqa: TRY004 (the interface raises ValueError)
    value = float(delta)
    if not -1.0 < value < 1.0:
        raise ValueError(f"delta must lie strictly between -1 and 1, got {value!r}")
    return value


def _variances(series: _Series, delta: float) -> np.ndarray:
    """Ṽ_h(δ): the variance of d̂_h at the restricted estimates, times N_h/(N_h − 1)."""
    out = np.empty(len(series.rows))
    for i, (x1, n1, x2, n2) in enumerate(series.rows):
        t1, t2 = difference_mle(x1, n1, x2, n2, delta)
        total = n1 + n2
        out[i] = (t1 * (1.0 - t1) / n1 + t2 * (1.0 - t2) / n2) * total / (total - 1)
    return out


def _parts(series: _Series, weights: str, delta: float) -> tuple[float, float]:
    """(T, D) with Z = T/sqrt(D), each scaled by one positive factor (S and Z do not change).

    CMH: T = Σ w_h e_h, D = Σ w_h² Ṽ_h (w unnormalised). Inverse variance: with m = min Ṽ_h and
    r_h = m/Ṽ_h in (0, 1], T = Σ r_h e_h and D = m·Σ r_h, which is Σ e_h/Ṽ_h and Σ 1/Ṽ_h
    times m, without overflow. Where some Ṽ_h is 0 the inverse-variance form returns (0, 0)
    and the callers take the limit (module docstring).
    """
    e = series.differences - delta
    v = _variances(series, delta)
    if weights == "cmh":
        w = series.cmh
        return math.fsum(w * e), math.fsum(w * w * v)
    smallest = float(v.min())
    if smallest <= 0.0:
        return 0.0, 0.0
    r = smallest / v
    return math.fsum(r * e), smallest * math.fsum(r)


def _share(series: _Series, weights: str, delta: float) -> float:
    """S(δ) = Z/sqrt(1 + Z²), continuous on [−1, 1]; 0 where T and D are both 0 (its limit)."""
    if delta <= -1.0:
        return 1.0 if bool((series.differences > -1.0).any()) else 0.0
    if delta >= 1.0:
        return -1.0 if bool((series.differences < 1.0).any()) else 0.0
    t, d = _parts(series, weights, delta)
    denominator = math.sqrt(t * t + d)
    return 0.0 if denominator == 0.0 else t / denominator


def _brentq(f: Callable[[float], float], low: float, high: float) -> float:
    return float(
        brentq(f, low, high, xtol=1e-15, rtol=4 * np.finfo(float).eps, maxiter=500)
    )


def _cmh_estimate(series: _Series) -> float:
    """Σ w_h d̂_h with w_h ∝ n1h·n2h/N_h, from exact fractions (one stratum: exactly p̂1 − p̂2)."""
    numerator = sum(
        (Fraction(x1 * n2 - x2 * n1, n1 + n2) for x1, n1, x2, n2 in series.rows), Fraction(0)
    )
    weight = sum((Fraction(n1 * n2, n1 + n2) for _, n1, _, n2 in series.rows), Fraction(0))
    return float(numerator / weight)


def _estimate(series: _Series, weights: str) -> float:
    """The root of Z(δ) = 0 (for the inverse-variance weights, the sign-changing one).

    The root is searched in one orientation of the groups, the same for a series and its
    swap (the one whose sorted strata come first), so that swapping the groups negates the
    estimate exactly.
    """
    if weights == "cmh":
        return _cmh_estimate(series)
    swapped = _swapped(series)
    if sorted(swapped.rows) < sorted(series.rows):
        return -_root(swapped, weights)
    return _root(series, weights)


def _root(series: _Series, weights: str) -> float:
    first = float(series.differences[0])
    if bool((series.differences == first).all()):
        return first  # every term d̂_h − δ is 0 there, whatever the weights
    low, high = -1.0, 1.0  # S(−1) = 1 and S(1) = −1: not every d̂_h is −1, nor every one 1
    if series.edge:
        # Z(0) = 0 by the limit even where Z keeps its sign on both sides of 0; 0 is the
        # estimate only if Z changes sign there, otherwise the root is searched on one side
        left = _share(series, weights, -_NEAR_ZERO)
        right = _share(series, weights, _NEAR_ZERO)
        if left >= 0.0 >= right:
            return 0.0
        low, high = (_NEAR_ZERO, 1.0) if right > 0.0 else (-1.0, -_NEAR_ZERO)
    return _brentq(lambda delta: _share(series, weights, delta), low, high)


def _landmarks(series: _Series) -> np.ndarray:
    """0, every d̂_h, and every δ where a stratum's restricted estimate reaches 0 or 1.

    Near these a stratum with a zero cell has a small Ṽ_h (a kink of Ṽ_h, or 0 at δ = 0 for a
    stratum of no or only events), so the inverse-variance weights can make a separate piece
    of the set {|Z| <= z} there. With p̃1 = p̃2 + δ and t the free proportion on the boundary,
    the restricted estimate leaves the boundary where the derivative of the log-likelihood
    in p2 there is 0, a/t − b/(1 − t) = c, i.e. c·t² − (a + b + c)·t + a = 0:
    x2 = 0 (p̃2 = 0, t = δ): a = x1, b = n1 − x1, c = n2;
    x1 = 0 (p̃1 = 0, t = −δ): a = x2, b = n2 − x2, c = n1;
    x1 = n1 (p̃1 = 1, t = 1 − δ): a = x2, b = n2 − x2, c = −n1;
    x2 = n2 (p̃2 = 1, t = 1 + δ): a = x1, b = n1 − x1, c = −n2.
    """
    points = [0.0, *series.differences.tolist()]
    for x1, n1, x2, n2 in series.rows:
        cases = []
        if x2 == 0:
            cases.append((x1, n1 - x1, n2, lambda t: t))
        if x1 == 0:
            cases.append((x2, n2 - x2, n1, lambda t: -t))
        if x1 == n1:
            cases.append((x2, n2 - x2, -n1, lambda t: 1.0 - t))
        if x2 == n2:
            cases.append((x1, n1 - x1, -n2, lambda t: t - 1.0))
        for a, b, c, to_delta in cases:
            for root in np.roots([c, -(a + b + c), a]):
                if abs(root.imag) == 0.0 and 0.0 < root.real < 1.0:
                    points.append(float(to_delta(root.real)))
    return np.array(points)


def _lower(series: _Series, weights: str, estimate: float, share: float) -> float:
    """The lowest δ in [−1, estimate] with S(δ) <= share, i.e. Z(δ) <= z.

    S(−1) = 1 > share whenever estimate > −1, and S(estimate) = 0 < share. The grid finds the
    first point with S <= share; the point before it has S > share, so the bracket holds a
    sign change of S − share and brentq finds the crossing (S is continuous). Each d̂_h and 0
    are grid points too (module docstring).
    """
    if estimate <= -1.0:
        return -1.0
    extra = _landmarks(series)
    grid = np.union1d(np.linspace(-1.0, estimate, _GRID_STEPS + 1)[1:],
                      extra[(extra > -1.0) & (extra < estimate)])
    previous = -1.0
    for point in grid:
        value = _share(series, weights, float(point))
        if value <= share:
            if value == share:
                return float(point)
            return _brentq(lambda delta: _share(series, weights, delta) - share,
                           previous, float(point))
        previous = float(point)
    return estimate  # not reached: S(estimate) is 0


def _nan_estimate(method: str, level: float, note: str | None = None) -> Estimate:
    return Estimate("risk-difference", math.nan, math.nan, math.nan, method, level, note)


def _note(series: _Series, weights: str) -> str | None:
    several = len(series.rows) > 1
    return _DEGENERATE_NOTE if weights != "cmh" and series.edge and several else None


def stratified_score_test(
    strata: Sequence[Stratum],
    *,
    weights: str = "cmh",
    delta: float = 0.0,
    alternative: str = "two-sided",
) -> TestResult:
    """Stratified Miettinen–Nurminen score test of a common risk difference p1 − p2 = delta.

    The statistic is Z(delta) of the module docstring, with the chosen ``weights`` (``cmh`` or
    ``miettinen-nurminen``, the latter evaluated at delta), referred to the standard normal
    distribution: ``greater`` is the alternative that the first group's risk exceeds the
    second's by more than delta. delta must lie strictly between −1 and 1. Without any
    informative stratum, or at delta = 0 when every informative stratum has no events or only
    events, the statistic and p-value are ``nan``; with the inverse-variance weights and some
    but not all strata so, the statistic at delta = 0 is its limit 0 (module docstring).

    References
    ----------
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    """
    series = _series(_strata(strata).rows)
    name = _weights_name(weights)
    value = _delta(delta)
    alt = _checks.alternative(alternative)
    method = "stratified-score"
    if not series.rows:
        return TestResult(method, math.nan, None, math.nan, alt)
    v = _variances(series, value)
    if bool((v <= 0.0).all()):
        return TestResult(method, math.nan, None, math.nan, alt)
    t, d = _parts(series, name, value)
    z = 0.0 if d <= 0.0 else t / math.sqrt(d)
    return TestResult(method, z, None, normal_p_value(z, alt), alt)


def stratified_score_interval(
    strata: Sequence[Stratum], level: float, *, weights: str = "cmh"
) -> Estimate:
    """Stratified Miettinen–Nurminen score interval for a common risk difference p1 − p2.

    The set {δ : |Z(δ)| <= z} and the root of Z(δ) = 0 (module docstring), with the chosen
    ``weights``. With one informative stratum it is the one-table Miettinen–Nurminen
    interval. Without any informative stratum every value is ``nan``.

    References
    ----------
    Miettinen O, Nurminen M. Comparative analysis of two rates. Statistics in Medicine
    1985;4:213–226.
    """
    series = _series(_strata(strata).rows)
    lvl = _checks.level(level)
    name = _weights_name(weights)
    method = "stratified-miettinen-nurminen"
    if not series.rows:
        return _nan_estimate(method, lvl)
    z = float(upper_quantile((1.0 - lvl) / 2.0))
    share = z / math.sqrt(1.0 + z * z)
    estimate = _estimate(series, name)
    low = _lower(series, name, estimate, share)
    high = -_lower(_swapped(series), name, -estimate, share)
    return Estimate("risk-difference", estimate, low, high, method, lvl, _note(series, name))


def _normalised_weights(series: _Series, weights: str, delta: float) -> np.ndarray:
    """The normalised weights of the informative strata at delta; ``nan`` where the inverse
    variance weights are undefined (some Ṽ_h(delta) = 0 and more than one stratum)."""
    if weights == "cmh":
        return series.cmh / math.fsum(series.cmh)
    if len(series.rows) == 1:
        return np.ones(1)
    v = _variances(series, delta)
    smallest = float(v.min())
    if smallest <= 0.0:
        return np.full(len(series.rows), math.nan)
    r = smallest / v
    return r / math.fsum(r)


def stratum_weights(
    strata: Sequence[Stratum], *, weights: str = "cmh", delta: float = 0.0
) -> tuple[float, ...]:
    """The normalised weight of each given stratum, in the order given.

    A stratum in which a group has no member gets 0; the others sum to 1. ``cmh`` weights do
    not depend on delta; ``miettinen-nurminen`` weights are 1/Ṽ_h(delta), normalised, and are
    all ``nan`` at a delta where some Ṽ_h is 0 (delta = 0 with a stratum of no events or only
    events), unless only one stratum is informative (its weight is then 1). Without any
    informative stratum every weight is 0.
    """
    given = list(strata) if isinstance(strata, Iterable) and not isinstance(
        strata, (str, bytes)) else strata
    data = _strata(given)
    name = _weights_name(weights)
    value = _delta(delta)
    series = _series(data.rows)
    informative = [stratum[1] > 0 and stratum[3] > 0 for stratum in given]
    inner = iter(_normalised_weights(series, name, value).tolist() if series.rows else [])
    return tuple(float(next(inner)) if keep else 0.0 for keep in informative)


def stratified_newcombe_interval(
    strata: Sequence[Stratum], level: float, *, weights: str = "cmh"
) -> Estimate:
    """Stratified Newcombe interval for a common risk difference (Yan and Su 2010).

    With the normalised weights w_h (``cmh``, or ``miettinen-nurminen`` at the stratified
    score estimate), p̂_i = Σ w_h x_ih/n_ih, stratified Wilson limits (l_i, u_i) from
    (p̂_i − p)² = z²·p(1 − p)·Σ w_h²/n_ih, and the interval
    d − sqrt((p̂1 − l1)² + (u2 − p̂2)²) to d + sqrt((u1 − p̂1)² + (p̂2 − l2)²), d = p̂1 − p̂2
    (module docstring; the method is recalled from memory). With one informative stratum it is
    Newcombe's hybrid score interval. Without any informative stratum every value is ``nan``.

    References
    ----------
    Yan X, Su XG. Stratified Wilson and Newcombe confidence intervals for multiple binomial
    proportions. Statistics in Biopharmaceutical Research 2010;2:329–335.
    Newcombe RG. Statistics in Medicine 1998;17:873–890 (method 10).
    """
    series = _series(_strata(strata).rows)
    lvl = _checks.level(level)
    name = _weights_name(weights)
    method = "stratified-newcombe"
    if not series.rows:
        return _nan_estimate(method, lvl)
    note = _note(series, name)
    at = 0.0 if name == "cmh" else _estimate(series, name)
    w = _normalised_weights(series, name, at)
    if bool(np.isnan(w).any()):
        return _nan_estimate(method, lvl, _UNDEFINED_NOTE)
    z = float(upper_quantile((1.0 - lvl) / 2.0))
    rows = np.array(series.rows, dtype=float)
    arms = []
    for events, totals in ((rows[:, 0], rows[:, 1]), (rows[:, 2], rows[:, 3])):
        if bool((events == 0).all()):
            p = 0.0
        elif bool((events == totals).all()):
            p = 1.0
        else:
            p = min(1.0, max(0.0, math.fsum(w * events / totals) / math.fsum(w)))
        size = 1.0 / math.fsum(w * w / totals)
        arms.append((p, *_wilson_limits(p * size, size, z)))
    (p1, l1, u1), (p2, l2, u2) = arms
    difference = _cmh_estimate(series) if name == "cmh" else p1 - p2
    low = difference - math.hypot(p1 - l1, u2 - p2)
    high = difference + math.hypot(u1 - p1, p2 - l2)
    return Estimate(
        "risk-difference", difference, max(-1.0, low), min(1.0, high), method, lvl, note
    )
