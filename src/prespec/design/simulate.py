"""Operating characteristics by simulation of whole trials, vectorised over trials.

Each simulated trial draws every group's events from its assumed rate (the group sizes fixed
at the analysed sizes) and is decided by the plan's full rule: the pre-specified test of each
hypothesis, its sparse switch applied trial by trial, the multiplicity procedure over the main
family, and the gated pairwise follow-ups with their own adjustment: the rule of
``analysis.decision``, the one the run decides by, here on many trials at once. The count
tables are arrays (trials × groups), drawn in chunks so that memory stays bounded; the tests
run on whole arrays (``arraytests``).

What is reported per scenario: the family-wise error rate (the probability of rejecting at
least one true null among the non-exploratory hypotheses, follow-ups included), the false
discovery rate as well under a false-discovery-rate procedure, the power of each hypothesis
(exploratory ones at their nominal level), the probabilities of rejecting at least one and all
of the main family, each with its Monte Carlo standard error.
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from prespec.analysis import decision
from prespec.analysis.decision import MAIN_FAMILY
from prespec.design.arraytests import ArrayTest, array_test
from prespec.errors import BadInput
from prespec.plan.followups import follow_ups
from prespec.stats.tables import smallest_expected_many

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

#: Trials per chunk: with a handful of groups and hypotheses, a few megabytes of arrays.
CHUNK = 20_000
#: Rates closer than this count as equal when deciding whether a null hypothesis holds.
EQUAL = 1e-12

Progress = Callable[[str, int, int], None]


@dataclass(frozen=True)
class Unit:
    """One hypothesis as the simulation decides it: a plan hypothesis or a follow-up."""

    id: str
    hyp: Any
    family: str | None  # "main", "<parent> pairwise", or None for exploratory
    parent: str | None
    groups: tuple[int, ...]  # indices into data.groups, in compare order

    def rule_unit(self) -> decision.Unit:
        """The unit as ``decision.decide`` sees it."""
        return decision.Unit(self.id, self.family, self.parent)


def units_of(plan: Plan) -> list[Unit]:
    """The hypotheses in the order of results.json: each followed by its follow-ups."""
    names = list(plan.data.groups)
    out = []
    for hyp in plan.hypotheses:
        groups = names if hyp.kind in ("all", "trend") else list(hyp.compare)
        out.append(Unit(hyp.id, hyp, decision.family_of(hyp), None,
                        tuple(names.index(g) for g in groups)))
        if hyp.then is None:
            continue
        for sub in follow_ups(hyp, plan):
            out.append(Unit(sub.id, sub, decision.family_of(sub, hyp), hyp.id,
                            tuple(names.index(g) for g in sub.compare)))
    return out


def null_holds(hyp: Hypothesis, rates: list[float], sizes: list[int]) -> bool:
    """Whether the hypothesis's null is true at these rates (of its groups, compare order).

    Pairs: p_a = p_b (two-sided), p_a <= p_b (greater), p_a >= p_b (less); margins: the
    measure on the far side of the margin (outside (low, high) for equivalence); one group:
    against null_rate likewise; k groups: all equal; trend: the size-weighted covariance of
    rate and score is 0 (two-sided), <= 0 (greater), >= 0 (less).
    """
    alt = hyp.alternative
    if hyp.kind == "all":
        return max(rates) - min(rates) <= EQUAL
    if hyp.kind == "trend":
        scores = hyp.scores if hyp.scores is not None else list(range(len(rates)))
        total = float(sum(sizes))
        mean_s = sum(n * s for n, s in zip(sizes, scores, strict=True)) / total
        value = sum(n * (s - mean_s) * p for n, s, p in zip(sizes, scores, rates, strict=True))
        value /= total
        reference = 0.0
    elif hyp.kind == "single":
        value, reference = rates[0], float(hyp.null_rate)
    elif hyp.comparison == "superiority":  # a Bayesian rule's margin is on this scale
        value, reference = rates[0] - rates[1], float(getattr(hyp, "margin", None) or 0.0)
    else:
        value = rates[0] - rates[1] if hyp.measure == "risk-difference" else rates[0] / rates[1]
        if hyp.comparison == "equivalence":
            low, high = hyp.margin
            return not (low < value < high)
        reference = float(hyp.margin)
    if alt == "two-sided":
        return abs(value - reference) <= EQUAL
    if alt == "greater":
        return value <= reference + EQUAL
    return value >= reference - EQUAL


@dataclass
class _Compiled:
    unit: Unit
    totals: np.ndarray
    tests: dict[str, ArrayTest]  # the planned test and, with a sparse switch, the other


class Decider:
    """The plan's decision rule on arrays of count tables, for fixed group sizes.

    ``decide(counts)`` takes, per outcome, an integer array (trials × groups in data.groups
    order) of events and returns a boolean array (trials × units) of rejections: the main
    family adjusted by the plan's multiplicity, exploratory hypotheses at their nominal level,
    follow-ups only where their parent is rejected (``decision.decide``; ``decisions(counts)``
    gives the adjusted p-values and gates as well). ``per_table`` lists the tests that run
    once per distinct table instead of on arrays.
    """

    def __init__(self, plan: Plan, sizes: dict[str, int]) -> None:
        self.plan = plan
        self.units = units_of(plan)
        self.per_table: list[str] = []
        self._compiled = []
        for unit in self.units:
            hyp = unit.hyp
            if hyp.strata:
                raise BadInput(f"hypotheses.{hyp.id}: a stratified test ({hyp.test}) cannot be "
                               "simulated from one assumed rate per group; leave out --simulate "
                               "or simulate a plan without it")
            if hyp.test == "g-computation":
                raise BadInput(f"hypotheses.{hyp.id}: a covariate-adjusted test (g-computation) "
                               "cannot be simulated from one assumed rate per group; leave out "
                               "--simulate or simulate a plan without it")
            totals = np.array([sizes[plan.data.groups[i]] for i in unit.groups], dtype=np.int64)
            tests = {}
            chosen = [(hyp.test, "")]
            if decision.has_sparse_switch(hyp):
                chosen.append((decision.test_chosen(hyp, True), " (sparse switch)"))
            for test, why in chosen:
                tests[test], arrays = array_test(hyp, test, totals)
                if not arrays:
                    self.per_table.append(f"{unit.id}: {test}{why}")
            self._compiled.append(_Compiled(unit, totals, tests))

    def fired(self, counts: dict[str, np.ndarray]) -> np.ndarray:
        """Where each unit's sparse switch fires, trials × units (``decision``)."""
        trials = next(iter(counts.values())).shape[0]
        columns = []
        for c in self._compiled:
            smallest = np.full(trials, np.inf)
            if decision.has_sparse_switch(c.unit.hyp):
                events = counts[c.unit.hyp.outcome][:, list(c.unit.groups)]
                smallest = smallest_expected_many(events, c.totals)
            columns.append(decision.sparse_fires(c.unit.hyp, smallest))
        return np.column_stack(columns)

    def p_values(self, counts: dict[str, np.ndarray]) -> np.ndarray:
        """Raw p-values, trials × units, each by the test chosen for its trial (the sparse
        switch of ``decision``; nan: not computable)."""
        fired = self.fired(counts)
        columns = []
        for k, c in enumerate(self._compiled):
            events = counts[c.unit.hyp.outcome][:, list(c.unit.groups)]

            def p_of(test: str, where: np.ndarray, c: _Compiled = c,
                     events: np.ndarray = events) -> np.ndarray:
                if test not in c.tests:
                    c.tests[test] = array_test(c.unit.hyp, test, c.totals)[0]
                return np.asarray(c.tests[test](events[where]), dtype=float)

            columns.append(decision.chosen_p_values(c.unit.hyp, fired[:, k], p_of))
        return np.column_stack(columns)

    def decisions(self, counts: dict[str, np.ndarray]) -> decision.Decision:
        """The plan's decisions on these trials (``decision.decide``)."""
        return decision.decide(self.plan, [u.rule_unit() for u in self.units],
                               self.p_values(counts))

    def decide(self, counts: dict[str, np.ndarray]) -> np.ndarray:
        """The rejections, trials × units."""
        return self.decisions(counts).reject


@dataclass(frozen=True)
class ScenarioResult:
    """The operating characteristics of one scenario."""

    name: str
    rates: dict[str, float]
    trials: int
    sizes: dict[str, int]
    fwer: float | None  # None when no null hypothesis holds in this scenario
    fdr: float | None  # under benjamini-hochberg or benjamini-yekutieli only
    any: float | None
    all: float | None
    power: dict[str, float]
    mc_se: dict[str, Any]
    true_nulls: tuple[str, ...]

    def to_json(self) -> dict[str, Any]:
        return {"name": self.name, "rates": dict(self.rates), "trials": self.trials,
                "n_per_group": dict(self.sizes), "fwer": self.fwer, "fdr": self.fdr,
                "any": self.any, "all": self.all, "power": dict(self.power),
                "mc_se": self.mc_se, "true_nulls": list(self.true_nulls)}


def _se(p: float | None, n: int) -> float | None:
    return None if p is None else math.sqrt(max(0.0, p * (1.0 - p)) / n)


@dataclass
class _Tally:
    trials: int = 0
    rejections: np.ndarray | None = None
    any_main: int = 0
    all_main: int = 0
    family_error: int = 0
    fdp_sum: float = 0.0
    fdp_squares: float = 0.0
    extra: dict[str, Any] = field(default_factory=dict)


def scenario_seed(seed: int, name: str) -> np.random.SeedSequence:
    """The random stream of one scenario: from the seed and the scenario's name, so that
    adding or removing another scenario changes nothing here."""
    return np.random.SeedSequence(entropy=seed, spawn_key=(zlib.crc32(name.encode("utf-8")),))


def draw(rng: np.random.Generator, plan: Any, outcomes: list[str], rates: np.ndarray,
         sizes: np.ndarray, trials: int) -> dict[str, np.ndarray]:
    """Events per outcome: trials × groups binomial draws, outcomes independent."""
    return {name: rng.binomial(sizes[None, :], rates[None, :], size=(trials, sizes.size))
            for name in outcomes}


def simulate(plan: Plan, *, scenarios: dict[str, dict[str, float]], sizes: dict[str, int],
             trials: int, seed: int, chunk: int = CHUNK,
             progress: Progress | None = None) -> tuple[list[ScenarioResult], Decider]:
    """Simulate ``trials`` whole trials per scenario and decide each by the plan's rule."""
    if trials < 1:
        raise BadInput(f"--simulate: the number of trials must be at least 1, got {trials}")
    decider = Decider(plan, sizes)
    groups = list(plan.data.groups)
    size_vector = np.array([sizes[g] for g in groups], dtype=np.int64)
    outcomes = list(dict.fromkeys(u.hyp.outcome for u in decider.units))
    main = [i for i, u in enumerate(decider.units) if u.family == MAIN_FAMILY]
    confirmatory = [i for i, u in enumerate(decider.units) if u.family is not None]
    fdr_method = (isinstance(plan.multiplicity, str)
                  and plan.multiplicity in ("benjamini-hochberg", "benjamini-yekutieli"))
    total_work = trials * len(scenarios)
    done = 0
    results = []
    for name, rates in scenarios.items():
        rng = np.random.default_rng(scenario_seed(seed, name))
        rate_vector = np.array([rates[g] for g in groups], dtype=float)
        nulls = [i for i, u in enumerate(decider.units) if null_holds(
            u.hyp, [rates[groups[j]] for j in u.groups], [sizes[groups[j]] for j in u.groups])]
        false = [i for i in confirmatory if i in nulls]
        tally = _Tally(rejections=np.zeros(len(decider.units), dtype=np.int64))
        left = trials
        while left > 0:
            size = min(chunk, left)
            reject = decider.decide(draw(rng, plan, outcomes, rate_vector, size_vector, size))
            assert tally.rejections is not None
            tally.rejections += reject.sum(axis=0)
            if main:
                tally.any_main += int(reject[:, main].any(axis=1).sum())
                tally.all_main += int(reject[:, main].all(axis=1).sum())
            if false:
                tally.family_error += int(reject[:, false].any(axis=1).sum())
                if fdr_method:
                    made = reject[:, confirmatory].sum(axis=1)
                    fdp = reject[:, false].sum(axis=1) / np.maximum(made, 1)
                    tally.fdp_sum += float(fdp.sum())
                    tally.fdp_squares += float((fdp * fdp).sum())
            tally.trials += size
            left -= size
            done += size
            if progress is not None:
                progress(name, done, total_work)
        results.append(_result(name, rates, sizes, decider, tally, main, false, fdr_method,
                               [decider.units[i].id for i in nulls]))
    return results, decider


def _result(name: str, rates: dict[str, float], sizes: dict[str, int], decider: Decider,
            tally: _Tally, main: list[int], false: list[int], fdr_method: bool,
            nulls: list[str]) -> ScenarioResult:
    n = tally.trials
    assert tally.rejections is not None
    power = {u.id: int(r) / n for u, r in zip(decider.units, tally.rejections, strict=True)}
    fwer = tally.family_error / n if false else None
    fdr = tally.fdp_sum / n if (false and fdr_method) else None
    fdr_se = None
    if fdr is not None:
        variance = max(0.0, tally.fdp_squares / n - fdr * fdr)
        fdr_se = math.sqrt(variance / n)
    any_ = tally.any_main / n if main else None
    all_ = tally.all_main / n if main else None
    mc_se = {"fwer": _se(fwer, n), "fdr": fdr_se, "any": _se(any_, n), "all": _se(all_, n),
             "power": {k: _se(v, n) for k, v in power.items()}}
    return ScenarioResult(name, dict(rates), n, dict(sizes), fwer, fdr, any_, all_, power,
                          mc_se, tuple(nulls))


def as_prepared(plan: Plan, counts: dict[str, np.ndarray], sizes: dict[str, int],
                trial: int) -> Any:
    """One simulated trial as the pipeline's ``Prepared`` counts, for ``analysis.analyse``
    (used to check that the arrays decide as the pipeline does)."""
    from prespec.data import GroupCounts, OutcomeCounts, Prepared

    groups = list(plan.data.groups)
    outcomes = {}
    for name, events in counts.items():
        outcomes[name] = OutcomeCounts(name, tuple(
            GroupCounts(g, int(events[trial, j]), sizes[g], 0, 0) for j, g in enumerate(groups)))
    total = sum(sizes.values())
    return Prepared(rows_read=total, excluded_by_filter=0, excluded_group=0, analysed=total,
                    outcomes=outcomes, deviations=(), notes=())
