"""The graphical multiple test procedure with weighted Bonferroni tests (Bretz et al. 2009).

A family of m hypotheses is described by initial weights w (hypothesis i is first tested at
w_i·alpha; the weights sum to at most 1) and a transition matrix G: when hypothesis j is
rejected, the share G[j][l] of its weight passes to hypothesis l and the graph is updated.
The procedure controls the family-wise error rate at alpha in the strong sense.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from numbers import Real

import numpy as np

#: How far a sum of weights (or of a row of transitions) may exceed 1 through rounding.
SUM_TOLERANCE = 1e-12


def _number(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"{name} must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = float(value)
    if not 0.0 <= number <= 1.0:  # also refuses nan
        raise ValueError(f"{name} must be in [0, 1], got {value!r}")
    return number


def _numbers(name: str, values: object) -> list[float]:
    if isinstance(values, (str, bytes)) or not isinstance(values, Sequence | np.ndarray):
        raise ValueError(f"{name} must be a sequence of numbers")  # noqa: TRY004 (the interface raises ValueError)
    return [_number(f"{name}[{i}]", v) for i, v in enumerate(values)]


def build_graph(
    p_values: Sequence[float], weights: Sequence[float], transitions: Sequence[Sequence[float]]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Validate the p-values, weights and transition matrix; return them as float arrays."""
    p = _numbers("p_values", p_values)
    m = len(p)
    w = _numbers("weights", weights)
    if len(w) != m:
        raise ValueError(f"weights has {len(w)} entries for {m} p-values")
    if math.fsum(w) > 1.0 + SUM_TOLERANCE:
        raise ValueError(f"weights sum to {math.fsum(w)!r}, more than 1")
    if isinstance(transitions, (str, bytes)) or not isinstance(transitions, Sequence | np.ndarray):
        raise ValueError("transitions must be a square matrix given as a sequence of rows")  # noqa: TRY004 (the interface raises ValueError)
    if len(transitions) != m:
        raise ValueError(f"transitions has {len(transitions)} rows for {m} p-values")
    rows = []
    for i, row in enumerate(transitions):
        values = _numbers(f"transitions[{i}]", row)
        if len(values) != m:
            raise ValueError(f"transitions[{i}] has {len(values)} entries for {m} p-values")
        if values[i] != 0.0:
            raise ValueError(
                f"transitions[{i}][{i}] must be 0 (no transition to itself), got {values[i]!r}"
            )
        if math.fsum(values) > 1.0 + SUM_TOLERANCE:
            raise ValueError(f"transitions[{i}] sums to {math.fsum(values)!r}, more than 1")
        rows.append(values)
    g = np.array(rows, dtype=float).reshape(m, m)
    return np.array(p, dtype=float), np.array(w, dtype=float), g


def remove_hypothesis(j: int, active: list[int], w: np.ndarray, g: np.ndarray) -> None:
    """Remove rejected hypothesis j: pass its weight on and update the graph, in place.

    Bretz et al. 2009, Algorithm 1, step 2: w_l ← w_l + w_j·g_jl and, for l ≠ k,
    g_lk ← (g_lk + g_lj·g_jk) / (1 − g_lj·g_jl), or 0 when g_lj·g_jl = 1. The one-graph case
    of :func:`_pass_on_many`.
    """
    active.remove(j)
    left = np.zeros((1, w.size), dtype=bool)
    left[0, active] = True
    new_w, new_g = _pass_on_many(w[None, :], g[None, :, :], left, np.array([j]))
    w[:] = new_w[0]
    g[:, :] = new_g[0]


def _pass_on_many(w: np.ndarray, g: np.ndarray, active: np.ndarray, j: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Remove hypothesis j[r] from graph r of each row (weights T × m, transitions T × m × m,
    ``active`` the hypotheses left once j is removed): the new weights and transitions."""
    rows = np.arange(w.shape[0])
    m = w.shape[1]
    g_out = g[rows, j, :]  # g[j, h]
    g_in = g[rows, :, j]  # g[h, j]
    w_j = w[rows, j]
    w = np.where(active, w + w_j[:, None] * g_out, w)
    loop = g_in * g_out
    with np.errstate(divide="ignore", invalid="ignore"):
        new_g = (g + g_in[:, :, None] * g_out[:, None, :]) / (1.0 - loop)[:, :, None]
    keep = active[:, :, None] & active[:, None, :] & (loop < 1.0)[:, :, None]
    keep &= ~np.eye(m, dtype=bool)[None, :, :]
    w = w.copy()
    w[rows, j] = 0.0
    return w, np.where(keep, new_g, 0.0)


def graphical_adjust(
    p_values: Sequence[float], weights: Sequence[float], transitions: Sequence[Sequence[float]]
) -> list[float]:
    """Adjusted p-values of the graphical procedure, in input order, capped at 1.

    At each step the hypothesis j with the smallest p_j / w_j among those left is taken, its
    adjusted p-value is the larger of p_j / w_j and the previous step's, and it is removed
    from the graph as if rejected (its weight passed on along the transitions). Hypothesis i
    is rejected by the procedure at level alpha exactly when its adjusted p-value is
    <= alpha (see :func:`graphical_rejections`). A hypothesis whose weight stays 0 gets 1.
    Weights must lie in [0, 1] and sum to at most 1; the transition matrix must be m × m with
    entries in [0, 1], a zero diagonal and rows summing to at most 1 (each sum within 1e-12).
    Empty input gives []. The one-row case of :func:`graphical_adjust_many`.

    References
    ----------
    Bretz F, Maurer W, Brannath W, Posch M. A graphical approach to sequentially rejective
    multiple test procedures. Statistics in Medicine 2009;28:586–604 (section 3: Algorithm 1
    and the adjusted p-values).
    Holm S. A simple sequentially rejective multiple test procedure. Scandinavian Journal of
    Statistics 1979;6:65–70.
    """
    p, w, g = build_graph(p_values, weights, transitions)
    return [float(v) for v in graphical_adjust_many(p[None, :], w, g)[0]]


def graphical_adjust_many(p: np.ndarray, weights: Sequence[float] | np.ndarray,
                          transitions: Sequence[Sequence[float]] | np.ndarray) -> np.ndarray:
    """:func:`graphical_adjust` on each row of an array of p-values (one family per row, as
    the design simulation draws them), the graph shared by every row.

    m steps, each taking in every row the hypothesis with the smallest p/w among those left
    (the first of equals; the first left when all of them have weight 0), then passing its
    weight on along the graph (:func:`_pass_on_many`, as :func:`remove_hypothesis`). The weights and transitions
    are not validated here (:func:`build_graph` does it for :func:`graphical_adjust`).
    """
    p = np.asarray(p, dtype=float)
    t, m = p.shape
    w = np.tile(np.asarray(weights, dtype=float), (t, 1))
    g = np.tile(np.asarray(transitions, dtype=float).reshape(1, m, m), (t, 1, 1))
    active = np.ones((t, m), dtype=bool)
    adjusted = np.ones((t, m))
    previous = np.zeros(t)
    rows = np.arange(t)
    for _ in range(m):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ratio = np.where(w > 0.0, p / w, np.inf)  # weight 0: never rejected
        ratio = np.where(active, ratio, np.inf)
        j = np.argmin(ratio, axis=1)
        # every hypothesis left has weight 0: take the first left (not one already taken)
        j = np.where(np.isinf(ratio[rows, j]), np.argmax(active, axis=1), j)
        previous = np.minimum(1.0, np.maximum(ratio[rows, j], previous))
        adjusted[rows, j] = previous
        active[rows, j] = False
        w, g = _pass_on_many(w, g, active, j)
    return adjusted


def graphical_rejections(
    p_values: Sequence[float],
    weights: Sequence[float],
    transitions: Sequence[Sequence[float]],
    alpha: float,
) -> list[bool]:
    """The sequentially rejective graphical test at family-wise level ``alpha``.

    Repeatedly reject a hypothesis with p_j <= w_j·alpha (and w_j > 0), the first such in
    input order, then pass its weight on and update the graph; stop when none is left to
    reject. The set rejected does not depend on the order of rejection (Bretz et al. 2009,
    section 3) and equals {i : adjusted p_i <= alpha} of :func:`graphical_adjust`.

    References
    ----------
    Bretz F, Maurer W, Brannath W, Posch M. A graphical approach to sequentially rejective
    multiple test procedures. Statistics in Medicine 2009;28:586–604 (Algorithm 1).
    """
    p, w, g = build_graph(p_values, weights, transitions)
    if isinstance(alpha, bool) or not isinstance(alpha, Real):
        raise ValueError(f"alpha must be a number, got {alpha!r}")  # noqa: TRY004 (the interface raises ValueError)
    level = float(alpha)
    if not (math.isfinite(level) and 0.0 < level < 1.0):
        raise ValueError(f"alpha must be strictly between 0 and 1, got {alpha!r}")
    active = list(range(p.size))
    rejected = [False] * p.size
    while True:
        candidates = [i for i in active if w[i] > 0.0 and p[i] <= w[i] * level]
        if not candidates:
            return rejected
        j = candidates[0]
        rejected[j] = True
        remove_hypothesis(j, active, w, g)
