"""A plain-text account of a plan, for ``prespec check``."""

from __future__ import annotations

from prespec.common.shown import console
from prespec.plan.families import family_words
from prespec.plan.followups import follow_ups
from prespec.plan.model import Condition, Hypothesis, Plan
from prespec.plan.yamlread import show


def number(value: float | None) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return show(value)


def _values(values: list[str | int | float]) -> str:
    return ", ".join(show(x) for x in values)


def _condition(cond: Condition) -> str:
    name, operand = cond.op()
    if name == "in":
        return f"{cond.column} is one of {_values(cond.in_ or [])}"
    if name == "not_in":
        return f"{cond.column} is none of {_values(cond.not_in or [])}"
    if name == "equals":
        return f"{cond.column} equals {show(operand)}"
    if name == "between":
        low, high = cond.between or [0.0, 0.0]
        return f"{cond.column} from {number(low)} to {number(high)} inclusive"
    return f"{cond.column} is {'blank' if operand else 'not blank'}"


def _compare(plan: Plan, hyp: Hypothesis) -> str:
    if hyp.compare == "all":
        return f"all {len(plan.data.groups)} groups"
    if hyp.compare == "trend":
        return f"trend over {len(plan.data.groups)} ordered groups"
    if len(hyp.compare) == 1:
        return f"{hyp.compare[0]} against a rate of {number(hyp.null_rate)}"
    return f"{hyp.compare[0]} vs {hyp.compare[1]}"


def _sides(plan: Plan, hyp: Hypothesis) -> list[str]:
    """The direction of the test in words. A k-group test has none: its statistic grows with
    a departure from equal proportions in any direction; a trend is tested in the direction
    of the scores."""
    if hyp.kind == "all":
        return [("test of equal proportions in every group, against any difference (no "
                 "direction)")]
    if hyp.kind == "trend":
        scores = (", ".join(map(number, hyp.scores)) if hyp.scores is not None
                  else ", ".join(str(i) for i in range(len(plan.data.groups))) + " (default)")
        direction = {"two-sided": "two-sided (a rising or a falling trend)",
                     "greater": "one-sided: the proportion rises with the score",
                     "less": "one-sided: the proportion falls with the score"}
        return [direction.get(hyp.alternative, hyp.alternative), f"scores {scores}"]
    return [hyp.alternative, hyp.comparison]


def _then(plan: Plan, hyp: Hypothesis) -> str:
    assert hyp.then is not None
    subs = follow_ups(hyp, plan)  # what the run tests, so the words cannot drift from it
    pairs = ", ".join(f"{f.compare[0]} vs {f.compare[1]}" for f in subs)
    which = ("each group against the reference" if hyp.then.pairwise == "reference"
             else "every pair")
    first = subs[0]
    return (f"then, only if {hyp.id} is rejected, {which} ({pairs}) by {first.test}, "
            f"{first.alternative}, {first.measure} with {first.interval} interval, adjusted by "
            f"{hyp.then.multiplicity} among themselves")


def _hypothesis(plan: Plan, hyp: Hypothesis) -> str:
    parts = [hyp.test + (" (continuity-corrected)" if hyp.continuity else ""),
             *_sides(plan, hyp)]
    if hyp.monte_carlo is not None:
        parts.append(f"Monte Carlo p-value from {hyp.monte_carlo.tables:,} tables, seed "
                     f"{hyp.monte_carlo.seed}")
    if hyp.margin is not None:
        margin = hyp.margin if isinstance(hyp.margin, list) else [hyp.margin]
        parts.append("margin " + " to ".join(map(number, margin)))
    if hyp.measure is not None:
        parts.append(f"{hyp.measure} with {hyp.interval} interval")
    if hyp.sparse is not None:
        parts.append(f"{hyp.sparse.test} if an expected count is below "
                     f"{number(hyp.sparse.min_expected)}")
    if hyp.strata:
        parts.append(f"strata {', '.join(hyp.strata)}")
    if hyp.weights is not None:
        parts.append(f"weights {hyp.weights}")
    if hyp.prior is not None:
        priors = ", ".join(f"{console(g)} Beta({number(a)}, {number(b)})"
                           for g, (a, b) in hyp.prior.items())
        parts.append(f"prior {priors}")
        parts.append(f"rule met when the posterior probability reaches {number(hyp.threshold)}"
                     if hyp.threshold is not None else "no threshold")
        parts.append(f"{number(hyp.credible)} credible interval; outside the multiplicity "
                     "family")
    if hyp.covariates is not None:
        shown = ", ".join(f"{console(c)} ({k})" for c, k in hyp.covariates.items()) or "none"
        parts.append(f"covariates {shown}")
        variance = f"variance {hyp.variance}"
        if hyp.randomisation_strata:
            variance += (" (randomisation stratified by "
                         + ", ".join(map(console, hyp.randomisation_strata)) + ")")
        parts.append(variance)
        parts.append(f"a blank covariate: {hyp.covariate_missing}")
        parts.append(f"fallback {hyp.fallback} if the working model fails")
    if hyp.looks is not None:
        from prespec.plan.looks import looks_words

        parts.append(looks_words(hyp.looks))
    if hyp.over is not None:
        parts.append(family_words(hyp, plan))
    if hyp.sensitivity:
        parts.append(f"sensitivity for missing outcomes: {', '.join(hyp.sensitivity)}")
    if hyp.then is not None:
        parts.append(_then(plan, hyp))
    title = f" - {console(hyp.title)}" if hyp.title else ""
    return (f"  {hyp.id} [{hyp.role}] {hyp.outcome}: {_compare(plan, hyp)}{title}\n"
            f"      {'; '.join(parts)}")


def summary(plan: Plan) -> str:
    """A readable multi-line summary of the plan; a line break in a title is shown as ``\\n``."""
    data = plan.data
    groups = ", ".join(f"{g} (reference)" if g == data.reference else g for g in data.groups)
    lines = [f"Plan:          {console(plan.title)}",
             f"Protocol:      {console(plan.protocol or '(none given)')}",
             f"Unit id:       column {data.id}",
             f"Groups:        {groups} (column {data.group})"]
    if data.planned_n:
        planned = ", ".join(f"{g} {n}" for g, n in data.planned_n.items())
        lines.append(f"Planned n:     {planned}")
    if data.include:
        lines.append("Population:    rows where " + "; and ".join(map(_condition, data.include)))
    else:
        lines.append("Population:    every row")
    events = getattr(data, "events", None)
    if events is not None:
        where = events.source if events.source is not None else f"table {events.table}"
        grouped = f", grouped by {console(events.within)}" if events.within else ""
        lines.append(f"Event table:   {console(where)}: one row per event; unit id "
                     f"{console(events.id)}, level {console(events.level)}{grouped}")
    lines.append("Outcomes:" if plan.outcomes or events is None else
                 "Outcomes:      none (each family counts units with an event of each level)")
    for name, out in plan.outcomes.items():
        lines.append(f"  {name}: column {out.column}; event = {_values(out.event)}; "
                     f"no event = {_values(out.no_event)}; blank counts as: {out.missing}")
    mult = plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical"
    lines.append(f"Alpha:         {number(plan.alpha)}, multiplicity: {mult}")
    lines.append(f"Hypotheses ({len(plan.hypotheses)}):")
    lines.extend(_hypothesis(plan, hyp) for hyp in plan.hypotheses)
    return "\n".join(lines)
