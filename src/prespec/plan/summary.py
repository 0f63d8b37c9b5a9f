"""A plain-text account of a plan, for ``prespec check``."""

from __future__ import annotations

from prespec.common.shown import console
from prespec.plan.families import family_words
from prespec.plan.model import Condition, Hypothesis, Plan
from prespec.plan.yamlread import show


def _num(value: float | None) -> str:
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
        return f"{cond.column} from {_num(low)} to {_num(high)} inclusive"
    return f"{cond.column} is {'blank' if operand else 'not blank'}"


def _compare(plan: Plan, hyp: Hypothesis) -> str:
    if hyp.compare == "all":
        return f"all {len(plan.data.groups)} groups"
    if hyp.compare == "trend":
        return f"trend over {len(plan.data.groups)} ordered groups"
    if len(hyp.compare) == 1:
        return f"{hyp.compare[0]} against a rate of {_num(hyp.null_rate)}"
    return f"{hyp.compare[0]} vs {hyp.compare[1]}"


def _sides(plan: Plan, hyp: Hypothesis) -> list[str]:
    """The direction of the test in words. A k-group test has none: its statistic grows with
    a departure from equal proportions in any direction; a trend is tested in the direction
    of the scores."""
    if hyp.kind == "all":
        return [("test of equal proportions in every group, against any difference (no "
                 "direction)")]
    if hyp.kind == "trend":
        scores = (", ".join(map(_num, hyp.scores)) if hyp.scores is not None
                  else ", ".join(str(i) for i in range(len(plan.data.groups))) + " (default)")
        direction = {"two-sided": "two-sided (a rising or a falling trend)",
                     "greater": "one-sided: the proportion rises with the score",
                     "less": "one-sided: the proportion falls with the score"}
        return [direction.get(hyp.alternative, hyp.alternative), f"scores {scores}"]
    return [hyp.alternative, hyp.comparison]


def _then(plan: Plan, hyp: Hypothesis) -> str:
    from prespec.analysis.hypotheses import follow_ups

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
        parts.append("margin " + " to ".join(map(_num, margin)))
    if hyp.measure is not None:
        parts.append(f"{hyp.measure} with {hyp.interval} interval")
    if hyp.sparse is not None:
        parts.append(f"{hyp.sparse.test} if an expected count is below "
                     f"{_num(hyp.sparse.min_expected)}")
    if hyp.strata:
        parts.append(f"strata {', '.join(hyp.strata)}")
    if hyp.looks is not None:
        from prespec.plan.looks import looks_words

        parts.append(looks_words(hyp.looks))
    if hyp.over is not None:
        parts.append(family_words(hyp))
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
    lines.append("Outcomes:")
    for name, out in plan.outcomes.items():
        lines.append(f"  {name}: column {out.column}; event = {_values(out.event)}; "
                     f"no event = {_values(out.no_event)}; blank counts as: {out.missing}")
    mult = plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical"
    lines.append(f"Alpha:         {_num(plan.alpha)}, multiplicity: {mult}")
    lines.append(f"Hypotheses ({len(plan.hypotheses)}):")
    lines.extend(_hypothesis(plan, hyp) for hyp in plan.hypotheses)
    if plan.design is not None:
        lines.extend(_design(plan))
    return "\n".join(lines)


def _design(plan: Plan) -> list[str]:
    """The design section and the sample sizes it gives (``prespec design`` has the detail)."""
    from prespec.design import size_plan

    design = plan.design
    assert design is not None
    rates = ", ".join(f"{g} {_num(p)}" for g, p in design.assumed.items())
    allocation = ":".join(_num(design.allocation[g]) for g in plan.data.groups) \
        if design.allocation else "equal"
    lines = [f"Design:        power {_num(design.power)} at assumed rates {rates}; allocation "
             f"{allocation}; dropout {_num(design.dropout)}"
             + ("; continuity-corrected 2×2 formula" if design.continuity else "")]
    for name, scenario in design.scenarios.items():
        shown = ", ".join(f"{g} {_num(p)}" for g, p in scenario.items())
        lines.append(f"  scenario {name}: {shown}")
    lines.append("  scenario global-null: every group at the pooled assumed rate (added)")
    sized, rule = size_plan(plan)
    lines.append(f"  sample size per hypothesis, at {rule}:")
    for h in sized:
        if h.n_per_group is None:
            lines.append(f"    {h.id}: not computable ({'; '.join(h.notes) or 'no size'})")
            continue
        n = ", ".join(f"{g} {v}" for g, v in h.n_per_group.items())
        enrol = ", ".join(str(v) for v in (h.n_enrol_per_group or {}).values())
        lines.append(f"    {h.id} (alpha {h.alpha:.4g}): analysed {n}; to enrol {enrol}")
    return lines
