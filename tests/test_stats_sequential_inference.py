"""Tests of prespec.stats.sequential beyond the boundaries: the design (inflation factors,
expected information), simulated error rates, stage-wise inference and repeated confidence
intervals."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from prespec.stats.sequential import (
    Boundaries,
    boundaries,
    crossing_probabilities,
    design,
    repeated_ci,
    stagewise_inference,
    stagewise_tail,
)


def _equal(k: int) -> list[float]:
    return [i / k for i in range(1, k + 1)]


def _paths(t: list[float], drift: float, n: int, seed: int) -> np.ndarray:
    """n simulated z processes at fractions t: the score has independent normal increments."""
    rng = np.random.default_rng(seed)
    tt = np.asarray(t)
    steps = np.diff(np.r_[0.0, tt])
    score = np.cumsum(rng.standard_normal((n, len(t))) * np.sqrt(steps) + drift * steps, axis=1)
    return score / np.sqrt(tt)


def _first_exit(
    z: np.ndarray, upper: np.ndarray, lower: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """For each path: the look of the first exit (K−1 if none) and whether it was above."""
    out = (z >= upper) | (z <= lower)
    out[:, -1] = True
    look = np.argmax(out, axis=1)
    rows = np.arange(len(z))
    return look, z[rows, look] >= upper[look]


# ----------------------------------------------------------------- inflation factors

# Jennison & Turnbull (2000), ch. 2 tables of the maximum-to-fixed sample size ratio
# R_P(K, α, β) (Pocock) and R_B(K, α, β) (O'Brien-Fleming), two-sided α = 0.05. # from memory
INFLATION = {
    ("pocock", 0.8): {2: 1.110, 3: 1.166, 4: 1.202, 5: 1.229},
    ("pocock", 0.9): {2: 1.100, 3: 1.151, 4: 1.183, 5: 1.207},
    ("obrien-fleming", 0.8): {2: 1.008, 3: 1.017, 4: 1.024, 5: 1.028},
    ("obrien-fleming", 0.9): {2: 1.007, 3: 1.016, 4: 1.022, 5: 1.026},
}


@pytest.mark.parametrize(("name", "power"), sorted(INFLATION))
def test_inflation_factor_jennison_turnbull(name: str, power: float) -> None:
    for k, expected in INFLATION[(name, power)].items():
        d = design(_equal(k), alpha=0.05, sides=2, efficacy=name, power=power)
        assert d.inflation == pytest.approx(expected, abs=5e-4)
        assert d.power == pytest.approx(power, abs=1e-9)


def test_single_look_design_is_the_fixed_sample_design() -> None:
    d = design([1.0], alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming", power=0.8)
    assert d.inflation == pytest.approx(1.0, abs=1e-9)
    assert d.expected_fraction_null == pytest.approx(1.0, abs=1e-12)
    assert d.drift == pytest.approx(stats.norm.isf(0.025) + stats.norm.isf(0.2), abs=1e-6)


def test_expected_information_against_simulation() -> None:
    t = [0.25, 0.5, 0.75, 1.0]
    d = design(
        t,
        alpha=0.05,
        sides=2,
        efficacy="lan-demets-pocock",
        futility="lan-demets-obrien-fleming",
        power=0.85,
    )
    b = d.boundaries
    assert d.expected_with_futility and b.futility_z is not None
    upper = np.asarray(b.z)
    lower = np.maximum(-upper, np.asarray(b.futility_z))
    for drift, expected, stop in (
        (0.0, d.expected_fraction_null, d.stop_null),
        (d.drift, d.expected_fraction_alternative, d.stop_alternative),
    ):
        look, _ = _first_exit(_paths(t, drift, 200_000, seed=11), upper, lower)
        simulated = np.asarray(t)[look]
        se = simulated.std() / math.sqrt(len(simulated))
        assert abs(simulated.mean() * d.inflation - expected) < 3 * se * d.inflation
        freq = np.bincount(look, minlength=4) / len(look)
        assert freq == pytest.approx(stop, abs=3 * math.sqrt(0.25 / len(look)))


# ----------------------------------------------------------------- simulated error rates


@pytest.mark.parametrize(
    ("efficacy", "gamma", "t"),
    [
        ("lan-demets-obrien-fleming", None, [0.3, 0.5, 0.8, 1.0]),
        ("lan-demets-pocock", None, [0.2, 0.55, 1.0]),
        ("hwang-shih-decani", -2.5, [0.3, 0.5, 0.8, 1.0]),
        ("obrien-fleming", None, _equal(4)),
        ("pocock", None, _equal(3)),
    ],
)
@pytest.mark.parametrize(("sides", "alpha"), [(2, 0.05), (1, 0.025)])
def test_type_one_error_by_simulation(
    efficacy: str, gamma: float | None, t: list[float], sides: int, alpha: float
) -> None:
    b = boundaries(t, alpha=alpha, sides=sides, efficacy=efficacy, gamma=gamma)
    z = _paths(t, 0.0, 200_000, seed=2026)
    edge = np.abs(z) if sides == 2 else z
    rejected = np.any(edge >= np.asarray(b.z), axis=1).mean()
    se = math.sqrt(alpha * (1 - alpha) / len(z))
    assert abs(rejected - alpha) < 3 * se


@pytest.mark.parametrize(
    ("efficacy", "gamma", "futility", "futility_gamma", "sides", "alpha"),
    [
        ("lan-demets-obrien-fleming", None, "hwang-shih-decani", -2.0, 1, 0.025),
        ("pocock", None, "lan-demets-pocock", None, 2, 0.05),
        ("hwang-shih-decani", -4.0, "lan-demets-obrien-fleming", None, 2, 0.05),
    ],
)
def test_power_with_futility_by_simulation(
    efficacy: str,
    gamma: float | None,
    futility: str,
    futility_gamma: float | None,
    sides: int,
    alpha: float,
) -> None:
    t = _equal(3)
    d = design(
        t,
        alpha=alpha,
        sides=sides,
        efficacy=efficacy,
        gamma=gamma,
        futility=futility,
        futility_gamma=futility_gamma,
        power=0.9,
    )
    b = d.boundaries
    assert b.futility_z is not None
    upper = np.asarray(b.z)
    lower = np.asarray(b.futility_z)
    if sides == 2:
        lower = np.maximum(lower, -upper)
    _, above = _first_exit(_paths(t, d.drift, 200_000, seed=7), upper, lower)
    se = math.sqrt(0.9 * 0.1 / len(above))
    assert abs(above.mean() - 0.9) < 3 * se
    # Non-binding: ignoring futility the type I error stays alpha, and following it lowers it.
    z0 = _paths(t, 0.0, 200_000, seed=8)
    _, above0 = _first_exit(z0, upper, lower)
    edge = np.abs(z0) if sides == 2 else z0
    assert abs(np.any(edge >= upper, axis=1).mean() - alpha) < 3 * math.sqrt(
        alpha * (1 - alpha) / len(z0)
    )
    assert above0.mean() < alpha


# ----------------------------------------------------------------- stage-wise inference


@pytest.mark.parametrize("z", [-2.3, 0.4, 1.96, 2.9])
def test_single_look_inference_is_the_fixed_sample_inference(z: float) -> None:
    b = boundaries([1.0], alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming")
    info = 64.0
    adj = stagewise_inference([z], [info], b, level=0.9)
    assert adj.p_value == pytest.approx(2 * stats.norm.sf(abs(z)), abs=1e-10)  # scipy.stats.norm
    assert adj.estimate == pytest.approx(z / 8.0, abs=1e-9)
    wald = stats.norm.ppf(0.95) / 8.0  # the Wald interval, scipy.stats.norm
    assert adj.ci == pytest.approx((z / 8.0 - wald, z / 8.0 + wald), abs=1e-9)
    one = boundaries([1.0], alpha=0.025, sides=1, efficacy="lan-demets-pocock")
    assert stagewise_inference([z], [info], one, level=0.9).p_value == pytest.approx(
        stats.norm.sf(z), abs=1e-10
    )


def _design_three() -> tuple[Boundaries, list[float]]:
    info = [40.0, 80.0, 120.0]
    b = boundaries([1 / 3, 2 / 3, 1.0], alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming")
    return b, info


def test_stagewise_p_at_the_boundary_is_the_alpha_spent() -> None:
    # The p-value is at most alpha exactly when the test rejects: at z = b_k it equals the
    # alpha spent by look k. # common practice (Jennison & Turnbull 2000, section 8.4)
    b, info = _design_three()
    for k in range(1, 4):
        z = [0.5] * (k - 1) + [b.z[k - 1]]
        assert stagewise_inference(z, info[:k], b, level=0.95).p_value == pytest.approx(
            b.alpha_spent[k - 1], abs=1e-9
        )


def test_stagewise_p_continuous_and_monotone() -> None:
    b, info = _design_three()
    grid = np.linspace(-3.0, 3.0, 61)
    p_final = [stagewise_inference([0.3, 1.0, v], info, b, level=0.95).p_value for v in grid]
    upper_half = [p for v, p in zip(grid, p_final, strict=True) if v > 0.2]
    assert all(x > y for x, y in itertools.pairwise(upper_half))
    steps = np.abs(np.diff(p_final))
    # No jumps: the slope of P(Z_3 >= z, continued) is a sub-density, at most φ(0) per unit.
    assert steps.max() <= 2 * 0.1 * stats.norm.pdf(0.0) + 1e-9
    near = [
        stagewise_inference([0.3, 1.0, 2.0 + e], info, b, level=0.95).p_value for e in (-1e-7, 1e-7)
    ]
    assert abs(near[0] - near[1]) < 1e-6
    # Stopping at look 2 is more extreme than any outcome at look 3.
    p_look2 = [
        stagewise_inference([0.3, v], info[:2], b, level=0.95) for v in (b.z[1], b.z[1] + 0.5, 4.0)
    ]
    assert all(x.p_value > y.p_value for x, y in itertools.pairwise(p_look2))
    assert (
        p_look2[0].p_value
        < stagewise_inference([0.3, 1.0, 8.0], info, b, level=0.95).p_value + b.alpha_spent[1]
    )
    assert max(p.p_value for p in p_look2) <= b.alpha_spent[1] + 1e-12
    assert min(p_final) >= b.alpha_spent[1] - 1e-12
    # The estimate increases with z and lies inside its interval.
    estimates = [stagewise_inference([0.3, 1.0, v], info, b, level=0.95) for v in (1.0, 2.0, 3.0)]
    assert estimates[0].estimate < estimates[1].estimate < estimates[2].estimate
    assert all(a.ci[0] < a.estimate < a.ci[1] for a in estimates)


def test_stagewise_p_against_multivariate_normal() -> None:
    # P_0(stage-wise at least as high as (3, z*)) = Σ_{j<3} P(exit above at j) + P(continue,
    # Z_3 ≥ z*), by scipy.stats.multivariate_normal (abseps = releps = 1e-10).
    b, info = _design_three()
    t = np.array(info) / info[-1]
    corr = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    z = np.array(b.z)
    zstar = 2.2
    tail = stats.norm.sf(z[0])
    mvn2 = stats.multivariate_normal(np.zeros(2), corr[:2, :2], abseps=1e-10, releps=1e-10)
    tail += mvn2.cdf([z[0], np.inf], lower_limit=[-z[0], z[1]])
    mvn3 = stats.multivariate_normal(np.zeros(3), corr, abseps=1e-10, releps=1e-10, maxpts=10**7)
    tail += mvn3.cdf([z[0], z[1], np.inf], lower_limit=[-z[0], -z[1], zstar])
    adj = stagewise_inference([0.1, 1.5, zstar], info, b, level=0.95)
    assert adj.p_value == pytest.approx(2 * tail, abs=1e-8)
    # The median-unbiased estimate: at θ̂ the same probability is one half.
    drift = adj.estimate * math.sqrt(info[-1])
    mean = drift * np.sqrt(t)
    half = stats.norm.sf(z[0] - mean[0])
    half += stats.multivariate_normal(mean[:2], corr[:2, :2], abseps=1e-10, releps=1e-10).cdf(
        [z[0], np.inf], lower_limit=[-z[0], z[1]]
    )
    half += stats.multivariate_normal(mean, corr, abseps=1e-10, releps=1e-10, maxpts=10**7).cdf(
        [z[0], z[1], np.inf], lower_limit=[-z[0], -z[1], zstar]
    )
    assert half == pytest.approx(0.5, abs=1e-7)


def test_stagewise_coverage_and_median_unbiasedness_by_simulation() -> None:
    t = [0.25, 0.5, 0.75, 1.0]
    info = [25.0, 50.0, 75.0, 100.0]
    b = boundaries(t, alpha=0.05, sides=2, efficacy="lan-demets-pocock")
    theta = 0.2  # drift θ·sqrt(I_max) = 2: about half the trials stop early
    z = _paths(t, theta * 10.0, 6000, seed=99)
    look, _ = _first_exit(z, np.asarray(b.z), -np.asarray(b.z))
    n = len(look)
    assert 0.3 < np.mean(look < 3) < 0.8
    # The interval at level 0.9 covers θ exactly when the stage-wise tail at θ lies in
    # (0.05, 0.95); the estimate is below θ exactly when the tail at θ exceeds 1/2. Checked on
    # the first 150 trials by stagewise_inference itself, then used for all 6000. r = 8 for
    # speed (accurate to about 1e-5, far below the Monte Carlo error).
    tails = np.array(
        [
            stagewise_tail(list(row[: k + 1]), info[: k + 1], b, theta, r=8)
            for row, k in zip(z, look, strict=True)
        ]
    )
    for row, k, tail in zip(z[:150], look[:150], tails[:150], strict=True):
        adj = stagewise_inference(list(row[: k + 1]), info[: k + 1], b, level=0.9, r=8)
        assert (adj.ci[0] < theta < adj.ci[1]) == (0.05 < tail < 0.95)
        assert (adj.estimate < theta) == (tail > 0.5)
    covered = np.mean((tails > 0.05) & (tails < 0.95))
    assert abs(covered - 0.9) < 3 * math.sqrt(0.9 * 0.1 / n)
    assert abs(np.mean(tails > 0.5) - 0.5) < 3 * math.sqrt(0.25 / n)
    # The tail at the true θ is uniform (the stage-wise ordering is an exact test). # common practice
    assert stats.kstest(tails, "uniform").pvalue > 0.001  # scipy.stats.kstest
    # The naive estimate z/sqrt(I) at the stopping look is biased upward (the reason for the
    # adjustment). # common practice
    naive = z[np.arange(n), look] / np.sqrt(np.asarray(info)[look])
    assert naive.mean() - theta > 3 * naive.std() / math.sqrt(n)


def test_stagewise_tail_at_zero_is_the_one_sided_p() -> None:
    b, info = _design_three()
    one = stagewise_tail([0.2, 1.1, 2.3], info, b)
    adj = stagewise_inference([0.2, 1.1, 2.3], info, b, level=0.95)
    assert adj.p_value == pytest.approx(2 * one, abs=1e-14)
    assert stagewise_tail([0.2, 1.1, 2.3], info, b, adj.estimate) == pytest.approx(0.5, abs=1e-9)
    assert stagewise_tail([0.2, 1.1, 2.3], info, b, adj.ci[0]) == pytest.approx(0.025, abs=1e-9)


def test_stagewise_bad_input() -> None:
    b, info = _design_three()
    with pytest.raises(ValueError, match="crossed its boundary"):
        stagewise_inference([4.0, 2.5], info[:2], b, level=0.95)
    with pytest.raises(ValueError, match="one of each"):
        stagewise_inference([1.0, 2.5], info, b, level=0.95)
    with pytest.raises(ValueError, match="increase"):
        stagewise_inference([1.0, 2.5], [50.0, 40.0], b, level=0.95)
    with pytest.raises(ValueError, match="boundaries have 3"):
        stagewise_inference([0.1] * 4, [1.0, 2.0, 3.0, 4.0], b, level=0.95)
    with pytest.raises(ValueError, match="level"):
        stagewise_inference([2.5], [10.0], b, level=95)


# ----------------------------------------------------------------- repeated confidence intervals


def test_repeated_ci_value_and_simultaneous_coverage() -> None:
    assert repeated_ci(0.12, 400.0, 2.5) == pytest.approx((0.12 - 0.125, 0.12 + 0.125), abs=1e-15)
    # Jennison & Turnbull 1989: with the two-sided boundaries of level alpha, the intervals at
    # all K looks contain θ together with probability 1 − alpha (simulation).
    t = [0.2, 0.45, 0.7, 1.0]
    info = np.asarray(t) * 300.0
    b = boundaries(t, alpha=0.05, sides=2, efficacy="hwang-shih-decani", gamma=-1.0)
    theta = 0.15
    z = _paths(t, theta * math.sqrt(300.0), 200_000, seed=5)
    est = z / np.sqrt(info)
    half = np.asarray(b.z) / np.sqrt(info)
    all_cover = np.all((est - half < theta) & (theta < est + half), axis=1).mean()
    assert abs(all_cover - 0.95) < 3 * math.sqrt(0.95 * 0.05 / len(z))
    lo, hi = repeated_ci(float(est[0, 1]), float(info[1]), b.z[1])
    assert (lo, hi) == pytest.approx((est[0, 1] - half[1], est[0, 1] + half[1]), abs=1e-15)
    with pytest.raises(ValueError, match="information"):
        repeated_ci(0.1, 0.0, 2.0)
    with pytest.raises(ValueError, match="bound_z"):
        repeated_ci(0.1, 10.0, -2.0)


def test_design_bad_input() -> None:
    with pytest.raises(ValueError, match="end at 1"):
        design([0.3, 0.8], alpha=0.05, sides=2, efficacy="lan-demets-pocock", power=0.8)
    with pytest.raises(ValueError, match="power"):
        design([0.5, 1.0], alpha=0.05, sides=2, efficacy="lan-demets-pocock", power=1.2)
    with pytest.raises(ValueError, match="exceed the one-sided alpha"):
        design([0.5, 1.0], alpha=0.05, sides=1, efficacy="lan-demets-pocock", power=0.04)


def test_crossing_probabilities_bad_input() -> None:
    with pytest.raises(ValueError, match="same length"):
        crossing_probabilities([2.0, 2.0], [-2.0], [0.5, 1.0], 0.0)
    with pytest.raises(ValueError, match="increasing"):
        crossing_probabilities([2.0, 2.0], [-2.0, -2.0], [0.5, 0.5], 0.0)
