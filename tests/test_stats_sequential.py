"""Tests of prespec.stats.sequential: boundaries against published tables, the recursion
against the multivariate normal route, the spending functions against their closed forms,
and bad input."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from prespec.stats.sequential import (
    EFFICACY,
    FUTILITY,
    boundaries,
    crossing_probabilities,
    equally_spaced,
    spent,
)


def _equal(k: int) -> list[float]:
    return [i / k for i in range(1, k + 1)]


# Jennison & Turnbull (2000) Table 2.1, Pocock constants C_P(K, α), two-sided α. # from memory
POCOCK = {
    0.01: {2: 2.772, 3: 2.873, 4: 2.939, 5: 2.986},
    0.05: {2: 2.178, 3: 2.289, 4: 2.361, 5: 2.413},
    0.10: {2: 1.875, 3: 1.992, 4: 2.067, 5: 2.122},
}
# Jennison & Turnbull (2000) Table 2.3, O'Brien-Fleming constants C_B(K, α). # from memory
OBRIEN_FLEMING = {
    0.01: {2: 2.580, 3: 2.595, 4: 2.609, 5: 2.621},
    0.05: {2: 1.977, 3: 2.004, 4: 2.024, 5: 2.040},
    0.10: {2: 1.678, 3: 1.710, 4: 1.733, 5: 1.751},
}


@pytest.mark.parametrize("alpha", sorted(POCOCK))
@pytest.mark.parametrize("k", [2, 3, 4, 5])
def test_pocock_constant_jennison_turnbull_table_2_1(alpha: float, k: int) -> None:
    b = boundaries(_equal(k), alpha=alpha, sides=2, efficacy="pocock")
    assert b.z == pytest.approx([b.z[0]] * k, abs=1e-12)
    assert b.z[0] == pytest.approx(POCOCK[alpha][k], abs=5e-4)
    assert b.alpha_spent[-1] == pytest.approx(alpha, abs=1e-9)


@pytest.mark.parametrize("alpha", sorted(OBRIEN_FLEMING))
@pytest.mark.parametrize("k", [2, 3, 4, 5])
def test_obrien_fleming_constant_jennison_turnbull_table_2_3(alpha: float, k: int) -> None:
    b = boundaries(_equal(k), alpha=alpha, sides=2, efficacy="obrien-fleming")
    # b_k = C_B·sqrt(K/k), so the last boundary is the constant itself.
    assert b.z[-1] == pytest.approx(OBRIEN_FLEMING[alpha][k], abs=5e-4)
    expected = [b.z[-1] * math.sqrt(k / i) for i in range(1, k + 1)]
    assert b.z == pytest.approx(expected, abs=1e-12)
    assert b.alpha_spent[-1] == pytest.approx(alpha, abs=1e-9)


def test_lan_demets_obrien_fleming_five_looks() -> None:
    # Lan-DeMets O'Brien-Fleming type, K = 5 equally spaced, two-sided α = 0.05 (DeMets & Lan,
    # Statistics in Medicine 1994, the standard worked example). # from memory
    b = boundaries(_equal(5), alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming")
    assert b.z == pytest.approx([4.877, 3.357, 2.680, 2.290, 2.031], abs=5e-4)
    assert b.alpha_spent[-1] == pytest.approx(0.05, abs=1e-10)


def test_lan_demets_pocock_five_looks() -> None:
    # Lan-DeMets Pocock type, K = 5, two-sided α = 0.05: 2.438, 2.427, 2.410, 2.397 for the
    # first four looks. # from memory (the recalled fifth, 2.391, is not reproduced: the
    # recursion and the multivariate normal route below both give 2.3860)
    b = boundaries(_equal(5), alpha=0.05, sides=2, efficacy="lan-demets-pocock")
    assert b.z[:4] == pytest.approx([2.438, 2.427, 2.410, 2.397], abs=5e-4)
    # The fifth boundary checked by the multivariate normal route: P(continue, |Z_5| > b_5)
    # equals the last increment of spending.
    t = np.array(_equal(5))
    corr = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    z = np.array(b.z)
    mvn = stats.multivariate_normal(np.zeros(5), corr, abseps=1e-9, releps=1e-9, maxpts=10**7)
    upper = mvn.cdf(np.r_[z[:4], np.inf], lower_limit=np.r_[-z[:4], z[4]])
    increment = 0.05 * (1.0 - math.log1p((math.e - 1.0) * 0.8))
    assert 2.0 * upper == pytest.approx(increment, abs=1e-8)


def test_one_sided_lan_demets_obrien_fleming_three_looks() -> None:
    # One-sided α = 0.025 spends 2 − 2Φ(z_{0.0125}/√t), so the boundaries equal the upper
    # boundaries of the two-sided α = 0.05 design when the lower tail is negligible
    # (# common practice); the first look exactly, the last within 1e-6.
    one = boundaries(_equal(3), alpha=0.025, sides=1, efficacy="lan-demets-obrien-fleming")
    two = boundaries(_equal(3), alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming")
    assert one.z[0] == pytest.approx(
        stats.norm.isf(spent("lan-demets-obrien-fleming", 1 / 3, 0.025)[()]), abs=1e-9
    )
    assert one.z == pytest.approx(two.z, abs=1e-6)
    assert one.nominal_p == pytest.approx([stats.norm.sf(v) for v in one.z], rel=1e-12)
    assert two.nominal_p == pytest.approx([2 * stats.norm.sf(v) for v in two.z], rel=1e-12)


def test_one_sided_lan_demets_obrien_fleming_published_values() -> None:
    # Lan-DeMets O'Brien-Fleming type, one-sided α = 0.025, K = 3 equally spaced: 3.710,
    # 2.511, 1.993 (the usual worked example of the literature). # from memory
    b = boundaries(_equal(3), alpha=0.025, sides=1, efficacy="lan-demets-obrien-fleming")
    assert b.z == pytest.approx([3.710, 2.511, 1.993], abs=5e-4)


@pytest.mark.parametrize(
    "efficacy", ["lan-demets-obrien-fleming", "lan-demets-pocock", "hwang-shih-decani"]
)
@pytest.mark.parametrize("sides", [1, 2])
def test_spending_boundaries_spend_what_the_function_says(efficacy: str, sides: int) -> None:
    t = [0.3, 0.55, 0.8, 1.0]
    gamma = -4.0 if efficacy == "hwang-shih-decani" else None
    b = boundaries(t, alpha=0.05, sides=sides, efficacy=efficacy, gamma=gamma)
    assert b.alpha_spent == pytest.approx(
        sides * spent(efficacy, t, 0.05 / sides, gamma), abs=1e-10
    )


def test_final_look_spends_all_alpha_at_a_short_fraction() -> None:
    b = boundaries(
        [0.4, 0.85], alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming", final=True
    )
    assert b.alpha_spent[-1] == pytest.approx(0.05, abs=1e-10)
    interim = boundaries([0.4, 0.85], alpha=0.05, sides=2, efficacy="lan-demets-obrien-fleming")
    assert interim.alpha_spent[-1] == pytest.approx(
        2 * spent("lan-demets-obrien-fleming", 0.85, 0.025)[()], abs=1e-10
    )
    assert interim.z[0] == b.z[0]
    assert interim.z[1] > b.z[1]


def test_any_alpha_for_recycling() -> None:
    # A boundary at alpha = 0.0125 (a quarter share) is the boundary of that alpha alone.
    b = boundaries([0.5, 1.0], alpha=0.0125, sides=2, efficacy="lan-demets-pocock")
    assert b.alpha_spent[-1] == pytest.approx(0.0125, abs=1e-11)
    assert b.z[0] == pytest.approx(
        stats.norm.isf(0.0125 / 2 * math.log1p((math.e - 1) / 2)), abs=1e-9
    )


# ----------------------------------------------------------------- spending closed forms


@pytest.mark.parametrize("total", [0.025, 0.05, 0.2])
def test_spending_functions_closed_forms(total: float) -> None:
    # Lan & DeMets 1983; Hwang, Shih & DeCani 1990, written with scipy.stats.norm. # common practice
    t = np.array([0.0, 0.1, 0.25, 0.5, 0.77, 1.0, 1.3])
    tc = np.minimum(t, 1.0)
    with np.errstate(divide="ignore"):
        obf = np.where(
            tc > 0, 2 - 2 * stats.norm.cdf(stats.norm.ppf(1 - total / 2) / np.sqrt(tc)), 0.0
        )
    assert spent("lan-demets-obrien-fleming", t, total) == pytest.approx(obf, abs=1e-15)
    assert spent("lan-demets-pocock", t, total) == pytest.approx(
        total * np.log(1 + (math.e - 1) * tc), abs=1e-15
    )
    for gamma in (-4.0, -2.0, 1.0, 3.5):
        hsd = total * (1 - np.exp(-gamma * tc)) / (1 - math.exp(-gamma))
        assert spent("hwang-shih-decani", t, total, gamma) == pytest.approx(hsd, abs=1e-15)
    assert spent("hwang-shih-decani", t, total, 0.0) == pytest.approx(total * tc, abs=1e-15)
    assert spent("hwang-shih-decani", t, total, 1e-9) == pytest.approx(total * tc, abs=1e-9)


def test_hsd_gamma_1_is_close_to_pocock() -> None:
    # Hwang, Shih & DeCani 1990: γ = 1 gives boundaries like Pocock's. # common practice
    t = _equal(5)
    pocock = boundaries(t, alpha=0.05, sides=2, efficacy="lan-demets-pocock").z
    hsd1 = boundaries(t, alpha=0.05, sides=2, efficacy="hwang-shih-decani", gamma=1.0).z
    assert max(abs(a - b) for a, b in zip(pocock, hsd1, strict=True)) < 0.05


# ----------------------------------------------------------------- recursion vs mvn


def _mvn_exits(
    b_upper: np.ndarray, b_lower: np.ndarray, t: np.ndarray, drift: float
) -> tuple[list[float], list[float]]:
    """P(stay in (lower, upper) to k − 1, exit above / below at k) by scipy.stats.multivariate_normal."""
    corr = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    mean = drift * np.sqrt(t)
    b_upper, b_lower = np.clip(b_upper, -38, 38), np.clip(b_lower, -38, 38)  # finite for the cdf
    ups, lows = [], []
    for k in range(1, len(t) + 1):
        mvn = stats.multivariate_normal(
            mean[:k], corr[:k, :k], abseps=1e-9, releps=1e-9, maxpts=10**7
        )
        lo, hi = b_lower[: k - 1], b_upper[: k - 1]
        if k == 1:
            ups.append(float(stats.norm.sf(b_upper[0] - mean[0])))
            lows.append(float(stats.norm.cdf(b_lower[0] - mean[0])))
            continue
        ups.append(float(mvn.cdf(np.r_[hi, np.inf], lower_limit=np.r_[lo, b_upper[k - 1]])))
        lows.append(float(mvn.cdf(np.r_[hi, b_lower[k - 1]], lower_limit=np.r_[lo, -np.inf])))
    return ups, lows


CASES = [
    ([0.5, 1.0], [2.8, 1.98], [-2.8, -1.98], 0.0),
    ([0.3, 0.65, 1.0], [3.6, 2.6, 2.0], [-3.6, -2.6, -2.0], 0.0),
    ([0.3, 0.65, 1.0], [3.6, 2.6, 2.0], [-0.3, 0.9, 2.0], 2.9),
    ([0.2, 0.5, 1.0], [4.0, 2.5, 1.9], [-np.inf, -np.inf, -np.inf], 1.5),
    ([0.25, 0.5, 0.75], [2.4, 2.4, 2.4], [-1.0, 0.0, 1.0], -0.7),
]


@pytest.mark.parametrize(("t", "upper", "lower", "drift"), CASES)
def test_recursion_against_multivariate_normal(
    t: list[float], upper: list[float], lower: list[float], drift: float
) -> None:
    up, low = crossing_probabilities(upper, lower, t, drift)
    ref_up, ref_low = _mvn_exits(np.array(upper), np.array(lower), np.array(t), drift)
    # scipy.stats.multivariate_normal.cdf with abseps = releps = 1e-9
    assert up == pytest.approx(ref_up, abs=1e-8)
    assert low == pytest.approx(ref_low, abs=1e-8)


@pytest.mark.parametrize("gap", [0.001, 0.0001])
def test_close_looks_against_multivariate_normal(gap: float) -> None:
    # A look just after another: the grid is refined to the width of the short step.
    t = [0.5, 0.5 + gap, 1.0]
    upper = [2.2, 2.25, 2.0]
    lower = [-2.2, -2.25, -2.0]
    up, low = crossing_probabilities(upper, lower, t, 0.4)
    ref_up, ref_low = _mvn_exits(np.array(upper), np.array(lower), np.array(t), 0.4)
    # scipy.stats.multivariate_normal.cdf with abseps = releps = 1e-9
    assert up == pytest.approx(ref_up, abs=1e-8)
    assert low == pytest.approx(ref_low, abs=1e-8)


def test_looks_too_close_are_refused() -> None:
    with pytest.raises(ValueError, match="0.5 and 0.500001 are too close"):
        boundaries([0.5, 0.500001, 1.0], alpha=0.05, sides=2, efficacy="lan-demets-pocock")


def test_boundaries_reached_by_multivariate_normal_spending() -> None:
    # The K = 3 boundaries spend, by the multivariate normal route, what the function says.
    t = np.array([0.35, 0.7, 1.0])
    b = boundaries(list(t), alpha=0.05, sides=2, efficacy="hwang-shih-decani", gamma=-2.0)
    z = np.array(b.z)
    ups, lows = _mvn_exits(z, -z, t, 0.0)
    assert np.cumsum(np.add(ups, lows)) == pytest.approx(
        2 * spent("hwang-shih-decani", t, 0.025, -2.0), abs=1e-8
    )


def test_grid_density_converges() -> None:
    # Simpson's rule on the ch. 19 grid converges as r^-4: the default r = 32 is within 1e-7 of
    # r = 64 on the z scale, r = 16 (Jennison & Turnbull's choice) within 1e-6.
    t = [0.1, 0.2, 0.45, 0.6, 0.9, 1.0]
    fine = boundaries(t, alpha=0.05, sides=2, efficacy="lan-demets-pocock", r=64).z
    default = boundaries(t, alpha=0.05, sides=2, efficacy="lan-demets-pocock").z
    coarse = boundaries(t, alpha=0.05, sides=2, efficacy="lan-demets-pocock", r=16).z
    assert default == pytest.approx(fine, abs=1e-7)
    assert coarse == pytest.approx(fine, abs=1e-6)


# ----------------------------------------------------------------- futility


def test_futility_meets_efficacy_at_the_last_look_and_gives_the_power() -> None:
    t = [1 / 3, 2 / 3, 1.0]
    b = boundaries(
        t,
        alpha=0.025,
        sides=1,
        efficacy="lan-demets-obrien-fleming",
        futility="hwang-shih-decani",
        futility_gamma=-2.0,
        power=0.9,
    )
    assert b.futility_z is not None and b.beta_spent is not None and b.drift is not None
    assert b.futility_z[-1] == pytest.approx(b.z[-1], abs=1e-9)
    assert all(a < z for a, z in zip(b.futility_z[:-1], b.z[:-1], strict=True))
    assert b.beta_spent == pytest.approx(spent("hwang-shih-decani", t, 0.1, -2.0), abs=1e-8)
    ups, _ = _mvn_exits(np.array(b.z), np.array(b.futility_z), np.array(t), b.drift)
    assert sum(ups) == pytest.approx(0.9, abs=1e-7)  # scipy.stats.multivariate_normal
    # Non-binding: the efficacy boundaries are those without futility.
    plain = boundaries(t, alpha=0.025, sides=1, efficacy="lan-demets-obrien-fleming")
    assert b.z == plain.z


def test_futility_at_observed_fractions_uses_the_planned_drift() -> None:
    planned = boundaries(
        [0.5, 1.0],
        alpha=0.05,
        sides=2,
        efficacy="lan-demets-obrien-fleming",
        futility="lan-demets-pocock",
        power=0.8,
    )
    assert planned.drift is not None
    observed = boundaries(
        [0.42],
        alpha=0.05,
        sides=2,
        efficacy="lan-demets-obrien-fleming",
        futility="lan-demets-pocock",
        power=0.8,
        drift=planned.drift,
    )
    assert observed.drift == planned.drift
    assert observed.beta_spent is not None and observed.futility_z is not None
    assert observed.beta_spent[0] == pytest.approx(
        spent("lan-demets-pocock", 0.42, 0.2)[()], abs=1e-10
    )
    # At the first look the futility boundary is explicit: Φ(a − δ·sqrt(t)) = β(t).
    expected = planned.drift * math.sqrt(0.42) + stats.norm.ppf(observed.beta_spent[0])
    assert observed.futility_z[0] == pytest.approx(expected, abs=1e-9)


# ----------------------------------------------------------------- input


def test_equally_spaced() -> None:
    assert equally_spaced([0.25, 0.5, 0.75, 1.0])
    assert equally_spaced([0.2, 0.4])
    assert not equally_spaced([0.3, 0.6, 1.0])
    assert equally_spaced([1 / 3, 2 / 3 + 1e-9, 1.0])


def test_classical_off_plan_is_refused() -> None:
    with pytest.raises(ValueError, match="equally spaced"):
        boundaries([0.45, 1.0], alpha=0.05, sides=2, efficacy="pocock")


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"fractions": [0.5, 0.4]}, "must increase"),
        ({"fractions": [0.5, 0.5]}, "must increase"),
        ({"fractions": [0.0, 1.0]}, r"in \(0, 1\]"),
        ({"fractions": [0.5, 1.2]}, r"in \(0, 1\]"),
        ({"fractions": []}, "at least one"),
        ({"fractions": "0.5"}, "sequence"),
        ({"fractions": [0.5, float("nan")]}, "finite"),
        ({"efficacy": "hwang-shih-decani"}, "needs gamma"),
        ({"efficacy": "pocock", "gamma": 1.0}, "hwang-shih-decani only"),
        ({"efficacy": "haybittle"}, "unknown efficacy"),
        ({"alpha": 0.0}, "alpha"),
        ({"alpha": 1.5}, "alpha"),
        ({"sides": 3}, "sides"),
        ({"futility": "pocock", "power": 0.8}, "unknown futility"),
        ({"futility": "lan-demets-pocock"}, "power"),
        ({"futility": "hwang-shih-decani", "power": 0.8}, "needs gamma"),
        ({"futility_gamma": -2.0}, "without a futility"),
    ],
)
def test_bad_input_one_line_messages(kwargs: dict[str, object], message: str) -> None:
    args: dict[str, object] = {
        "fractions": [0.5, 1.0],
        "alpha": 0.05,
        "sides": 2,
        "efficacy": "lan-demets-pocock",
    }
    args.update(kwargs)
    with pytest.raises(ValueError, match=message) as info:
        boundaries(**args)  # type: ignore[arg-type]
    assert "\n" not in str(info.value)


def test_spent_bad_names() -> None:
    with pytest.raises(ValueError, match="unknown spending"):
        spent("pocock", [0.5], 0.05)
    with pytest.raises(ValueError, match="needs gamma"):
        spent("hwang-shih-decani", [0.5], 0.05)


def test_name_lists() -> None:
    assert set(FUTILITY) < set(EFFICACY)
