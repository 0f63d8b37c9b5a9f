"""Reference checks of the multiplicity adjustments against a published example and statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from prespec.stats import ADJUSTMENT_METHODS, adjust

# Our plan names and the method names of statsmodels.stats.multitest.multipletests.
STATSMODELS_NAMES = {
    "bonferroni": "bonferroni",
    "sidak": "sidak",
    "holm": "holm",
    "hochberg": "simes-hochberg",
    "hommel": "hommel",
    "benjamini-hochberg": "fdr_bh",
    "benjamini-yekutieli": "fdr_by",
}

# Benjamini Y, Hochberg Y. Controlling the false discovery rate. JRSS B 1995;57:289-300,
# section 4: the 15 p-values of their example, in increasing order. # from memory
BH_1995_EXAMPLE = [
    0.0001,
    0.0004,
    0.0019,
    0.0095,
    0.0201,
    0.0278,
    0.0298,
    0.0344,
    0.0459,
    0.3240,
    0.4262,
    0.5719,
    0.6528,
    0.7590,
    1.0000,
]


def test_holm_by_hand() -> None:
    # common practice, Holm's (1979) step-down rule worked by hand: sorted p = 0.005, 0.01,
    # 0.03, 0.04 (m = 4) are multiplied by 4, 3, 2, 1 -> 0.02, 0.03, 0.06, 0.04, and the
    # running maximum makes the last 0.06. Input order is kept.
    assert adjust([0.01, 0.04, 0.03, 0.005], "holm") == pytest.approx(
        [0.03, 0.06, 0.06, 0.02], rel=1e-12
    )


def test_published_example_rejections() -> None:
    # Benjamini & Hochberg 1995, section 4 (from memory): at level 0.05 the Bonferroni
    # procedure rejects the 3 smallest p-values and the false discovery rate procedure the 4
    # smallest. Holm also rejects 3 by hand: 0.0095 > 0.05/12 stops the step-down (common
    # practice).
    def rejected(method: str) -> int:
        return sum(p <= 0.05 for p in adjust(BH_1995_EXAMPLE, method))

    assert rejected("bonferroni") == 3
    assert rejected("holm") == 3
    assert rejected("benjamini-hochberg") == 4


def test_every_adjusting_method_is_checked_here() -> None:
    # fixed-sequence is not in statsmodels; it is checked by hand below.
    assert set(STATSMODELS_NAMES) | {"none", "fixed-sequence"} == ADJUSTMENT_METHODS


def test_fixed_sequence_stops_at_the_first_non_rejection() -> None:
    # common practice (Maurer, Hothorn and Lehmacher 1995; Westfall and Krishen 2001): each
    # hypothesis is tested at the full alpha in the pre-specified order and testing stops at
    # the first that is not rejected, so the adjusted p-value is the running maximum.
    p = [0.01, 0.04, 0.06, 0.001]
    assert adjust(p, "fixed-sequence") == pytest.approx([0.01, 0.04, 0.06, 0.06], rel=1e-15)
    assert [q <= 0.05 for q in adjust(p, "fixed-sequence")] == [True, True, False, False]


@pytest.mark.filterwarnings("ignore:divide by zero encountered in log1p:RuntimeWarning")
@pytest.mark.parametrize("method", sorted(STATSMODELS_NAMES))
def test_matches_statsmodels_multipletests(method: str) -> None:
    # statsmodels.stats.multitest.multipletests(p, method=...)[1], 1e-12 relative, on 500
    # random families of 1 to 20 p-values (60 for holm, where multipletests takes about 60 ms
    # a call); a quarter of them rounded to 2 decimals for ties, and some containing 0 and 1.
    # (The filtered warning is statsmodels' own, for sidak at p = 1.)
    rng = np.random.default_rng(43)
    for i in range(60 if method == "holm" else 500):
        m = int(rng.integers(1, 21))
        p = rng.uniform(0.0, 1.0, m) ** 3
        if i % 4 == 0:
            p = np.round(p, 2)
        if i % 10 == 0:
            p[0], p[-1] = 0.0, 1.0
        ref = multipletests(p, method=STATSMODELS_NAMES[method])[1]
        ours = adjust([float(v) for v in p], method)
        np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=0.0, err_msg=str(list(p)))


@pytest.mark.filterwarnings("ignore:divide by zero encountered in log1p:RuntimeWarning")
def test_published_example_matches_statsmodels() -> None:
    # statsmodels.stats.multitest.multipletests on the Benjamini & Hochberg 1995 p-values.
    for method, name in STATSMODELS_NAMES.items():
        ref = multipletests(BH_1995_EXAMPLE, method=name)[1]
        np.testing.assert_allclose(adjust(BH_1995_EXAMPLE, method), ref, rtol=1e-12)
