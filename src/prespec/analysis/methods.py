"""The plan's method names mapped to the pure functions of ``stats``.

One table per question: which test runs for a test name, which interval for a (measure,
interval name). ``analysis.py`` asks these tables and never names a stats function itself, so
adding a method is one line here (and its name in ``plan/vocabulary.py``).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from prespec.analysis import adjusted
from prespec.errors import DataError
from prespec.stats import (
    exact,
    intervals,
    margins,
    proportions,
    ratios,
    single,
    stratified,
    trend,
)
from prespec.stats.results import Estimate, TestResult

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis

Strata = Sequence[tuple[int, int, int, int]]


@dataclass(frozen=True)
class Table:
    """What a test needs: the groups' events and totals, the strata when stratified, and the
    analysed units (``data.prepare.Units``) of a covariate-adjusted test."""

    events: list[int]
    totals: list[int]
    strata: list[tuple[int, int, int, int]] | None = None
    units: Any = None

    @property
    def pair(self) -> tuple[int, int, int, int]:
        return self.events[0], self.totals[0], self.events[1], self.totals[1]


@dataclass(frozen=True)
class TestOutcome:
    result: TestResult
    monte_carlo: dict[str, Any] | None = None


def _margin_test(fn: Callable[..., TestResult]) -> Callable[[Table, Any], TestResult]:
    """A test at a margin: one-sided for non-inferiority, two one-sided tests for equivalence."""

    def run(table: Table, hyp: Hypothesis) -> TestResult:
        measure = hyp.measure
        if hyp.comparison == "equivalence":
            low, high = hyp.margin
            lower = fn(*table.pair, margin=low, measure=measure, alternative="greater")
            upper = fn(*table.pair, margin=high, measure=measure, alternative="less")
            return margins.tost(lower, upper)
        return fn(*table.pair, margin=hyp.margin, measure=measure, alternative=hyp.alternative)

    return run


def _two_proportion_z(table: Table, hyp: Hypothesis) -> TestResult:
    if hyp.comparison != "superiority":
        return _margin_test(margins.wald_margin_z)(table, hyp)
    return proportions.two_proportion_z(*table.pair, alternative=hyp.alternative)


def _fisher(table: Table, hyp: Hypothesis) -> TestOutcome:
    if len(table.events) == 2:
        return TestOutcome(proportions.fisher_exact(*table.pair, alternative=hyp.alternative))
    mc = hyp.monte_carlo
    try:
        out = exact.fisher_exact_k(
            table.events, table.totals, monte_carlo=(mc.tables, mc.seed) if mc else None
        )
    except ValueError as exc:  # the counts are valid here: the table is too large to enumerate
        raise DataError(f"hypotheses.{hyp.id}: {exc}") from None
    info = None
    if mc is not None:
        info = {"tables": mc.tables, "seed": mc.seed, "standard_error": out.monte_carlo_se}
    return TestOutcome(out.result, info)


def _sized(fn: Callable[..., TestResult]) -> Callable[[Table, Any], TestResult]:
    """An unconditional exact test, which refuses groups too large to hold every table."""

    def run(table: Table, hyp: Hypothesis) -> TestResult:
        try:
            return fn(*table.pair, alternative=hyp.alternative)
        except ValueError as exc:  # the counts are valid here: the groups are too large
            raise DataError(f"hypotheses.{hyp.id}: {exc}") from None

    return run


def _plain(fn: Callable[[Table, Any], TestResult]) -> Callable[[Table, Any], TestOutcome]:
    return lambda table, hyp: TestOutcome(fn(table, hyp))


TESTS: dict[str, Callable[[Table, Any], TestOutcome]] = {
    "pearson-chi-square": _plain(
        lambda t, h: proportions.pearson_chi_square(
            t.events, t.totals, continuity=bool(h.continuity), alternative=h.alternative
        )
    ),
    "likelihood-ratio": _plain(
        lambda t, h: proportions.likelihood_ratio(t.events, t.totals, alternative=h.alternative)
    ),
    "two-proportion-z": _plain(_two_proportion_z),
    "fisher-exact": _fisher,
    "barnard-exact": _plain(_sized(exact.barnard_exact)),
    "boschloo-exact": _plain(_sized(exact.boschloo_exact)),
    "cochran-mantel-haenszel": _plain(
        lambda t, h: stratified.cochran_mantel_haenszel(
            t.strata or [], continuity=bool(h.continuity), alternative=h.alternative
        )
    ),
    "farrington-manning": _plain(_margin_test(margins.farrington_manning)),
    "stratified-score": _plain(lambda t, h: adjusted.stratified_score(t.strata or [], h)),
    # the test alone (hypotheses.py runs the whole adjusted analysis, with its fallback)
    "g-computation": _plain(
        lambda t, h: adjusted.adjusted_test(adjusted.fit(h, t.units, 0.95), h)),
    "cochran-armitage-trend": _plain(
        lambda t, h: trend.cochran_armitage(
            t.events, t.totals, scores=h.scores, alternative=h.alternative
        )
    ),
    "binomial-exact": _plain(
        lambda t, h: single.binomial_exact(
            t.events[0], t.totals[0], h.null_rate, alternative=h.alternative
        )
    ),
    "one-proportion-z": _plain(
        lambda t, h: single.one_proportion_z(
            t.events[0], t.totals[0], h.null_rate, alternative=h.alternative
        )
    ),
}

PairInterval = Callable[[int, int, int, int, float], Estimate]

PAIR_INTERVALS: dict[str, dict[str, PairInterval]] = {
    "risk-difference": {
        "newcombe": intervals.newcombe_difference,
        "wald": intervals.wald_difference,
        "agresti-caffo": intervals.agresti_caffo_difference,
        "miettinen-nurminen": intervals.miettinen_nurminen_difference,
    },
    "risk-ratio": {"katz": ratios.katz_ratio, "koopman": ratios.koopman_ratio},
    "odds-ratio": {
        "woolf": ratios.woolf_odds_ratio,
        "miettinen-nurminen": ratios.miettinen_nurminen_odds_ratio,
        "exact-conditional": ratios.exact_conditional_odds_ratio,
    },
}

SINGLE_INTERVALS: dict[str, Callable[[int, int, float], Estimate]] = {
    "wilson": intervals.wilson,
    "clopper-pearson": single.clopper_pearson,
    "jeffreys": single.jeffreys,
}

STRATIFIED_ESTIMATES: dict[str, Callable[[Strata, float], Estimate]] = {
    "odds-ratio": stratified.mantel_haenszel_odds_ratio,
    "risk-ratio": stratified.mantel_haenszel_risk_ratio,
    "risk-difference": stratified.mantel_haenszel_risk_difference,
}


def estimate(hyp: Hypothesis, table: Table, level: float) -> Estimate | None:
    """The hypothesis's measure with its pre-specified interval, or None when it has none."""
    if hyp.measure is None:
        return None
    if hyp.kind == "single":
        return SINGLE_INTERVALS[hyp.interval](table.events[0], table.totals[0], level)
    if table.strata is not None and hyp.test == "stratified-score":
        return adjusted.stratified_estimate(table.strata, hyp, level)
    if table.strata is not None:
        return STRATIFIED_ESTIMATES[hyp.measure](table.strata, level)
    return PAIR_INTERVALS[hyp.measure][hyp.interval](*table.pair, level)


def homogeneity(table: Table) -> TestResult | None:
    """Breslow–Day with Tarone's correction, for a stratified comparison of two groups."""
    if table.strata is None or len(table.strata) < 2:
        return None
    return stratified.breslow_day_tarone(table.strata)
