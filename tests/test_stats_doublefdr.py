"""Tests of prespec.stats.doublefdr: the double FDR of Mehrotra and Heyse (2004).

The method is checked against explicit Benjamini–Hochberg calls of
statsmodels.stats.multitest.multipletests(method="fdr_bh") composed as the paper's two steps
(from memory of the paper), and against a small example worked out by hand below.
"""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from prespec.stats.doublefdr import DoubleFdr, double_fdr


def _by_statsmodels(
    p: list[float], groups: list[str], level_groups: float, level_terms: float
) -> DoubleFdr:
    """The double FDR composed from statsmodels' Benjamini–Hochberg, one call per step."""
    names = list(dict.fromkeys(groups))
    within = np.empty(len(p))
    reps = []
    for name in names:
        members = [i for i, g in enumerate(groups) if g == name]
        adjusted = multipletests([p[i] for i in members], method="fdr_bh")[1]
        within[members] = adjusted
        reps.append(float(np.min(adjusted)))
    across = multipletests(reps, method="fdr_bh")[1]
    by_name = dict(zip(names, across))
    flagged_groups = {name: by_name[name] <= level_groups for name in names}
    return DoubleFdr(
        p_group=tuple(float(by_name[g]) for g in groups),
        p_adjusted=tuple(float(v) for v in within),
        flagged=tuple(
            bool(flagged_groups[g] and within[i] <= level_terms) for i, g in enumerate(groups)
        ),
        groups=tuple(names),
        group_p=tuple(float(v) for v in across),
        group_flagged=tuple(bool(flagged_groups[n]) for n in names),
    )


@pytest.mark.parametrize("seed", range(20))
def test_equals_two_steps_of_statsmodels_benjamini_hochberg(seed: int) -> None:
    rng = np.random.default_rng(seed)
    size = int(rng.integers(1, 80))
    k = int(rng.integers(1, 12))
    groups = [f"system-{int(g)}" for g in rng.integers(0, k, size)]
    # a mix of signals, noise, ties (rounded values) and p = 1
    p = np.where(rng.random(size) < 0.3, rng.random(size) * 0.01, rng.random(size))
    p = np.where(rng.random(size) < 0.2, np.round(p, 2), p)
    p = np.where(rng.random(size) < 0.1, 1.0, p)
    values = [float(v) for v in p]
    ours = double_fdr(values, groups, level_groups=0.1, level_terms=0.05)
    ref = _by_statsmodels(values, groups, 0.1, 0.05)
    assert ours.groups == ref.groups
    assert ours.group_flagged == ref.group_flagged
    assert ours.flagged == ref.flagged
    for mine, theirs in (
        (ours.p_adjusted, ref.p_adjusted),
        (ours.p_group, ref.p_group),
        (ours.group_p, ref.group_p),
    ):
        assert mine == pytest.approx(theirs, rel=1e-12, abs=0.0)
    assert all(type(v) is float for v in ours.p_adjusted + ours.p_group + ours.group_p)
    assert all(type(v) is bool for v in ours.flagged + ours.group_flagged)


def test_worked_by_hand() -> None:
    # common practice (Benjamini and Hochberg 1995, step-up): adjusted p(i) is the running
    # minimum, from the largest p down, of m·p(i)/i.
    terms = [
        ("skin", 0.01),
        ("nervous", 0.20),
        ("skin", 0.04),
        ("cardiac", 0.001),
        ("skin", 0.03),
        ("nervous", 0.50),
    ]
    # skin (m = 3), sorted 0.01, 0.03, 0.04: 3·0.01/1 = 0.03, 3·0.03/2 = 0.045, 3·0.04/3 = 0.04
    #   running minimum from the top: 0.04, min(0.045, 0.04) = 0.04, min(0.03, 0.04) = 0.03;
    #   so 0.01 -> 0.03, 0.03 -> 0.04, 0.04 -> 0.04; representative 0.03
    # nervous (m = 2): 0.20 -> 0.40, 0.50 -> 0.50; representative 0.40
    # cardiac (m = 1): 0.001 -> 0.001; representative 0.001
    # across (G = 3), sorted 0.001, 0.03, 0.40: 0.003, 0.045, 0.40 (already increasing)
    result = double_fdr(
        [p for _, p in terms], [g for g, _ in terms], level_groups=0.05, level_terms=0.035
    )
    assert result.groups == ("skin", "nervous", "cardiac")
    assert result.group_p == pytest.approx((0.045, 0.40, 0.003), rel=1e-12)
    assert result.group_flagged == (True, False, True)
    assert result.p_adjusted == pytest.approx((0.03, 0.40, 0.04, 0.001, 0.04, 0.50), rel=1e-12)
    assert result.p_group == pytest.approx((0.045, 0.40, 0.045, 0.003, 0.045, 0.40), rel=1e-12)
    # skin is flagged and only its 0.01 term has adjusted p 0.03 <= 0.035; cardiac's term too
    assert result.flagged == (True, False, False, True, False, False)
    # a group not flagged keeps its terms unflagged however small their own adjusted p
    strict = double_fdr(
        [p for _, p in terms], [g for g, _ in terms], level_groups=0.04, level_terms=0.5
    )
    assert strict.group_flagged == (False, False, True)
    assert strict.flagged == (False, False, False, True, False, False)


def test_one_group_is_plain_benjamini_hochberg() -> None:
    rng = np.random.default_rng(7)
    p = [float(v) for v in np.concatenate([rng.random(30) * 0.002, rng.random(70)])]
    result = double_fdr(p, ["gastro"] * len(p), level_groups=0.999, level_terms=0.05)
    reject, adjusted, _, _ = multipletests(p, alpha=0.05, method="fdr_bh")
    assert result.flagged == tuple(bool(r) for r in reject)
    assert sum(result.flagged) > 0
    assert result.p_adjusted == pytest.approx(list(adjusted), rel=1e-12)
    # the one representative adjusted across one group is itself: the smallest adjusted p
    assert result.group_p == pytest.approx((float(np.min(adjusted)),), rel=1e-12)


def test_ties_and_p_one() -> None:
    result = double_fdr(
        [0.02, 0.02, 1.0, 1.0, 1.0],
        ["renal", "renal", "renal", "hepatic", "hepatic"],
        level_groups=0.05,
        level_terms=0.05,
    )
    # renal (m = 3), sorted 0.02, 0.02, 1: 0.06, 0.03, 1 -> running minimum 0.03, 0.03, 1
    assert result.p_adjusted == pytest.approx((0.03, 0.03, 1.0, 1.0, 1.0), rel=1e-12)
    # representatives 0.03 and 1; across G = 2: 0.06 and 1
    assert result.group_p == pytest.approx((0.06, 1.0), rel=1e-12)
    assert result.group_flagged == (False, False)
    assert result.flagged == (False,) * 5
    looser = double_fdr(
        [0.02, 0.02, 1.0, 1.0, 1.0],
        ["renal", "renal", "renal", "hepatic", "hepatic"],
        level_groups=0.1,
        level_terms=0.03,
    )
    # flags at equality (adjusted p <= level), ties flagged together
    assert looser.group_flagged == (True, False)
    assert looser.flagged == (True, True, False, False, False)


def test_flag_at_equality_and_empty_input() -> None:
    one = double_fdr([0.25], ["eye"], level_groups=0.25, level_terms=0.25)
    assert one.group_p == (0.25,) and one.group_flagged == (True,) and one.flagged == (True,)
    empty = double_fdr([], [], level_groups=0.1, level_terms=0.1)
    assert empty == DoubleFdr((), (), (), (), (), ())


@pytest.mark.parametrize(
    ("p", "groups", "levels", "message"),
    [
        ([0.1], [""], (0.1, 0.1), r"groups\[0\] is an empty group name"),
        ([0.1, 0.2], ["a", "  "], (0.1, 0.1), r"groups\[1\] is an empty group name"),
        ([0.1], [3], (0.1, 0.1), r"groups\[0\] must be text"),
        ([0.1, 0.2], ["a"], (0.1, 0.1), "p has 2 values but groups has 1"),
        ([0.1], "a", (0.1, 0.1), "not one string"),
        ([1.5], ["a"], (0.1, 0.1), r"p_values\[0\] must be in \[0, 1\]"),
        ([float("nan")], ["a"], (0.1, 0.1), r"must be in \[0, 1\]"),
        ([0.1], ["a"], (0.0, 0.1), "level_groups must be strictly between 0 and 1"),
        ([0.1], ["a"], (0.1, 1.0), "level_terms must be strictly between 0 and 1"),
        ([0.1], ["a"], (True, 0.1), "level_groups must be a number"),
    ],
)
def test_bad_input(p: list[float], groups: list[str], levels: tuple[float, float],
                   message: str) -> None:
    with pytest.raises(ValueError, match=message) as caught:
        double_fdr(p, groups, level_groups=levels[0], level_terms=levels[1])
    assert "\n" not in str(caught.value)
