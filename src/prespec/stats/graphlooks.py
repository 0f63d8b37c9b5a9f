"""The graphical procedure over hypotheses and interim looks together (Maurer & Bretz 2013).

Each hypothesis has its own group-sequential boundaries, computed at its current local level
w_i·alpha of the graph (Bretz et al. 2009). At look k every hypothesis still in the graph is
tested with its boundaries at that level; when one is rejected, its weight passes on along the
transitions, the graph is updated, and the others are tested again at look k with boundaries
recomputed at their new levels, at every look up to k (a hypothesis whose z crossed an earlier
look's boundary at the new level is rejected now). This repeats until no more can be rejected;
then the next look. A hypothesis without interim looks has one analysis, at the final look.

This module holds the procedure only: whether hypothesis i crosses, at level a, by look k, is
asked of the caller (``crosses(i, a, k)``), which knows the boundaries and the data. The
boundaries must fall as the level rises (spending functions and the classical boundaries do),
so that the set rejected does not depend on the order of rejection.

References
----------
Maurer W, Bretz F. Multiple testing in group sequential trials using graphical approaches.
Statistics in Biopharmaceutical Research 2013; 5: 311-320.
Bretz F, Maurer W, Brannath W, Posch M. A graphical approach to sequentially rejective
multiple test procedures. Statistics in Medicine 2009; 28: 586-604.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .graphical import build_graph, remove_hypothesis


@dataclass(frozen=True)
class Rejection:
    """One step of the procedure: ``hypothesis`` (its index) rejected at ``look`` at ``level``."""

    hypothesis: int
    look: int
    level: float


@dataclass(frozen=True)
class GraphLooks:
    """The outcome over looks 1..K: the rejections in order, and each hypothesis's level at
    the end (the level it was rejected at, for a rejected one)."""

    rejections: tuple[Rejection, ...]
    levels: tuple[float, ...]

    def rejected_at(self, i: int) -> int | None:
        """The look at which hypothesis ``i`` was rejected, or None."""
        return next((r.look for r in self.rejections if r.hypothesis == i), None)


def graph_over_looks(
    weights: Sequence[float],
    transitions: Sequence[Sequence[float]],
    alpha: float,
    looks: int,
    crosses: Callable[[int, float, int], bool],
) -> GraphLooks:
    """Run the graphical procedure with group-sequential tests over ``looks`` looks.

    ``crosses(i, level, k)``: whether hypothesis i's z crosses, at some look up to k, its
    boundaries computed at ``level`` (> 0). Weights and transitions as in
    :func:`prespec.stats.graphical.graphical_adjust`.
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must be in (0, 1), got {alpha!r}")
    if looks < 1:
        raise ValueError(f"looks must be at least 1, got {looks!r}")
    _, w, g = build_graph([0.0] * len(weights), weights, transitions)
    active = list(range(len(weights)))
    levels = [0.0] * len(weights)
    steps: list[Rejection] = []
    for k in range(1, looks + 1):
        while True:
            found = next(
                (i for i in active if w[i] > 0.0 and crosses(i, float(w[i]) * alpha, k)), None
            )
            if found is None:
                break
            levels[found] = float(w[found]) * alpha
            steps.append(Rejection(found, k, levels[found]))
            remove_hypothesis(found, active, w, g)
    for i in active:
        levels[i] = float(w[i]) * alpha
    return GraphLooks(tuple(steps), tuple(levels))


def family_graph(method: str, m: int) -> tuple[list[float], list[list[float]]]:
    """The weights and transitions of a Bonferroni-based procedure written as a graph:
    ``bonferroni`` (no transitions), ``holm`` (equal weights, each passed equally to the
    others) and ``fixed-sequence`` (all weight on the first, passed down the order)
    (Bretz et al. 2009, section 2)."""
    g = np.zeros((m, m))
    if method == "bonferroni":
        w = [1.0 / m] * m
    elif method == "holm":
        w = [1.0 / m] * m
        if m > 1:
            g = (np.ones((m, m)) - np.eye(m)) / (m - 1)
    elif method == "fixed-sequence":
        w = [1.0] + [0.0] * (m - 1)
        for i in range(m - 1):
            g[i, i + 1] = 1.0
    else:
        raise ValueError(f"{method!r} is not a Bonferroni-based procedure with a graph")
    return w, [list(map(float, row)) for row in g]
