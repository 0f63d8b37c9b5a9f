"""Reference checks of the graphical procedure against the procedures it contains and the
closed test it shortcuts.

Bretz, Maurer, Brannath and Posch (Statistics in Medicine 2009;28:586–604) show that Holm's
procedure, the fixed sequence, weighted Bonferroni and the fallback procedure are special graphs,
and that the sequentially rejective graph procedure is a shortcut of a closed test whose
intersection hypotheses are tested by weighted Bonferroni tests. Each of those is checked here.
Library checks name the function that computed the reference value.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from prespec.stats.graphical import graphical_adjust, graphical_rejections
from prespec.stats.multiplicity import adjust


def _holm_graph(m: int) -> tuple[list[float], list[list[float]]]:
    """Equal weights 1/m; each hypothesis passes its weight equally to the m − 1 others."""
    weights = [1.0 / m] * m
    transitions = [[0.0 if i == j else 1.0 / (m - 1) for j in range(m)] for i in range(m)]
    return weights, transitions


def _chain(m: int) -> list[list[float]]:
    """1 → 2 → … → m, each passing all its weight to the next."""
    return [[1.0 if j == i + 1 else 0.0 for j in range(m)] for i in range(m)]


def _families(seed: int, count: int, max_m: int) -> list[np.ndarray]:
    """Random p-value families; some rounded (ties), some holding 0 or 1."""
    rng = np.random.default_rng(seed)
    families = []
    for i in range(count):
        p = rng.uniform(0.0, 1.0, int(rng.integers(1, max_m + 1))) ** 3
        if i % 4 == 0:
            p = np.round(p, 2)
        if i % 10 == 0:
            p[0], p[-1] = 0.0, 1.0
        families.append(p)
    return families


def _random_graph(rng: np.random.Generator, m: int) -> tuple[list[float], list[list[float]]]:
    """Weights summing to at most 1 and rows summing to at most 1, with zeros in both."""
    weights = rng.uniform(0.0, 1.0, m) * (rng.uniform(0.0, 1.0, m) < 0.8)
    weights = weights / max(weights.sum(), 1e-300) * (1.0 if rng.uniform() < 0.7 else 0.6)
    transitions = rng.uniform(0.0, 1.0, (m, m)) * (rng.uniform(0.0, 1.0, (m, m)) < 0.7)
    np.fill_diagonal(transitions, 0.0)
    sums = transitions.sum(axis=1, keepdims=True)
    scale = np.where(rng.uniform(0.0, 1.0, (m, 1)) < 0.7, 1.0, 0.5)
    transitions = np.divide(transitions, sums, out=np.zeros_like(transitions), where=sums > 0)
    return [float(w) for w in weights], (transitions * scale).tolist()


# --- the procedures it contains ------------------------------------------------------------


def test_holm_graph_gives_holm() -> None:
    # Bretz et al. 2009, section 3 (# from memory): equal weights 1/m with g_ij = 1/(m − 1) is
    # Holm's procedure. Against prespec.stats.multiplicity.adjust(p, "holm") (itself checked
    # against statsmodels) on 400 families, and statsmodels.stats.multitest.multipletests(
    # p, method="holm") directly on 20 (about 60 ms a call there); 1e-9 relative.
    for i, p in enumerate(_families(31, 400, 8)):
        m = p.size
        if m == 1:
            weights, transitions = [1.0], [[0.0]]
        else:
            weights, transitions = _holm_graph(m)
        ours = graphical_adjust(list(p), weights, transitions)
        np.testing.assert_allclose(ours, adjust(list(p), "holm"), rtol=1e-9, atol=1e-15)
        if i < 20:
            ref = multipletests(p, method="holm")[1]
            np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-15, err_msg=str(list(p)))


def test_holm_by_hand() -> None:
    # common practice, Holm (1979) worked by hand: p = 0.01, 0.04, 0.03, 0.005 (m = 4) sorted
    # 0.005, 0.01, 0.03, 0.04 times 4, 3, 2, 1 = 0.02, 0.03, 0.06, 0.04; running max 0.06.
    weights, transitions = _holm_graph(4)
    ours = graphical_adjust([0.01, 0.04, 0.03, 0.005], weights, transitions)
    assert ours == pytest.approx([0.03, 0.06, 0.06, 0.02], rel=1e-12)


def test_chain_gives_fixed_sequence() -> None:
    # Bretz et al. 2009 (# from memory): weight 1 on the first hypothesis and a chain
    # 1 → 2 → … → m is the fixed-sequence procedure, whose adjusted p-value is the running
    # maximum (Westfall and Krishen 2001); against adjust(p, "fixed-sequence") and
    # numpy.maximum.accumulate, 1e-12 relative.
    for p in _families(32, 300, 8):
        m = p.size
        ours = graphical_adjust(list(p), [1.0] + [0.0] * (m - 1), _chain(m))
        np.testing.assert_allclose(ours, np.maximum.accumulate(p), rtol=1e-12, atol=0.0)
        np.testing.assert_allclose(ours, adjust(list(p), "fixed-sequence"), rtol=1e-12)


def test_no_transitions_give_weighted_bonferroni() -> None:
    # common practice: without transitions nothing is passed on, each hypothesis is tested at
    # w_i·alpha, and the adjusted p-value is min(1, p_i / w_i) (weighted Bonferroni).
    rng = np.random.default_rng(33)
    for p in _families(33, 300, 6):
        m = p.size
        weights = rng.dirichlet(np.ones(m)) * rng.choice([1.0, 0.8])
        ours = graphical_adjust(list(p), list(weights), [[0.0] * m for _ in range(m)])
        np.testing.assert_allclose(ours, np.minimum(1.0, p / weights), rtol=1e-12)
    # by hand, w = (0.8, 0.2): 0.03/0.8 = 0.0375 and 0.01/0.2 = 0.05
    assert graphical_adjust([0.03, 0.01], [0.8, 0.2], [[0, 0], [0, 0]]) == pytest.approx(
        [0.0375, 0.05], rel=1e-12
    )
    # equal weights 1/m and no transitions: Bonferroni, as adjust(p, "bonferroni")
    p = [0.01, 0.2, 0.004, 0.03]
    assert graphical_adjust(p, [0.25] * 4, [[0.0] * 4] * 4) == pytest.approx(
        adjust(p, "bonferroni"), rel=1e-12
    )


def test_proportional_transitions_give_weighted_holm() -> None:
    # Holm 1979 (weighted version; # common practice): with g_ij = w_j / Σ_{k≠i} w_k the
    # weights left always keep their initial proportions and sum to the initial total, so,
    # sorting by p_i / w_i, the adjusted p-value of the k-th is the running maximum of
    # min(1, p_(k) · Σ_{l >= k} w_(l) / w_(k)) (total weight 1).
    rng = np.random.default_rng(34)
    for p in _families(34, 300, 6):
        m = p.size
        if m == 1:
            continue
        w = rng.dirichlet(np.ones(m))
        others = [sum(w[k] for k in range(m) if k != i) for i in range(m)]
        transitions = [[0.0 if i == j else w[j] / others[i] for j in range(m)] for i in range(m)]
        ours = graphical_adjust(list(p), list(w), transitions)
        order = np.argsort(p / w, kind="stable")
        tail = np.cumsum(w[order][::-1])[::-1]
        stepped = np.maximum.accumulate(np.minimum(1.0, p[order] * tail / w[order]))
        expected = np.empty(m)
        expected[order] = stepped
        np.testing.assert_allclose(ours, expected, rtol=1e-9, atol=1e-15, err_msg=str(list(p)))


def test_fallback_by_hand() -> None:
    # Wiens BL. A fixed sequence Bonferroni procedure for testing multiple endpoints.
    # Pharmaceutical Statistics 2003;2:211-215: the fallback procedure, drawn by Bretz et al.
    # 2009 as weights (w1, w2) and the single edge H1 → H2 of weight 1 (# from memory).
    # Worked by hand (common practice), w = (0.8, 0.2):
    # - p = (0.03, 0.02): H1 first (0.03/0.8 = 0.0375 < 0.02/0.2 = 0.1), q1 = 0.0375; H2 then
    #   has weight 1, q2 = max(0.02, 0.0375) = 0.0375.
    # - p = (0.5, 0.004): H2 first (0.004/0.2 = 0.02), q2 = 0.02; nothing passes back to H1,
    #   whose weight stays 0.8: q1 = max(0.5/0.8, 0.02) = 0.625.
    graph = [[0.0, 1.0], [0.0, 0.0]]
    assert graphical_adjust([0.03, 0.02], [0.8, 0.2], graph) == pytest.approx([0.0375, 0.0375])
    assert graphical_adjust([0.5, 0.004], [0.8, 0.2], graph) == pytest.approx([0.625, 0.02])
    assert graphical_rejections([0.5, 0.004], [0.8, 0.2], graph, 0.025) == [False, True]
    assert graphical_rejections([0.03, 0.02], [0.8, 0.2], graph, 0.025) == [False, False]
    assert graphical_rejections([0.03, 0.02], [0.8, 0.2], graph, 0.05) == [True, True]


def test_two_primary_two_secondary_by_hand() -> None:
    # The graph for two primary hypotheses (H1, H2, e.g. two doses on the primary endpoint),
    # each with a secondary one (H3 after H1, H4 after H2), drawn in Bretz et al. 2009 and in
    # Bretz F, Posch M, Glimm E, Klinglmueller F, Maurer W, Rohmeyer K, Biometrical Journal
    # 2011;53:894-913, figure 1 (graph # from memory; the p-values are ours):
    #   w = (1/2, 1/2, 0, 0); H1 → H2 1/2, H1 → H3 1/2; H2 → H1 1/2, H2 → H4 1/2;
    #   H3 → H2 1; H4 → H1 1.
    # Worked by hand (common practice), p = (0.01, 0.03, 0.005, 0.5):
    # 1. ratios 0.02, 0.06, inf, inf: H1 first, q1 = 0.02. Weights become w2 = 1/2 + 1/4
    #    = 3/4, w3 = 1/4, w4 = 0; new edges g23 = (0 + 1/2·1/2)/(1 − 1/4) = 1/3,
    #    g24 = 1/2 / (3/4) = 2/3, g32 = 1, g34 = 0, g42 = (0 + 1·1/2)/1 = 1/2, g43 = 1/2.
    # 2. ratios 0.03/0.75 = 0.04, 0.005/0.25 = 0.02: H3, q3 = max(0.02, 0.02) = 0.02.
    #    w2 = 3/4 + 1/4·1 = 1, w4 = 0; g24 = (2/3 + 1/3·0)/(1 − 1/3·1) = 1, g42 = 1.
    # 3. H2 at weight 1: q2 = max(0.03, 0.02) = 0.03. 4. H4 gets weight 1: q4 = 0.5.
    weights = [0.5, 0.5, 0.0, 0.0]
    graph = [[0, 0.5, 0.5, 0], [0.5, 0, 0, 0.5], [0, 1, 0, 0], [1, 0, 0, 0]]
    p = [0.01, 0.03, 0.005, 0.5]
    assert graphical_adjust(p, weights, graph) == pytest.approx([0.02, 0.03, 0.02, 0.5])
    # at one-sided 0.025: H1 (0.01 <= 0.0125), then H3 (0.005 <= 0.00625); H2 needs 0.025
    assert graphical_rejections(p, weights, graph, 0.025) == [True, False, True, False]
    # H3 alone small cannot be rejected while H1 stands (secondary after primary)
    q = graphical_adjust([0.2, 0.3, 0.0001, 0.0001], weights, graph)
    assert q == pytest.approx([0.4, 0.4, 0.4, 0.4])


# --- the closed test it shortcuts ----------------------------------------------------------


def _intersection_weights(
    subset: tuple[int, ...], weights: list[float], transitions: list[list[float]]
) -> dict[int, float]:
    """Weights of the intersection of the hypotheses in ``subset``: start from the full graph
    and remove every hypothesis outside it by the update rule of Bretz et al. 2009
    (Algorithm 1), written out again here independently of the module under test."""
    w = dict(enumerate(weights))
    g = {(i, j): transitions[i][j] for i in w for j in w}
    for j in [h for h in range(len(weights)) if h not in subset]:
        left = [h for h in w if h != j]
        new_g = {}
        for a in left:
            for b in left:
                denominator = 1.0 - g[a, j] * g[j, a]
                if a == b or denominator <= 0.0:
                    new_g[a, b] = 0.0
                else:
                    new_g[a, b] = (g[a, b] + g[a, j] * g[j, b]) / denominator
        w = {h: w[h] + w[j] * g[j, h] for h in left}
        g = new_g
    return w


def _closed_test_adjusted(
    p: list[float], weights: list[float], transitions: list[list[float]]
) -> list[float]:
    """Adjusted p-values of the closed test with weighted Bonferroni intersection tests:
    q_i = max over subsets J containing i of min(1, min over j in J of p_j / w_j(J))."""
    m = len(p)
    local: dict[tuple[int, ...], float] = {}
    for size in range(1, m + 1):
        for subset in itertools.combinations(range(m), size):
            w = _intersection_weights(subset, weights, transitions)
            ratios = [p[j] / w[j] if w[j] > 0 else np.inf for j in subset]
            local[subset] = min(1.0, min(ratios))
    return [max(v for s, v in local.items() if i in s) for i in range(m)]


def test_matches_the_closed_weighted_bonferroni_test() -> None:
    # Bretz et al. 2009, section 3: the sequentially rejective procedure is a shortcut of the
    # closed test of the intersection hypotheses by weighted Bonferroni tests with weights
    # from the graph, so the adjusted p-values agree. 200 random graphs of 1 to 5 hypotheses,
    # 1e-9 relative.
    rng = np.random.default_rng(35)
    for _ in range(200):
        m = int(rng.integers(1, 6))
        weights, transitions = _random_graph(rng, m)
        p = list(rng.uniform(0.0, 0.2, m) ** 2)
        ours = graphical_adjust(p, weights, transitions)
        closed = _closed_test_adjusted(p, weights, transitions)
        np.testing.assert_allclose(
            ours, closed, rtol=1e-9, atol=1e-15, err_msg=f"{p} {weights} {transitions}"
        )
        for alpha in (0.01, 0.025, 0.05):
            if any(abs(q - alpha) < 1e-9 for q in closed):
                continue
            assert graphical_rejections(p, weights, transitions, alpha) == [
                q <= alpha for q in closed
            ]
