"""The rules across keys of a typed plan (docs/plan-format.md, "How the keys combine").

:func:`format_issues` checks a plan against format version 1 as a whole; :func:`availability_issues`
then refuses what format version 1 knows but this version of prespec cannot run yet. Each yields
:class:`Issue` objects; the loader reports the first in document order.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterator
from typing import Any

from prespec.common.matching import value_key
from prespec.plan import vocabulary as v
from prespec.plan.families import event_issues, family_issues, is_event_family
from prespec.plan.locate import Issue
from prespec.plan.looks import all_looks_issues
from prespec.plan.model import Hypothesis, Plan, suggest
from prespec.plan.yamlread import KeyPath, show

_RESERVED_ID = re.compile(r"[:\[\]\s]")
_TOLERANCE = 1e-12


def _not_in(what: str, value: object, known: list[str]) -> str:
    listed = ", ".join(known) if known else "none"
    return f"{show(value)} is not one of {what} (known: {listed})" + suggest(value, known)


def _blank(text: str | None) -> bool:
    return text is not None and not text.strip()


def format_issues(plan: Plan) -> Iterator[Issue]:
    """Every breach of the format's rules across keys."""
    if not plan.title.strip():
        yield Issue(("title",), "must not be empty")
    yield from _data_issues(plan)
    yield from event_issues(plan)
    yield from _outcome_issues(plan)
    yield from _multiplicity_issues(plan)
    yield from _design_issues(plan)
    if not plan.hypotheses:
        yield Issue(("hypotheses",), "must list at least one hypothesis")
    seen: dict[str, int] = {}
    for i, hyp in enumerate(plan.hypotheses):
        yield from _hypothesis_issues(plan, hyp, ("hypotheses", i), seen)
    yield from all_looks_issues(plan)


def _data_issues(plan: Plan) -> Iterator[Issue]:
    data = plan.data
    for key in ("id", "group"):
        if _blank(getattr(data, key)):
            yield Issue(("data", key), "must name a column")
    if data.id == data.group:
        yield Issue(("data", "group"), f"names the same column as data.id ({show(data.id)}); "
                    "the group and the unit id are different columns")
    if not data.groups:
        yield Issue(("data", "groups"), "must list at least one group")
    first: dict[str, int] = {}
    for j, name in enumerate(data.groups):
        path = ("data", "groups", j)
        if not name.strip():
            yield Issue(path, "a group name must not be empty")
        elif name != name.strip():
            yield Issue(path, f"{show(name)} starts or ends with spaces; data values are "
                        "trimmed, so it would never match")
        if name in first:
            yield Issue(path, f"{show(name)} is listed twice (first as item {first[name] + 1})")
        first.setdefault(name, j)
    if data.reference is not None and data.reference not in data.groups:
        yield Issue(("data", "reference"), _not_in("data.groups", data.reference, data.groups))
    for name in data.planned_n or {}:
        if name not in data.groups:
            yield Issue(("data", "planned_n", name), _not_in("data.groups", name, data.groups),
                        at_key=True)
    for i, cond in enumerate(data.include):
        yield from _condition_issues(cond, ("data", "include", i))


def _condition_issues(cond: Any, path: KeyPath) -> Iterator[Issue]:
    if _blank(cond.column):
        yield Issue((*path, "column"), "must name a column")
    given = cond.given()
    if not given:
        yield Issue(path, "needs one operator: in, not_in, equals, between or is_missing")
    elif len(given) > 1:
        yield Issue((*path, given[1]), f"has both '{given[0]}' and '{given[1]}'; give one "
                    "operator per condition and list more conditions to combine them",
                    at_key=True)
    for name in ("in", "not_in"):
        values = cond.in_ if name == "in" else cond.not_in
        if values is not None and not values:
            yield Issue((*path, name), "must list at least one value")
    if cond.between is not None:
        if len(cond.between) != 2:
            yield Issue((*path, "between"), "expected [low, high], two numbers")
        elif cond.between[0] > cond.between[1]:
            yield Issue((*path, "between"), f"low {show(cond.between[0])} is above high "
                        f"{show(cond.between[1])}")


def _outcome_issues(plan: Plan) -> Iterator[Issue]:
    only_events = bool(plan.hypotheses) and all(is_event_family(plan, h)
                                                for h in plan.hypotheses)
    if not plan.outcomes and not only_events:
        yield Issue(("outcomes",), "must define at least one outcome")
    for name, out in plan.outcomes.items():
        path: KeyPath = ("outcomes", name)
        if not name.strip():
            yield Issue(path, "an outcome name must not be empty", at_key=True)
        if _blank(out.column):
            yield Issue((*path, "column"), "must name a column")
        keys: dict[str, dict[tuple[str, object], object]] = {}
        for side in ("event", "no_event"):
            values = getattr(out, side)
            if not values:
                yield Issue((*path, side), "must list at least one value")
            keys[side] = {}
            for j, value in enumerate(values):
                key = value_key(value)
                if key in keys[side]:
                    yield Issue((*path, side, j), f"{show(value)} is listed twice (as "
                                f"{show(keys[side][key])} and {show(value)})")
                keys[side].setdefault(key, value)
                other = keys.get("event") if side == "no_event" else None
                if other is not None and key in other:
                    yield Issue((*path, side, j), f"{show(value)} is also in event (as "
                                f"{show(other[key])}); values match as text or as equal "
                                "numbers, and a value cannot count as both")


def _outside_family(hyp_id: str, bayesian: bool = False) -> str:
    if bayesian:
        return (f"{show(hyp_id)} is a Bayesian rule (posterior-probability), which is outside "
                "the frequentist multiplicity family; leave it out")
    return (f"{show(hyp_id)} is exploratory, and exploratory hypotheses are outside the "
            "multiplicity family; give it a role of primary or secondary, or leave it out")


def _multiplicity_issues(plan: Plan) -> Iterator[Issue]:
    mult = plan.multiplicity
    if isinstance(mult, str):
        return
    ids = [h.id for h in plan.hypotheses]
    exploratory = {h.id for h in plan.hypotheses if h.outside_multiplicity}
    bayesian = {h.id for h in plan.hypotheses if h.test in v.BAYESIAN_TESTS}
    base: KeyPath = ("multiplicity",)
    total = 0.0
    for hyp_id, weight in mult.weights.items():
        if hyp_id not in ids:
            yield Issue((*base, "weights", hyp_id), _not_in("the hypothesis ids", hyp_id, ids),
                        at_key=True)
        elif hyp_id in exploratory:
            yield Issue((*base, "weights", hyp_id), _outside_family(hyp_id, hyp_id in bayesian),
                        at_key=True)
        if not 0 <= weight <= 1:
            yield Issue((*base, "weights", hyp_id), f"a weight must be in [0, 1], found "
                        f"{show(weight)}")
        total += weight
    if total > 1 + _TOLERANCE:
        yield Issue((*base, "weights"), f"the weights sum to {total:g}; they must sum to at "
                    "most 1")
    for source, row in mult.transitions.items():
        path = (*base, "transitions", source)
        if source not in ids:
            yield Issue(path, _not_in("the hypothesis ids", source, ids), at_key=True)
        elif source in exploratory:
            yield Issue(path, _outside_family(source, source in bayesian), at_key=True)
        for target, weight in row.items():
            if target == source:
                yield Issue((*path, target), f"{show(source)} cannot pass weight to itself",
                            at_key=True)
            elif target not in ids:
                yield Issue((*path, target), _not_in("the hypothesis ids", target, ids),
                            at_key=True)
            elif target in exploratory:
                yield Issue((*path, target), _outside_family(target, target in bayesian),
                            at_key=True)
            if not 0 <= weight <= 1:
                yield Issue((*path, target), f"a transition weight must be in [0, 1], found "
                            f"{show(weight)}")
        if sum(row.values()) > 1 + _TOLERANCE:
            yield Issue(path, f"the transitions from {show(source)} sum to "
                        f"{sum(row.values()):g}; they must sum to at most 1")


def _hypothesis_issues(plan: Plan, hyp: Hypothesis, path: KeyPath,
                       seen: dict[str, int]) -> Iterator[Issue]:
    if not hyp.id.strip():
        yield Issue((*path, "id"), "must not be empty")
    elif _RESERVED_ID.search(hyp.id):
        yield Issue((*path, "id"), f"{show(hyp.id)} holds a space, ':', '[' or ']'; these are "
                    "kept for the ids prespec derives (H2:a-vs-b, H3[term])")
    if hyp.id in seen:
        yield Issue((*path, "id"), f"{show(hyp.id)} is already the id of hypotheses"
                    f"[{seen[hyp.id] + 1}]; ids must be unique")
    seen.setdefault(hyp.id, int(path[1]))
    if hyp.title is not None and _blank(hyp.title):
        yield Issue((*path, "title"), "must not be empty (leave it out instead)")
    if hyp.outcome not in plan.outcomes and not is_event_family(plan, hyp):
        yield Issue((*path, "outcome"), _not_in("the outcomes", hyp.outcome,
                                                list(plan.outcomes)))
    yield from _compare_issues(plan, hyp, path)
    yield from _test_issues(hyp, hyp.test, (*path, "test"))
    yield from _comparison_issues(hyp, path)
    yield from _estimate_issues(hyp, path)
    yield from _option_issues(plan, hyp, path)
    yield from _estimand_issues(hyp, path)
    yield from _sensitivity_issues(plan, hyp, path)
    yield from family_issues(plan, hyp, path)


def _estimand_issues(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if hyp.estimand is None:
        return
    for j, ice in enumerate(hyp.estimand.intercurrent):
        where: KeyPath = (*path, "estimand", "intercurrent", j)
        for key in ("event", "column"):
            if _blank(getattr(ice, key)):
                yield Issue((*where, key), "must not be empty")
        if not ice.happened:
            yield Issue((*where, "happened"), "must list the values meaning it happened")
        if ice.strategy == "composite":
            if ice.counts_as is None:
                yield Issue((*where, "counts_as"), "is required for a composite strategy "
                            "(event or no-event)", line_path=where)
        elif ice.counts_as is not None:
            yield Issue((*where, "counts_as"), "is used only with strategy: composite",
                        at_key=True)
        if ice.strategy == "while-on-treatment":
            if ice.outcome_column is None or _blank(ice.outcome_column):
                yield Issue((*where, "outcome_column"), "is required for while-on-treatment "
                            "(the column with the outcome before the intercurrent event)",
                            line_path=where)
        elif ice.outcome_column is not None:
            yield Issue((*where, "outcome_column"), "is used only with strategy: "
                        "while-on-treatment", at_key=True)


def _sensitivity_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if hyp.sensitivity is None:
        return
    where: KeyPath = (*path, "sensitivity")
    if not hyp.sensitivity:
        yield Issue(where, "must name at least one analysis (worst-case, best-case, "
                    "tipping-point), or be left out")
    if hyp.kind != "pair":
        yield Issue(where, "sensitivity analyses of missing outcomes apply to compare [a, b]",
                    at_key=True)
        return
    seen: set[str] = set()
    for j, name in enumerate(hyp.sensitivity):
        if name in seen:
            yield Issue((*where, j), f"{show(name)} is listed twice")
        seen.add(name)
        outcome = plan.outcomes.get(hyp.outcome)
        if name in ("worst-case", "best-case") and outcome is not None \
                and outcome.favourable is None:
            yield Issue((*where, j), f"{name} needs outcomes.{hyp.outcome}.favourable "
                        "(event or no-event) to know which value is the worse one")
        if name in ("worst-case", "best-case") and hyp.test in v.ADJUSTED_TESTS:
            yield Issue((*where, j), f"{name} imputes a count table, and '{hyp.test}' fits a "
                        "working model to each unit's covariates; leave it out")
        if name == "tipping-point":
            for test in (hyp.test, hyp.sparse.test if hyp.sparse else None):
                if test in v.NO_TIPPING_POINT_TESTS:
                    yield Issue((*where, j), f"tipping-point is not available with "
                                f"'{test}': {v.NO_TIPPING_POINT_TESTS[test]}")


def _design_issues(plan: Plan) -> Iterator[Issue]:
    design = plan.design
    if design is None:
        return
    groups = plan.data.groups
    base: KeyPath = ("design",)

    def rates(mapping: dict[str, float], path: KeyPath) -> Iterator[Issue]:
        for name in mapping:
            if name not in groups:
                yield Issue((*path, name), _not_in("data.groups", name, groups), at_key=True)
        absent = [g for g in groups if g not in mapping]
        if absent:
            yield Issue(path, f"gives no rate for {', '.join(absent)}; give one for every "
                        "group")

    yield from rates(design.assumed, (*base, "assumed"))
    allocation = design.allocation or {}
    for name in allocation:
        if name not in groups:
            yield Issue((*base, "allocation", name), _not_in("data.groups", name, groups),
                        at_key=True)
    absent = [g for g in groups if g not in allocation]
    if absent:
        yield Issue((*base, "allocation"), f"gives no share for {', '.join(absent)}; give "
                    "one for every group, or leave allocation out for equal groups")
    for name, scenario in design.scenarios.items():
        path: KeyPath = (*base, "scenarios", name)
        if name == "global-null":
            yield Issue(path, "'global-null' is added by prespec itself (every group at the "
                        "pooled assumed rate); choose another name", at_key=True)
        yield from rates(scenario, path)


def _compare_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if isinstance(hyp.compare, str):
        return
    groups = plan.data.groups
    for j, name in enumerate(hyp.compare):
        if name not in groups:
            yield Issue((*path, "compare", j), _not_in("data.groups", name, groups))
    if len(hyp.compare) == 2 and hyp.compare[0] == hyp.compare[1]:
        yield Issue((*path, "compare", 1), f"compares {show(hyp.compare[0])} with itself; "
                    "give two different groups")


def _test_issues(hyp: Hypothesis, test: str, path: KeyPath) -> Iterator[Issue]:
    """Rules a test must meet on this hypothesis; used for ``test`` and ``sparse.test``."""
    kind, label = hyp.kind, v.KIND_LABELS[hyp.kind]
    if test not in v.KNOWN_TESTS_BY_KIND[kind]:
        tests = ", ".join(sorted(v.KNOWN_TESTS_BY_KIND[kind]))
        yield Issue(path, f"'{test}' is not a test for compare {label} (tests for {label}: "
                    f"{tests})")
        return
    if test in v.TWO_SIDED_ONLY_BY_KIND[kind] and hyp.alternative != "two-sided":
        where = "compare: all" if kind == "all" else f"'{test}'"
        yield Issue(path, f"{where} is tested two-sided only, and alternative is "
                    f"'{hyp.alternative}'")
    if test in v.MARGIN_ONLY_TESTS and hyp.comparison == "superiority":
        yield Issue(path, f"'{test}' tests non-inferiority or equivalence; set comparison "
                    "and margin, or choose another test")
    if (hyp.comparison != "superiority" and test not in v.MARGIN_TESTS
            and test not in v.BAYESIAN_TESTS):  # a Bayesian rule says why: _bayesian_issues
        tests = ", ".join(sorted(v.MARGIN_TESTS))
        yield Issue(path, f"'{test}' does not test {hyp.comparison} (tests with a margin: "
                    f"{tests})")
    if test in v.STRATIFIED_TESTS and not hyp.strata:
        yield Issue(path, f"'{test}' needs strata: [column, ...] on the hypothesis")


def _comparison_issues(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    comparison, margin = hyp.comparison, hyp.margin
    if hyp.test in v.BAYESIAN_TESTS:
        return  # its margin and comparison: _bayesian_issues
    if comparison == "superiority":
        if margin is not None:
            yield Issue((*path, "margin"), "a margin is used only with comparison: "
                        "non-inferiority or equivalence")
        return
    if hyp.kind != "pair":
        yield Issue((*path, "comparison"), f"{comparison} applies to compare [a, b] only")
        return
    if hyp.measure == "odds-ratio":
        yield Issue((*path, "measure"), "odds-ratio margins are not supported; use "
                    "risk-difference or risk-ratio")
        return
    ratio = hyp.measure == "risk-ratio"
    if comparison == "non-inferiority":
        if hyp.alternative == "two-sided":
            yield Issue((*path, "alternative"), "non-inferiority needs a one-sided alternative "
                        "(greater or less: the direction of benefit)")
        if margin is None:
            yield Issue((*path, "margin"), "is required for non-inferiority")
        elif isinstance(margin, list):
            yield Issue((*path, "margin"), "non-inferiority takes one margin, not [low, high]")
        elif hyp.alternative != "two-sided":
            yield from _ni_margin(margin, hyp.alternative, ratio, (*path, "margin"))
        return
    if hyp.alternative != "two-sided":
        yield Issue((*path, "alternative"), "equivalence is decided by two one-sided tests; "
                    "leave alternative two-sided")
    if not isinstance(margin, list):
        yield Issue((*path, "margin"), "equivalence needs margin: [low, high]")
        return
    low, high = margin
    centre, bounds = (1.0, (0.0, math.inf)) if ratio else (0.0, (-1.0, 1.0))
    if not bounds[0] < low < centre < high < bounds[1]:
        where = "0 < low < 1 < high" if ratio else "-1 < low < 0 < high < 1"
        yield Issue((*path, "margin"), f"an equivalence margin on the {hyp.measure} needs "
                    f"{where}, found [{show(low)}, {show(high)}]")


def _ni_margin(margin: float, alternative: str, ratio: bool, path: KeyPath) -> Iterator[Issue]:
    if ratio:
        if margin <= 0:
            yield Issue(path, f"a risk-ratio margin must be above 0, found {show(margin)}")
        elif (alternative == "greater") != (margin < 1):
            side = "below 1" if alternative == "greater" else "above 1"
            yield Issue(path, f"with alternative {alternative} the risk-ratio margin lies "
                        f"{side}, found {show(margin)}")
        return
    if not -1 < margin < 1:
        yield Issue(path, f"a risk-difference margin must be in (-1, 1), found {show(margin)}")
    elif (alternative == "greater") != (margin < 0):
        side = "below 0" if alternative == "greater" else "above 0"
        yield Issue(path, f"with alternative {alternative} the risk-difference margin lies "
                    f"{side}, found {show(margin)}")


def _estimate_issues(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    kind, label = hyp.kind, v.KIND_LABELS[hyp.kind]
    measures = v.MEASURES_BY_KIND[kind]
    if not measures:
        if hyp.measure is not None:
            yield Issue((*path, "measure"), f"compare: {label} has no measure (its estimate is "
                        "null); leave measure out")
        if hyp.interval is not None:
            yield Issue((*path, "interval"), f"compare: {label} has no interval; leave "
                        "interval out")
        return
    if hyp.measure not in measures:
        yield Issue((*path, "measure"), f"'{hyp.measure}' is not a measure for compare {label} "
                    f"(measures for {label}: {', '.join(measures)})")
        return
    own = v.OWN_INTERVALS.get(hyp.test)
    if own is not None and hyp.measure not in own:
        yield Issue((*path, "measure"), f"'{hyp.measure}' is not a measure of '{hyp.test}' "
                    f"(measures: {', '.join(own)})")
        return
    if own is not None:
        allowed: tuple[str, ...] = own[hyp.measure]
        under = f"{hyp.measure} under '{hyp.test}'"
    else:
        allowed = v.INTERVALS_BY_MEASURE[hyp.measure]
        under = hyp.measure
    if hyp.interval not in allowed:
        hint = ""
        owner = _measure_of_interval(str(hyp.interval), own)
        if owner and owner != hyp.measure and owner in measures:
            hint = f"; '{hyp.interval}' is an interval for {owner} (set measure: {owner})"
        yield Issue((*path, "interval"), f"'{hyp.interval}' is not an interval for {under} "
                    f"(intervals: {', '.join(allowed)}){hint}")


def _measure_of_interval(interval: str, own: dict[str, tuple[str, ...]] | None) -> str | None:
    table = own if own is not None else v.INTERVALS_BY_MEASURE
    owners = [m for m, ints in table.items() if interval in ints]
    return owners[0] if len(owners) == 1 else None


def _option_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    kind, label = hyp.kind, v.KIND_LABELS[hyp.kind]
    if hyp.continuity and hyp.test not in v.CONTINUITY_TESTS_BY_KIND[kind]:
        yield Issue((*path, "continuity"), "continuity applies only to pearson-chi-square on "
                    "compare [a, b] and to cochran-mantel-haenszel")
    if hyp.sparse is not None:
        sp = (*path, "sparse", "test")
        if hyp.sparse.test == hyp.test:
            yield Issue(sp, f"switches to '{hyp.test}', the test already chosen")
        else:
            yield from _test_issues(hyp, hyp.sparse.test, sp)
        if hyp.comparison != "superiority":
            yield Issue((*path, "sparse"), "a sparse switch applies to superiority comparisons "
                        "only")
        if hyp.test in v.STRATIFIED_TESTS:
            yield Issue((*path, "sparse"), f"a sparse switch does not apply to '{hyp.test}': "
                        "the switched test would ignore the strata")
        if hyp.test in v.ADJUSTED_TESTS:
            yield Issue((*path, "sparse"), f"a sparse switch does not apply to '{hyp.test}'; "
                        "its fallback key names the test run when the working model fails",
                        at_key=True)
    if kind == "single":
        if hyp.null_rate is None:
            yield Issue((*path, "null_rate"), "is required for compare [a] (the rate under the "
                        "null hypothesis)", line_path=path)
    elif hyp.null_rate is not None:
        yield Issue((*path, "null_rate"), "is used only with compare [a]", at_key=True)
    stratified = {hyp.test, hyp.sparse.test if hyp.sparse else ""} & v.STRATIFIED_TESTS
    if hyp.strata is not None:
        yield from _strata_issues(plan, hyp.strata, bool(stratified), (*path, "strata"))
    yield from _adjusted_issues(plan, hyp, path)
    yield from _bayesian_issues(plan, hyp, path)
    if hyp.then is not None and kind != "all":
        yield Issue((*path, "then"), f"follow-up comparisons apply to compare: all, not {label}",
                    at_key=True)
    if hyp.scores is not None:
        yield from _score_issues(plan, hyp, (*path, "scores"))
    fisher_k = kind == "all" and "fisher-exact" in {hyp.test, hyp.sparse.test if hyp.sparse
                                                     else ""}
    if hyp.monte_carlo is not None and not fisher_k:
        yield Issue((*path, "monte_carlo"), "a Monte Carlo p-value applies only to fisher-exact "
                    "on compare: all", at_key=True)


def _other_column(plan: Plan, column: str, path: KeyPath, what: str) -> Iterator[Issue]:
    """A column named by a covariate key must be a column other than the id, group, outcome."""
    outcome_columns = {o.column for o in plan.outcomes.values()}
    if not column.strip():
        yield Issue(path, "must name a column")
    elif column == plan.data.group:
        yield Issue(path, f"{show(column)} is the group column; {what} are other columns")
    elif column == plan.data.id:
        yield Issue(path, f"{show(column)} is the unit id column (data.id); {what} are other "
                    "columns")
    elif column in outcome_columns:
        yield Issue(path, f"{show(column)} is an outcome column; {what} are baseline columns")


def _adjusted_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    """The keys of g-computation, used only by it, and the weights of stratified-score."""
    adjusted = hyp.test in v.ADJUSTED_TESTS
    for key in ("covariates", "variance", "randomisation_strata", "covariate_missing",
                "fallback"):
        if getattr(hyp, key) is not None and not adjusted:
            yield Issue((*path, key), f"is used only with test: {', '.join(sorted(v.ADJUSTED_TESTS))}",
                        at_key=True)
    if hyp.weights is not None and hyp.test != "stratified-score":
        yield Issue((*path, "weights"), "is used only with test: stratified-score", at_key=True)
    if not adjusted:
        return
    if hyp.covariates is None:
        yield Issue((*path, "test"), f"'{hyp.test}' needs covariates: {{column: numeric or "
                    "categorical, ...}} on the hypothesis ({} for none)")
    for column in hyp.covariates or {}:
        yield from _other_column(plan, column, (*path, "covariates", column), "covariates")
    if hyp.randomisation_strata is not None:
        where: KeyPath = (*path, "randomisation_strata")
        if hyp.variance != "ye":
            yield Issue(where, "the stratified-randomisation form is that of variance: ye; "
                        "leave randomisation_strata out with variance: ge", at_key=True)
        if not hyp.randomisation_strata:
            yield Issue(where, "must name at least one column")
        for j, column in enumerate(hyp.randomisation_strata):
            yield from _other_column(plan, column, (*where, j), "randomisation strata")
            if column in hyp.randomisation_strata[:j]:
                yield Issue((*where, j), f"{show(column)} is listed twice")
    fallback = hyp.fallback
    if fallback is not None:
        where = (*path, "fallback")
        if fallback not in v.FALLBACK_TESTS:
            tests = ", ".join(sorted(v.FALLBACK_TESTS))
            yield Issue(where, f"'{fallback}' cannot be the fallback of '{hyp.test}' (an "
                        f"unadjusted test of two groups: {tests})")
        else:
            yield from _test_issues(hyp, fallback, where)


def _bayesian_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    """The keys of a Bayesian rule (test: posterior-probability), used only by it."""
    bayesian = hyp.test in v.BAYESIAN_TESTS
    for key in ("prior", "threshold", "credible", "sceptical_prior"):
        if getattr(hyp, key) is not None and not bayesian:
            yield Issue((*path, key), "is used only with test: posterior-probability",
                        at_key=True)
    if not bayesian:
        return
    if hyp.alternative == "two-sided":
        yield Issue((*path, "test"), "a posterior-probability rule is one-sided: set "
                    "alternative: greater or less (the direction of success)")
    if hyp.comparison != "superiority":
        yield Issue((*path, "comparison"), "a posterior-probability rule takes its margin "
                    "with comparison: superiority (Pr(p_a − p_b > margin)); leave comparison "
                    "out", at_key=True)
    if hyp.threshold is None:
        yield Issue((*path, "test"), "posterior-probability needs threshold: the posterior "
                    "probability at which the rule is met, e.g. 0.975")
    if hyp.margin is not None:
        if hyp.kind == "single":
            yield Issue((*path, "margin"), "compare [a] takes null_rate, not a margin",
                        at_key=True)
        elif isinstance(hyp.margin, list) or not -1 < hyp.margin < 1:
            yield Issue((*path, "margin"), "the margin of a posterior-probability rule is one "
                        f"risk difference in (-1, 1), found {show(hyp.margin)}")
    if hyp.prior is not None and isinstance(hyp.compare, list):
        for group, prior in hyp.prior.items():
            small = [x for x in prior if isinstance(x, float) and x < v.MIN_BETA_PARAMETER]
            if small:
                yield Issue((*path, "prior", group), f"a Beta parameter of {show(small[0])} is "
                            f"below {v.MIN_BETA_PARAMETER:g}: such a prior piles its mass so "
                            "close to 0 or 1 that posteriors cannot be compared in double "
                            "precision", at_key=True)
        for group in hyp.prior:
            if group not in hyp.compare:
                yield Issue((*path, "prior", group), _not_in("the compared groups", group,
                                                             list(hyp.compare)), at_key=True)
        for group in hyp.compare:
            if group not in hyp.prior:
                yield Issue((*path, "prior"), f"gives no prior for {show(group)}; give one "
                            "for each compared group", at_key=True)
    sceptical = hyp.sceptical_prior
    if sceptical is not None and min(sceptical.mean, 1 - sceptical.mean) * sceptical.n \
            < v.MIN_BETA_PARAMETER:
        yield Issue((*path, "sceptical_prior"), f"mean·n and (1 − mean)·n must be at least "
                    f"{v.MIN_BETA_PARAMETER:g} (Beta parameters below it cannot be compared in "
                    "double precision)", at_key=True)
    for key, why in (("sparse", "a Bayesian rule has no sparse switch"),
                     ("sensitivity", ("the prior-sensitivity table is shown instead; analyses "
                                     "of missing outcomes are not available for a Bayesian "
                                     "rule in this version of prespec"))):
        if getattr(hyp, key) is not None:
            yield Issue((*path, key), why, at_key=True)


def _strata_issues(plan: Plan, strata: list[str], stratified: bool,
                   path: KeyPath) -> Iterator[Issue]:
    if not stratified:
        tests = ", ".join(sorted(v.STRATIFIED_TESTS))
        yield Issue(path, f"strata are used only by {tests}", at_key=True)
    if not strata:
        yield Issue(path, "must name at least one column")
    for j, column in enumerate(strata):
        if not column.strip():
            yield Issue((*path, j), "must name a column")
        elif column == plan.data.group:
            yield Issue((*path, j), f"{show(column)} is the group column; strata are other "
                        "columns")
        elif column in strata[:j]:
            yield Issue((*path, j), f"{show(column)} is listed twice")


def _score_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if hyp.kind != "trend":
        yield Issue(path, "scores are used only with compare: trend", at_key=True)
        return
    k = len(plan.data.groups)
    if len(hyp.scores or []) != k:
        yield Issue(path, f"expected {k} scores, one per group in data.groups order, found "
                    f"{len(hyp.scores or [])}")
    elif len(set(hyp.scores or [])) != k:
        yield Issue(path, "the scores must be distinct numbers")


def availability_issues(plan: Plan) -> Iterator[Issue]:
    """What format version 1 knows but this version of prespec cannot run."""
    mult = plan.multiplicity
    name = mult if isinstance(mult, str) else mult.method
    if name not in v.AVAILABLE_MULTIPLICITY:
        where: KeyPath = ("multiplicity",) if isinstance(mult, str) else ("multiplicity",
                                                                          "method")
        yield Issue(where, v.unavailable(name, v.AVAILABLE_MULTIPLICITY))
    for i, hyp in enumerate(plan.hypotheses):
        yield from _hypothesis_availability(hyp, ("hypotheses", i))


def _unavailable_test(kind: str, test: str) -> str:
    shown = ""
    if kind == "all" and test == "fisher-exact":
        shown = "'fisher-exact' on compare: all (the exact k×2 test)"
    return v.unavailable(test, v.AVAILABLE_TESTS_BY_KIND[kind], v.KIND_LABELS[kind], shown)


def _hypothesis_availability(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    kind = hyp.kind
    if kind not in v.AVAILABLE_KINDS:
        avail = ", ".join(v.KIND_LABELS[k] for k in v.KINDS if k in v.AVAILABLE_KINDS)
        yield Issue((*path, "compare"), f"compare {v.KIND_LABELS[kind]} is known but not "
                    f"available in this version of prespec (available: {avail})")
    else:
        if hyp.test not in v.AVAILABLE_TESTS_BY_KIND[kind]:
            yield Issue((*path, "test"), _unavailable_test(kind, hyp.test))
        if hyp.sparse is not None and hyp.sparse.test not in v.AVAILABLE_TESTS_BY_KIND[kind]:
            yield Issue((*path, "sparse", "test"), _unavailable_test(kind, hyp.sparse.test))
        yield from _estimate_availability(hyp, path)
    for key in sorted(v.KNOWN_HYPOTHESIS_OPTIONS - v.AVAILABLE_HYPOTHESIS_OPTIONS):
        if getattr(hyp, key) is not None:
            yield Issue((*path, key), f"'{key}' is known but not available in this version "
                        "of prespec", at_key=True)


def _estimate_availability(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if hyp.comparison not in v.AVAILABLE_COMPARISONS:
        yield Issue((*path, "comparison"),
                    v.unavailable(hyp.comparison, v.AVAILABLE_COMPARISONS))
    if hyp.measure is not None and hyp.measure not in v.AVAILABLE_MEASURES:
        yield Issue((*path, "measure"), v.unavailable(hyp.measure, v.AVAILABLE_MEASURES))
    elif hyp.interval is not None and hyp.interval not in v.AVAILABLE_INTERVALS:
        measure = hyp.measure or ""
        for_measure = v.AVAILABLE_INTERVALS & set(v.INTERVALS_BY_MEASURE.get(measure, ()))
        yield Issue((*path, "interval"), v.unavailable(hyp.interval, for_measure, measure))
