"""Sensitivity analyses of missing outcomes: worst case, best case and the tipping point.

They are pre-specified per hypothesis (``sensitivity:``) and reported beside the primary
result, never instead of it. "Missing" for a group is its blank and unmapped outcomes among
the analysed rows, whatever the ``missing`` rule did with them in the primary analysis; the
complete-case counts are the primary ones less what the rule imputed.

- **Worst case / best case**: every missing outcome of the first group counted as the
  unfavourable value and every one of the second group as the favourable value (worst case),
  or the reverse (best case); the hypothesis's own test and estimate then run on that table.
- **Tipping point**: for every number i = 0…m1 of events among the first group's missing and
  j = 0…m2 among the second's, the hypothesis's test on the completed table, its p-value and
  its decision at the nominal alpha. The grid is computed on whole arrays at once: closed forms
  for the chi-square, z, likelihood-ratio and margin tests, and for Fisher's exact test one
  hypergeometric law per anti-diagonal (cells with the same number of events share it) with
  its tails accumulated in log space and the two-sided cut found by a binary search run on all
  cells together.

References
----------
Gould AL. A new approach to the analysis of clinical drug trials with withdrawals.
Biometrics 1980;36:721–727 (bounds by extreme imputation).
Yan X, Lee S, Li N. Missing data handling methods in medical device clinical trials. Journal
of Biopharmaceutical Statistics 2009;19:1085–1098 (the tipping-point analysis).
ICH E9(R1). Addendum on estimands and sensitivity analysis in clinical trials, 2019.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special, stats

from prespec.analysis import decision
from prespec.data import GroupCounts
from prespec.plan import vocabulary
from prespec.stats.proportions import FISHER_TIE_TOLERANCE, deviance_terms
from prespec.stats.ratios import ratio_discriminant

#: Tests whose tipping-point grid is computed here, on arrays (see the module docstring).
GRID_TESTS: frozenset[str] = frozenset({
    "pearson-chi-square", "likelihood-ratio", "two-proportion-z", "fisher-exact",
    "farrington-manning",
})
#: Tests refused for a tipping point by the plan rules, and why.
NO_GRID_TESTS: dict[str, str] = vocabulary.NO_TIPPING_POINT_TESTS
_CHUNK = 1 << 22  # hypergeometric cells held at once by the Fisher grid


@dataclass(frozen=True)
class Observed:
    """One group's complete-case counts and its number of missing outcomes."""

    group: str
    events: int
    total: int
    missing: int


def observed(counts: GroupCounts, missing_rule: str) -> Observed:
    """The complete-case events and total of a group: the primary ones less what the rule
    imputed (``event`` added the missing as events, ``no-event`` as non-events)."""
    missing = counts.blank + counts.unmapped
    events, total = counts.events, counts.total
    if missing_rule == "event":
        events, total = events - missing, total - missing
    elif missing_rule == "no-event":
        total -= missing
    return Observed(counts.group, events, total, missing)


def extreme_imputation(analysis: str, favourable: str, groups: list[str]) -> dict[str, str]:
    """What the missing of each group count as: worst case = the first group's missing
    unfavourable, the second's favourable; best case the reverse."""
    unfavourable = "no-event" if favourable == "event" else "event"
    if analysis == "worst-case":
        return {groups[0]: unfavourable, groups[1]: favourable}
    if analysis == "best-case":
        return {groups[0]: favourable, groups[1]: unfavourable}
    raise ValueError(f"not an extreme-case analysis: {analysis!r}")


def impute(part: Observed, value: str) -> tuple[int, int]:
    """Events and total when every missing outcome of the group counts as ``value``."""
    return part.events + (part.missing if value == "event" else 0), part.total + part.missing


# --- the vectorised p-values: x1, x2 broadcastable integer arrays, n1, n2 fixed totals ---

def _normal_p(z: np.ndarray, alternative: str) -> np.ndarray:
    """P-values of standard normal statistics, as ``stats._normal.normal_p_value``."""
    if alternative == "greater":
        return stats.norm.sf(z)
    if alternative == "less":
        return stats.norm.cdf(z)
    return np.minimum(1.0, 2.0 * stats.norm.sf(np.abs(z)))


def _pearson(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Any) -> np.ndarray:
    """Pearson's X² on 2×2 tables: d²·N³/(n1·n2·s·(N − s)), d = |x1 − n1·s/N| (less 0.5,
    not below 0, with Yates' correction); nan at a zero column margin."""
    n = n1 + n2
    s = x1 + x2
    cross = x1 * n2 - x2 * n1
    deviation = np.abs(cross) / n
    if hyp.continuity:
        deviation = np.maximum(deviation - 0.5, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        x2_stat = deviation**2 * float(n) ** 3 / (float(n1) * n2 * s * (n - s))
    x2_stat = np.where((s == 0) | (s == n), np.nan, x2_stat)
    if hyp.alternative == "two-sided":
        return stats.chi2.sf(x2_stat, 1)
    return _normal_p(np.sign(cross) * np.sqrt(x2_stat), hyp.alternative)


def _likelihood_ratio(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int,
                      hyp: Any) -> np.ndarray:
    """G² = 2 Σ O ln(O/E) over the four cells (0 ln 0 = 0), summed as the non-negative
    ``stats.proportions.deviance_terms``; nan at a zero column margin."""
    n = n1 + n2
    s = x1 + x2
    g2 = np.zeros(np.broadcast(x1, x2).shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        for observed_, row, column in ((x1, n1, s), (n1 - x1, n1, n - s), (x2, n2, s),
                                       (n2 - x2, n2, n - s)):
            g2 = g2 + deviance_terms(observed_, row, column, n)
    g2 = np.where((s == 0) | (s == n), np.nan, g2)
    return stats.chi2.sf(g2, 1)


def _z_pooled(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Any) -> np.ndarray:
    """The two-proportion z test with the pooled standard error; nan where it is 0."""
    if hyp.comparison != "superiority":
        return _margin(_wald_margin_z)(x1, n1, x2, n2, hyp)
    pooled = (x1 + x2) / (n1 + n2)
    variance = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0.0, (x1 / n1 - x2 / n2) / np.sqrt(variance), np.nan)
    return _normal_p(z, hyp.alternative)


def _log_factorials(n: int) -> np.ndarray:
    return special.gammaln(np.arange(n + 1, dtype=float) + 1.0)


def _fisher(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Any) -> np.ndarray:
    """Fisher's exact test on every table at once, as ``stats.proportions.fisher_exact``.

    Given s = x1 + x2, x1 is hypergeometric; the cells of one anti-diagonal share that law.
    Its log-probabilities are laid out one row per s, the tails accumulated in log space
    (``logaddexp.accumulate``). The two-sided p-value sums the tables no more probable than
    the observed one (relative tolerance 1e-7): since the law is unimodal they form a lower
    tail, found by a binary search below the mode, and an upper tail, by one above it.
    """
    x1, x2 = np.broadcast_arrays(np.asarray(x1, np.int64), np.asarray(x2, np.int64))
    shape = x1.shape
    x1, s = x1.ravel(), (x1 + x2).ravel()
    n = n1 + n2
    lf = _log_factorials(n)
    sums, row_of = np.unique(s, return_inverse=True)
    k_low = int(np.maximum(0, sums - n2).min())
    width = int(np.minimum(sums, n1).max()) - k_low + 1
    out = np.empty(x1.size)
    per_chunk = max(1, _CHUNK // width)
    tolerance = math.log1p(FISHER_TIE_TOLERANCE)
    for start in range(0, sums.size, per_chunk):
        chunk = sums[start:start + per_chunk]
        k = k_low + np.arange(width)
        low, high = np.maximum(0, chunk - n2), np.minimum(chunk, n1)
        inside = (k[None, :] >= low[:, None]) & (k[None, :] <= high[:, None])
        j = np.clip(chunk[:, None] - k[None, :], 0, n2)
        kk = np.clip(k, 0, n1)
        log_p = (lf[n1] - lf[kk] - lf[n1 - kk])[None, :] + lf[n2] - lf[j] - lf[n2 - j] \
            - (lf[n] - lf[chunk] - lf[n - chunk])[:, None]
        log_p = np.where(inside, log_p, -np.inf)
        cells = np.flatnonzero((row_of >= start) & (row_of < start + chunk.size))
        rows, cols = row_of[cells] - start, x1[cells] - k_low
        out[cells] = _fisher_cells(log_p, rows, cols, low - k_low, high - k_low,
                                   hyp.alternative, tolerance)
    return np.minimum(1.0, out).reshape(shape)


def _fisher_cells(log_p: np.ndarray, rows: np.ndarray, cols: np.ndarray, low: np.ndarray,
                  high: np.ndarray, alternative: str, tolerance: float) -> np.ndarray:
    """Fisher p-values of the cells (rows, cols) of one block of hypergeometric laws."""
    with np.errstate(divide="ignore", invalid="ignore"):
        lower = np.logaddexp.accumulate(log_p, axis=1)  # log P(X <= k)
        upper = np.logaddexp.accumulate(log_p[:, ::-1], axis=1)[:, ::-1]  # log P(X >= k)
    if alternative == "greater":
        return np.exp(upper[rows, cols])
    if alternative == "less":
        return np.exp(lower[rows, cols])
    mode = np.argmax(log_p, axis=1)
    limit = log_p[rows, cols] + tolerance
    r_mode = mode[rows]
    # lower tail: the last column a in [low, mode] with log_p <= limit (non-decreasing there)
    a = _last_at_most(log_p, rows, low[rows], r_mode, limit)
    # upper tail: the first column b in (mode, high] with log_p <= limit (non-increasing)
    b = _first_at_most(log_p, rows, r_mode + 1, high[rows], limit)
    with np.errstate(divide="ignore", invalid="ignore"):
        tail_low = np.where(a >= low[rows], lower[rows, np.maximum(a, 0)], -np.inf)
        tail_high = np.where(b <= high[rows], upper[rows, np.minimum(b, log_p.shape[1] - 1)],
                             -np.inf)
        p = np.exp(np.logaddexp(tail_low, tail_high))
    return np.where(log_p[rows, r_mode] <= limit, 1.0, p)


def _last_at_most(log_p: np.ndarray, rows: np.ndarray, start: np.ndarray, stop: np.ndarray,
                  limit: np.ndarray) -> np.ndarray:
    """Per cell, the last column in [start, stop] where the non-decreasing row is <= limit
    (start − 1 if none), by a binary search on all cells at once."""
    left, right = start.copy(), stop + 1  # find the first column whose value exceeds limit
    while True:
        active = left < right
        if not active.any():
            return left - 1
        mid = np.where(active, (left + right) // 2, left)
        above = log_p[rows, np.minimum(mid, log_p.shape[1] - 1)] > limit
        right = np.where(active & above, mid, right)
        left = np.where(active & ~above, mid + 1, left)


def _first_at_most(log_p: np.ndarray, rows: np.ndarray, start: np.ndarray, stop: np.ndarray,
                   limit: np.ndarray) -> np.ndarray:
    """Per cell, the first column in [start, stop] where the non-increasing row is <= limit
    (stop + 1 if none), by a binary search on all cells at once."""
    left, right = start.copy(), stop + 1
    while True:
        active = left < right
        if not active.any():
            return left
        mid = np.where(active, (left + right) // 2, left)
        at_most = log_p[rows, np.minimum(mid, log_p.shape[1] - 1)] <= limit
        right = np.where(active & at_most, mid, right)
        left = np.where(active & ~at_most, mid + 1, left)


def _difference_mle(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int,
                    delta: float) -> tuple[np.ndarray, np.ndarray]:
    """The restricted MLEs (p̃1, p̃2) with p1 − p2 = delta on arrays: the closed-form cubic
    root of Farrington and Manning (1990) and Newton steps against rounding, exactly as the
    scalar ``stats.intervals.difference_mle``."""
    p1, p2 = x1 / n1, x2 / n2
    theta = n2 / n1
    a = 1.0 + theta
    b = -(1.0 + theta + p1 + theta * p2 + delta * (theta + 2.0))
    c = delta * delta + delta * (2.0 * p1 + theta + 1.0) + p1 + theta * p2
    d = -p1 * delta * (1.0 + delta)
    shift = b / (3.0 * a)
    v = shift**3 - b * c / (6.0 * a * a) + d / (2.0 * a)
    u = np.copysign(np.sqrt(np.maximum(0.0, shift * shift - c / (3.0 * a))), v)
    with np.errstate(divide="ignore", invalid="ignore"):
        cosine = np.clip(v / u**3, -1.0, 1.0)
        root = np.where(u == 0.0, -shift,
                        2.0 * u * np.cos((math.pi + np.arccos(cosine)) / 3.0) - shift)
    root = np.minimum(min(1.0, 1.0 + delta), np.maximum(max(0.0, delta), root))
    t2 = _polish(x1, n1, x2, n2, delta, np.clip(root - delta, 0.0, 1.0))
    return np.clip(t2 + delta, 0.0, 1.0), t2


def _log_likelihood(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, p1: np.ndarray,
                    p2: np.ndarray) -> np.ndarray:
    total = np.zeros(np.broadcast(x1, x2, p1).shape)
    for count, p in ((x1, p1), (n1 - x1, 1.0 - p1), (x2, p2), (n2 - x2, 1.0 - p2)):
        with np.errstate(divide="ignore", invalid="ignore"):
            term = np.where(p > 0.0, count * np.log(np.where(p > 0.0, p, 1.0)), -np.inf)
        total = total + np.where(count > 0, term, 0.0)
    return total


def _polish(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, delta: float,
            p2: np.ndarray) -> np.ndarray:
    """Up to four Newton steps on the log-likelihood in p2, each kept only while the
    likelihood does not fall (``stats.intervals._polish``, on arrays)."""
    low, high = max(0.0, -delta), min(1.0, 1.0 - delta)
    best = _log_likelihood(x1, n1, x2, n2, p2 + delta, p2)
    active = np.ones(best.shape, dtype=bool)
    x1, x2 = np.broadcast_to(x1, best.shape), np.broadcast_to(x2, best.shape)
    for _ in range(4):
        p1 = p2 + delta
        terms = ((x1, p1, 1.0), (n1 - x1, 1.0 - p1, -1.0), (x2, p2, 1.0),
                 (n2 - x2, 1.0 - p2, -1.0))
        blocked = np.zeros(best.shape, dtype=bool)
        gradient = np.zeros(best.shape)
        curvature = np.zeros(best.shape)
        for count, p, sign in terms:
            blocked |= (count > 0) & (p <= 0.0)
            safe = np.where(p > 0.0, p, 1.0)
            gradient = gradient + np.where(count > 0, sign * count / safe, 0.0)
            curvature = curvature - np.where(count > 0, count / (safe * safe), 0.0)
        active &= ~blocked & (gradient != 0.0) & (curvature != 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.clip(p2 - gradient / np.where(curvature != 0.0, curvature, 1.0),
                           low, high)
        value = _log_likelihood(x1, n1, x2, n2, step + delta, step)
        active &= (step != p2) & ~(value < best)
        if not active.any():
            break
        p2 = np.where(active, step, p2)
        best = np.where(active, value, best)
    return p2


def _ratio_mle(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int,
               ratio: float) -> tuple[np.ndarray, np.ndarray]:
    """The restricted MLEs with p1 = ratio·p2 (the quadratic's smaller root), on arrays, with
    the discriminant of ``stats.ratios.ratio_discriminant`` (a sum that does not cancel)."""
    b = -(n1 * ratio + x1 + n2 + x2 * ratio)
    c = (x1 + x2).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        root = 2.0 * c / (-b + np.sqrt(ratio_discriminant(x1, n1, x2, n2, ratio)))
    p2 = np.minimum(np.minimum(1.0, root), math.inf if ratio == 0.0 else 1.0 / ratio)
    return np.minimum(1.0, ratio * p2), p2


def _z(numerator: np.ndarray, variance: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(variance > 0.0, numerator / np.sqrt(variance), np.nan)


def _farrington_manning_z(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, margin: float,
                          measure: str) -> np.ndarray:
    """The Farrington–Manning score statistic (``stats.margins.farrington_manning``)."""
    if measure == "risk-difference":
        t1, t2 = _difference_mle(x1, n1, x2, n2, margin)
        numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - margin
        variance = t1 * (1.0 - t1) / n1 + t2 * (1.0 - t2) / n2
    else:
        t1, t2 = _ratio_mle(x1, n1, x2, n2, margin)
        numerator = (x1 * n2 - margin * x2 * n1) / (n1 * n2)
        variance = t1 * (1.0 - t1) / n1 + margin * margin * t2 * (1.0 - t2) / n2
    return _z(numerator, variance)


def _wald_margin_z(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, margin: float,
                   measure: str) -> np.ndarray:
    """The Wald z at a margin, unpooled variance (``stats.margins.wald_margin_z``)."""
    if measure == "risk-difference":
        p1, p2 = x1 / n1, x2 / n2
        numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - margin
        return _z(numerator, p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.log(x1) - math.log(n1) - np.log(x2) + math.log(n2)
        variance = 1.0 / x1 - 1.0 / n1 + 1.0 / x2 - 1.0 / n2
    z = _z(log_ratio - math.log(margin), variance)
    return np.where((x1 == 0) | (x2 == 0), np.nan, z)


def _margin(statistic: Callable[..., np.ndarray]) -> Callable[..., np.ndarray]:
    """A test at the margin: one-sided for non-inferiority, two one-sided tests (the larger
    p-value, nan if either is) for equivalence, as ``methods._margin_test``."""

    def run(x1: np.ndarray, n1: int, x2: np.ndarray, n2: int, hyp: Any) -> np.ndarray:
        if hyp.comparison == "equivalence":
            low, high = hyp.margin
            lower = _normal_p(statistic(x1, n1, x2, n2, low, hyp.measure), "greater")
            upper = _normal_p(statistic(x1, n1, x2, n2, high, hyp.measure), "less")
            return np.where(np.isnan(lower) | np.isnan(upper), np.nan,
                            np.maximum(lower, upper))
        z = statistic(x1, n1, x2, n2, hyp.margin, hyp.measure)
        return _normal_p(z, hyp.alternative)

    return run


GridTest = Callable[[np.ndarray, int, np.ndarray, int, Any], np.ndarray]

GRID: dict[str, GridTest] = {
    "pearson-chi-square": _pearson,
    "likelihood-ratio": _likelihood_ratio,
    "two-proportion-z": _z_pooled,
    "fisher-exact": _fisher,
    "farrington-manning": _margin(_farrington_manning_z),
}
assert set(GRID) == GRID_TESTS


def grid_p_values(test: str, x1: Any, n1: int, x2: Any, n2: int, hyp: Any) -> np.ndarray:
    """The p-values of ``test`` on the tables (x1 of n1, x2 of n2), x1 and x2 broadcast.

    ``hyp`` gives the test's options: ``alternative``, ``continuity``, ``comparison``,
    ``margin`` and ``measure``. A p-value the test does not define is ``nan``.
    """
    if test not in GRID:
        raise ValueError(f"no tipping-point grid for {test!r}: {NO_GRID_TESTS.get(test, '')}")
    x1 = np.asarray(x1, dtype=np.int64)
    x2 = np.asarray(x2, dtype=np.int64)
    return np.asarray(GRID[test](x1, int(n1), x2, int(n2), hyp), dtype=float)


def smallest_expected_grid(x1: Any, n1: int, x2: Any, n2: int) -> np.ndarray:
    """The smallest expected count of each 2×2 table: min(n1, n2)·min(s, N − s)/N."""
    s = np.asarray(x1) + np.asarray(x2)
    n = n1 + n2
    return min(n1, n2) * np.minimum(s, n - s) / n


@dataclass(frozen=True)
class TippingPoint:
    """The tipping-point grid of one comparison of two groups.

    ``p_values[i, j]`` is the p-value with i events among the first group's missing and j
    among the second's (nan where not computable); ``reject`` is ``p <= alpha``; ``switched``
    marks the cells where a pre-specified sparse switch chose the other test.
    """

    groups: tuple[str, str]
    missing: tuple[int, int]
    events: tuple[int, int]
    totals: tuple[int, int]
    alpha: float
    test: str
    p_values: np.ndarray
    reject: np.ndarray
    switched: np.ndarray
    observed_point: tuple[float, float] | None


def tipping_point(a: Observed, b: Observed, hyp: Any, alpha: float) -> TippingPoint:
    """The p-value and decision at ``alpha`` of the hypothesis's test at every completion.

    Every table has the full totals n = complete + missing; x1 = e1 + i, x2 = e2 + j. The
    plan's rule (``decision``) decides each cell as it decides the run: the pre-specified
    sparse switch on the cell's smallest expected count, the test it chooses, and the
    decision at the nominal ``alpha``.
    """
    n1, n2 = a.total + a.missing, b.total + b.missing
    shape = (a.missing + 1, b.missing + 1)
    i, j = np.indices(shape)
    x1, x2 = a.events + i, b.events + j
    switched = np.zeros(shape, dtype=bool)
    if n1 == 0 or n2 == 0:
        p = np.full(shape, np.nan)
    else:
        if decision.has_sparse_switch(hyp):
            switched = decision.sparse_fires(hyp, smallest_expected_grid(x1, n1, x2, n2))

        def p_of(test: str, where: np.ndarray) -> np.ndarray:
            return grid_p_values(test, x1[where], n1, x2[where], n2, hyp)

        p = decision.chosen_p_values(hyp, switched, p_of)
    reject = decision.rejects(p, alpha)
    point = None
    if a.total > 0 and b.total > 0:
        point = (a.missing * a.events / a.total, b.missing * b.events / b.total)
    return TippingPoint((a.group, b.group), (a.missing, b.missing), (a.events, b.events),
                        (a.total, b.total), alpha, hyp.test, p, reject, switched, point)


def boundary(p_values: np.ndarray, alpha: float, primary_rejects: bool) -> list[int | None]:
    """For each row i, the smallest j whose decision at ``alpha`` differs from the primary
    decision, or None; cells without a p-value decide nothing."""
    computable = ~np.isnan(p_values)
    flips = computable & ((np.where(computable, p_values, 1.0) <= alpha) != primary_rejects)
    first = np.argmax(flips, axis=1)
    return [int(f) if flips[r, f] else None for r, f in enumerate(first)]


def tipping_point_json(tp: TippingPoint, primary_rejects: bool | None) -> dict[str, Any]:
    """The ``tipping-point`` entry of results.json (see the results contract)."""
    compared = False if primary_rejects is None else primary_rejects
    computable = ~np.isnan(tp.p_values)
    changing = computable & (tp.reject != compared)
    entry: dict[str, Any] = {
        "analysis": "tipping-point",
        "groups": list(tp.groups),
        "missing": list(tp.missing),
        "complete": {"events": list(tp.events), "totals": list(tp.totals)},
        "alpha": tp.alpha,
        "test": tp.test,
        "p_values": [[None if math.isnan(v) else float(v) for v in row]
                     for row in tp.p_values.tolist()],
        "observed_point": None if tp.observed_point is None else list(tp.observed_point),
        "primary_rejects": primary_rejects,
        "cells_changing": int(changing.sum()),
        "boundary": [[i, j] for i, j in enumerate(boundary(tp.p_values, tp.alpha, compared))],
        "cells": int(tp.p_values.size),
        "cells_not_computable": int((~computable).sum()),
        "cells_switched": int(tp.switched.sum()),
    }
    return entry
