"""Reference checks of the Bayesian comparisons (prespec.stats.bayes) against things we did not
write: ``scipy.integrate.quad`` over ``scipy.stats.beta``, Monte Carlo draws from
``scipy.stats.beta.rvs``, ``scipy.stats.beta.sf/cdf/ppf``, the finite sum for Pr(p_a > p_b)
with integer Beta parameters (common practice), a published predictive-probability example
(from memory), plain loops of scipy calls and enumerations written here.

The one published example is Lee and Liu's single-arm predictive probability design; no
published two-group beta-binomial comparison with its numbers is recalled reliably enough to
be used, so the two-group values are checked against the library and the closed form only.
"""

from __future__ import annotations

import itertools
import math
import warnings
from fractions import Fraction

import numpy as np
import pytest
from scipy import integrate, stats

from prespec.stats.bayes import (
    difference_cdf,
    difference_pdf,
    operating_characteristics,
    operating_characteristics_single,
    posterior_difference,
    posterior_single,
    predictive_probability,
    predictive_probability_single,
    rule_probability,
    rule_region,
    rule_region_single,
)

# (x_a, n_a, x_b, n_b, prior_a, prior_b, margin): small to 5,000 per group, flat, Jeffreys and
# informative priors, priors with a, b < 1 where the posterior density is infinite at an end,
# and margins up to ±0.999.
CASES = [
    (12, 40, 5, 40, (1, 1), (1, 1), 0.0),
    (0, 10, 0, 10, (0.5, 0.5), (0.5, 0.5), 0.0),
    (3, 15, 14, 15, (0.5, 0.5), (0.5, 0.5), -0.5),
    (1, 3, 2, 3, (0.2, 0.3), (0.4, 0.25), 0.1),
    (0, 4, 4, 4, (0.3, 0.2), (0.2, 0.3), -0.9),
    (40, 60, 7, 300, (2, 8), (0.3, 0.7), 0.3),
    (150, 1000, 130, 1000, (30, 70), (30, 70), -0.05),
    (50, 200, 220, 5000, (1, 1), (0.5, 0.5), 0.02),
    (2500, 5000, 2400, 5000, (1, 1), (1, 1), 0.01),
    (2450, 5000, 2500, 5000, (1, 1), (1, 1), -0.01),
    (5000, 5000, 0, 5000, (0.5, 0.5), (0.5, 0.5), 0.999),
    (0, 5000, 5000, 5000, (1, 1), (1, 1), -0.999),
    (1000, 1000, 0, 1000, (1, 1), (1, 1), 0.99),
    # Beta(4094.05, 906.5) against Beta(47.05, 0.05): the second is narrower by its variance
    # but piled within an ulp of 1, so the first route's check sends it to the other
    (4094, 5000, 47, 47, (0.05, 0.5), (0.05, 0.05), 0.0),
]


def quad_greater(post_a: tuple[float, float], post_b: tuple[float, float], m: float) -> float:
    """Pr(p_a − p_b > m) = F_b(−m) + ∫ f_b(y) S_a(y + m) dy by scipy.integrate.quad.

    The range of y is split at its middle: the upper half is integrated in z = 1 − y, with
    z's own beta law, so that the mass a density infinite at 1 piles within an ulp of 1 is
    seen. Each half is cut at quantiles so that quad sees where the mass is (where a density is
    infinite at an end: each decade of tail probability, and pieces shrinking by decades
    towards the ends of the range, where the integrand then has an infinite slope).
    """
    lo, hi = max(0.0, -m), min(1.0, 1.0 - m)
    mid = (lo + hi) / 2
    singular = min(*post_a, *post_b) < 1
    decades = 10.0 ** -np.arange(1, 16) if singular else np.array([1e-3, 1e-12])
    tails = (*decades, 0.5, *(1 - decades))
    law_a, law_b = stats.beta(*post_a), stats.beta(*post_b)
    flip_a, flip_b = stats.beta(*post_a[::-1]), stats.beta(*post_b[::-1])  # of 1 − p

    def pieces(start: float, stop: float, cuts: set[float]) -> list[tuple[float, float]]:
        if singular:
            cuts = cuts | {start + d for d in decades}
        points = sorted({start, stop} | {c for c in cuts if start < c < stop})
        return list(itertools.pairwise(points))

    def integral(function: object, parts: list[tuple[float, float]]) -> float:
        def finite(t: float) -> float:
            value = function(t)  # type: ignore[operator]
            return value if math.isfinite(value) else 0.0  # an infinite density at one point
        with warnings.catch_warnings():  # quad's round-off notes at a 1e-14 target
            warnings.simplefilter("ignore", integrate.IntegrationWarning)
            return sum(integrate.quad(finite, left, right, epsabs=1e-14, epsrel=1e-12,
                                      limit=200)[0] for left, right in parts)

    lower = integral(lambda y: law_b.pdf(y) * law_a.sf(y + m), pieces(
        lo, mid, {float(law_b.ppf(p)) for p in tails} | {float(law_a.ppf(p)) - m for p in tails}))
    upper = integral(lambda z: flip_b.pdf(z) * flip_a.cdf(z - m), pieces(
        1 - hi, 1 - mid,
        {float(flip_b.ppf(p)) for p in tails} | {float(flip_a.ppf(p)) + m for p in tails}))
    return (float(law_b.cdf(lo)) if m < 0 else 0.0) + lower + upper


def posteriors(case: tuple) -> tuple[tuple[float, float], tuple[float, float]]:
    x_a, n_a, x_b, n_b, prior_a, prior_b, _ = case
    return ((prior_a[0] + x_a, prior_a[1] + (n_a - x_a)),
            (prior_b[0] + x_b, prior_b[1] + (n_b - x_b)))


@pytest.mark.parametrize("case", CASES)
def test_the_probability_equals_quad_over_scipy_beta(case: tuple) -> None:
    x_a, n_a, x_b, n_b, prior_a, prior_b, m = case
    post_a, post_b = posteriors(case)
    want = quad_greater(post_a, post_b, m)  # scipy.integrate.quad over scipy.stats.beta
    greater = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, margin=m)
    less = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, margin=m,
                                alternative="less")
    assert abs(greater.probability - want) <= 1e-9, (greater.probability, want)
    assert abs(less.probability - (1.0 - want)) <= 1e-9, (less.probability, 1 - want)
    assert greater.posteriors == (post_a, post_b)


def test_a_prior_piling_mass_within_an_ulp_of_zero_equals_quad() -> None:
    """Beta(0.05, 3.3) against Beta(0.2, 3.05): most of the first's mass lies below 1e-16,
    where a quadrature in y sees nothing; quad is given points on a logarithmic scale."""
    post_a, post_b = (0.05, 3.3), (0.2, 3.05)
    law_a, law_b = stats.beta(*post_a), stats.beta(*post_b)
    points = np.concatenate([[0.0], np.logspace(-300, 0, 301)])
    want = sum(integrate.quad(lambda y: law_b.pdf(y) * law_a.sf(y), lo, hi, epsabs=1e-15,
                              epsrel=1e-13, limit=200)[0]
               for lo, hi in itertools.pairwise(points))  # scipy.integrate.quad
    got = posterior_difference(0, 3, 0, 3, (0.05, 0.3), (0.2, 0.05)).probability
    assert abs(got - want) <= 1e-9, (got, want)


@pytest.mark.parametrize("case", [
    (12, 40, 5, 40, (1, 1), (1, 1), 0.0), (0, 2, 1, 1, (0.7, 0.3), (0.4, 0.9), 0.2),
    (60, 100, 49, 100, (1, 1), (1, 1), -0.05)])
def test_the_probability_agrees_with_monte_carlo_draws(case: tuple) -> None:
    x_a, n_a, x_b, n_b, prior_a, prior_b, m = case
    post_a, post_b = posteriors(case)
    draws = 2_000_000
    rng = np.random.default_rng(20261203)
    pa = stats.beta.rvs(*post_a, size=draws, random_state=rng)  # scipy.stats.beta.rvs
    pb = stats.beta.rvs(*post_b, size=draws, random_state=rng)
    estimate = float(np.mean(pa - pb > m))
    se = math.sqrt(estimate * (1 - estimate) / draws)
    got = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, margin=m).probability
    assert abs(got - estimate) <= 5 * se, (got, estimate, se)


def exact_probability_greater(a1: int, b1: int, a2: int, b2: int) -> Fraction:
    """Pr(X > Y), X ~ Beta(a1, b1), Y ~ Beta(a2, b2), integer parameters, as an exact fraction:
    Σ_{i<a1} B(a2 + i, b1 + b2) / ((b1 + i) B(1 + i, b1) B(a2, b2)).  # common practice
    """
    def beta(a: int, b: int) -> Fraction:
        return Fraction(math.factorial(a - 1) * math.factorial(b - 1), math.factorial(a + b - 1))
    return sum((beta(a2 + i, b1 + b2) / ((b1 + i) * beta(1 + i, b1) * beta(a2, b2))
                for i in range(a1)), Fraction(0))


@pytest.mark.parametrize(("x_a", "n_a", "x_b", "n_b", "prior_a", "prior_b"), [
    (7, 20, 3, 20, (1, 1), (1, 1)), (0, 1, 1, 1, (1, 1), (1, 1)), (30, 60, 30, 60, (2, 3), (2, 3)),
    (18, 50, 25, 45, (3, 7), (1, 1)), (59, 60, 1, 60, (1, 1), (1, 1)),
])
def test_the_probability_equals_the_finite_sum_for_integer_parameters(
        x_a: int, n_a: int, x_b: int, n_b: int, prior_a: tuple, prior_b: tuple) -> None:
    post_a = (prior_a[0] + x_a, prior_a[1] + (n_a - x_a))
    post_b = (prior_b[0] + x_b, prior_b[1] + (n_b - x_b))
    want = float(exact_probability_greater(*post_a, *post_b))
    got = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b).probability
    assert abs(got - want) <= 1e-12, (got, want)


def test_identical_posteriors_give_one_half() -> None:
    # common practice: two identical, independent posteriors give Pr(p_a > p_b) = 1/2 exactly
    for x, n, prior in ((0, 10, (0.5, 0.5)), (17, 40, (1, 1)), (2500, 5000, (2, 2))):
        got = posterior_difference(x, n, x, n, prior, prior).probability
        assert abs(got - 0.5) <= 1e-13, (x, n, got)


def bisect(function: object, target: float, lo: float, hi: float) -> float:
    """The root of function(d) = target in [lo, hi] by plain bisection (function increasing),
    to (hi − lo) / 2**26."""
    assert function(lo) < target < function(hi)  # type: ignore[operator]
    for _ in range(26):
        mid = (lo + hi) / 2
        if function(mid) < target:  # type: ignore[operator]
            lo = mid
        else:
            hi = mid
    return (lo + hi) / 2


@pytest.mark.parametrize("case", [CASES[0], CASES[5], CASES[6]])
def test_the_credible_interval_solves_the_quad_distribution_function(case: tuple) -> None:
    x_a, n_a, x_b, n_b, prior_a, prior_b, _ = case
    post_a, post_b = posteriors(case)

    def cdf(d: float) -> float:  # Pr(p_a − p_b <= d) by scipy.integrate.quad
        return 1.0 - quad_greater(post_a, post_b, d) if -1 < d < 1 else float(d >= 1)

    got = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, credible=0.9)
    assert got.credible == 0.9
    # the root searched within 0.01 of the interval's ends (the bracket checked first)
    assert abs(got.low - bisect(cdf, 0.05, got.low - 0.01, got.low + 0.01)) <= 1e-9
    assert abs(got.high - bisect(cdf, 0.95, got.high - 0.01, got.high + 0.01)) <= 1e-9
    a_mean = post_a[0] / sum(post_a)
    b_mean = post_b[0] / sum(post_b)
    assert got.mean == pytest.approx(a_mean - b_mean, abs=1e-15)  # E p_a − E p_b
    assert abs(difference_cdf(got.low, post_a, post_b) - 0.05) <= 1e-11


@pytest.mark.parametrize(("x", "n", "prior", "rate"), [
    (7, 20, (1, 1), 0.2), (0, 30, (0.5, 0.5), 0.05), (30, 30, (0.5, 0.5), 0.95),
    (412, 5000, (2, 18), 0.08), (3, 9, (0.2, 0.4), 0.5)])
def test_one_group_equals_scipy_beta(x: int, n: int, prior: tuple, rate: float) -> None:
    law = stats.beta(prior[0] + x, prior[1] + (n - x))
    greater = posterior_single(x, n, prior, null_rate=rate, credible=0.8)
    less = posterior_single(x, n, prior, null_rate=rate, alternative="less", credible=0.8)
    assert greater.probability == pytest.approx(law.sf(rate), rel=1e-12, abs=1e-300)  # beta.sf
    assert less.probability == pytest.approx(law.cdf(rate), rel=1e-12, abs=1e-300)  # beta.cdf
    assert greater.mean == pytest.approx(law.mean(), rel=1e-14)
    assert greater.low == pytest.approx(law.ppf(0.1), rel=1e-10)  # scipy.stats.beta.ppf
    assert greater.high == pytest.approx(law.ppf(0.9), rel=1e-10)


def test_lee_liu_predictive_probability_example() -> None:
    # Lee JJ, Liu DD. A predictive probability design for phase II cancer clinical trials.
    # Clinical Trials 2008;5:93-106, the worked example and Table 1: prior Beta(0.6, 0.4),
    # p0 = 0.6, at most 40 patients, success when Pr(p > 0.6 | data) > 0.90 at the end. After
    # 16 responses in 23 patients the trial succeeds with 12 or more responses among the
    # 17 still to come (Pr(p > 0.6 | 28 of 40) = 0.9089), and the predictive probability of
    # success is 0.5656.  # from memory
    region = rule_region_single(40, (0.6, 0.4), null_rate=0.6, alternative="greater",
                                threshold=0.9)
    assert int(np.argmax(region)) == 16 + 12 and region[28:].all() and not region[:28].any()
    assert posterior_single(28, 40, (0.6, 0.4), null_rate=0.6).probability == \
        pytest.approx(0.9089, abs=5e-5)
    got = predictive_probability_single(16, 23, 40, (0.6, 0.4), null_rate=0.6,
                                        alternative="greater", threshold=0.9)
    assert got == pytest.approx(0.5656, abs=5e-5)


# --- the rule region, operating characteristics and predictive probabilities ---------------------


def scipy_rule(x_a: int, n_a: int, x_b: int, n_b: int, prior_a: tuple, prior_b: tuple,
               m: float, alternative: str, threshold: float) -> bool:
    post_a = (prior_a[0] + x_a, prior_a[1] + (n_a - x_a))
    post_b = (prior_b[0] + x_b, prior_b[1] + (n_b - x_b))
    p = quad_greater(post_a, post_b, m)
    return (p if alternative == "greater" else 1.0 - p) >= threshold


@pytest.mark.parametrize(("n_a", "n_b", "prior_a", "prior_b", "m", "alternative", "threshold"), [
    (9, 7, (1, 1), (1, 1), 0.0, "greater", 0.95),
    (6, 5, (0.5, 0.5), (2, 6), -0.1, "less", 0.9),
])
def test_exact_operating_characteristics_equal_a_double_loop_of_scipy_calls(
        n_a: int, n_b: int, prior_a: tuple, prior_b: tuple, m: float, alternative: str,
        threshold: float) -> None:
    rule = {(i, j): scipy_rule(i, n_a, j, n_b, prior_a, prior_b, m, alternative, threshold)
            for i in range(n_a + 1) for j in range(n_b + 1)}
    region = rule_region(n_a, n_b, prior_a, prior_b, margin=m, alternative=alternative,
                         threshold=threshold)
    assert all(region[i, j] == met for (i, j), met in rule.items())
    oc = operating_characteristics(n_a, n_b, prior_a, prior_b, margin=m,
                                   alternative=alternative, threshold=threshold, grid=6,
                                   assumed=(0.7, 0.3))
    points = [(b, a) for b, a, _ in oc.curve] + [(0.3, 0.7)]
    want = []
    for rate_b, rate_a in points:  # scipy.stats.binom.pmf, one cell at a time
        want.append(sum(stats.binom.pmf(i, n_a, rate_a) * stats.binom.pmf(j, n_b, rate_b)
                        for (i, j), met in rule.items() if met))
    got = [p for _, _, p in oc.curve] + [oc.power]
    assert np.allclose(got, want, rtol=1e-12, atol=1e-15)
    assert [round(b, 12) for b, _ in points[:-1]] == \
        [round(v, 12) for v in np.linspace(max(0, -m), min(1, 1 - m), 6)]
    assert oc.type_one_error == pytest.approx(max(want[:-1]), rel=1e-12)


def test_exact_operating_characteristics_agree_with_simulated_trials() -> None:
    n_a, n_b, m = 150, 120, 0.0
    region = rule_region(n_a, n_b, (1, 1), (1, 1), margin=m, alternative="greater",
                         threshold=0.975)
    rng = np.random.default_rng(7)
    trials = 400_000
    for rate_a, rate_b in ((0.3, 0.3), (0.45, 0.3), (0.12, 0.1)):
        got = float(rule_probability(region, n_a, n_b, [rate_a], [rate_b])[0])
        x_a = rng.binomial(n_a, rate_a, trials)  # numpy's binomial draws
        x_b = rng.binomial(n_b, rate_b, trials)
        share = float(region[x_a, x_b].mean())
        se = math.sqrt(max(share * (1 - share), 1e-4) / trials)
        assert abs(got - share) <= 4.5 * se, (rate_a, rate_b, got, share, se)


def test_one_group_operating_characteristics_equal_a_loop_of_scipy_calls() -> None:
    n, prior, rate = 25, (0.5, 0.5), 0.2
    oc = operating_characteristics_single(n, prior, null_rate=rate, alternative="greater",
                                          threshold=0.95, assumed=0.45, grid=5)
    met = [x for x in range(n + 1)
           if stats.beta.sf(rate, prior[0] + x, prior[1] + (n - x)) >= 0.95]
    assert met == list(range(met[0], n + 1))

    def law(p: float) -> float:  # scipy.stats.binom.pmf over the outcomes meeting the rule
        return sum(stats.binom.pmf(x, n, p) for x in met)

    assert oc.type_one_error == pytest.approx(law(rate), rel=1e-12)
    assert oc.power == pytest.approx(law(0.45), rel=1e-12)
    assert [p for _, _, p in oc.curve] == pytest.approx([law(p) for p in np.linspace(0, 1, 5)],
                                                        rel=1e-12, abs=1e-15)


def beta_binomial(y: int, m: int, a: float, b: float) -> float:
    """C(m, y) B(a + y, b + m − y) / B(a, b), from math.comb and math.lgamma."""
    def log_beta(p: float, q: float) -> float:
        return math.lgamma(p) + math.lgamma(q) - math.lgamma(p + q)
    return math.comb(m, y) * math.exp(log_beta(a + y, b + m - y) - log_beta(a, b))


def test_the_predictive_probability_equals_an_enumeration() -> None:
    x_a, n_a, x_b, n_b, final_a, final_b = 6, 12, 2, 10, 18, 16
    prior_a, prior_b, m, threshold = (1, 1), (0.5, 0.5), 0.05, 0.9
    got = predictive_probability(x_a, n_a, x_b, n_b, final_a, final_b, prior_a, prior_b,
                                 margin=m, alternative="greater", threshold=threshold)
    want = 0.0
    for y_a in range(final_a - n_a + 1):
        for y_b in range(final_b - n_b + 1):
            weight = (beta_binomial(y_a, final_a - n_a, prior_a[0] + x_a,
                                    prior_a[1] + (n_a - x_a))
                      * beta_binomial(y_b, final_b - n_b, prior_b[0] + x_b,
                                      prior_b[1] + (n_b - x_b)))
            if scipy_rule(x_a + y_a, final_a, x_b + y_b, final_b, prior_a, prior_b, m,
                          "greater", threshold):
                want += weight
    assert 0.05 < want < 0.95
    assert got == pytest.approx(want, rel=1e-12)


def test_the_one_group_predictive_probability_equals_an_enumeration() -> None:
    x, n, final, prior, rate = 4, 15, 35, (0.5, 0.5), 0.3
    got = predictive_probability_single(x, n, final, prior, null_rate=rate, alternative="less",
                                        threshold=0.8)
    want = sum(beta_binomial(y, final - n, prior[0] + x, prior[1] + (n - x))
               for y in range(final - n + 1)
               if stats.beta.cdf(rate, prior[0] + x + y, prior[1] + (final - x - y)) >= 0.8)
    assert 0.05 < want < 0.95
    assert got == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize(("post_a", "post_b", "d"), [
    ((13, 29), (6, 36), 0.1), ((0.7, 2.3), (1.4, 0.9), -0.3), ((61, 41), (50, 52), 0.02),
    ((2500, 2500), (2400, 2600), 0.03)])
def test_the_density_of_the_difference_equals_quad(post_a: tuple, post_b: tuple,
                                                   d: float) -> None:
    law_a, law_b = stats.beta(*post_a), stats.beta(*post_b)
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    points = [float(p) for p in law_b.ppf([1e-6, 0.5, 1 - 1e-6]) if lo < p < hi]
    want = integrate.quad(lambda y: law_a.pdf(y + d) * law_b.pdf(y), lo, hi, points=points,
                          epsabs=0, epsrel=1e-12, limit=200)[0]  # scipy.integrate.quad
    assert difference_pdf(d, post_a, post_b) == pytest.approx(want, rel=1e-9)
