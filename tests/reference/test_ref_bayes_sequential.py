"""Reference checks of the operating characteristics of a Bayesian rule with interim looks
(prespec.stats.bayes.sequential_*) against things we did not write: a brute-force enumeration
of every path of outcomes through the looks, each look decided by ``scipy.integrate.quad`` over
``scipy.stats.beta`` (the posterior probability) and by sums of ``scipy.stats.betabinom`` pmfs
(the predictive probability), each path weighted by ``scipy.stats.binom.pmf``; simulated trials
drawn with numpy; and the fixed-sample functions of the module (one look, no stopping).
"""

from __future__ import annotations

import itertools
import math
import warnings
from functools import cache

import numpy as np
import pytest
from scipy import integrate, stats

from prespec.stats.bayes import (
    operating_characteristics,
    operating_characteristics_single,
    posterior_difference,
    posterior_probabilities,
    posterior_single,
    predictive_probabilities,
    predictive_probability,
    predictive_probability_single,
    rule_probability,
    rule_region,
    sequential_operating_characteristics,
    sequential_operating_characteristics_single,
    sequential_rule_probability,
    sequential_rule_probability_single,
)

#: A decision of the brute force must not sit this close to its threshold (the module and the
#: brute force would then be free to fall on either side): the test says so if one does.
CLEAR = 1e-8


@cache  # the tests share outcomes (12 per group, flat priors): each integral is taken once
def quad_greater(post_a: tuple[float, float], post_b: tuple[float, float], m: float) -> float:
    """Pr(p_a − p_b > m) = F_b(−m) + ∫ f_b(y) S_a(y + m) dy by scipy.integrate.quad over
    scipy.stats.beta (the priors used here are >= 1, so no density is infinite)."""
    lo, hi = max(0.0, -m), min(1.0, 1.0 - m)
    law_a, law_b = stats.beta(*post_a), stats.beta(*post_b)
    points = [float(p) for p in law_b.ppf([1e-6, 0.5, 1 - 1e-6]) if lo < p < hi]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", integrate.IntegrationWarning)
        inside = integrate.quad(lambda y: law_b.pdf(y) * law_a.sf(y + m), lo, hi,
                                points=points or None, epsabs=1e-14, epsrel=1e-12,
                                limit=200)[0]
    return float(law_b.cdf(lo)) + inside


class BruteForce:
    """Every path of outcomes through the looks, for one or two groups.

    ``sizes``: one tuple of cumulative sizes per group; ``probability(x, n)`` the posterior
    probability of the rule's event after x events in n (tuples, one entry per group), by scipy.
    """

    def __init__(self, sizes: tuple[tuple[int, ...], ...], priors: tuple[tuple, ...],
                 probability: object, threshold: float, success: float | None,
                 futility: float | None) -> None:
        self.sizes, self.priors = sizes, priors
        self.probability = cache(probability)  # type: ignore[arg-type]
        self.threshold, self.success, self.futility = threshold, success, futility
        self.closest = 1.0  # the nearest any decided probability came to its threshold

    def reaches(self, value: float, level: float) -> bool:
        self.closest = min(self.closest, abs(value - level))
        return value >= level

    def stops(self, x: tuple[int, ...], n: tuple[int, ...]) -> bool:
        return self.success is not None and self.reaches(self.probability(x, n), self.success)

    def met(self, x: tuple[int, ...]) -> bool:
        final = tuple(group[-1] for group in self.sizes)
        return self.reaches(self.probability(x, final), self.threshold)

    @cache  # noqa: B019 (one instance per test)
    def predictive(self, x: tuple[int, ...], n: tuple[int, ...]) -> float:
        """Σ over the future events of each group of the product of scipy.stats.betabinom pmfs,
        where the final rule is met."""
        final = tuple(group[-1] for group in self.sizes)
        laws = [stats.betabinom(f - m, a + e, b + m - e)
                for f, m, e, (a, b) in zip(final, n, x, self.priors)]
        total = 0.0
        for future in itertools.product(*(range(f - m + 1) for f, m in zip(final, n))):
            if self.met(tuple(e + y for e, y in zip(x, future))):
                total += math.prod(float(law.pmf(y)) for law, y in zip(laws, future))
        return total

    def crosses(self, x: tuple[int, ...], n: tuple[int, ...]) -> bool:
        return self.futility is not None and not self.reaches(self.predictive(x, n),
                                                              self.futility)

    def run(self, rates: tuple[float, ...]) -> dict:
        """success, stop_for_success, futility and expected_size at one point of rates."""
        looks = list(zip(*self.sizes))
        steps = [tuple(n - b for n, b in zip(look, before))
                 for look, before in zip(looks, [(0,) * len(rates)] + looks[:-1])]
        pmfs = [[stats.binom.pmf(np.arange(d + 1), d, p) for d, p in zip(step, rates)]
                for step in steps]  # scipy.stats.binom.pmf of each increment
        out = {"success": 0.0, "stop": [0.0] * (len(looks) - 1),
               "futility": [0.0] * (len(looks) - 1), "size": [0.0] * len(rates)}
        every = itertools.product(*(itertools.product(*(range(d + 1) for d in step))
                                    for step in steps))
        for path in every:
            weight = math.prod(float(pmfs[k][g][i]) for k, increments in enumerate(path)
                               for g, i in enumerate(increments))
            x, crossed = (0,) * len(rates), False
            for k, (look, increments) in enumerate(zip(looks, path)):
                x = tuple(e + i for e, i in zip(x, increments))
                if k == len(looks) - 1:
                    out["success"] += weight * self.met(x)
                elif self.stops(x, look):
                    out["success"] += weight
                    out["stop"][k] += weight
                    break
                elif not crossed and self.crosses(x, look):
                    out["futility"][k] += weight
                    crossed = True
            for g in range(len(rates)):
                out["size"][g] += weight * look[g]
        return out


def two_group_brute(sizes_a: tuple, sizes_b: tuple, prior_a: tuple, prior_b: tuple, m: float,
                    alternative: str, threshold: float, success: float | None,
                    futility: float | None) -> BruteForce:
    def probability(x: tuple[int, int], n: tuple[int, int]) -> float:
        post_a = (prior_a[0] + x[0], prior_a[1] + n[0] - x[0])
        post_b = (prior_b[0] + x[1], prior_b[1] + n[1] - x[1])
        greater = quad_greater(post_a, post_b, m)  # scipy.integrate.quad over scipy.stats.beta
        return greater if alternative == "greater" else 1.0 - greater
    return BruteForce((sizes_a, sizes_b), (prior_a, prior_b), probability, threshold, success,
                      futility)


def single_brute(sizes: tuple, prior: tuple, rate: float, alternative: str, threshold: float,
                 success: float | None, futility: float | None) -> BruteForce:
    def probability(x: tuple[int], n: tuple[int]) -> float:
        law = stats.beta(prior[0] + x[0], prior[1] + n[0] - x[0])
        return float(law.sf(rate) if alternative == "greater" else law.cdf(rate))
    return BruteForce((sizes,), (prior,), probability, threshold, success, futility)


def assert_equal(got: object, want: dict, tolerance: float = 1e-10) -> None:
    assert abs(got.success - want["success"]) <= tolerance, (got.success, want["success"])
    assert np.allclose(got.stop_for_success, want["stop"], rtol=0, atol=tolerance)
    assert np.allclose(got.futility, want["futility"], rtol=0, atol=tolerance)
    assert np.allclose(got.expected_size, want["size"], rtol=1e-12, atol=0)


TWO_GROUP = [
    # sizes_a, sizes_b, prior_a, prior_b, margin, alternative, threshold, success, futility
    ((4, 8, 12), (4, 8, 12), (1, 1), (1, 1), 0.0, "greater", 0.95, 0.99, 0.2),
    ((3, 7), (5, 9), (2, 3), (1, 1), 0.1, "less", 0.9, 0.97, 0.3),
    # stopping for success below the final threshold: some outcomes of the interim look both
    # reach it and cross the futility bound (success is decided first)
    ((3, 7), (5, 9), (2, 3), (1, 1), 0.1, "less", 0.9, 0.85, 0.6),
    ((4, 6, 9), (3, 6, 8), (1.5, 4), (1, 2), -0.05, "greater", 0.8, 0.93, 0.4),
    # group a complete at the second look, group b still growing
    ((3, 5, 5), (2, 4, 6), (1, 1), (1, 1), 0.0, "greater", 0.9, 0.95, 0.3),
]
TWO_GROUP_RATES = [(0.2, 0.2), (0.5, 0.5), (0.6, 0.25), (0.15, 0.45), (0.35, 0.3)]


@pytest.mark.parametrize("design", TWO_GROUP)
def test_two_groups_equal_the_brute_force_enumeration(design: tuple) -> None:
    sizes_a, sizes_b, prior_a, prior_b, m, alternative, threshold, success, futility = design
    brute = two_group_brute(*design)
    got = sequential_rule_probability(
        sizes_a, sizes_b, prior_a, prior_b, margin=m, alternative=alternative,
        threshold=threshold, stop_for_success=success, stop_for_futility=futility,
        rates_a=[a for a, _ in TWO_GROUP_RATES], rates_b=[b for _, b in TWO_GROUP_RATES])
    stopped = crossed = 0.0
    for result, rates in zip(got, TWO_GROUP_RATES):
        want = brute.run(rates)
        assert_equal(result, want)
        stopped, crossed = stopped + sum(want["stop"]), crossed + sum(want["futility"])
    assert brute.closest > CLEAR, brute.closest
    assert stopped > 0.05 and crossed > 0.05  # both kinds of stop happen in these designs


ONE_GROUP = [
    # sizes, prior, null_rate, alternative, threshold, success, futility
    ((5, 10, 15, 20), (1, 1), 0.2, "greater", 0.95, 0.99, 0.1),
    ((6, 13, 19), (0.6, 0.4), 0.6, "less", 0.9, 0.95, 0.25),
    ((6, 13, 19), (0.6, 0.4), 0.6, "less", 0.9, 0.8, 0.6),  # stops below the threshold
    ((8, 12), (2, 5), 0.3, "greater", 0.975, 0.995, None),
]


@pytest.mark.parametrize("design", ONE_GROUP)
def test_one_group_equals_the_brute_force_enumeration(design: tuple) -> None:
    sizes, prior, rate, alternative, threshold, success, futility = design
    brute = single_brute(*design)
    rates = [0.1, 0.2, 0.35, 0.6, 0.9]
    got = sequential_rule_probability_single(
        sizes, prior, null_rate=rate, alternative=alternative, threshold=threshold,
        stop_for_success=success, stop_for_futility=futility, rates=rates)
    stopped = 0.0
    for result, p in zip(got, rates):
        want = brute.run((p,))
        assert_equal(result, want)
        assert len(result.expected_size) == 1
        stopped += sum(want["stop"])
    assert brute.closest > CLEAR, brute.closest
    assert stopped > 0.05


def test_two_groups_agree_with_simulated_trials() -> None:
    """Trials drawn with numpy's binomial draws, each look decided by the module's posterior
    and predictive probabilities of every outcome (``posterior_probabilities``,
    ``predictive_probabilities``: each outcome's own integral, not the bisection of the rule's
    region), a few of them checked against the scalar functions."""
    sizes_a, sizes_b = (40, 80, 120), (30, 60, 90)
    prior_a, prior_b, m, threshold, success, futility = (1, 1), (1, 1), 0.0, 0.975, 0.995, 0.15
    kw = {"margin": m, "alternative": "greater"}
    posterior = [posterior_probabilities(a, b, prior_a, prior_b, **kw)
                 for a, b in zip(sizes_a, sizes_b)]
    predictive = [predictive_probabilities(a, b, sizes_a[-1], sizes_b[-1], prior_a, prior_b,
                                           threshold=threshold, **kw)
                  for a, b in zip(sizes_a[:-1], sizes_b[:-1])]
    for x_a, x_b in ((13, 4), (20, 21)):  # the scalar functions agree with the arrays
        assert posterior[0][x_a, x_b] == pytest.approx(posterior_difference(
            x_a, 40, x_b, 30, prior_a, prior_b, margin=m).probability, abs=1e-14)
        assert predictive[0][x_a, x_b] == pytest.approx(predictive_probability(
            x_a, 40, x_b, 30, 120, 90, prior_a, prior_b, threshold=threshold, **kw), abs=1e-13)
    rng = np.random.default_rng(20261203)
    trials = 200_000
    rates = [(0.3, 0.3), (0.45, 0.3), (0.12, 0.08)]
    got = sequential_rule_probability(
        sizes_a, sizes_b, prior_a, prior_b, threshold=threshold, stop_for_success=success,
        stop_for_futility=futility, rates_a=[a for a, _ in rates],
        rates_b=[b for _, b in rates], **kw)
    for result, (rate_a, rate_b) in zip(got, rates):
        steps_a, steps_b = np.diff((0, *sizes_a)), np.diff((0, *sizes_b))
        x_a = np.cumsum(rng.binomial(steps_a, rate_a, (trials, 3)), axis=1)  # numpy's draws
        x_b = np.cumsum(rng.binomial(steps_b, rate_b, (trials, 3)), axis=1)
        going, open_ = np.ones(trials, bool), np.ones(trials, bool)
        stops, crossings = [], []
        for k in range(2):
            stop = going & (posterior[k][x_a[:, k], x_b[:, k]] >= success)
            cross = open_ & ~stop & (predictive[k][x_a[:, k], x_b[:, k]] < futility)
            stops.append(stop.mean())
            crossings.append(cross.mean())
            going &= ~stop
            open_ &= ~(stop | cross)
        final = going & (posterior[2][x_a[:, 2], x_b[:, 2]] >= threshold)
        shares = [final.mean() + sum(stops), *stops, *crossings]
        exact = [result.success, *result.stop_for_success, *result.futility]
        for share, value in zip(shares, exact):
            se = math.sqrt(max(share * (1 - share), 1e-4) / trials)
            assert abs(value - share) <= 4.5 * se, (rate_a, rate_b, value, share, se)
        size_a = sizes_a[0] * stops[0] + sizes_a[1] * stops[1] + sizes_a[2] * going.mean()
        assert abs(result.expected_size[0] - size_a) <= 4.5 * sizes_a[2] / math.sqrt(trials)
    assert got[1].stop_for_success[0] > 0.05 and got[0].futility[0] > 0.05


def test_one_group_agrees_with_simulated_trials() -> None:
    """Trials drawn with numpy, each look decided by the module's scalar functions
    (``posterior_single``, ``predictive_probability_single``) for each outcome reached."""
    sizes, prior, rate, threshold, success, futility = (25, 50, 80), (0.5, 0.5), 0.25, 0.95, \
        0.99, 0.1
    kw = {"null_rate": rate, "alternative": "greater"}

    @cache
    def probability(x: int, n: int) -> float:
        return posterior_single(x, n, prior, **kw).probability

    @cache
    def predictive(x: int, n: int) -> float:
        return predictive_probability_single(x, n, sizes[-1], prior, threshold=threshold, **kw)

    rng = np.random.default_rng(17)
    trials = 200_000
    true_rates = [0.25, 0.4]
    got = sequential_rule_probability_single(sizes, prior, threshold=threshold,
                                             stop_for_success=success,
                                             stop_for_futility=futility, rates=true_rates,
                                             **kw)
    for result, p in zip(got, true_rates):
        x = np.cumsum(rng.binomial(np.diff((0, *sizes)), p, (trials, 3)), axis=1)
        going, open_ = np.ones(trials, bool), np.ones(trials, bool)
        stops, crossings = [], []
        for k, n in enumerate(sizes[:-1]):
            seen = np.unique(x[:, k])
            reach = dict(zip(seen, (probability(int(v), n) >= success for v in seen)))
            low = dict(zip(seen, (predictive(int(v), n) < futility for v in seen)))
            stop = going & np.array([reach[v] for v in x[:, k]])
            cross = open_ & ~stop & np.array([low[v] for v in x[:, k]])
            stops.append(stop.mean())
            crossings.append(cross.mean())
            going &= ~stop
            open_ &= ~(stop | cross)
        seen = np.unique(x[:, 2])
        met = dict(zip(seen, (probability(int(v), sizes[-1]) >= threshold for v in seen)))
        final = going & np.array([met[v] for v in x[:, 2]])
        shares = [final.mean() + sum(stops), *stops, *crossings]
        exact = [result.success, *result.stop_for_success, *result.futility]
        for share, value in zip(shares, exact):
            se = math.sqrt(max(share * (1 - share), 1e-4) / trials)
            assert abs(value - share) <= 4.5 * se, (p, value, share, se)
    assert got[1].stop_for_success[0] > 0.05 and got[0].futility[1] > 0.05


def test_one_look_equals_the_fixed_sample_operating_characteristics_exactly() -> None:
    kw = {"margin": 0.05, "alternative": "less", "threshold": 0.9}
    want = operating_characteristics(37, 29, (1, 1), (2, 3), assumed=(0.2, 0.4), grid=15, **kw)
    got = sequential_operating_characteristics((37,), [29], (1, 1), (2, 3), assumed=(0.2, 0.4),
                                               grid=15, stop_for_success=0.99,
                                               stop_for_futility=0.2, **kw)
    assert got == want
    single = {"null_rate": 0.3, "alternative": "greater", "threshold": 0.95}
    want = operating_characteristics_single(44, (0.5, 0.5), assumed=0.5, grid=9, **single)
    got = sequential_operating_characteristics_single([44], (0.5, 0.5), assumed=0.5, grid=9,
                                                      stop_for_success=0.999,
                                                      stop_for_futility=None, **single)
    assert got == want
    (only,) = sequential_rule_probability([12], [12], (1, 1), (1, 1), margin=0.0,
                                          alternative="greater", threshold=0.95,
                                          stop_for_success=None, stop_for_futility=None,
                                          rates_a=[0.6], rates_b=[0.2])
    assert only.stop_for_success == () and only.futility == ()
    assert only.expected_size == (12.0, 12.0)


def test_no_stopping_equals_the_fixed_rule_at_the_final_sizes() -> None:
    kw = {"margin": -0.1, "alternative": "greater", "threshold": 0.975}
    rates_a, rates_b = [0.1, 0.3, 0.55, 0.8], [0.2, 0.3, 0.4, 0.75]
    got = sequential_rule_probability((20, 45, 70), (25, 40, 60), (1, 1), (0.5, 0.5),
                                      stop_for_success=None, stop_for_futility=None,
                                      rates_a=rates_a, rates_b=rates_b, **kw)
    region = rule_region(70, 60, (1, 1), (0.5, 0.5), **kw)
    want = rule_probability(region, 70, 60, rates_a, rates_b)
    assert np.allclose([r.success for r in got], want, rtol=1e-12, atol=1e-15)
    assert all(r.stop_for_success == (0.0, 0.0) and r.futility == (0.0, 0.0) for r in got)
    assert all(r.expected_size == (70.0, 60.0) for r in got)
    single = {"null_rate": 0.4, "alternative": "less", "threshold": 0.9}
    got_single = sequential_operating_characteristics_single(
        (10, 30, 31), (1, 1), stop_for_success=None, stop_for_futility=None, assumed=0.2,
        grid=7, **single)
    want_single = operating_characteristics_single(31, (1, 1), assumed=0.2, grid=7, **single)
    assert got_single.type_one_error == pytest.approx(want_single.type_one_error, abs=1e-15)
    assert got_single.power == pytest.approx(want_single.power, abs=1e-15)
    assert np.allclose(np.array(got_single.curve), np.array(want_single.curve), rtol=0,
                       atol=1e-15)


def test_futility_is_non_binding() -> None:
    """The bound changes only the futility probabilities: success, the stops for success and
    the expected sizes are those of the same rule without it."""
    common = {"margin": 0.0, "alternative": "greater", "threshold": 0.975,
              "stop_for_success": 0.99, "rates_a": [0.3, 0.5], "rates_b": [0.3, 0.3]}
    with_bound = sequential_rule_probability((30, 60), (30, 60), (1, 1), (1, 1),
                                             stop_for_futility=0.3, **common)
    without = sequential_rule_probability((30, 60), (30, 60), (1, 1), (1, 1),
                                          stop_for_futility=None, **common)
    for bound, free in zip(with_bound, without):
        assert (bound.success, bound.stop_for_success, bound.expected_size) == \
            (free.success, free.stop_for_success, free.expected_size)
        assert free.futility == (0.0,)
    assert with_bound[0].futility[0] > 0.3


def test_an_interim_success_look_never_lowers_success_and_raises_the_type_one_error() -> None:
    kw = {"margin": 0.0, "alternative": "greater", "threshold": 0.95}
    rates_a = np.linspace(0.05, 0.95, 10)
    for rates_b in (rates_a, rates_a[::-1], np.full(10, 0.4)):
        fixed = sequential_rule_probability((12,), (12,), (1, 1), (1, 1), stop_for_success=None,
                                            stop_for_futility=None, rates_a=rates_a,
                                            rates_b=rates_b, **kw)
        for looks, level in (((6, 12), 0.95), ((4, 8, 12), 0.99), ((11, 12), 0.9)):
            more = sequential_rule_probability(looks, looks, (1, 1), (1, 1),
                                               stop_for_success=level, stop_for_futility=0.5,
                                               rates_a=rates_a, rates_b=rates_b, **kw)
            assert all(m.success >= f.success - 1e-15 for m, f in zip(more, fixed))
    # The example: 12 per group, flat priors, success when Pr(p_a > p_b | data) >= 0.95 at the
    # end; an interim look at 4 per group stopping at the same 0.95 raises the type I error, and
    # its value is that of the brute force at the worst rate on the boundary.
    fixed = operating_characteristics(12, 12, (1, 1), (1, 1), grid=21, **kw)
    looked = sequential_operating_characteristics((4, 12), (4, 12), (1, 1), (1, 1), grid=21,
                                                  stop_for_success=0.95,
                                                  stop_for_futility=None, **kw)
    brute = two_group_brute((4, 12), (4, 12), (1, 1), (1, 1), 0.0, "greater", 0.95, 0.95, None)
    want = brute.run((looked.at_rate, looked.at_rate))["success"]
    assert brute.closest > CLEAR
    assert abs(looked.type_one_error - want) <= 1e-10, (looked.type_one_error, want)
    assert looked.type_one_error > fixed.type_one_error + 0.01, (looked, fixed)
    # the values when this example was written: the brute force's 0.0689, and the fixed rule's
    # 0.0527 (operating_characteristics, checked against scipy in test_ref_bayes.py)
    assert want == pytest.approx(0.06892133876979, abs=1e-12)
    assert fixed.type_one_error == pytest.approx(0.05271192381531, abs=1e-12)
    curve = [p for _, _, p in looked.curve]
    assert looked.type_one_error == max(curve)


def test_the_largest_null_probability_lies_on_the_boundary() -> None:
    """Success grows with p_a at fixed p_b (for "greater"), looks and all: inside the null
    (p_a < p_b + margin) it stays below its value on the boundary."""
    kw = {"margin": 0.1, "alternative": "greater", "threshold": 0.9, "stop_for_success": 0.97,
          "stop_for_futility": 0.1}
    oc = sequential_operating_characteristics((15, 30), (15, 30), (1, 1), (1, 1), grid=9,
                                              assumed=(0.6, 0.3), **kw)
    for rate_b, rate_a, on_boundary in oc.curve:
        inside = np.linspace(0.0, rate_a, 6)
        got = sequential_rule_probability((15, 30), (15, 30), (1, 1), (1, 1), rates_a=inside,
                                          rates_b=np.full(6, rate_b), **kw)
        values = [r.success for r in got]
        assert all(b >= a - 1e-15 for a, b in itertools.pairwise(values))
        assert values[-1] == pytest.approx(on_boundary, abs=1e-15)
    (power,) = sequential_rule_probability((15, 30), (15, 30), (1, 1), (1, 1), rates_a=[0.6],
                                           rates_b=[0.3], **kw)
    assert oc.power == power.success
    single = sequential_operating_characteristics_single(
        (10, 20), (1, 1), null_rate=0.3, alternative="less", threshold=0.9,
        stop_for_success=0.99, stop_for_futility=None, assumed=0.1, grid=5)
    rates = [0.3, 0.1, *np.linspace(0, 1, 5)]
    want = sequential_rule_probability_single(
        (10, 20), (1, 1), null_rate=0.3, alternative="less", threshold=0.9,
        stop_for_success=0.99, stop_for_futility=None, rates=rates)
    assert single.type_one_error == want[0].success and single.power == want[1].success
    assert [p for _, _, p in single.curve] == [r.success for r in want[2:]]
    assert single.at_rate == 0.3


TWO = {"prior_a": (1, 1), "prior_b": (1, 1), "margin": 0.0, "alternative": "greater",
       "threshold": 0.95, "stop_for_success": 0.99, "stop_for_futility": 0.1,
       "rates_a": [0.3], "rates_b": [0.3]}


@pytest.mark.parametrize(("sizes_a", "sizes_b", "changes", "message"), [
    ((10, 5), (10, 20), {}, "sizes_a[0] (10) is a look beyond the final size (5)"),
    ((5, 10, 8), (5, 10, 20), {}, "sizes_a[1] (10) is a look beyond the final size (8)"),
    ((5, 4, 10), (5, 8, 10), {}, "sizes_a must not decrease from look to look"),
    ((5, 10), (5, 10, 20), {}, "sizes_a (2 looks) and sizes_b (3 looks) differ in length"),
    ((5, 5, 10), (8, 8, 10), {}, "the sizes must increase from look to look"),
    ((), (), {}, "sizes_a must give at least one look"),
    ("10", (10,), {}, "sizes_a must be a sequence of sizes"),
    (10, (10,), {}, "sizes_a must be a sequence of sizes"),
    ((0, 10), (5, 10), {}, "sizes_a[0] must be >= 1"),
    ((5, 10.5), (5, 10), {}, "sizes_a[1] must be an integer"),
    ((5, 10), (5, 10), {"stop_for_success": 1.0}, "stop_for_success must be strictly between"),
    ((5, 10), (5, 10), {"stop_for_futility": 0}, "stop_for_futility must be strictly between"),
    ((5, 10), (5, 10), {"stop_for_futility": "0.1"}, "stop_for_futility must be a number"),
    ((5, 10), (5, 10), {"threshold": 1.5}, "threshold must be strictly between"),
    ((5, 10), (5, 10), {"alternative": "two-sided"}, "alternative must be one of"),
    ((5, 10), (5, 10), {"margin": 1.0}, "margin must be strictly between -1 and 1"),
    ((5, 10), (5, 10), {"prior_a": (0.01, 1)}, "prior_a parameters must be at least"),
    ((5, 10), (5, 10), {"rates_b": [0.3, 0.4]}, "rates_a (1) and rates_b (2) differ"),
    ((5, 10), (5, 10), {"rates_a": [1.2]}, "rates_a must be a sequence of rates"),
])
def test_bad_two_group_arguments_raise_one_line(sizes_a: object, sizes_b: object,
                                                changes: dict, message: str) -> None:
    with pytest.raises(ValueError, match="^" + message.replace("(", r"\(").replace(")", r"\)")
                       .replace("[", r"\[").replace("]", r"\]")) as raised:
        sequential_rule_probability(sizes_a, sizes_b, **{**TWO, **changes})
    assert "\n" not in str(raised.value)


@pytest.mark.parametrize(("call", "message"), [
    ({"sizes": (10, 10, 20)}, "sizes must increase from look to look"),
    ({"sizes": (30, 20)}, "sizes[0] (30) is a look beyond the final size (20)"),
    ({"null_rate": 0.0}, "null_rate must be strictly between"),
    ({"stop_for_success": -0.5}, "stop_for_success must be strictly between"),
    ({"rates": [0.2, -0.1]}, "rates must be a sequence of rates"),
])
def test_bad_one_group_arguments_raise_one_line(call: dict, message: str) -> None:
    args = {"sizes": (10, 20), "prior": (1, 1), "null_rate": 0.2, "alternative": "greater",
            "threshold": 0.9, "stop_for_success": 0.99, "stop_for_futility": 0.1,
            "rates": [0.2], **call}
    with pytest.raises(ValueError) as raised:
        sequential_rule_probability_single(**args)
    assert str(raised.value).startswith(message) and "\n" not in str(raised.value)


def test_bad_operating_characteristics_arguments_raise_one_line() -> None:
    kw = {"margin": 0.0, "alternative": "greater", "threshold": 0.95, "stop_for_success": 0.99,
          "stop_for_futility": None}
    with pytest.raises(ValueError, match="^assumed must be a pair"):
        sequential_operating_characteristics((5, 10), (5, 10), (1, 1), (1, 1),
                                             assumed=(0.3, 0.2, 0.1), **kw)
    with pytest.raises(ValueError, match="^grid must be >= 2"):
        sequential_operating_characteristics((5, 10), (5, 10), (1, 1), (1, 1), grid=1, **kw)
    with pytest.raises(ValueError, match="^assumed must be a number"):
        sequential_operating_characteristics_single((5, 10), (1, 1), null_rate=0.2,
                                                    alternative="greater", threshold=0.95,
                                                    stop_for_success=None,
                                                    stop_for_futility=0.2, assumed="0.4")
