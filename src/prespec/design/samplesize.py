"""Closed-form power and sample size for comparisons of proportions (normal approximations).

Every function takes the level of one side, ``alpha`` (a one-sided test at alpha; a two-sided
test at level 2·alpha is the caller's alpha/2 per side), the assumed rates and the group sizes.
A power function returns the probability of rejecting in the direction of the assumed
difference and, with ``two_sided=True``, adds the far tail (a rejection in the other
direction), so that the power of a two-sided test under equal rates is its whole level, 2·alpha.
The sample sizes are the published formulas, which leave the far tail out; the power at the
returned sizes, with or without it, is at least the target.

Sizes are per group; allocation is the ratio ``ratio`` = n2 / n1 (or, for k groups, shares).
A sample size is the real-valued solution of the formula rounded up in each group.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from prespec.stats._lazy import brentq, scipy_stats
from prespec.stats._normal import lower_tail, upper_quantile
from prespec.stats.intervals import difference_mle
from prespec.stats.ratios import ratio_mle

#: Slack when rounding a real-valued sample size up, so that 435.0000000001 stays 435.
ROUND_SLACK = 1e-9


@dataclass(frozen=True)
class Size:
    """Sample sizes per group (in the order given), the power they reach, and the real-valued
    solution for the first group (None when the size was found by a search)."""

    n: tuple[int, ...]
    power: float
    solution: float | None


def _z(alpha: float) -> float:
    return float(upper_quantile(alpha))


def _check(alpha: float, power: float | None = None) -> None:
    if not 0.0 < alpha < 0.5:
        raise ValueError(f"the level of one side must be in (0, 0.5), got {alpha!r}")
    if power is not None and not 0.0 < power < 1.0:
        raise ValueError(f"power must be in (0, 1), got {power!r}")


def _up(x: float) -> int:
    return max(1, math.ceil(x - ROUND_SLACK))


def _tails(effect: float, threshold: float, sd: float, two_sided: bool) -> float:
    """Φ((effect − threshold)/sd), plus the far tail Φ((−effect − threshold)/sd) if two-sided
    (effect >= 0: the statistic's numerator at the assumed rates, on the side they lie)."""
    near = float(lower_tail((effect - threshold) / sd))
    if not two_sided:
        return near
    return near + float(lower_tail((-effect - threshold) / sd))


def _rate(name: str, p: float) -> float:
    if not 0.0 < p < 1.0:
        raise ValueError(f"{name} must be in (0, 1), got {p!r}")
    return float(p)


# --- two proportions, superiority -----------------------------------------------------------

def two_proportion_power(p1: float, p2: float, n1: float, n2: float, alpha: float, *,
                         continuity: bool = False, two_sided: bool = False) -> float:
    """Power of the two-proportion z test (≡ Pearson's 2×2 X²) at level ``alpha`` per side.

    Φ((|p1 − p2| − c − z_α·sqrt(p̄q̄(1/n1 + 1/n2))) / sqrt(p1q1/n1 + p2q2/n2)), with p̄ the
    size-weighted mean rate (the pooled variance under the null, the unpooled one under the
    alternative) and c = (1/n1 + 1/n2)/2 with the continuity correction, 0 without; with
    ``two_sided`` plus the far tail Φ((−|p1 − p2| − c − z_α·sd0) / sd1).

    References
    ----------
    Fleiss JL, Levin B, Paik MC. Statistical Methods for Rates and Proportions, 3rd ed. Wiley,
    2003, §4.2 (equations 4.14 and 4.19).
    Casagrande JT, Pike MC, Smith PG. An improved approximate formula for calculating sample
    sizes for comparing two binomial distributions. Biometrics 1978;34:483–486.
    """
    _check(alpha)
    p1, p2 = _rate("p1", p1), _rate("p2", p2)
    pooled = (n1 * p1 + n2 * p2) / (n1 + n2)
    null_sd = math.sqrt(pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2))
    alt_sd = math.sqrt(p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    correction = 0.5 * (1.0 / n1 + 1.0 / n2) if continuity else 0.0
    return _tails(abs(p1 - p2), correction + _z(alpha) * null_sd, alt_sd, two_sided)


def two_proportion_n(p1: float, p2: float, alpha: float, power: float, *, ratio: float = 1.0,
                     continuity: bool = False, two_sided: bool = False) -> Size:
    """Sizes (n1, n2 = ratio·n1) for :func:`two_proportion_power` to reach ``power``.

    n1' = [z_α·sqrt((r + 1)p̄q̄) + z_β·sqrt(r·p1q1 + p2q2)]² / (r·(p1 − p2)²), p̄ = (p1 + r·p2)/
    (r + 1); with the continuity correction n1 = n1'/4·[1 + sqrt(1 + 2(r + 1)/(r·n1'·|p1 −
    p2|))]², the exact solution of the corrected power equation. Raises ValueError when
    p1 = p2 (no difference to detect).

    References
    ----------
    Fleiss JL, Levin B, Paik MC. Statistical Methods for Rates and Proportions, 3rd ed. Wiley,
    2003, §4.2 (equations 4.19 and 4.20).
    """
    _check(alpha, power)
    p1, p2 = _rate("p1", p1), _rate("p2", p2)
    if p1 == p2:
        raise ValueError("the assumed rates are equal: there is no difference to detect")
    r = float(ratio)
    pooled = (p1 + r * p2) / (r + 1.0)
    root = (_z(alpha) * math.sqrt((r + 1.0) * pooled * (1.0 - pooled))
            + _z(1.0 - power) * math.sqrt(r * p1 * (1.0 - p1) + p2 * (1.0 - p2)))
    delta = abs(p1 - p2)
    n = root * root / (r * delta * delta)
    if continuity:
        n = n / 4.0 * (1.0 + math.sqrt(1.0 + 2.0 * (r + 1.0) / (r * n * delta))) ** 2
    n1, n2 = _up(n), _up(r * n)
    return Size((n1, n2), two_proportion_power(p1, p2, n1, n2, alpha, continuity=continuity,
                                               two_sided=two_sided), n)


# --- margins: non-inferiority and equivalence -----------------------------------------------

def _margin_parts(p1: float, p2: float, n1: float, n2: float, margin: float, measure: str,
                  pooled_null: bool) -> tuple[float, float, float]:
    """(effect, null sd, alternative sd) of the test of p1 − p2 = δ0 or p1/p2 = φ0.

    The effect is the statistic's numerator at the assumed rates, positive when they lie on the
    side of ``greater``; the null sd uses the restricted maximum likelihood rates (their limit
    at the assumed rates) for the score test, the assumed rates for the Wald test.
    """
    p1, p2 = _rate("p1", p1), _rate("p2", p2)
    theta = n2 / n1
    if measure == "risk-difference":
        effect = p1 - p2 - margin
        alt_var = p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2
        if pooled_null:
            t1, t2 = difference_mle(p1, 1.0, theta * p2, theta, margin)  # type: ignore[arg-type]
            null_var = t1 * (1 - t1) / n1 + t2 * (1 - t2) / n2
        else:
            null_var = alt_var
    elif measure == "risk-ratio":
        if pooled_null:
            effect = p1 - margin * p2
            alt_var = p1 * (1 - p1) / n1 + margin * margin * p2 * (1 - p2) / n2
            t1, t2 = ratio_mle(p1, 1.0, theta * p2, theta, margin)  # type: ignore[arg-type]
            null_var = t1 * (1 - t1) / n1 + margin * margin * t2 * (1 - t2) / n2
        else:  # the Wald test on the log scale
            effect = math.log(p1 / p2) - math.log(margin)
            alt_var = (1 - p1) / (n1 * p1) + (1 - p2) / (n2 * p2)
            null_var = alt_var
    else:
        raise ValueError(f"margins are on risk-difference or risk-ratio, got {measure!r}")
    return effect, math.sqrt(max(0.0, null_var)), math.sqrt(alt_var)


def margin_power(p1: float, p2: float, n1: float, n2: float, alpha: float, *, margin: float,
                 measure: str, alternative: str, score: bool = True) -> float:
    """Power of the one-sided test of p1 − p2 = margin (or p1/p2 = margin) at level alpha.

    ``score=True``: the Farrington–Manning score test, Φ((e − z_α·σ0)/σ1) with σ0 from the
    rates that maximise the likelihood under the null at the assumed rates and σ1 from the
    assumed rates; ``score=False``: the Wald test with the unpooled variance (σ0 = σ1), on the
    log scale for the ratio. ``greater`` asks for p1 − p2 > margin (p1/p2 > margin), ``less``
    the reverse; e is the assumed effect on that side.

    References
    ----------
    Farrington CP, Manning G. Test statistics and sample size formulae for comparative binomial
    trials with null hypothesis of non-zero risk difference or non-unity relative risk.
    Statistics in Medicine 1990;9:1447–1454 (sections 2 and 3).
    Blackwelder WC. "Proving the null hypothesis" in clinical trials. Controlled Clinical
    Trials 1982;3:345–353.
    """
    _check(alpha)
    effect, null_sd, alt_sd = _margin_parts(p1, p2, n1, n2, margin, measure, score)
    if alternative == "less":
        effect = -effect
    elif alternative != "greater":
        raise ValueError(f"a margin test is one-sided (greater or less), got {alternative!r}")
    return float(lower_tail((effect - _z(alpha) * null_sd) / alt_sd))


def margin_n(p1: float, p2: float, alpha: float, power: float, *, margin: float, measure: str,
             alternative: str, ratio: float = 1.0, score: bool = True) -> Size:
    """Sizes (n1, ratio·n1) for :func:`margin_power` to reach ``power``.

    n1 = (z_α·s0 + z_β·s1)² / e², s0 and s1 the null and alternative standard deviations for
    n1 = 1 (Farrington and Manning 1990, equation 6). Raises ValueError when the assumed rates
    are not on the side of the alternative (no size reaches any power above alpha).
    """
    _check(alpha, power)
    effect, null_sd, alt_sd = _margin_parts(p1, p2, 1.0, float(ratio), margin, measure, score)
    if alternative == "less":
        effect = -effect
    if effect <= 0.0:
        raise ValueError("the assumed rates are not on the side of the alternative beyond the "
                         "margin: no sample size reaches the power")
    n = ((_z(alpha) * null_sd + _z(1.0 - power) * alt_sd) / effect) ** 2
    n1, n2 = _up(n), _up(ratio * n)
    got = margin_power(p1, p2, n1, n2, alpha, margin=margin, measure=measure,
                       alternative=alternative, score=score)
    return Size((n1, n2), got, n)


def equivalence_power(p1: float, p2: float, n1: float, n2: float, alpha: float, *,
                      low: float, high: float, measure: str, score: bool = True) -> float:
    """Power of two one-sided tests at level alpha each for low < p1 − p2 (or p1/p2) < high.

    The normal approximation P(both reject) ≈ P(lower rejects) + P(upper rejects) − 1 (at
    least 0), each one-sided power as in :func:`margin_power`.

    References
    ----------
    Schuirmann DJ. A comparison of the two one-sided tests procedure and the power approach
    for assessing the equivalence of average bioavailability. Journal of Pharmacokinetics and
    Biopharmaceutics 1987;15:657–680.
    Farrington CP, Manning G. Statistics in Medicine 1990;9:1447–1454.
    """
    lower = margin_power(p1, p2, n1, n2, alpha, margin=low, measure=measure,
                         alternative="greater", score=score)
    upper = margin_power(p1, p2, n1, n2, alpha, margin=high, measure=measure,
                         alternative="less", score=score)
    return max(0.0, lower + upper - 1.0)


def equivalence_n(p1: float, p2: float, alpha: float, power: float, *, low: float,
                  high: float, measure: str, ratio: float = 1.0, score: bool = True) -> Size:
    """The smallest n1 (n2 = ratio·n1, rounded up) for :func:`equivalence_power` to reach
    ``power``, by bisection (the approximate power rises with n). Raises ValueError when the
    assumed measure is not strictly inside (low, high)."""
    _check(alpha, power)
    value = p1 - p2 if measure == "risk-difference" else p1 / p2
    if not low < value < high:
        raise ValueError("the assumed rates are not inside the equivalence margins: no sample "
                         "size reaches the power")

    def reach(m: int) -> float:
        return equivalence_power(p1, p2, m, _up(ratio * m), alpha, low=low, high=high,
                                 measure=measure, score=score)

    m = _search_up(reach, power)
    return Size((m, _up(ratio * m)), reach(m), None)


def _search_up(reach: Callable[[int], float], power: float, limit: int = 10**9) -> int:
    """The smallest integer m >= 1 with reach(m) >= power, for a reach that rises with m."""
    high = 1
    while reach(high) < power:
        high *= 2
        if high > limit:
            raise ValueError("no sample size below a billion reaches the power")
    low = high // 2
    while high - low > 1:  # reach(low) < power <= reach(high), or low = 0
        mid = (low + high) // 2
        if reach(mid) >= power:
            high = mid
        else:
            low = mid
    return high


# --- one group against a fixed rate ---------------------------------------------------------

def one_proportion_power(p: float, p0: float, n: float, alpha: float, *,
                         two_sided: bool = False) -> float:
    """Power of the score z test of p = p0 at level alpha per side:
    Φ((|p − p0|·sqrt(n) − z_α·sqrt(p0q0)) / sqrt(pq)), plus the far tail
    Φ((−|p − p0|·sqrt(n) − z_α·sqrt(p0q0)) / sqrt(pq)) if ``two_sided``.

    References
    ----------
    Fleiss JL, Levin B, Paik MC. Statistical Methods for Rates and Proportions, 3rd ed. Wiley,
    2003, §2.5 (one sample: the null variance in the critical value, the alternative one in
    the power).
    """
    _check(alpha)
    p, p0 = _rate("p", p), _rate("p0", p0)
    return _tails(abs(p - p0) * math.sqrt(n), _z(alpha) * math.sqrt(p0 * (1 - p0)),
                  math.sqrt(p * (1 - p)), two_sided)


def one_proportion_n(p: float, p0: float, alpha: float, power: float, *,
                     two_sided: bool = False) -> Size:
    """n = [z_α·sqrt(p0q0) + z_β·sqrt(pq)]² / (p − p0)² for :func:`one_proportion_power`."""
    _check(alpha, power)
    p, p0 = _rate("p", p), _rate("p0", p0)
    if p == p0:
        raise ValueError("the assumed rate equals the null rate: there is no difference to detect")
    n = ((_z(alpha) * math.sqrt(p0 * (1 - p0)) + _z(1.0 - power) * math.sqrt(p * (1 - p)))
         / (p - p0)) ** 2
    m = _up(n)
    return Size((m,), one_proportion_power(p, p0, m, alpha, two_sided=two_sided), n)


# --- k groups -------------------------------------------------------------------------------

def _shares(sizes: Sequence[float]) -> list[float]:
    total = float(sum(sizes))
    return [s / total for s in sizes]


def _noncentrality_per_unit(rates: Sequence[float], shares: Sequence[float]) -> float:
    """Σ w_i (p_i − p̄)² / (p̄q̄), p̄ = Σ w_i p_i: the noncentrality per participant."""
    rates = [_rate(f"rates[{i}]", p) for i, p in enumerate(rates)]
    mean = sum(w * p for w, p in zip(shares, rates, strict=True))
    spread = sum(w * (p - mean) ** 2 for w, p in zip(shares, rates, strict=True))
    return spread / (mean * (1.0 - mean))


def k_group_power(rates: Sequence[float], sizes: Sequence[float], level: float) -> float:
    """Power of the chi-square test of equal proportions in k groups (k − 1 df) at ``level``.

    The statistic is approximately noncentral chi-square with k − 1 df and noncentrality
    λ = N·Σ w_i (p_i − p̄)²/(p̄q̄), w_i = n_i/N; power = P(χ²(k − 1, λ) > χ²_{1−level}(k − 1)).

    References
    ----------
    Lachin JM. Sample size determinations for r × c comparative trials. Biometrics
    1977;33:315–324.
    Cohen J. Statistical Power Analysis for the Behavioral Sciences, 2nd ed. Erlbaum, 1988,
    chapter 7 (w² = λ/N).
    """
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must be in (0, 1), got {level!r}")
    df = len(rates) - 1
    lam = float(sum(sizes)) * _noncentrality_per_unit(rates, _shares(sizes))
    stats = scipy_stats()
    return float(stats.ncx2.sf(stats.chi2.isf(level, df), df, lam))


def k_group_n(rates: Sequence[float], level: float, power: float,
              shares: Sequence[float] | None = None) -> Size:
    """Sizes n_i = ⌈N·w_i⌉ for :func:`k_group_power` to reach ``power``: N = λ*/(λ per
    participant), λ* the noncentrality at which the power equals the target (Lachin 1977)."""
    if not 0.0 < power < 1.0:
        raise ValueError(f"power must be in (0, 1), got {power!r}")
    k = len(rates)
    w = _shares(shares if shares is not None else [1.0] * k)
    unit = _noncentrality_per_unit(rates, w)
    if unit <= 0.0:
        raise ValueError("the assumed rates are equal: there is no difference to detect")
    df = k - 1
    stats = scipy_stats()
    crit = float(stats.chi2.isf(level, df))
    lam = brentq(lambda x: stats.ncx2.sf(crit, df, x) - power, 1e-9, 1e6, xtol=1e-12)
    total = lam / unit
    sizes = tuple(_up(total * wi) for wi in w)
    return Size(sizes, k_group_power(rates, sizes, level), total * w[0])


# --- trend ----------------------------------------------------------------------------------

def _trend_parts(rates: Sequence[float], sizes: Sequence[float], scores: Sequence[float]
                 ) -> tuple[float, float, float]:
    total = float(sum(sizes))
    rates = [_rate(f"rates[{i}]", p) for i, p in enumerate(rates)]
    mean_p = sum(n * p for n, p in zip(sizes, rates, strict=True)) / total
    mean_s = sum(n * s for n, s in zip(sizes, scores, strict=True)) / total
    centred = [s - mean_s for s in scores]
    effect = sum(n * c * p for n, c, p in zip(sizes, centred, rates, strict=True))
    null_var = mean_p * (1 - mean_p) * sum(n * c * c for n, c in zip(sizes, centred, strict=True))
    alt_var = sum(n * c * c * p * (1 - p) for n, c, p in zip(sizes, centred, rates, strict=True))
    return effect, math.sqrt(null_var), math.sqrt(alt_var)


def trend_power(rates: Sequence[float], sizes: Sequence[float], scores: Sequence[float],
                alpha: float, *, two_sided: bool = False) -> float:
    """Power of the Cochran–Armitage trend test at level alpha per side, in the direction of
    the assumed trend: Φ((|U| − z_α·sqrt(p̄q̄·S)) / sqrt(Σ n_i(s_i − s̄)²p_iq_i)), U = Σ n_i(s_i −
    s̄)p_i and S = Σ n_i(s_i − s̄)², plus the far tail Φ((−|U| − …)/…) if ``two_sided``. For two
    groups with scores (0, 1) it is the two-proportion power of :func:`two_proportion_power`.

    References
    ----------
    Nam JM. A simple approximation for calculating sample sizes for detecting linear trend in
    proportions. Biometrics 1987;43:701–705.
    """
    _check(alpha)
    effect, null_sd, alt_sd = _trend_parts(rates, sizes, scores)
    return _tails(abs(effect), _z(alpha) * null_sd, alt_sd, two_sided)


def trend_n(rates: Sequence[float], scores: Sequence[float], alpha: float, power: float,
            shares: Sequence[float] | None = None, *, two_sided: bool = False) -> Size:
    """Sizes n_i = ⌈N·w_i⌉ for :func:`trend_power` to reach ``power``: N = (z_α·sqrt(v0) +
    z_β·sqrt(v1))²/u², u, v0 and v1 the effect and variances per participant (Nam 1987)."""
    _check(alpha, power)
    k = len(rates)
    w = _shares(shares if shares is not None else [1.0] * k)
    effect, null_sd, alt_sd = _trend_parts(rates, w, scores)
    if abs(effect) <= 1e-15:
        raise ValueError("the assumed rates have no linear trend in the scores")
    total = ((_z(alpha) * null_sd + _z(1.0 - power) * alt_sd) / effect) ** 2
    sizes = tuple(_up(total * wi) for wi in w)
    return Size(sizes, trend_power(rates, sizes, scores, alpha, two_sided=two_sided),
                total * w[0])
