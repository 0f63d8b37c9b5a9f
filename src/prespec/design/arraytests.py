"""The plan's tests computed on arrays of count tables, one row per simulated trial.

Each array test is the array kernel of ``prespec.stats`` of which the pipeline's function is
the one-table case (or its array twin, held to it by a test), so that a simulated trial is
decided as ``prespec run`` would decide it. The tests not written on arrays (Farrington–
Manning, the unconditional exact tests, Fisher's test on k groups) run the pipeline's own
function once per distinct table (:class:`PerTable`); the stratified test cannot be simulated
from rates per group alone and is refused by the caller.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np

from prespec.analysis import methods
from prespec.design.exactpower import FisherTables
from prespec.plan.vocabulary import BAYESIAN_TESTS
from prespec.stats.margins import margin_p_values, wald_margin_z_many
from prespec.stats.proportions import likelihood_ratio_many, pearson_many, two_proportion_z_many
from prespec.stats.single import binomial_exact_all, one_proportion_z_many
from prespec.stats.trend import cochran_armitage_many

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis

ArrayTest = Callable[[np.ndarray], np.ndarray]


def wald_margin(events: np.ndarray, totals: np.ndarray, hyp: Hypothesis) -> np.ndarray:
    """The margin test by the Wald z (non-inferiority, or two one-sided tests)."""
    return margin_p_values(wald_margin_z_many, events[:, 0], int(totals[0]), events[:, 1],
                           int(totals[1]), comparison=hyp.comparison, margin=hyp.margin,
                           measure=hyp.measure, alternative=hyp.alternative)


class PerTable:
    """A test the pipeline runs by its own function, called once per distinct table and kept
    for later chunks."""

    def __init__(self, hyp: Hypothesis, totals: np.ndarray) -> None:
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


def bayesian_rule(hyp: Hypothesis, totals: np.ndarray) -> ArrayTest:
    """A Bayesian rule on arrays: every outcome's decision is looked up in the rule's region
    (``stats.bayes.rule_region``), and enters the decision as 0 where the rule is met and 1
    elsewhere: outside the multiplicity family it is decided at its nominal level, so its
    decision is exactly the rule's."""
    from prespec.stats import bayes

    groups = list(hyp.compare)
    if hyp.kind == "single":
        single = bayes.rule_region_single(
            int(totals[0]), tuple(hyp.prior[groups[0]]), null_rate=float(hyp.null_rate),
            alternative=hyp.alternative, threshold=float(hyp.threshold))
        return lambda ev: np.where(single[ev[:, 0]], 0.0, 1.0)
    region = bayes.rule_region(
        int(totals[0]), int(totals[1]), tuple(hyp.prior[groups[0]]),
        tuple(hyp.prior[groups[1]]), margin=float(hyp.margin or 0.0),
        alternative=hyp.alternative, threshold=float(hyp.threshold))
    return lambda ev: np.where(region[ev[:, 0], ev[:, 1]], 0.0, 1.0)


#: Tests with an array form, by compare kind (the others run per distinct table).
ON_ARRAYS = {
    "pair": {"pearson-chi-square", "likelihood-ratio", "two-proportion-z", "fisher-exact"},
    "single": {"binomial-exact", "one-proportion-z"},
    "all": {"pearson-chi-square", "likelihood-ratio"},
    "trend": {"cochran-armitage-trend"},
}


def on_arrays(hyp: Hypothesis, test: str) -> bool:
    """Whether ``test`` for this hypothesis has an array form."""
    if test in BAYESIAN_TESTS:
        return True
    if hyp.kind == "pair" and hyp.comparison != "superiority":
        return test == "two-proportion-z"
    return test in ON_ARRAYS.get(hyp.kind, set())


def array_test(hyp: Hypothesis, test: str, totals: np.ndarray) -> tuple[ArrayTest, bool]:
    """The function of the events array (T, k) that gives the p-values of ``test`` for this
    hypothesis, and whether it is an array form (False: once per distinct table)."""
    hyp = hyp.model_copy(update={"test": test})
    alt = hyp.alternative
    if not on_arrays(hyp, test):
        return PerTable(hyp, totals), False
    if test in BAYESIAN_TESTS:
        return bayesian_rule(hyp, totals), True
    if test == "pearson-chi-square":
        return (lambda ev: pearson_many(ev, totals, continuity=bool(hyp.continuity),
                                        alternative=alt)[1]), True
    if test == "likelihood-ratio":
        return (lambda ev: likelihood_ratio_many(ev, totals)[1]), True
    if test == "two-proportion-z":
        if hyp.comparison != "superiority":
            return (lambda ev: wald_margin(ev, totals, hyp)), True
        return (lambda ev: two_proportion_z_many(ev, totals, alt)[1]), True
    if test == "fisher-exact":
        tables = FisherTables(int(totals[0]), int(totals[1]), alt)
        return (lambda ev: tables.p_values(ev[:, 0], ev[:, 1])), True
    if test == "cochran-armitage-trend":
        scores = np.arange(totals.size, dtype=float) if hyp.scores is None else \
            np.asarray(hyp.scores, dtype=float)
        return (lambda ev: cochran_armitage_many(ev, totals, scores, alt)[1]), True
    if test == "binomial-exact":
        lookup = binomial_exact_all(int(totals[0]), float(hyp.null_rate), alt)
        return (lambda ev: lookup[ev[:, 0]]), True
    # one-proportion-z, the only one left in ON_ARRAYS
    return (lambda ev: one_proportion_z_many(ev[:, 0], int(totals[0]), float(hyp.null_rate),
                                             alt)[1]), True
