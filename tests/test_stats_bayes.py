"""Unit tests of prespec.stats.bayes: argument checks, symmetries, monotonicity, the margin,
the decision region against the scalar posterior, operating characteristics and predictive
probabilities. The checks against scipy and published values are in
tests/reference/test_ref_bayes.py."""

from __future__ import annotations

import numpy as np
import pytest

from prespec.stats import bayes
from prespec.stats.bayes import (
    TIE_TOLERANCE,
    beta_from_mean,
    difference_cdf,
    difference_pdf,
    meets_threshold,
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
    rule_region_single,
)

FLAT = (1, 1)
JEFFREYS = (0.5, 0.5)


def test_a_prior_from_its_mean_and_effective_size() -> None:
    assert beta_from_mean(0.2, 10) == pytest.approx((2.0, 8.0), rel=1e-15)
    assert beta_from_mean(0.5, 1) == (0.5, 0.5)
    with pytest.raises(ValueError, match=r"^mean must be strictly between 0 and 1, got 1\.0$"):
        beta_from_mean(1, 10)
    with pytest.raises(ValueError, match=r"^n \(the prior's effective sample size\) must be "
                                         r"> 0, got 0\.0$"):
        beta_from_mean(0.3, 0)


@pytest.mark.parametrize(("call", "message"), [
    (lambda: posterior_difference(11, 10, 3, 10, FLAT, FLAT), r"x_a \(11\) must not exceed n_a"),
    (lambda: posterior_difference(1, 10, -1, 10, FLAT, FLAT), r"x_b must be >= 0, got -1"),
    (lambda: posterior_difference(1, 0, 0, 10, FLAT, FLAT), r"n_a must be >= 1, got 0"),
    (lambda: posterior_difference(1, 10, 3, 10, (0, 1), FLAT),
     r"prior_a parameters must be > 0, got \(0\.0, 1\.0\)"),
    (lambda: posterior_difference(1, 10, 3, 10, FLAT, (0.01, 0.01)),
     (r"prior_b parameters must be at least 0\.05 \(below it, part of the mass lies under the "
     r"smallest floating-point number and the probabilities lose accuracy\), got "
     r"\(0\.01, 0\.01\)")),
    (lambda: beta_from_mean(0.01, 2), (r"the prior from its mean and n parameters must be at "
                                      r"least 0\.05")),
    (lambda: posterior_difference(1, 10, 3, 10, FLAT, (1, 2, 3)),
     r"prior_b must be a pair \(a, b\) of Beta parameters"),
    (lambda: posterior_difference(1, 10, 3, 10, FLAT, (1, float("inf"))),
     r"prior_b parameter must be finite, got inf"),
    (lambda: posterior_difference(1, 10, 3, 10, FLAT, FLAT, margin=1),
     r"margin must be strictly between -1 and 1, got 1\.0"),
    (lambda: posterior_difference(1, 10, 3, 10, FLAT, FLAT, alternative="two-sided"),
     (r"alternative must be one of greater, less \(a Bayesian rule is one-sided\); "
      r"got 'two-sided'")),
    (lambda: posterior_difference(1, 10, 3, 10, FLAT, FLAT, credible=1),
     r"credible must be strictly between 0 and 1, got 1\.0"),
    (lambda: posterior_single(2, 10, FLAT, null_rate=0),
     r"null_rate must be strictly between 0 and 1, got 0\.0"),
    (lambda: rule_region(10, 10, FLAT, FLAT, margin=0, alternative="greater", threshold=1.5),
     r"threshold must be strictly between 0 and 1, got 1\.5"),
    (lambda: rule_region_single(10, FLAT, null_rate=0.2, alternative="less", threshold=0),
     r"threshold must be strictly between 0 and 1, got 0\.0"),
    (lambda: rule_probability(np.ones((3, 3), bool), 2, 3, [0.1], [0.1]),
     r"region must have shape \(3, 4\), got \(3, 3\)"),
    (lambda: rule_probability(np.ones((3, 4), bool), 2, 3, [0.1, 0.2], [0.1]),
     r"rates_a \(2\) and rates_b \(1\) differ in length"),
    (lambda: rule_probability(np.ones((3, 4), bool), 2, 3, [1.1], [0.1]),
     r"rates_a must be a sequence of rates between 0 and 1"),
    (lambda: operating_characteristics(5, 5, FLAT, FLAT, margin=0, alternative="greater",
                                       threshold=0.9, grid=1), r"grid must be >= 2, got 1"),
    (lambda: operating_characteristics(5, 5, FLAT, FLAT, margin=0, alternative="greater",
                                       threshold=0.9, assumed=(0.2,)),
     r"assumed must be a pair \(rate_a, rate_b\)"),
    (lambda: predictive_probability(2, 10, 3, 10, 9, 20, FLAT, FLAT, margin=0,
                                    alternative="greater", threshold=0.9),
     r"final_n_a \(9\) must not be smaller than the size so far \(10\)"),
    (lambda: predictive_probability_single(2, 10, 20, "flat", null_rate=0.3,
                                           alternative="greater", threshold=0.9),
     r"prior must be a pair \(a, b\) of Beta parameters, got 'flat'"),
    (lambda: difference_cdf(0.1, (1, 1), (1, -2)), r"post_b parameters must be > 0"),
])
def test_bad_arguments_raise_one_line(call: object, message: str) -> None:
    with pytest.raises(ValueError, match=message) as raised:
        call()  # type: ignore[operator]
    assert "\n" not in str(raised.value)


@pytest.mark.parametrize(("x_a", "n_a", "x_b", "n_b", "prior_a", "prior_b", "m"), [
    (12, 40, 5, 35, FLAT, JEFFREYS, 0.0), (3, 8, 6, 9, (0.3, 0.6), (2, 2), -0.2),
    (410, 1000, 380, 1100, FLAT, FLAT, 0.05)])
def test_swapping_groups_and_alternative_and_relabelling_events(
        x_a: int, n_a: int, x_b: int, n_b: int, prior_a: tuple, prior_b: tuple,
        m: float) -> None:
    base = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, margin=m, credible=0.9)
    # Pr(p_a − p_b > m) = Pr(p_b − p_a < −m)
    swapped = posterior_difference(x_b, n_b, x_a, n_a, prior_b, prior_a, margin=-m,
                                   alternative="less", credible=0.9)
    # events and non-events exchanged: q = 1 − p, and p_a − p_b > m  <=>  q_a − q_b < −m
    relabelled = posterior_difference(n_a - x_a, n_a, n_b - x_b, n_b, prior_a[::-1],
                                      prior_b[::-1], margin=-m, alternative="less",
                                      credible=0.9)
    less = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, margin=m,
                                alternative="less")
    assert swapped.probability == pytest.approx(base.probability, abs=1e-13)
    assert relabelled.probability == pytest.approx(base.probability, abs=1e-13)
    assert base.probability + less.probability == pytest.approx(1.0, abs=1e-13)
    for other in (swapped, relabelled):
        assert other.mean == pytest.approx(-base.mean, abs=1e-15)
        assert (other.low, other.high) == pytest.approx((-base.high, -base.low), abs=1e-10)
    assert base.low < base.mean < base.high


def test_the_probability_grows_with_the_data_and_falls_with_the_margin() -> None:
    by_xa = [posterior_difference(x, 30, 10, 30, FLAT, FLAT).probability for x in range(31)]
    by_xb = [posterior_difference(10, 30, x, 30, JEFFREYS, JEFFREYS).probability
             for x in range(31)]
    by_margin = [posterior_difference(15, 30, 10, 30, FLAT, FLAT, margin=m).probability
                 for m in np.linspace(-0.95, 0.95, 39)]
    assert np.all(np.diff(by_xa) > 0) and np.all(np.diff(by_xb) < 0)
    inside = [p for p in by_margin if 1e-12 < p < 1 - 1e-12]
    assert np.all(np.diff(by_margin) <= 0) and np.all(np.diff(inside) < 0) and len(inside) > 10
    assert by_margin[0] == 1.0 and by_margin[-1] < 1e-12
    # the probability of "greater" at margin m is one minus the distribution function at m
    assert by_margin[19] == pytest.approx(1 - difference_cdf(0.0, (16, 16), (11, 21)), abs=1e-15)


def test_the_credible_interval_narrows_with_the_data_and_the_level() -> None:
    small = posterior_difference(12, 40, 8, 40, FLAT, FLAT)
    large = posterior_difference(120, 400, 80, 400, FLAT, FLAT)
    inner = posterior_difference(12, 40, 8, 40, FLAT, FLAT, credible=0.8)
    assert large.high - large.low < (small.high - small.low) / 3
    assert small.low < inner.low < inner.high < small.high
    assert difference_cdf(small.high, (13, 29), (9, 33)) == pytest.approx(0.975, abs=1e-12)
    assert difference_cdf(-1.0, (2, 3), (3, 2)) == 0.0
    assert difference_cdf(1.0, (2, 3), (3, 2)) == 1.0


def test_one_group_swaps_with_the_alternative_and_the_labels() -> None:
    greater = posterior_single(7, 20, (0.5, 1.5), null_rate=0.25, credible=0.9)
    less = posterior_single(7, 20, (0.5, 1.5), null_rate=0.25, alternative="less")
    relabelled = posterior_single(13, 20, (1.5, 0.5), null_rate=0.75, alternative="less",
                                  credible=0.9)
    assert greater.probability + less.probability == pytest.approx(1.0, abs=1e-15)
    assert relabelled.probability == pytest.approx(greater.probability, rel=1e-13)
    assert (relabelled.low, relabelled.high) == pytest.approx(
        (1 - greater.high, 1 - greater.low), rel=1e-12)
    assert greater.posteriors == ((7.5, 14.5),) and greater.mean == 7.5 / 22


@pytest.mark.parametrize(("n_a", "n_b", "prior_a", "prior_b", "m", "alternative", "threshold"), [
    (16, 12, FLAT, FLAT, 0.0, "greater", 0.975),
    (14, 13, JEFFREYS, (2, 6), -0.1, "less", 0.9),
    (10, 18, (0.3, 0.2), JEFFREYS, 0.2, "greater", 0.8),
    (12, 12, FLAT, FLAT, 0.0, "greater", 0.5),  # exact ties at 0.5 on the diagonal
])
def test_the_region_agrees_with_the_scalar_posterior_on_every_cell(
        n_a: int, n_b: int, prior_a: tuple, prior_b: tuple, m: float, alternative: str,
        threshold: float) -> None:
    region = rule_region(n_a, n_b, prior_a, prior_b, margin=m, alternative=alternative,
                         threshold=threshold)
    grid = posterior_probabilities(n_a, n_b, prior_a, prior_b, margin=m, alternative=alternative)
    assert region.shape == grid.shape == (n_a + 1, n_b + 1) and region.dtype == bool
    for x_a in range(n_a + 1):
        for x_b in range(n_b + 1):
            p = posterior_difference(x_a, n_a, x_b, n_b, prior_a, prior_b, margin=m,
                                     alternative=alternative).probability
            assert grid[x_a, x_b] == pytest.approx(p, abs=1e-14)
            assert region[x_a, x_b] == meets_threshold(p, threshold), (x_a, x_b, p)
    assert 0 < region.sum() < region.size


def test_the_region_agrees_near_the_threshold_at_large_sizes() -> None:
    n_a, n_b, threshold = 1000, 800, 0.95
    for alternative in ("greater", "less"):
        region = rule_region(n_a, n_b, FLAT, JEFFREYS, margin=-0.03, alternative=alternative,
                             threshold=threshold)
        for x_b in range(0, n_b + 1, 37):
            column = region[:, x_b]
            edges = np.flatnonzero(np.diff(column.astype(int)))
            assert edges.size <= 1  # one switch per column: the region is monotone in x_a
            for x_a in {int(e) for e in edges} | {int(e) + 1 for e in edges}:
                p = posterior_difference(x_a, n_a, x_b, n_b, FLAT, JEFFREYS, margin=-0.03,
                                         alternative=alternative).probability
                assert column[x_a] == (p >= threshold - TIE_TOLERANCE), (x_a, x_b, p)


def test_an_exact_tie_meets_the_threshold() -> None:
    assert posterior_difference(8, 16, 8, 16, FLAT, FLAT).probability == \
        pytest.approx(0.5, abs=1e-14)
    assert meets_threshold(0.5 - TIE_TOLERANCE / 2, 0.5)
    assert not meets_threshold(0.5 - 2 * TIE_TOLERANCE, 0.5)


def test_the_one_group_region_agrees_with_the_scalar_posterior() -> None:
    for alternative in ("greater", "less"):
        region = rule_region_single(30, (0.4, 1.1), null_rate=0.3, alternative=alternative,
                                    threshold=0.9)
        want = [posterior_single(x, 30, (0.4, 1.1), null_rate=0.3,
                                 alternative=alternative).probability >= 0.9
                for x in range(31)]
        assert region.tolist() == want and 0 < sum(want) < 31


def test_operating_characteristics_on_the_boundary_and_the_mirror_rule() -> None:
    oc = operating_characteristics(60, 50, FLAT, JEFFREYS, margin=0.1, alternative="greater",
                                   threshold=0.95, assumed=(0.6, 0.3), grid=12)
    assert len(oc.curve) == 12
    rates_b = [b for b, _, _ in oc.curve]
    assert rates_b[0] == 0.0 and rates_b[-1] == pytest.approx(0.9, abs=1e-15)
    assert all(a == pytest.approx(b + 0.1, abs=1e-15) for b, a, _ in oc.curve)
    assert oc.type_one_error == max(p for _, _, p in oc.curve)
    assert oc.at_rate in rates_b and 0.0 < oc.type_one_error < 0.1
    assert oc.power is not None and oc.power > 0.5
    # "less" with the groups exchanged and the margin negated is the same rule
    mirror = operating_characteristics(50, 60, JEFFREYS, FLAT, margin=-0.1, alternative="less",
                                       threshold=0.95, assumed=(0.3, 0.6), grid=12)
    assert mirror.type_one_error == pytest.approx(oc.type_one_error, rel=1e-12)
    assert mirror.power == pytest.approx(oc.power, rel=1e-12)
    assert operating_characteristics(10, 10, FLAT, FLAT, margin=0, alternative="less",
                                     threshold=0.9).power is None


def test_a_flat_prior_rule_behaves_like_a_one_sided_test() -> None:
    # common practice: with flat priors and large groups, Pr(p_a > p_b | data) >= 0.975 has a
    # type I error near 0.025, like a one-sided test at that level
    oc = operating_characteristics(200, 200, FLAT, FLAT, margin=0.0, alternative="greater",
                                   threshold=0.975, grid=40)
    assert 0.02 < oc.type_one_error < 0.032
    assert 0.3 < oc.at_rate < 0.7


def test_the_rule_probability_of_an_empty_and_a_full_region() -> None:
    rates = np.array([0.0, 0.2, 0.5, 1.0])
    assert rule_probability(np.ones((6, 8), bool), 5, 7, rates, rates[::-1]) == \
        pytest.approx(1.0, abs=1e-14)
    assert not rule_probability(np.zeros((6, 8), bool), 5, 7, rates, rates).any()


def test_one_group_operating_characteristics() -> None:
    oc = operating_characteristics_single(40, JEFFREYS, null_rate=0.2, alternative="greater",
                                          threshold=0.95, assumed=0.4, grid=11)
    assert oc.at_rate == 0.2 and len(oc.curve) == 11
    assert all(comparator == 0.2 for comparator, _, _ in oc.curve)
    curve = [p for _, _, p in oc.curve]
    assert curve[0] == 0.0 and curve[-1] == 1.0 and np.all(np.diff(curve) >= 0)
    assert 0 < oc.type_one_error < 0.05
    assert oc.power is not None and oc.power > 0.8


def test_predictive_probability_at_the_final_size_is_the_rule() -> None:
    for x_a, x_b in ((15, 5), (10, 9)):
        final = predictive_probability(x_a, 30, x_b, 30, 30, 30, FLAT, FLAT, margin=0,
                                       alternative="greater", threshold=0.975)
        met = posterior_difference(x_a, 30, x_b, 30, FLAT, FLAT).probability >= 0.975
        assert final == float(met)


def test_the_grid_of_predictive_probabilities_matches_the_scalar_and_grows_with_x_a() -> None:
    kw = {"margin": 0.05, "alternative": "greater", "threshold": 0.9}
    grid = predictive_probabilities(10, 8, 25, 20, FLAT, JEFFREYS, **kw)
    assert grid.shape == (11, 9)
    for x_a in range(0, 11, 3):
        for x_b in range(0, 9, 2):
            assert grid[x_a, x_b] == pytest.approx(predictive_probability(
                x_a, 10, x_b, 8, 25, 20, FLAT, JEFFREYS, **kw), rel=1e-12, abs=1e-15)
    assert np.all(np.diff(grid, axis=0) >= -1e-15) and np.all(np.diff(grid, axis=1) <= 1e-15)
    assert grid[10, 0] > 0.99 and grid[0, 8] < 0.01


def test_one_group_predictive_probability_moves_with_the_data() -> None:
    values = [predictive_probability_single(x, 20, 50, FLAT, null_rate=0.3,
                                            alternative="greater", threshold=0.95)
              for x in range(21)]
    assert np.all(np.diff(values) >= 0) and values[0] < 0.01 and values[-1] > 0.99


def test_the_density_of_the_difference_is_the_slope_of_its_distribution_function() -> None:
    post_a, post_b = (13, 29), (6, 36)
    for d in (-0.1, 0.05, 0.2, 0.4):
        step = 1e-5
        slope = (difference_cdf(d + step, post_a, post_b)
                 - difference_cdf(d - step, post_a, post_b)) / (2 * step)
        assert difference_pdf(d, post_a, post_b) == pytest.approx(slope, rel=1e-6)
    grid = np.linspace(-1, 1, 4001)
    density = [difference_pdf(d, (0.5, 2.5), (1.5, 1.5)) for d in grid]
    assert np.trapezoid(density, grid) == pytest.approx(1.0, abs=2e-3)
    assert difference_pdf(1.0, post_a, post_b) == 0.0


def test_a_skewed_posterior_is_integrated_again_over_the_other_group() -> None:
    """Beta(47.05, 0.05) has the smaller variance, but its mass is piled at 1: over it, the rule
    of twice the step disagrees, so the other route (over Beta(4094.05, 906.5)) is taken."""
    args = [np.array([v]) for v in (4094.05, 906.5, 47.05, 0.05, 0.0)]
    first, first_error = bayes._route(np.array([True]), *args)
    other, other_error = bayes._route(np.array([False]), *args)
    assert first_error[0] > bayes._SUSPECT > other_error[0]
    fine = bayes._route(np.array([False]), *args, rule=bayes._FINE_RULE)[0]
    got = posterior_difference(4094, 5000, 47, 47, (0.05, 0.5), (0.05, 0.05)).probability
    assert got == other[0] and abs(got - fine[0]) <= 1e-14
    assert abs(first[0] - fine[0]) > 1e-12  # the first route alone would have been off
