"""Unit tests of prespec.stats.multiplicity: validation, edges and orderings."""

from __future__ import annotations

import math

import numpy as np
import pytest

from prespec.stats import ADJUSTMENT_METHODS, adjust

METHODS = sorted(ADJUSTMENT_METHODS)
# fixed-sequence depends on the pre-specified order by design, so it is left out of the checks
# that a family's adjusted values do not depend on the order it is given in.
ORDER_FREE = [m for m in METHODS if m != "fixed-sequence"]


def test_the_methods_offered() -> None:
    assert isinstance(ADJUSTMENT_METHODS, frozenset)
    assert ADJUSTMENT_METHODS == {
        "none",
        "bonferroni",
        "sidak",
        "holm",
        "hochberg",
        "hommel",
        "fixed-sequence",
        "benjamini-hochberg",
        "benjamini-yekutieli",
    }


@pytest.mark.parametrize("method", METHODS)
def test_empty_family(method: str) -> None:
    assert adjust([], method) == []


@pytest.mark.parametrize("method", METHODS)
def test_one_hypothesis_is_not_adjusted(method: str) -> None:
    # common practice: with a single hypothesis every adjustment is the identity
    for p in (0.0, 0.003, 0.5, 1.0):
        assert adjust([p], method) == pytest.approx([p], rel=1e-12)


@pytest.mark.parametrize("method", ORDER_FREE)
def test_output_is_plain_floats_in_input_order_capped_at_one(method: str) -> None:
    p = [0.2, 0.001, 0.9, 0.04, 0.04]
    adjusted = adjust(p, method)
    assert len(adjusted) == 5 and all(type(v) is float for v in adjusted)
    assert all(0.0 <= v <= 1.0 for v in adjusted)
    assert all(a >= raw - 1e-15 for a, raw in zip(adjusted, p))  # never below the raw p
    # the order of the adjusted values follows the order of the raw ones
    ranks = np.argsort(p, kind="stable")
    assert list(np.array(adjusted)[ranks]) == sorted(adjusted)
    assert adjusted[3] == adjusted[4]  # ties stay tied
    # the same family given in another order gives the same values, moved with it
    assert adjust(p[::-1], method) == adjusted[::-1]


def test_bonferroni_and_none_by_hand() -> None:
    assert adjust([0.01, 0.3, 0.02], "bonferroni") == pytest.approx([0.03, 0.9, 0.06])
    assert adjust([0.5, 0.6], "bonferroni") == [1.0, 1.0]
    assert adjust([0.01, 0.3, 0.02], "none") == [0.01, 0.3, 0.02]


def test_sidak_by_hand() -> None:
    # 1 - (1 - p)^m: 1 - 0.99^3 = 0.029701
    assert adjust([0.01, 0.5, 0.9], "sidak")[0] == pytest.approx(0.029701, rel=1e-12)
    assert adjust([1e-12, 0.5], "sidak")[0] == pytest.approx(2e-12, rel=1e-9)


def test_hochberg_and_bh_by_hand() -> None:
    # sorted 0.01, 0.02, 0.03 (m = 3). Hochberg: 3*0.01, 2*0.02, 1*0.03 -> running minimum
    # from the top: 0.03, 0.03, 0.03. Benjamini-Hochberg: 3*p/i = 0.03, 0.03, 0.03.
    assert adjust([0.03, 0.01, 0.02], "hochberg") == pytest.approx([0.03, 0.03, 0.03])
    assert adjust([0.03, 0.01, 0.02], "benjamini-hochberg") == pytest.approx([0.03] * 3)
    # Benjamini-Yekutieli multiplies by 1 + 1/2 + 1/3 = 11/6
    assert adjust([0.03, 0.01, 0.02], "benjamini-yekutieli") == pytest.approx([0.055] * 3)


def test_known_orderings() -> None:
    # Holm is never more conservative than Bonferroni (Holm 1979), Hochberg than Holm
    # (Hochberg 1988), Hommel than Hochberg (Hommel 1989, Biometrika 76:624-625; from memory),
    # Benjamini-Hochberg than Hochberg; Sidak lies between raw and Bonferroni.
    rng = np.random.default_rng(53)
    for _ in range(200):
        p = list(rng.uniform(0, 1, int(rng.integers(2, 12))) ** 2)
        a = {m: np.array(adjust(p, m)) for m in METHODS}
        tol = 1e-12
        assert np.all(a["holm"] <= a["bonferroni"] + tol)
        assert np.all(a["hochberg"] <= a["holm"] + tol)
        assert np.all(a["hommel"] <= a["hochberg"] + tol)
        assert np.all(a["benjamini-hochberg"] <= a["hochberg"] + tol)
        assert np.all(a["sidak"] <= a["bonferroni"] + tol)
        assert np.all(a["benjamini-yekutieli"] >= a["benjamini-hochberg"] - tol)


@pytest.mark.parametrize("bad", [math.nan, -0.01, 1.01, math.inf, "0.1", None, True])
def test_bad_p_values_are_refused(bad: object) -> None:
    with pytest.raises(ValueError, match=r"p_values\[1\] must be"):
        adjust([0.01, bad, 0.2], "holm")  # type: ignore[list-item]


@pytest.mark.parametrize("bad", ["Holm", "BH", "fdr_bh", "", None, "graphical"])
def test_unknown_method_is_refused(bad: object) -> None:
    with pytest.raises(ValueError, match="not a known adjustment method"):
        adjust([0.01], bad)  # type: ignore[arg-type]


def test_sequences_of_any_kind() -> None:
    assert adjust((0.01, 0.02), "holm") == pytest.approx([0.02, 0.02])
    assert adjust(np.array([0.01, 0.02]), "holm") == pytest.approx([0.02, 0.02])
    with pytest.raises(ValueError, match="sequence of numbers"):
        adjust("0.01", "holm")
