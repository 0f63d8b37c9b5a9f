"""The statistics of one run: each hypothesis of the plan computed on its count table.

This module computes each hypothesis's entry of results.json (test, estimate, interval,
margins) and writes down the plan's decisions as ``decision.py`` makes them (sparse switch,
multiplicity, gatekeeping: the rule the design simulation and the tipping point also decide
by); ``methods.py`` maps names to the pure functions of ``stats``. Beside each result it
writes the estimand in words and the pre-specified sensitivity analyses of missing outcomes
(``sensitivity.py``), which never replace it. It neither reads files nor writes anything.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from prespec.analysis import adjusted, bayes, decision, methods, sensitivity
from prespec.analysis.decision import MAIN_FAMILY
from prespec.common.departures import Note
from prespec.data import Prepared
from prespec.plan import vocabulary as v
from prespec.plan.followups import follow_ups
from prespec.stats import tables
from prespec.stats.results import TestResult

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan


def finite_or_note(value: float | None, what: str, notes: list[Note]) -> float | None:
    """A finite float, or None with a note (JSON has no NaN or infinity)."""
    if value is None:
        return None
    value = float(value)
    if math.isfinite(value):
        return value
    notes.append(Note("not-computable", f"{what} is {value} and is written as null"))
    return None


def interval_level(alpha: float, alternative: str, comparison: str) -> float:
    """1 − alpha for two-sided superiority; 1 − 2·alpha for one-sided and margin-based ones."""
    if alternative == "two-sided" and comparison == "superiority":
        return 1.0 - alpha
    return 1.0 - 2.0 * alpha


def _groups_of(hyp: Hypothesis, plan: Plan) -> list[str]:
    return list(plan.data.groups) if hyp.kind in ("all", "trend") else list(hyp.compare)


def _table(hyp: Hypothesis, plan: Any, prepared: Prepared,
           source: str | None = None) -> tuple[methods.Table, list[dict] | None]:
    """The hypothesis's count table (its own under an estimand: ``source`` names the
    hypothesis of the plan whose counts it uses, itself unless it is a follow-up)."""
    groups = _groups_of(hyp, plan)
    source = source or hyp.id
    units = prepared.units.get(source) if getattr(hyp, "covariates", None) is not None else None
    if units is not None:  # a covariate-adjusted test: the units it analyses
        events, totals = units.table()
        return methods.Table(events, totals, units=units), None
    events, totals = prepared.counts_for(source, hyp.outcome).table(groups)
    if not hyp.strata:
        return methods.Table(events, totals), None
    shown, strata = [], []
    for stratum in prepared.strata_for(source, hyp.outcome, tuple(hyp.strata)):
        s_events, s_totals = stratum.counts.table(groups)
        shown.append({"stratum": dict(zip(hyp.strata, stratum.values, strict=True)),
                      "events": s_events, "totals": s_totals})
        strata.append((s_events[0], s_totals[0], s_events[1], s_totals[1]))
    return methods.Table(events, totals, strata), shown


def _rule(hyp: Hypothesis, table: methods.Table) -> dict[str, Any] | None:
    """The ``rule`` of an entry: the sparse switch where it fired (``decision``), else None."""
    if not decision.has_sparse_switch(hyp):
        return None
    smallest = tables.smallest_expected(table.events, table.totals)
    if not decision.sparse_fires(hyp, smallest):
        return None
    return {
        "switch": "sparse",
        "min_expected": hyp.sparse.min_expected,
        "smallest_expected": smallest,
        "from": hyp.test,
        "to": decision.test_chosen(hyp, True),
    }


def _margin_check(hyp: Hypothesis, est: dict[str, Any] | None, decided: bool | None
                  ) -> dict[str, Any] | None:
    """Whether the interval excludes the margin on the side of benefit, and agrees with the test."""
    if hyp.comparison == "superiority" or est is None or None in est["ci"]:
        return None
    low, high = est["ci"]
    if hyp.comparison == "equivalence":
        m_low, m_high = hyp.margin
        excludes = m_low < low and high < m_high
    elif hyp.alternative == "greater":
        excludes = low > hyp.margin
    else:
        excludes = high < hyp.margin
    return {
        "interval_excludes_margin": excludes,
        "agrees_with_test": None if decided is None else excludes == decided,
    }


def _blank_entry(hyp: Hypothesis, plan: Any, groups: list[str], table: methods.Table) -> dict[str, Any]:
    scores = hyp.scores
    if hyp.kind == "trend" and scores is None:
        scores = list(range(len(groups)))
    return {
        "id": hyp.id,
        "title": hyp.title,
        "role": hyp.role,
        "kind": hyp.kind,
        "outcome": hyp.outcome,
        "compare": hyp.compare,
        "alternative": hyp.alternative,
        "comparison": hyp.comparison,
        "margin": hyp.margin,
        "null_rate": hyp.null_rate,
        "scores": scores,
        "strata": hyp.strata,
        "planned_test": hyp.test,
        "test": hyp.test,
        "continuity": hyp.continuity,
        "statistic": None,
        "df": None,
        "p_value": None,
        "p_adjusted": None,
        "reject": None,
        "estimate": None,
        "table": {"groups": groups, "events": table.events, "totals": table.totals},
        "expected": None,
        "strata_tables": None,
        "homogeneity": None,
        "monte_carlo": None,
        "margin_check": None,
        "rule": None,
        "parent": None,
        "gate": None,
        "family": decision.family_of(hyp),
        "estimand": None,
        "sensitivity": None,
        # "adjusted" (g-computation) and "stratified" (stratified-score) are written only
        # where they apply, so the reports of other tests keep the keys earlier ones wrote
    }


def _test_json(result: TestResult, what: str, notes: list[Note]) -> dict[str, Any]:
    return {"test": result.method,
            "statistic": finite_or_note(result.statistic, f"{what} statistic", notes),
            "df": result.df,
            "p_value": finite_or_note(result.p_value, f"{what} p-value", notes)}


def compute_hypothesis(hyp: Hypothesis, plan: Any, prepared: Prepared, notes: list[Note], *,
                       source: str | None = None) -> dict[str, Any]:
    """One hypothesis's entry of results.json, before the multiplicity adjustment.

    ``source`` is the id of the plan's hypothesis whose counts a follow-up uses (its parent).
    The estimand in words and the sensitivity analyses are written beside the result.
    """
    entry = _primary(hyp, plan, prepared, notes, source or hyp.id)
    entry["estimand"] = estimand_entry(hyp, plan, prepared, source or hyp.id)
    if getattr(hyp, "sensitivity", None):
        entry["sensitivity"] = _sensitivity(hyp, plan, prepared, entry, notes,
                                            source or hyp.id)
    return entry


def _primary(hyp: Hypothesis, plan: Plan, prepared: Prepared, notes: list[Note],
             source: str) -> dict[str, Any]:
    groups = _groups_of(hyp, plan)
    table, strata_shown = _table(hyp, plan, prepared, source)
    entry = _blank_entry(hyp, plan, groups, table)
    entry["strata_tables"] = strata_shown
    empty = [g for g, n in zip(groups, table.totals, strict=True) if n == 0]
    if empty:
        notes.append(Note("not-computable", f"{hyp.id}: no analysed participants in "
                          f"{', '.join(empty)}; test and estimate not computable"))
        return entry
    if hyp.kind != "single":
        expected = tables.expected_counts(table.events, table.totals)
        entry["expected"] = [[float(a), float(b)] for a, b in expected]
    level = interval_level(plan.alpha, hyp.alternative, hyp.comparison)
    if table.units is not None:
        return _adjusted(hyp, table, level, entry, notes)
    if hyp.test in v.BAYESIAN_TESTS:  # no p-value: the posterior probability and its rule
        entry.update(bayes.run_bayes(hyp, plan, table.events, table.totals, notes))
        return entry
    rule = _rule(hyp, table)
    run_as = hyp.model_copy(update={"test": rule["to"]}) if rule else hyp
    if rule:
        entry["rule"] = rule
        notes.append(Note("sparse-switch", f"{hyp.id}: smallest expected count "
                          f"{rule['smallest_expected']:.4g} is below {rule['min_expected']:g}; "
                          f"the pre-specified switch from {rule['from']} to {rule['to']} applied"))
    outcome = methods.TESTS[run_as.test](table, run_as)
    entry.update(_test_json(outcome.result, f"{hyp.id}: the", notes))
    entry["test"] = run_as.test
    entry["monte_carlo"] = outcome.monte_carlo
    if outcome.monte_carlo is not None:
        mc = outcome.monte_carlo
        mc["standard_error"] = finite_or_note(mc["standard_error"], f"{hyp.id}: the Monte Carlo "
                                       "standard error", notes)
    if table.strata is not None and run_as.test == "stratified-score":
        entry["stratified"] = adjusted.stratified_json(table.strata, run_as, notes)
    if table.strata is not None and run_as.test == "cochran-mantel-haenszel":
        het = methods.homogeneity(table)
        if het is not None:
            entry["homogeneity"] = {"test": het.method, **{
                k: v for k, v in _test_json(het, f"{hyp.id}: the homogeneity", notes).items()
                if k != "test"}}
            if entry["homogeneity"]["p_value"] is not None:
                notes.append(Note("homogeneity", f"{hyp.id}: Breslow–Day test with Tarone's "
                                  f"correction over {len(table.strata)} strata, p = "
                                  f"{entry['homogeneity']['p_value']:.4g}"))
    entry["estimate"] = estimate_json(methods.estimate(hyp, table, level), level, hyp.id,
                                       notes)
    return entry


def _adjusted(hyp: Hypothesis, table: methods.Table, level: float, entry: dict[str, Any],
              notes: list[Note]) -> dict[str, Any]:
    """A covariate-adjusted entry: the working model's marginal effect, or the fallback."""
    counts = methods.Table(table.events, table.totals)

    def unadjusted(run_as: Any) -> tuple[TestResult, Any]:
        return (methods.TESTS[run_as.test](counts, run_as).result,
                methods.estimate(run_as, counts, level))

    ran, result, est, entry["adjusted"] = adjusted.run_adjusted(hyp, table.units, level,
                                                               notes, unadjusted)
    entry.update(_test_json(result, f"{hyp.id}: the", notes))
    entry["test"] = ran
    entry["estimate"] = estimate_json(est, level, hyp.id, notes)
    return entry


def estimate_json(est: Any, level: float, who: str, notes: list[Note]) -> dict[str, Any] | None:
    """The ``estimate`` of an entry: measure, value, interval, method and level."""
    if est is None:
        return None
    out = {
        "measure": est.measure,
        "value": finite_or_note(est.value, f"{who}: the estimate", notes),
        "ci": [finite_or_note(est.low, f"{who}: the lower limit", notes),
               finite_or_note(est.high, f"{who}: the upper limit", notes)],
        "ci_method": est.method,
        "level": level,
        "note": getattr(est, "note", None),
    }
    if out["note"]:
        notes.append(Note("interval-adjustment", f"{who}: {out['note']}"))
    low, high = out["ci"]
    if low is not None and low == high:
        notes.append(Note("zero-width-interval", _zero_width_words(who, est.method, low)))
    return out


def _zero_width_words(who: str, method: str, limit: float) -> str:
    """Why an interval collapsed to a point: its variance estimate is 0 at these counts."""
    return (f"{who}: the {method} interval is [{limit:g}, {limit:g}], of zero width: its "
            "variance estimate is 0 at these counts (as when every participant in each "
            "compared group, in every stratum, had the same outcome); zero width does not mean "
            "the estimate is certain, and a score or exact interval keeps a width")


# --- the estimand in words (ICH E9(R1)) ---

_SUMMARY_WORDS = {
    "risk-difference": ("the risk difference", "minus"),
    "risk-ratio": ("the risk ratio", "over"),
    "odds-ratio": ("the odds ratio", "over"),
}


def _condition_words(cond: Any) -> str:
    op, arg = cond.op()
    if op == "is_missing":
        return f"{cond.column} {'is' if arg else 'is not'} blank"
    if op == "between":
        return f"{cond.column} between {arg[0]:g} and {arg[1]:g}"
    if op == "equals":
        return f"{cond.column} equals {arg}"
    values = ", ".join(str(x) for x in arg)
    return f"{cond.column} {'in' if op == 'in' else 'not in'} [{values}]"


def _population_words(plan: Plan, groups: list[str]) -> str:
    shown = " and ".join(groups) if len(groups) <= 2 else ", ".join(groups)
    words = f"the analysed participants of {shown}"
    if plan.data.include:
        words += " (" + "; ".join(_condition_words(c) for c in plan.data.include) + ")"
    return words


def _strategy_words(ice: Any) -> str:
    if ice.strategy == "composite":
        counted = "an event" if ice.counts_as == "event" else "no event"
        return f"a composite strategy (counted as {counted})"
    if ice.strategy == "while-on-treatment":
        return (f"a while-on-treatment strategy (the outcome before it, from column "
                f"{ice.outcome_column})")
    return "a treatment-policy strategy (the outcome as observed, whether or not it happened)"


def _summary_words(hyp: Hypothesis, groups: list[str]) -> str:
    if hyp.kind == "pair" and hyp.measure in _SUMMARY_WORDS:
        words, joint = _SUMMARY_WORDS[hyp.measure]
        return f"{words} ({groups[0]} {joint} {groups[1]})"
    if hyp.kind == "single":
        return f"the proportion in {groups[0]}"
    if hyp.kind == "trend":
        return "none (a test for a trend in the proportions across the groups)"
    return "none (a test of equal proportions across the groups)"


def estimand_entry(hyp: Hypothesis, plan: Plan, prepared: Prepared,
                   source: str | None = None) -> dict[str, Any] | None:
    """The ``estimand`` of an entry: its attributes, how often each intercurrent event
    happened (pooled over the compared groups) and one paragraph in words; None when the
    plan states no estimand.

    References
    ----------
    ICH E9(R1). Addendum on estimands and sensitivity analysis in clinical trials to the
    guideline on statistical principles for clinical trials, 2019 (the five attributes).
    """
    estimand = getattr(hyp, "estimand", None)
    if estimand is None:
        return None
    groups = _groups_of(hyp, plan)
    outcome = plan.outcomes[hyp.outcome]
    own = prepared.by_hypothesis.get(source or hyp.id)
    population = estimand.population or _population_words(plan, groups)
    variable = f"{estimand.variable or hyp.outcome} ({outcome.column})"
    events, parts = [], [f"Population: {population}", f"variable: {variable}"]
    for k, ice in enumerate(estimand.intercurrent):
        affected = sum(own.intercurrent[k].happened.get(g, 0) for g in groups) if own else 0
        events.append({"event": ice.event, "column": ice.column, "strategy": ice.strategy,
                       "counts_as": ice.counts_as, "outcome_column": ice.outcome_column,
                       "affected": affected})
        parts.append(f"intercurrent event '{ice.event}' (column {ice.column}) handled by "
                     f"{_strategy_words(ice)}")
    if not estimand.intercurrent:
        parts.append("no intercurrent events named")
    elif len(estimand.intercurrent) > 1:
        parts.append("where more than one happened, the first listed decides")
    parts.append(f"population-level summary: {_summary_words(hyp, groups)}")
    return {"population": population, "variable": variable, "intercurrent": events,
            "summary": hyp.measure, "text": "; ".join(parts) + "."}


# --- sensitivity analyses of missing outcomes ---

def _test_on(hyp: Hypothesis, plan: Plan, table: methods.Table, notes: list[Note],
             who: str) -> dict[str, Any]:
    """The hypothesis's own test (with its sparse switch) and estimate on another table."""
    out: dict[str, Any] = {"test": hyp.test, "statistic": None, "df": None, "p_value": None,
                           "estimate": None, "rule": None}
    empty = [g for g, n in zip(_groups_of(hyp, plan), table.totals, strict=True) if n == 0]
    if empty:
        notes.append(Note("not-computable", f"{who}: no participants in {', '.join(empty)}; "
                          "test and estimate not computable"))
        return out
    rule = _rule(hyp, table)
    run_as = hyp.model_copy(update={"test": rule["to"]}) if rule else hyp
    out.update(_test_json(methods.TESTS[run_as.test](table, run_as).result, f"{who}: the",
                          notes))
    out["test"], out["rule"] = run_as.test, rule
    level = interval_level(plan.alpha, hyp.alternative, hyp.comparison)
    out["estimate"] = estimate_json(methods.estimate(hyp, table, level), level, who, notes)
    return out


def _extreme_case(hyp: Hypothesis, plan: Plan, prepared: Prepared, analysis: str, source: str,
                  notes: list[Note]) -> dict[str, Any]:
    """Worst case or best case: every missing outcome of each group imputed one way."""
    groups = _groups_of(hyp, plan)
    outcome = plan.outcomes[hyp.outcome]
    imputed = sensitivity.extreme_imputation(analysis, outcome.favourable, groups)

    def completed(counts: Any) -> tuple[list[int], list[int]]:
        pairs = [sensitivity.impute(sensitivity.observed(counts.of(g), outcome.missing),
                                    imputed[g]) for g in groups]
        return [e for e, _ in pairs], [n for _, n in pairs]

    events, totals = completed(prepared.counts_for(source, hyp.outcome))
    strata = None
    if hyp.strata:
        strata = []
        for stratum in prepared.strata_for(source, hyp.outcome, tuple(hyp.strata)):
            s_events, s_totals = completed(stratum.counts)
            strata.append((s_events[0], s_totals[0], s_events[1], s_totals[1]))
    result = _test_on(hyp, plan, methods.Table(events, totals, strata), notes,
                      f"{hyp.id} {analysis}")
    p = result["p_value"]
    return {"analysis": analysis, "imputed": imputed,
            "table": {"groups": groups, "events": events, "totals": totals}, **result,
            "reject_nominal": None if p is None else bool(decision.rejects(p, plan.alpha))}


def _tipping(hyp: Hypothesis, plan: Plan, prepared: Prepared, entry: dict[str, Any], source: str,
             notes: list[Note]) -> dict[str, Any]:
    """The tipping-point grid at the nominal alpha, against the primary nominal decision."""
    groups = _groups_of(hyp, plan)
    rule = plan.outcomes[hyp.outcome].missing
    counts = prepared.counts_for(source, hyp.outcome)
    a, b = (sensitivity.observed(counts.of(g), rule) for g in groups)
    grid = sensitivity.tipping_point(a, b, hyp, plan.alpha)
    primary = entry["p_value"]
    primary_rejects = None if primary is None else bool(decision.rejects(primary, plan.alpha))
    if primary_rejects is None:
        notes.append(Note("not-computable", f"{hyp.id} tipping-point: the primary p-value is "
                          "not computable; the grid is compared with 'not rejected'"))
    out = sensitivity.tipping_point_json(grid, primary_rejects)
    if out["cells_not_computable"]:
        notes.append(Note("not-computable", f"{hyp.id} tipping-point: "
                          f"{out['cells_not_computable']} of {out['cells']} cells have no "
                          "p-value (a zero column margin) and are written as null"))
    return out


def _sensitivity(hyp: Hypothesis, plan: Any, prepared: Prepared, entry: dict[str, Any],
                 notes: list[Note], source: str) -> list[dict[str, Any]]:
    """The pre-specified sensitivity analyses of missing outcomes, in the plan's order."""
    out = []
    for analysis in hyp.sensitivity:
        if analysis == "tipping-point":
            out.append(_tipping(hyp, plan, prepared, entry, source, notes))
        else:
            out.append(_extreme_case(hyp, plan, prepared, analysis, source, notes))
    return out


def _family_notes(entries: list[dict[str, Any]], method: Any, label: str,
                  notes: list[Note]) -> None:
    """A note for each entry of an adjusted family without a p-value: it enters as 1."""
    name = method if isinstance(method, str) else method.method
    for e in entries:
        if e["p_value"] is None:
            notes.append(Note("not-computable", f"{e['id']}: no p-value; it enters {name} "
                              f"({label}) as 1"))


def _decide(entries: list[dict[str, Any]], plan: Any) -> decision.Decision:
    """Fill ``p_adjusted``, ``reject`` and ``gate`` of every entry by the plan's rule
    (``decision.decide``, one row): exploratory entries keep null, an entry without a p-value
    too unless a closed gate decided it (not rejected)."""
    units = [decision.Unit(e["id"], e["family"], e["parent"]) for e in entries]
    raw = [np.nan if e["p_value"] is None else e["p_value"] for e in entries]
    decided = decision.decide(plan, units, np.array([raw], dtype=float))
    for k, e in enumerate(entries):
        if e["family"] is None:
            continue
        if e["parent"] is not None:
            e["gate"] = "open" if decided.gate_open[0, k] else "closed"
            if e["gate"] == "closed":
                e["reject"] = False
                continue
        if e["p_value"] is not None:
            e["p_adjusted"] = float(decided.adjusted[0, k])
            e["reject"] = bool(decided.reject[0, k])
    return decided


def _decide_margins(entries: list[dict[str, Any]], plan: Plan) -> None:
    for e in entries:
        hyp = plan.hypothesis(e["parent"]) if e["parent"] else None
        source = hyp if hyp is not None else plan.hypothesis(e["id"])
        if source.comparison == "superiority":
            continue
        decided = e["reject"]
        if decided is None and e["p_value"] is not None:  # exploratory: the nominal decision
            decided = bool(decision.rejects(e["p_value"], plan.alpha))
        e["margin_check"] = _margin_check(source, e["estimate"], decided)


def analyse(plan: Plan, prepared: Prepared) -> tuple[list[dict[str, Any]], list[Note]]:
    """Every hypothesis of the plan, adjusted for multiplicity, with the gated follow-ups.

    The decisions are those of ``decision.decide`` on the one table of the run; the notes
    keep their order: the plan's hypotheses, the main family's adjustment, then each parent's
    follow-ups and their adjustment or closed gate.
    """
    notes: list[Note] = []
    entries = [compute_hypothesis(h, plan, prepared, notes) for h in plan.hypotheses]
    out: list[dict[str, Any]] = []
    later: list[tuple[Any, int, list[dict[str, Any]], list[Note]]] = []
    for hyp, entry in zip(plan.hypotheses, entries, strict=True):
        at = len(out)
        out.append(entry)
        if hyp.then is None:
            continue
        own: list[Note] = []
        follow = []
        for sub in follow_ups(hyp, plan):
            e = compute_hypothesis(sub, plan, prepared, own, source=hyp.id)
            e["parent"] = hyp.id
            e["family"] = decision.family_of(sub, hyp)
            follow.append(e)
        out.extend(follow)
        later.append((hyp, at, follow, own))
    decided = _decide(out, plan)
    _family_notes([e for e in out if e["family"] == MAIN_FAMILY], plan.multiplicity,
                  "the main family", notes)
    for hyp, at, follow, own in later:
        notes.extend(own)
        if hyp.role == "exploratory":
            continue
        if decided.reject[0, at]:  # the gate of its follow-ups is open
            _family_notes(follow, hyp.then.multiplicity, f"{hyp.id} pairwise", notes)
        else:
            notes.append(Note("gate-closed", f"{hyp.id} was not rejected, so its pairwise "
                              "follow-ups are not tested (their p-values are nominal)"))
    _decide_margins(out, plan)
    return out, notes


def group_summaries(plan: Plan, prepared: Prepared) -> dict[str, list[dict[str, Any]]]:
    """Per outcome and group: events, total, missing, proportion and its Wilson interval."""
    from prespec.stats import intervals

    level = 1.0 - plan.alpha
    out: dict[str, list[dict[str, Any]]] = {}
    for name, counts in prepared.outcomes.items():
        rows = []
        for gc in counts.groups:
            row: dict[str, Any] = {
                "group": gc.group,
                "events": gc.events,
                "total": gc.total,
                "missing": gc.blank + gc.unmapped,
                "proportion": None,
                "ci": [None, None],
                "ci_method": "wilson",
                "level": level,
            }
            if gc.total > 0:
                est = intervals.wilson(gc.events, gc.total, level)
                row["proportion"] = est.value
                row["ci"] = [est.low, est.high]
            rows.append(row)
        out[name] = rows
    return out
