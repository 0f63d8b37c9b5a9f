"""The plan as ``prespec design`` reads it: a plan whose interim looks are given as information
fractions needs ``data.planned_n`` (the observed fraction is the analysed total over the
planned one), but design is where that size comes from. When the plan gives no
``data.planned_n``, design sizes the plan first and takes, for each group, the largest
analysed size any hypothesis needs (the maximum size under its looks); the design document says
so, and the plan must carry those sizes in ``data.planned_n`` before it is locked.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.errors import PlanError
from prespec.plan import LoadedPlan, load_plan
from prespec.plan.yamlread import parse_plan_yaml, read_plan_bytes

if TYPE_CHECKING:
    from prespec.plan.model import Plan


def _needs_designed_n(raw: Any) -> list[str] | None:
    """The groups of a plan that has a design, looks by fractions and no data.planned_n."""
    if not isinstance(raw, dict) or not isinstance(raw.get("design"), dict):
        return None
    data = raw.get("data")
    if not isinstance(data, dict) or data.get("planned_n") is not None:
        return None
    groups = data.get("groups")
    hypotheses = raw.get("hypotheses")
    if not isinstance(groups, list) or not isinstance(hypotheses, list):
        return None
    if not any(isinstance(h, dict) and isinstance(h.get("looks"), dict)
               and h["looks"].get("fractions") is not None for h in hypotheses):
        return None
    if not all(isinstance(g, str) for g in groups):
        return None
    return list(groups)


def designed_sizes(plan: Plan) -> dict[str, int]:
    """Per group, the largest analysed size any ordinary hypothesis is designed to need: its
    maximum size under interim looks, else its fixed-sample size."""
    from prespec.analysis.families import ordinary_plan
    from prespec.design.document import size_plan
    from prespec.design.looks import looks_design

    sized_plan = ordinary_plan(plan)
    sized, _ = size_plan(sized_plan)
    need: dict[str, int] = {}
    for hyp, h in zip(sized_plan.hypotheses, sized, strict=True):
        n = h.n_per_group
        if n is None:
            continue
        looks = looks_design(sized_plan, hyp, h.alpha, n)
        if looks is not None and looks["n_max_per_group"]:
            n = looks["n_max_per_group"]
        for g, size in n.items():
            need[g] = max(need.get(g, 0), int(size))
    return {g: need[g] for g in plan.data.groups if g in need}


def load_for_design(path: Path) -> tuple[LoadedPlan, dict[str, int] | None]:
    """The plan for ``prespec design``, and the sizes put in for a missing data.planned_n
    (None when the plan is read as written)."""
    try:
        return load_plan(path), None
    except PlanError as refused:
        try:
            groups = _needs_designed_n(parse_plan_yaml(read_plan_bytes(path, str(path)),
                                                       str(path)).data)
        except PlanError:
            groups = None
        if not groups:
            raise
        try:
            provisional = load_plan(path, planned_n={g: 1 for g in groups})
        except PlanError:
            raise refused from None
        sizes = designed_sizes(provisional.model)
        looked = {g for h in provisional.model.hypotheses if h.looks is not None
                  for g in (h.compare if isinstance(h.compare, list) else groups)}
        if not sizes or not looked <= set(sizes):
            raise refused from None
        try:
            return load_plan(path, planned_n=sizes), sizes
        except PlanError:
            raise refused from None


def refuse_unsimulated(path: Path, plan: Plan) -> None:
    """Refuse ``--simulate`` for a plan it does not cover (a stratified test: the simulation
    draws one rate per group, with no strata), as a one-line error at the plan's line."""
    from prespec.analysis.families import is_family
    from prespec.plan.locate import Issue, Locator

    for i, hyp in enumerate(plan.hypotheses):
        if hyp.strata and not is_family(hyp):
            doc = parse_plan_yaml(read_plan_bytes(path, str(path)), str(path))
            issue = Issue(("hypotheses", i, "strata"),
                          f"a stratified test ({hyp.test}) cannot be simulated: --simulate "
                          "draws one assumed rate per group, with no strata; leave out "
                          "--simulate (the sizes assume the same rates in every stratum)",
                          at_key=True)
            raise Locator(str(path), doc.data, doc.lines, doc.key_lines).error(issue)
        if hyp.test == "g-computation":
            doc = parse_plan_yaml(read_plan_bytes(path, str(path)), str(path))
            issue = Issue(("hypotheses", i, "covariates"),
                          "a covariate-adjusted test (g-computation) cannot be simulated: "
                          "--simulate draws one assumed rate per group, and the plan gives no "
                          "distribution of the covariates; leave out --simulate (the sizes "
                          "are those of the unadjusted comparison)", at_key=True)
            raise Locator(str(path), doc.data, doc.lines, doc.key_lines).error(issue)
