"""Reference checks of the confidence intervals against Newcombe (1998) and statsmodels.

The published limits below are ``# from memory``: recalled, not looked up in the printed
tables. Each is asserted to the 4 decimals printed there.
"""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from prespec.stats import newcombe_difference, wald_difference, wilson

LEVELS = (0.80, 0.90, 0.95, 0.99)

# Newcombe RG. Interval estimation for the difference between independent proportions:
# comparison of eleven methods. Statistics in Medicine 1998;17:873-890, Table II, 95 per cent
# limits for the examples (a)-(e). # from memory
NEWCOMBE_1998_TABLE_II_METHOD_10 = [
    ((56, 70, 48, 80), (0.0524, 0.3339)),
    ((9, 10, 3, 10), (0.1705, 0.8090)),
    ((6, 7, 2, 7), (0.0582, 0.8062)),
    ((5, 56, 0, 29), (-0.0381, 0.1926)),
    ((0, 10, 0, 20), (-0.1611, 0.2775)),
]
# Same table, method 1 (simple asymptotic, no continuity correction). # from memory
NEWCOMBE_1998_TABLE_II_METHOD_1 = [
    ((56, 70, 48, 80), (0.0575, 0.3425)),
    ((9, 10, 3, 10), (0.2605, 0.9395)),
    ((6, 7, 2, 7), (0.1481, 0.9947)),
    ((5, 56, 0, 29), (0.0146, 0.1640)),
]
# Newcombe RG. Two-sided confidence intervals for the single proportion: comparison of seven
# methods. Statistics in Medicine 1998;17:857-872, Table II, method 3 (Wilson score, no
# continuity correction), 95 per cent limits. # from memory
NEWCOMBE_1998_SINGLE_TABLE_II_METHOD_3 = [
    ((81, 263), (0.2553, 0.3662)),
    ((15, 148), (0.0624, 0.1605)),
    ((0, 20), (0.0000, 0.1611)),
    ((1, 29), (0.0061, 0.1718)),
]


@pytest.mark.parametrize("counts, limits", NEWCOMBE_1998_TABLE_II_METHOD_10)
def test_newcombe_method_10_published_examples(
    counts: tuple[int, int, int, int], limits: tuple[float, float]
) -> None:
    estimate = newcombe_difference(*counts, 0.95)
    assert (round(estimate.low, 4), round(estimate.high, 4)) == limits


@pytest.mark.parametrize("counts, limits", NEWCOMBE_1998_TABLE_II_METHOD_1)
def test_wald_method_1_published_examples(
    counts: tuple[int, int, int, int], limits: tuple[float, float]
) -> None:
    estimate = wald_difference(*counts, 0.95)
    assert (round(estimate.low, 4), round(estimate.high, 4)) == limits


def test_wald_zero_width_when_both_proportions_are_zero() -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(0, 10, 0, 20, method="wald",
    # compare="diff") also gives (0, 0): the standard error is 0, and the interval is kept as
    # computed (Newcombe 1998, Table II, example (e): method 1 degenerates).
    low, high = confint_proportions_2indep(0, 10, 0, 20, method="wald", compare="diff")
    estimate = wald_difference(0, 10, 0, 20, 0.95)
    assert (estimate.low, estimate.high) == (low, high) == (0.0, 0.0)


@pytest.mark.parametrize("counts, limits", NEWCOMBE_1998_SINGLE_TABLE_II_METHOD_3)
def test_wilson_published_examples(counts: tuple[int, int], limits: tuple[float, float]) -> None:
    estimate = wilson(*counts, 0.95)
    assert (round(estimate.low, 4), round(estimate.high, 4)) == limits


def _random_pairs(seed: int, count: int) -> list[tuple[int, int, int, int]]:
    """(x1, n1, x2, n2) with small and large n, a quarter of them at 0 or n events."""
    rng = np.random.default_rng(seed)
    pairs = []
    for i in range(count):
        n1 = int(rng.integers(1, 30 if i % 2 else 500))
        n2 = int(rng.integers(1, 30 if i % 3 else 500))
        x1 = int(rng.integers(0, n1 + 1))
        x2 = int(rng.integers(0, n2 + 1))
        if i % 4 == 0:
            x1 = (0, n1)[i % 8 == 0]
        pairs.append((x1, n1, x2, n2))
    return pairs


# Relative tolerance 1e-9; the absolute floor 1e-12 is only there for limits that are 0,
# where statsmodels may return a rounding residue (about 1e-17) clipped or not.
def _close(ours: float, ref: float) -> bool:
    return ours == pytest.approx(float(ref), rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("level", LEVELS)
def test_wilson_matches_statsmodels(level: float) -> None:
    # statsmodels.stats.proportion.proportion_confint(x, n, alpha=1 - level, method="wilson")
    for x, n, _, _ in _random_pairs(seed=23, count=300):
        estimate = wilson(x, n, level)
        low, high = proportion_confint(x, n, alpha=1 - level, method="wilson")
        assert _close(estimate.low, low) and _close(estimate.high, high), (x, n)


@pytest.mark.parametrize("level", LEVELS)
def test_newcombe_matches_statsmodels(level: float) -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(..., method="newcomb",
    # compare="diff", alpha=1 - level): the same hybrid of Wilson limits.
    for x1, n1, x2, n2 in _random_pairs(seed=29, count=300):
        estimate = newcombe_difference(x1, n1, x2, n2, level)
        low, high = confint_proportions_2indep(
            x1, n1, x2, n2, method="newcomb", compare="diff", alpha=1 - level
        )
        assert _close(estimate.low, low) and _close(estimate.high, high), (x1, n1, x2, n2)
        assert estimate.value == pytest.approx(x1 / n1 - x2 / n2, rel=1e-12, abs=1e-15)


@pytest.mark.parametrize("level", LEVELS)
def test_wald_matches_statsmodels_clipped(level: float) -> None:
    # statsmodels.stats.proportion.confint_proportions_2indep(..., method="wald",
    # compare="diff", alpha=1 - level). statsmodels does not clip the Wald limits, so with a
    # large difference in small groups its limits can pass -1 or 1 (e.g. 9/10 vs 1/10 at
    # 99 per cent reaches 1.146); we clip to [-1, 1], so its limits are clipped here too.
    clipped = 0
    for x1, n1, x2, n2 in _random_pairs(seed=37, count=300) + [(9, 10, 1, 10), (1, 10, 9, 10)]:
        estimate = wald_difference(x1, n1, x2, n2, level)
        low, high = confint_proportions_2indep(
            x1, n1, x2, n2, method="wald", compare="diff", alpha=1 - level
        )
        clipped += int(low < -1 or high > 1)
        assert _close(estimate.low, max(-1.0, low)), (x1, n1, x2, n2)
        assert _close(estimate.high, min(1.0, high)), (x1, n1, x2, n2)
    if level == 0.99:
        assert clipped >= 2  # the clipping is exercised, not only assumed
