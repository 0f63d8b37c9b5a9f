"""Families of hypotheses in the plan: a template expanded over the levels of a column.

A hypothesis with ``over: COLUMN`` is a template, run once per level of that column (an
adverse-event term, say), on the rows holding that level; ``within: COLUMN`` names the column
that groups the levels (a body system). With a declared ``levels`` list (or, with ``within``, a
mapping ``{body system: [terms]}``) the members are fixed when the plan is locked and their ids
(``H3[rash]``) are written into the resolved plan as ``members``; without it they are found in
the data at run time. The members are flagged by Benjamini–Hochberg or the double false
discovery rate (Mehrotra and Heyse 2004) at ``flag_level``, outside the plan's confirmatory
multiplicity, which stays over the ordinary hypotheses.

This module holds the defaults (filled in before validation) and the rules across keys; the
data side is :mod:`prespec.data.families`, the statistics :mod:`prespec.analysis.families`.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

from prespec.plan import vocabulary as v
from prespec.plan.locate import Issue
from prespec.plan.yamlread import KeyPath, show

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

FAMILY_DOC: dict[str, str] = {
    "over": "makes the hypothesis a family: it runs once per level of this column (e.g. "
            "event_term), on the rows holding that level; each level's rows are a complete "
            "analysis set (one row per unit; the outcome says whether the unit had the event). "
            "Unit ids must be unique within each level when every hypothesis of the plan is a "
            "family over this column, and unique overall otherwise",
    "within": "family: the column grouping the levels (e.g. body_system); a level belongs to "
              "one group",
    "levels": "family: the levels, declared in advance ([rash, nausea]; with within, a "
              "mapping {body system: [terms]}); the members are then fixed at lock time. "
              "Left out: the levels found in the data at run time",
    "flag_method": "family: how members are flagged: benjamini-hochberg, or double-fdr "
                   "(needs within)",
    "flag_level": "family: the false discovery rate at which members are flagged; default "
                  "the plan's alpha",
    "group_level": "family, double-fdr: the level of the step across groups; default "
                   "flag_level",
    "members": "family: the member ids, written by lock from levels; leave it out",
}

_ORDINARY_ONLY = ("strata", "then", "sensitivity", "estimand", "monte_carlo", "margin",
                  "null_rate", "scores")


def member_id(hyp_id: str, level: str) -> str:
    """The id of a family member: ``H3[rash]``."""
    return f"{hyp_id}[{level}]"


def declared(levels: Any) -> list[tuple[str, str | None]]:
    """The declared levels as (level, group or None), in the plan's order."""
    if isinstance(levels, dict):
        return [(term, str(group)) for group, terms in levels.items()
                for term in (terms if isinstance(terms, list) else [])]
    if isinstance(levels, list):
        return [(term, None) for term in levels]
    return []


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _hypothesis_defaults(hyp: dict[str, Any], alpha: Any) -> dict[str, Any]:
    out = dict(hyp)
    out.setdefault("role", "exploratory")
    if out.get("flag_level") is None and _is_number(alpha):
        out["flag_level"] = alpha
    if out.get("flag_method") == "double-fdr" and out.get("group_level") is None \
            and _is_number(out.get("flag_level")) and 0 < out["flag_level"] < 1:
        out["group_level"] = out["flag_level"]
    levels = out.get("levels")
    if out.get("members") is None and levels is not None and isinstance(out.get("id"), str):
        items = declared(levels)
        if all(isinstance(term, str) for term, _ in items):
            out["members"] = [member_id(out["id"], term) for term, _ in items]
    return out


#: ``over: events``: the family runs over the levels of the event table (``data.events``).
EVENTS = "events"
#: The outcome of a family over the event table: the unit had an event of the level.
EVENT_OUTCOME = "events"


def _event_table(data: dict[str, Any]) -> dict[str, Any] | None:
    spec = data.get("data")
    events = spec.get("events") if isinstance(spec, dict) else None
    return events if isinstance(events, dict) else None


def _event_defaults(hyp: dict[str, Any], events: dict[str, Any]) -> dict[str, Any]:
    out = dict(hyp)
    out.setdefault("outcome", EVENT_OUTCOME)
    if out.get("within") is None and isinstance(events.get("within"), str):
        out["within"] = events["within"]
    return out


def family_defaults(data: Any) -> Any:
    """Fill in a family's defaults in a raw plan: role exploratory, flag_level the plan's
    alpha, group_level the flag_level (double-fdr), and members from declared levels; a
    family over the event table (``over: events`` with ``data.events``) takes the outcome
    ``events`` and ``within`` from ``data.events.within``, and a plan whose every hypothesis
    is such a family may leave ``outcomes`` out."""
    if not isinstance(data, dict) or not isinstance(data.get("hypotheses"), list):
        return data
    hyps = data["hypotheses"]
    if not any(isinstance(h, dict) and h.get("over") is not None for h in hyps):
        return data
    events = _event_table(data)
    if events is not None:
        hyps = [_event_defaults(h, events) if isinstance(h, dict) and h.get("over") == EVENTS
                else h for h in hyps]
        if "outcomes" not in data and all(isinstance(h, dict) and h.get("over") == EVENTS
                                          for h in hyps):
            data = {**data, "outcomes": {}}
    alpha = data.get("alpha")
    return {**data, "hypotheses": [
        _hypothesis_defaults(h, alpha) if isinstance(h, dict) and h.get("over") is not None
        else h for h in hyps]}


def is_family(hyp: Any) -> bool:
    """Whether a validated hypothesis is a family template."""
    return getattr(hyp, "over", None) is not None


def is_event_family(plan: Any, hyp: Any) -> bool:
    """Whether a validated hypothesis is a family over the event table (``over: events``
    with ``data.events`` declared; without it, ``events`` is a column like any other)."""
    return getattr(hyp, "over", None) == EVENTS and getattr(plan.data, "events", None) is not None


def family_column(plan: Plan) -> str | None:
    """The ``over`` column when every hypothesis is a family over that one column, else None
    (unit ids are then checked within each level instead of overall)."""
    columns = {h.over for h in plan.hypotheses}
    if plan.hypotheses and all(is_family(h) for h in plan.hypotheses) and len(columns) == 1:
        return next(iter(columns))
    return None


def family_issues(plan: Any, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    """The rules of one hypothesis's family keys (nothing for an ordinary hypothesis)."""
    if hyp.over is None:
        for key in v.FAMILY_KEYS[1:]:
            if getattr(hyp, key) is not None:
                yield Issue((*path, key), f"'{key}' is used only in a family; give over: "
                            "COLUMN (the column whose levels the family runs over)",
                            at_key=True)
        return
    if is_event_family(plan, hyp):
        yield from _event_issues(plan, hyp, path)
    else:
        yield from _column_issues(plan, hyp, path)
    yield from _method_issues(hyp, path)
    yield from _shape_issues(hyp, path)
    yield from _levels_issues(hyp, path)


def _column_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    data = plan.data
    for key in ("over", "within"):
        column = getattr(hyp, key)
        if column is None:
            continue
        if not column.strip():
            yield Issue((*path, key), "must name a column")
        elif column in (data.id, data.group):
            role = "data.id" if column == data.id else "data.group"
            yield Issue((*path, key), f"{show(column)} is {role}; a family runs over another "
                        "column")
    if hyp.within is not None and hyp.within == hyp.over:
        yield Issue((*path, "within"), f"{show(hyp.within)} is the over column; within names "
                    "the column that groups its levels")


def _event_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    """A family over the event table: its outcome is having an event of the level, its
    ``within`` is ``data.events.within``; the plan's other families run over it too."""
    events = plan.data.events
    assert events is not None
    if hyp.outcome != EVENT_OUTCOME:
        yield Issue((*path, "outcome"), "a family over the event table counts the units with "
                    "an event of each level; leave outcome out")
    if hyp.within is not None and hyp.within != events.within:
        yield Issue((*path, "within"), f"{show(hyp.within)} is not data.events.within; a family "
                    "over the event table groups its levels by data.events.within (leave "
                    "within out)")
    if hyp.flag_method == "double-fdr" and events.within is None:
        yield Issue((*path, "flag_method"), "double-fdr adjusts across groups of levels and "
                    "within each; it needs data.events.within (e.g. body_system)")
    others = sorted({str(h.over) for h in plan.hypotheses
                     if h.over is not None and h.over != EVENTS})
    if others:
        yield Issue((*path, "over"), "a plan's families run over the event table or over "
                    f"columns of the unit table, not both (also over: {', '.join(others)})")


def event_issues(plan: Plan) -> Iterator[Issue]:
    """The rules of ``data.events``: its columns named, the id not the level."""
    events = plan.data.events
    if events is None:
        return
    where: KeyPath = ("data", "events")
    for key in ("id", "level", "within"):
        column = getattr(events, key)
        if column is not None and not column.strip():
            yield Issue((*where, key), "must name a column")
    if events.level == events.id:
        yield Issue((*where, "level"), f"names the same column as data.events.id "
                    f"({show(events.id)}); the level and the unit id are different columns")
    if events.within is not None and events.within in (events.id, events.level):
        yield Issue((*where, "within"), f"{show(events.within)} is data.events."
                    f"{'id' if events.within == events.id else 'level'}; within names the "
                    "column that groups the levels")
    for key in ("source", "table"):
        value = getattr(events, key)
        if value is not None and not value.strip():
            yield Issue((*where, key), "must name the event table")
    if not any(is_event_family(plan, h) for h in plan.hypotheses):
        yield Issue(where, "an event table is read by a family over it (over: events); no "
                    "hypothesis has one, so leave data.events out")
    if events.source is not None and "://" in events.source:
        yield Issue((*where, "source"), "the event table is a file or glob inside the plan's "
                    "folder; with a database, give data.source the URL and name the event "
                    "table in data.events.table")


def _method_issues(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if hyp.flag_method is None:
        yield Issue((*path, "flag_method"), "is required for a family (over): "
                    f"{' or '.join(v.FLAG_METHODS)}", line_path=path)
        return
    if hyp.flag_method == "double-fdr" and hyp.within is None:
        yield Issue((*path, "flag_method"), "double-fdr adjusts across groups of levels and "
                    "within each; it needs within: COLUMN (e.g. body_system)")
    if hyp.group_level is not None and hyp.flag_method != "double-fdr":
        yield Issue((*path, "group_level"), "is used only with flag_method: double-fdr",
                    at_key=True)


def _shape_issues(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    if hyp.kind != "pair":
        yield Issue((*path, "compare"), "a family compares two groups: compare: [a, b]")
        return
    refused = False
    for key, test in (("test", hyp.test), ("sparse", hyp.sparse.test if hyp.sparse else None)):
        if test is not None and test not in v.FAMILY_TESTS:
            refused = True
            where = (*path, "test") if key == "test" else (*path, "sparse", "test")
            yield Issue(where, f"'{test}' is not a test for a family (tests: "
                        f"{', '.join(sorted(v.FAMILY_TESTS))})")
    if refused:  # the measure's default follows the test: say only what to change
        return
    if hyp.comparison != "superiority":
        yield Issue((*path, "comparison"), "a family tests superiority (each member against "
                    "no difference)")
    if hyp.measure != "risk-difference":
        yield Issue((*path, "measure"), "a family estimates the risk difference (drawn against "
                    "the p-value in its figure); leave measure out")
    for key in _ORDINARY_ONLY:
        if getattr(hyp, key) is not None:
            yield Issue((*path, key), f"'{key}' is not used in a family", at_key=True)
    if hyp.role != "exploratory":
        yield Issue((*path, "role"), "a family's members are flagged outside the plan's "
                    "multiplicity; leave role out (it is exploratory)")


def _levels_issues(hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    levels = hyp.levels
    where: KeyPath = (*path, "levels")
    if levels is not None:
        if hyp.within is not None and not isinstance(levels, dict):
            yield Issue(where, "with within, declare the levels as a mapping {group: [levels]} "
                        "so that each level's group is fixed too")
            return
        if hyp.within is None and isinstance(levels, dict):
            yield Issue(where, "a mapping {group: [levels]} needs within: COLUMN; without "
                        "within, declare a list")
            return
        yield from _declared_issues(levels, where)
    expected = [member_id(hyp.id, t) for t, _ in declared(levels)] if levels is not None else None
    if hyp.members is not None and hyp.members != expected:
        yield Issue((*path, "members"), "is written by lock from levels; leave it out",
                    at_key=True)


def _declared_issues(levels: list[str] | dict[str, list[str]], where: KeyPath
                     ) -> Iterator[Issue]:
    seen: dict[str, str | None] = {}
    groups = levels.items() if isinstance(levels, dict) else [(None, levels)]
    if not any(terms for _, terms in groups):
        yield Issue(where, "must declare at least one level (or leave levels out to take them "
                    "from the data)")
    for group, terms in groups:
        base = where if group is None else (*where, group)
        if group is not None and not group.strip():
            yield Issue(base, "a group name must not be empty", at_key=True)
        if group is not None and not terms:
            yield Issue(base, f"group {show(group)} declares no level")
        for j, term in enumerate(terms):
            if not term.strip():
                yield Issue((*base, j), "a level must not be empty")
            elif term != term.strip():
                yield Issue((*base, j), f"{show(term)} starts or ends with spaces; data values "
                            "are trimmed, so it would never match")
            elif term in seen:
                first = seen[term]
                other = "listed twice" if first == group else (
                    f"also listed under {show(first)}; a level belongs to one group")
                yield Issue((*base, j), f"{show(term)} is {other}")
            seen.setdefault(term, group)


def family_words(hyp: Hypothesis, plan: Any = None) -> str:
    """The family part of ``prespec check``'s summary line of a hypothesis."""
    grouped = f" within {hyp.within}" if hyp.within else ""
    if plan is not None and is_event_family(plan, hyp):
        grouped = (f" (the levels of {plan.data.events.level} in the event table; units with "
                   f"an event of each level, of all units in the population){grouped}")
    n = len(hyp.members or [])
    found = (f"{n} declared levels" if hyp.levels is not None
             else "levels found in the data at run time")
    level = f"{hyp.flag_level:g}"
    if hyp.flag_method == "double-fdr" and hyp.group_level is not None:
        level = f"{hyp.group_level:g} across groups, {level} within"
    return (f"family over {hyp.over}{grouped} ({found}); flagged by {hyp.flag_method} at "
            f"{level}")

