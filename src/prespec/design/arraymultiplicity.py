"""Multiplicity-adjusted p-values on arrays: one row per simulated trial, one column per
hypothesis of the family, in plan order.

Each method repeats the arithmetic of ``prespec.stats.multiplicity.adjust`` and
``prespec.stats.graphical.graphical_adjust`` row by row (the same stable ordering, the same
running maxima and minima), so that the adjusted p-values, and so the decisions, are those of
the pipeline. References are those of the two functions (Holm 1979, Hochberg 1988, Hommel
1988 with Wright 1992, Benjamini and Hochberg 1995, Benjamini and Yekutieli 2001, Bretz et al.
2009).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np


def _sorted(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    order = np.argsort(p, axis=1, kind="stable")
    return order, np.take_along_axis(p, order, axis=1)


def _unsort(values: np.ndarray, order: np.ndarray) -> np.ndarray:
    out = np.empty_like(values)
    np.put_along_axis(out, order, values, axis=1)
    return out


def _holm(p: np.ndarray) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    stepped = np.maximum.accumulate((m - np.arange(m)) * s, axis=1)
    return _unsort(np.minimum(stepped, 1.0), order)


def _hochberg(p: np.ndarray) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    scaled = (m - np.arange(m)) * s
    return _unsort(np.minimum.accumulate(scaled[:, ::-1], axis=1)[:, ::-1], order)


def _hommel(p: np.ndarray) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    adjusted = s.copy()
    for j in range(m, 1, -1):
        largest = s[:, m - j:]
        simes = np.min(j * largest / np.arange(1, j + 1), axis=1)[:, None]
        adjusted[:, m - j:] = np.maximum(adjusted[:, m - j:], simes)
        adjusted[:, : m - j] = np.maximum(adjusted[:, : m - j],
                                          np.minimum(j * s[:, : m - j], simes))
    return _unsort(adjusted, order)


def _step_up(p: np.ndarray, factor: float) -> np.ndarray:
    order, s = _sorted(p)
    m = p.shape[1]
    scaled = factor * m * s / np.arange(1, m + 1)
    return _unsort(np.minimum.accumulate(scaled[:, ::-1], axis=1)[:, ::-1], order)


def adjust(p: np.ndarray, method: str) -> np.ndarray:
    """Adjusted p-values of each row by a named method, capped at 1 (as ``adjust``)."""
    p = np.asarray(p, dtype=float)
    m = p.shape[1]
    if m == 0:
        return p.copy()
    if method == "none":
        out = p.copy()
    elif method == "bonferroni":
        out = p * m
    elif method == "sidak":
        with np.errstate(divide="ignore"):
            out = -np.expm1(m * np.log1p(-p))
    elif method == "holm":
        out = _holm(p)
    elif method == "hochberg":
        out = _hochberg(p)
    elif method == "hommel":
        out = _hommel(p)
    elif method == "benjamini-hochberg":
        out = _step_up(p, 1.0)
    elif method == "benjamini-yekutieli":
        out = _step_up(p, float(np.sum(1.0 / np.arange(1, m + 1))))
    elif method == "fixed-sequence":
        out = np.maximum.accumulate(p, axis=1)
    else:
        raise ValueError(f"{method!r} is not a known adjustment method")
    return np.minimum(out, 1.0)


def graphical_adjust(p: np.ndarray, weights: Sequence[float],
                     transitions: Sequence[Sequence[float]]) -> np.ndarray:
    """Adjusted p-values of the graphical procedure for each row (Bretz et al. 2009,
    Algorithm 1): m steps, each taking in every row the hypothesis with the smallest p/w
    among those left (the first of equals), then passing its weight on along the graph."""
    p = np.asarray(p, dtype=float)
    t, m = p.shape
    w = np.tile(np.asarray(weights, dtype=float), (t, 1))
    g = np.tile(np.asarray(transitions, dtype=float).reshape(1, m, m), (t, 1, 1))
    active = np.ones((t, m), dtype=bool)
    adjusted = np.ones((t, m))
    previous = np.zeros(t)
    rows = np.arange(t)
    for _ in range(m):
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(w > 0.0, p / w, np.inf)
        ratio = np.where(active, ratio, np.inf)
        j = np.argmin(ratio, axis=1)
        # where every hypothesis left has weight 0, argmin may point at one already taken:
        # those left keep 1 (as the scalar procedure gives them), the taken one its value
        taken = active[rows, j]
        previous = np.minimum(1.0, np.maximum(ratio[rows, j], previous))
        adjusted[rows, j] = np.where(taken, previous, adjusted[rows, j])
        active[rows, j] = False
        g_out = g[rows, j, :]  # g[j, h]
        g_in = g[rows, :, j]  # g[h, j]
        w_j = w[rows, j]
        w = np.where(active, w + w_j[:, None] * g_out, w)
        loop = g_in * g_out
        with np.errstate(divide="ignore", invalid="ignore"):
            new_g = (g + g_in[:, :, None] * g_out[:, None, :]) / (1.0 - loop)[:, :, None]
        keep = active[:, :, None] & active[:, None, :] & (loop < 1.0)[:, :, None]
        keep &= ~np.eye(m, dtype=bool)[None, :, :]
        g = np.where(keep, new_g, 0.0)
        w[rows, j] = 0.0
    return adjusted
