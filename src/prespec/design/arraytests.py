"""The plan's tests computed on arrays of count tables, one row per simulated trial.

Each array test follows the arithmetic of its function in ``prespec.stats`` (the same
statistic, the same undefined cases as ``nan``, the same p-value), so that a simulated trial
is decided as ``prespec run`` would decide it. The tests not written on arrays (Farrington–
Manning, the unconditional exact tests, Fisher's test on k groups) run the pipeline's own
function once per distinct table (:class:`PerTable`); the stratified test cannot be simulated
from rates per group alone and is refused by the caller.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from scipy import stats

from prespec.analysis import methods
from prespec.design.exactpower import FisherTables, binomial_p_values
from prespec.stats.proportions import deviance_terms

ArrayTest = Callable[[np.ndarray], np.ndarray]


def by_value(fn: Callable[[np.ndarray], np.ndarray], values: np.ndarray) -> np.ndarray:
    """``fn`` computed once per distinct value: count tables of fixed totals take few distinct
    statistics, and a distribution function is the costly step."""
    unique, inverse = np.unique(values, return_inverse=True)
    return np.asarray(fn(unique), dtype=float)[inverse.reshape(np.shape(values))]


def chi2_p(x2: np.ndarray, df: int) -> np.ndarray:
    """The upper tail of chi-square with ``df`` df (scipy.stats.chi2.sf), per distinct value."""
    return by_value(lambda u: stats.chi2.sf(u, df), x2)


def normal_p(z: np.ndarray, alternative: str) -> np.ndarray:
    """``stats._normal.normal_p_value`` on an array (nan stays nan)."""
    if alternative == "greater":
        return by_value(stats.norm.sf, z)
    if alternative == "less":
        return by_value(stats.norm.cdf, z)
    return np.minimum(1.0, 2.0 * by_value(stats.norm.sf, np.abs(z)))


def expected_events(events: np.ndarray, totals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Expected events and non-events per group, arrays (T, k), under equal proportions."""
    rows = totals.astype(float)
    column_events = events.sum(axis=1).astype(float)
    column_other = float(totals.sum()) - column_events
    grand = float(totals.sum())
    return (rows[None, :] * column_events[:, None] / grand,
            rows[None, :] * column_other[:, None] / grand)


def smallest_expected(events: np.ndarray, totals: np.ndarray) -> np.ndarray:
    """The smallest expected count of each k×2 table (``stats.tables.smallest_expected``)."""
    column_events = events.sum(axis=1).astype(float)
    column_other = float(totals.sum()) - column_events
    return float(totals.min()) * np.minimum(column_events, column_other) / float(totals.sum())


def _observed(events: np.ndarray, totals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return events.astype(float), (totals[None, :] - events).astype(float)


def pearson(events: np.ndarray, totals: np.ndarray, *, continuity: bool,
            alternative: str) -> np.ndarray:
    """Pearson's X² test (``stats.proportions.pearson_chi_square``) on every row."""
    e_ev, e_non = expected_events(events, totals)
    o_ev, o_non = _observed(events, totals)
    d_ev, d_non = np.abs(o_ev - e_ev), np.abs(o_non - e_non)
    if continuity:
        d_ev, d_non = np.maximum(d_ev - 0.5, 0.0), np.maximum(d_non - 0.5, 0.0)
    undefined = (e_ev == 0.0).any(axis=1) | (e_non == 0.0).any(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.stack([d_ev**2 / e_ev, d_non**2 / e_non], axis=2)
    x2 = terms.reshape(terms.shape[0], -1).sum(axis=1)
    k = totals.size
    if alternative == "two-sided":
        p = chi2_p(x2, k - 1)
    else:
        sign = np.sign(events[:, 0] * totals[1] - events[:, 1] * totals[0]).astype(float)
        p = normal_p(sign * np.sqrt(x2), alternative)
    return np.where(undefined, np.nan, p)


def likelihood_ratio(events: np.ndarray, totals: np.ndarray) -> np.ndarray:
    """The G² test (``stats.proportions.likelihood_ratio``) on every row."""
    grand = int(totals.sum())
    column = events.sum(axis=1)[:, None]
    undefined = (column[:, 0] == 0) | (column[:, 0] == grand)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = (deviance_terms(events, totals[None, :], column, grand)
                 + deviance_terms(totals[None, :] - events, totals[None, :], grand - column,
                                  grand))
    g2 = np.where(undefined, 0.0, terms.sum(axis=1))
    return np.where(undefined, np.nan, chi2_p(g2, totals.size - 1))


def two_proportion_z(events: np.ndarray, totals: np.ndarray, alternative: str) -> np.ndarray:
    """The pooled two-proportion z test (``stats.proportions.two_proportion_z``)."""
    x1, x2 = events[:, 0].astype(float), events[:, 1].astype(float)
    n1, n2 = float(totals[0]), float(totals[1])
    pooled = (x1 + x2) / (n1 + n2)
    variance = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0.0, (x1 / n1 - x2 / n2) / np.sqrt(variance), np.nan)
    return normal_p(z, alternative)


def _wald_margin(events: np.ndarray, totals: np.ndarray, margin: float, measure: str,
                 alternative: str) -> np.ndarray:
    """``stats.margins.wald_margin_z`` on every row."""
    x1, x2 = events[:, 0].astype(float), events[:, 1].astype(float)
    n1, n2 = float(totals[0]), float(totals[1])
    with np.errstate(divide="ignore", invalid="ignore"):
        if measure == "risk-difference":
            p1, p2 = x1 / n1, x2 / n2
            numerator = (x1 * n2 - x2 * n1) / (n1 * n2) - margin
            variance = p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2
        else:
            numerator = np.log(x1) - np.log(n1) - np.log(x2) + np.log(n2) - np.log(margin)
            variance = 1.0 / x1 - 1.0 / n1 + 1.0 / x2 - 1.0 / n2
            variance = np.where((x1 == 0) | (x2 == 0), np.nan, variance)
        z = np.where(variance > 0.0, numerator / np.sqrt(variance), np.nan)
    return normal_p(z, alternative)


def wald_margin(events: np.ndarray, totals: np.ndarray, hyp: Any) -> np.ndarray:
    """The margin test by the Wald z (non-inferiority, or two one-sided tests)."""
    if hyp.comparison == "equivalence":
        low, high = hyp.margin
        lower = _wald_margin(events, totals, low, hyp.measure, "greater")
        upper = _wald_margin(events, totals, high, hyp.measure, "less")
        return np.maximum(lower, upper)  # nan if either is nan
    return _wald_margin(events, totals, hyp.margin, hyp.measure, hyp.alternative)


def cochran_armitage(events: np.ndarray, totals: np.ndarray, scores: list[float] | None,
                     alternative: str) -> np.ndarray:
    """The Cochran–Armitage trend test (``stats.trend.cochran_armitage``) on every row."""
    k = totals.size
    s = np.arange(k, dtype=float) if scores is None else np.asarray(scores, dtype=float)
    x = events.astype(float)
    n = totals.astype(float)
    population = float(n.sum())
    pooled = x.sum(axis=1) / population
    spread = float(np.sum(n * s * s) - np.sum(n * s) ** 2 / population)
    variance = pooled * (1.0 - pooled) * spread
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0.0,
                     (s[None, :] * (x - n[None, :] * pooled[:, None])).sum(axis=1)
                     / np.sqrt(variance), np.nan)
    return normal_p(z, alternative)


def one_proportion_z(events: np.ndarray, totals: np.ndarray, rate: float,
                     alternative: str) -> np.ndarray:
    """The score z test of one rate (``stats.single.one_proportion_z``)."""
    n = float(totals[0])
    z = (events[:, 0] / n - rate) / np.sqrt(rate * (1.0 - rate) / n)
    return normal_p(z, alternative)


class PerTable:
    """A test the pipeline runs by its own function, called once per distinct table and kept
    for later chunks."""

    def __init__(self, hyp: Any, totals: np.ndarray) -> None:
        self.hyp, self.totals = hyp, [int(t) for t in totals]
        self.function = methods.TESTS[hyp.test]
        self.known: dict[tuple[int, ...], float] = {}

    def __call__(self, events: np.ndarray) -> np.ndarray:
        unique, inverse = np.unique(events, axis=0, return_inverse=True)
        values = np.empty(len(unique))
        for i, row in enumerate(unique.tolist()):
            key = tuple(row)
            if key not in self.known:
                result = self.function(methods.Table(list(key), self.totals), self.hyp).result
                self.known[key] = result.p_value
            values[i] = self.known[key]
        return values[inverse.reshape(-1)]


#: Tests with an array form, by compare kind (the others run per distinct table).
ON_ARRAYS = {
    "pair": {"pearson-chi-square", "likelihood-ratio", "two-proportion-z", "fisher-exact"},
    "single": {"binomial-exact", "one-proportion-z"},
    "all": {"pearson-chi-square", "likelihood-ratio"},
    "trend": {"cochran-armitage-trend"},
}


def on_arrays(hyp: Any, test: str) -> bool:
    """Whether ``test`` for this hypothesis has an array form."""
    if hyp.kind == "pair" and hyp.comparison != "superiority":
        return test == "two-proportion-z"
    return test in ON_ARRAYS.get(hyp.kind, set())


def array_test(hyp: Any, test: str, totals: np.ndarray) -> tuple[ArrayTest, bool]:
    """The function of the events array (T, k) that gives the p-values of ``test`` for this
    hypothesis, and whether it is an array form (False: once per distinct table)."""
    hyp = hyp.model_copy(update={"test": test})
    alt = hyp.alternative
    if not on_arrays(hyp, test):
        return PerTable(hyp, totals), False
    if test == "pearson-chi-square":
        return (lambda ev: pearson(ev, totals, continuity=bool(hyp.continuity),
                                   alternative=alt)), True
    if test == "likelihood-ratio":
        return (lambda ev: likelihood_ratio(ev, totals)), True
    if test == "two-proportion-z":
        if hyp.comparison != "superiority":
            return (lambda ev: wald_margin(ev, totals, hyp)), True
        return (lambda ev: two_proportion_z(ev, totals, alt)), True
    if test == "fisher-exact":
        tables = FisherTables(int(totals[0]), int(totals[1]), alt)
        return (lambda ev: tables.p_values(ev[:, 0], ev[:, 1])), True
    if test == "cochran-armitage-trend":
        return (lambda ev: cochran_armitage(ev, totals, hyp.scores, alt)), True
    if test == "binomial-exact":
        lookup = binomial_p_values(int(totals[0]), float(hyp.null_rate), alt)
        return (lambda ev: lookup[ev[:, 0]]), True
    # one-proportion-z, the only one left in ON_ARRAYS
    return (lambda ev: one_proportion_z(ev, totals, float(hyp.null_rate), alt)), True
