"""Unit tests of prespec.stats.graphical: validation, edges, invariances and properties."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from prespec.stats.graphical import graphical_adjust, graphical_rejections

# An invented family: two primary hypotheses sharing alpha, each passing half to the other.
W2 = [0.5, 0.5]
G2 = [[0.0, 1.0], [1.0, 0.0]]


@st.composite
def graphs(draw: st.DrawFn) -> tuple[list[float], list[float], list[list[float]]]:
    """p-values, weights (sum <= 1) and transitions (rows <= 1, zero diagonal), with zeros."""
    m = draw(st.integers(1, 5))
    unit = st.floats(0.0, 1.0)
    p = draw(
        st.lists(st.one_of(unit, st.sampled_from([0.0, 1.0, 0.01, 0.025])), min_size=m, max_size=m)
    )
    raw_w = draw(st.lists(st.one_of(unit, st.just(0.0)), min_size=m, max_size=m))
    total = sum(raw_w)
    w_scale = draw(st.sampled_from([1.0, 0.5]))
    weights = [v / total * w_scale if total > 1 else v for v in raw_w]
    transitions = []
    for i in range(m):
        row = draw(st.lists(st.one_of(unit, st.just(0.0)), min_size=m, max_size=m))
        row[i] = 0.0
        s = sum(row)
        full = draw(st.booleans())
        transitions.append([v / s if (s > 1 or (full and s > 0)) else v for v in row])
    # keep every sum within the tolerance after the division's rounding
    weights = [min(v, 1.0) for v in weights]
    transitions = [[min(v, 1.0) for v in row] for row in transitions]
    assume(math.fsum(weights) <= 1.0 + 1e-12)
    assume(all(math.fsum(row) <= 1.0 + 1e-12 for row in transitions))
    return p, weights, transitions


# --- validation ----------------------------------------------------------------------------

BAD = [
    (([0.5, 2.0], W2, G2), r"p_values\[1\] must be in \[0, 1\], got 2.0"),
    (([0.5, math.nan], W2, G2), r"p_values\[1\] must be in \[0, 1\]"),
    (([0.5, "0.1"], W2, G2), r"p_values\[1\] must be a number"),
    (([0.5, True], W2, G2), r"p_values\[1\] must be a number"),
    (("0.5", W2, G2), r"p_values must be a sequence of numbers"),
    (([0.1, 0.2], [0.5], G2), r"weights has 1 entries for 2 p-values"),
    (([0.1, 0.2], [0.7, 0.5], G2), r"weights sum to 1.2, more than 1"),
    (([0.1, 0.2], [-0.1, 0.5], G2), r"weights\[0\] must be in \[0, 1\]"),
    (([0.1, 0.2], [math.inf, 0.5], G2), r"weights\[0\] must be in \[0, 1\]"),
    (([0.1, 0.2], W2, [[0, 1]]), r"transitions has 1 rows for 2 p-values"),
    (([0.1, 0.2], W2, [[0, 1], [1]]), r"transitions\[1\] has 1 entries for 2 p-values"),
    (([0.1, 0.2], W2, [[0.5, 0.5], [1, 0]]), r"transitions\[0\]\[0\] must be 0"),
    (([0.1, 0.2], W2, [[0, 1.5], [1, 0]]), r"transitions\[0\]\[1\] must be in \[0, 1\]"),
    (
        ([0.1, 0.2, 0.3], [0.3] * 3, [[0, 0.6, 0.6], [0, 0, 1], [1, 0, 0]]),
        r"transitions\[0\] sums to 1.2, more than 1",
    ),
    (([0.1, 0.2], W2, "ab"), r"transitions must be a square matrix"),
    (([0.1, 0.2], W2, [[0, None], [1, 0]]), r"transitions\[0\]\[1\] must be a number"),
]


@pytest.mark.parametrize("args, message", BAD)
def test_bad_input_is_refused_with_one_clear_line(args: tuple, message: str) -> None:
    for call in (lambda: graphical_adjust(*args), lambda: graphical_rejections(*args, 0.05)):
        with pytest.raises(ValueError, match=message) as caught:
            call()
        assert "\n" not in str(caught.value)


@pytest.mark.parametrize("alpha", [0, 1, -0.1, 1.5, math.nan, "0.05", None, True])
def test_bad_alpha_is_refused(alpha: object) -> None:
    with pytest.raises(ValueError, match="alpha must be"):
        graphical_rejections([0.01, 0.02], W2, G2, alpha)  # type: ignore[arg-type]


def test_sums_within_the_tolerance_are_accepted() -> None:
    third = 1.0 / 3.0
    weights = [third, third, third + 1e-13]
    transitions = [[0, 0.5, 0.5 + 1e-13], [0.5, 0, 0.5], [0.5, 0.5, 0]]
    assert len(graphical_adjust([0.01, 0.02, 0.03], weights, transitions)) == 3
    with pytest.raises(ValueError, match="weights sum to"):
        graphical_adjust([0.01, 0.02, 0.03], [third, third, third + 1e-9], transitions)


def test_numpy_input_is_accepted() -> None:
    ours = graphical_adjust(np.array([0.01, 0.04]), np.array(W2), np.array(G2))
    assert ours == pytest.approx([0.02, 0.04]) and all(type(v) is float for v in ours)


# --- edges ---------------------------------------------------------------------------------


def test_empty_and_single() -> None:
    assert graphical_adjust([], [], []) == []
    assert graphical_rejections([], [], [], 0.05) == []
    assert graphical_adjust([0.03], [1.0], [[0.0]]) == [0.03]
    assert graphical_adjust([0.03], [0.5], [[0.0]]) == [0.06]
    assert graphical_adjust([0.8], [0.5], [[0.0]]) == [1.0]  # capped
    assert graphical_rejections([0.03], [1.0], [[0.0]], 0.05) == [True]


def test_zero_weight_is_never_rejected_unless_weight_arrives() -> None:
    # H2 starts at weight 0; p2 = 0 still cannot be rejected while H1 stands (its level is 0)
    assert graphical_adjust([0.5, 0.0], [1.0, 0.0], [[0, 0], [0, 0]]) == [0.5, 1.0]
    assert graphical_rejections([0.001, 0.0], [1.0, 0.0], [[0, 0], [0, 0]], 0.05) == [
        True,
        False,
    ]
    # with an edge H1 -> H2 it inherits H1's level once H1 is rejected
    assert graphical_adjust([0.01, 0.0], [1.0, 0.0], [[0, 1], [0, 0]]) == [0.01, 0.01]
    # all weights 0: nothing can be rejected
    assert graphical_adjust([0.0, 0.0], [0.0, 0.0], G2) == [1.0, 1.0]
    assert graphical_rejections([0.0, 0.0], [0.0, 0.0], G2, 0.5) == [False, False]


def test_p_values_of_zero_and_one() -> None:
    assert graphical_adjust([0.0, 1.0], W2, G2) == [0.0, 1.0]
    assert graphical_adjust([1.0, 1.0], W2, G2) == [1.0, 1.0]
    assert graphical_adjust([0.0, 0.0], W2, G2) == [0.0, 0.0]


def test_a_cycle_of_full_edges() -> None:
    # g12 = g21 = 1: after H1 falls the pair has no one left to pass to; the update's
    # denominator 1 − g12·g21 is 0 and the new edges are 0 (Bretz et al. 2009)
    p = [0.01, 0.02, 0.04]
    weights = [0.4, 0.4, 0.2]
    transitions = [[0, 1, 0], [1, 0, 0], [0.5, 0.5, 0]]
    # 0.01/0.4 = 0.025 first; then H2 at 0.8: 0.025; H3 keeps 0.2 (nothing passes to it):
    # max(0.04/0.2, 0.025) = 0.2
    assert graphical_adjust(p, weights, transitions) == pytest.approx([0.025, 0.025, 0.2])


def test_ties_give_the_same_values_whichever_goes_first() -> None:
    weights, transitions = [0.5, 0.5], G2
    assert graphical_adjust([0.02, 0.02], weights, transitions) == pytest.approx([0.04, 0.04])
    assert graphical_rejections([0.02, 0.02], weights, transitions, 0.04) == [True, True]


def test_unused_weight_makes_it_conservative() -> None:
    # weights summing to 0.8 test at 0.8·alpha in total: Bonferroni-like inflation
    assert graphical_adjust([0.01, 0.02], [0.4, 0.4], [[0, 1], [1, 0]]) == pytest.approx(
        [0.025, 0.025]
    )


# --- properties ----------------------------------------------------------------------------


@settings(max_examples=300, deadline=None)
@given(graphs(), st.sampled_from([0.001, 0.01, 0.025, 0.05, 0.1, 0.2]))
def test_rejections_agree_with_adjusted_p_values(
    graph: tuple[list[float], list[float], list[list[float]]], alpha: float
) -> None:
    p, weights, transitions = graph
    adjusted = graphical_adjust(p, weights, transitions)
    # a p-value at alpha within rounding may fall either way: not a disagreement
    assume(all(abs(q - alpha) > 1e-9 for q in adjusted))
    assert graphical_rejections(p, weights, transitions, alpha) == [q <= alpha for q in adjusted]


@settings(max_examples=200, deadline=None)
@given(graphs())
def test_adjusted_values_in_range_and_at_least_the_raw(
    graph: tuple[list[float], list[float], list[list[float]]],
) -> None:
    p, weights, transitions = graph
    adjusted = graphical_adjust(p, weights, transitions)
    assert len(adjusted) == len(p)
    for q, raw, w in zip(adjusted, p, weights):
        assert 0.0 <= q <= 1.0 and type(q) is float
        assert q >= raw or q == 1.0 or math.isclose(q, raw, rel_tol=1e-12)
        if w > 0:
            # never above the unshared weighted Bonferroni value
            assert q <= min(1.0, raw / w) * (1 + 1e-12)


@settings(max_examples=150, deadline=None)
@given(graphs(), st.data())
def test_relabelling_the_hypotheses_moves_the_results(
    graph: tuple[list[float], list[float], list[list[float]]], data: st.DataObject
) -> None:
    p, weights, transitions = graph
    m = len(p)
    order = data.draw(st.permutations(range(m)))
    adjusted = graphical_adjust(p, weights, transitions)
    permuted = graphical_adjust(
        [p[i] for i in order],
        [weights[i] for i in order],
        [[transitions[i][j] for j in order] for i in order],
    )
    assert permuted == pytest.approx([adjusted[i] for i in order], rel=1e-9, abs=1e-15)


@settings(max_examples=150, deadline=None)
@given(graphs(), st.data())
def test_a_smaller_p_value_never_raises_an_adjusted_one(
    graph: tuple[list[float], list[float], list[list[float]]], data: st.DataObject
) -> None:
    # monotone: every weighted Bonferroni intersection test is monotone in each p-value
    p, weights, transitions = graph
    i = data.draw(st.integers(0, len(p) - 1))
    smaller = list(p)
    smaller[i] = p[i] * data.draw(st.floats(0.0, 1.0))
    before = graphical_adjust(p, weights, transitions)
    after = graphical_adjust(smaller, weights, transitions)
    assert all(b <= a * (1 + 1e-9) + 1e-15 for b, a in zip(after, before))
