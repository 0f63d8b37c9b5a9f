"""The statistics of families: one comparison per level, flagged by a false discovery rate.

Each member of a family is the family's template run on one level's rows with the ordinary
machinery (:func:`prespec.analysis.hypotheses.compute_hypothesis`: sparse switch, test, risk difference
with its interval). For ``fisher-exact`` without a sparse switch the p-values of all members
are computed at once by :func:`prespec.stats.fisherarray.fisher_many`, giving the same
numbers. The members are then flagged by Benjamini–Hochberg over the whole
family, or by the double false discovery rate of Mehrotra and Heyse (2004) over the groups
named by ``within`` and within each. Members are outside the plan's confirmatory
multiplicity: they are reported as flagged, never as rejected.

References
----------
Benjamini Y, Hochberg Y. Controlling the false discovery rate: a practical and powerful
approach to multiple testing. JRSS B 1995;57:289–300.
Mehrotra DV, Heyse JF. Use of the false discovery rate for evaluating clinical safety data.
Statistical Methods in Medical Research 2004;13:227–238.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from prespec.analysis import methods
from prespec.analysis.hypotheses import (
    compute_hypothesis,
    estimate_json,
    finite_or_note,
    interval_level,
)
from prespec.common.departures import Note
from prespec.data import Prepared, prepare
from prespec.data.families import FamilyData, Level, family_data
from prespec.plan.families import family_column, is_event_family, is_family, member_id
from prespec.stats import multiplicity
from prespec.stats.doublefdr import double_fdr
from prespec.stats.exact import TIE_TOLERANCE
from prespec.stats.fisherarray import fisher_many

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

Progress = Callable[[str, int, int], None]


def ordinary_plan(plan: Plan) -> Any:
    """The plan without its family templates (what the ordinary machinery runs)."""
    return plan.model_copy(update={"hypotheses": [h for h in plan.hypotheses
                                                  if not is_family(h)]})


def templates(plan: Plan) -> list[Any]:
    """The family templates of the plan, in plan order."""
    return [h for h in plan.hypotheses if is_family(h)]


def prepare_run(frame: pd.DataFrame, plan: Any, source: str | Path,
                progress: Progress | None = None) -> tuple[Prepared, list[FamilyData]]:
    """The counts of the ordinary hypotheses and of every family's levels.

    A plan whose every hypothesis is a family over one column has no per-unit table over all
    rows (a unit has one row per level): its population counts are summed over the levels and
    it has no per-outcome group summary.
    """
    fams = templates(plan)
    if not fams:
        return prepare(frame, plan, source), []
    data = [family_data(frame, plan, h, source, _tick(progress, h.id)) for h in fams]
    if family_column(plan) is None:
        return prepare(frame, ordinary_plan(plan), source), data
    levels = [lv.prepared for d in data for lv in d.levels if lv.prepared is not None]
    return Prepared(
        rows_read=len(frame.index),
        excluded_by_filter=sum(p.excluded_by_filter for p in levels),
        excluded_group=sum(p.excluded_group for p in levels),
        analysed=sum(p.analysed for p in levels),
        outcomes={}, deviations=(), notes=(Note(
            "family-population", "every hypothesis is a family over "
            f"{family_column(plan)!r}: the population counts are rows (one per unit and "
            "level) summed over the levels, and each member's table counts units"),),
    ), data


#: A family with at least this many levels reports its progress.
LONG_FAMILY = 50


def _tick(progress: Progress | None, hyp_id: str) -> Callable[[int, int], None] | None:
    if progress is None:
        return None

    def tick(done: int, total: int) -> None:
        if total >= LONG_FAMILY:
            progress(f"{hyp_id} levels", done, total)

    return tick


def _member(hyp: Hypothesis, level: Level) -> Any:
    """The template as an ordinary hypothesis on one level."""
    return hyp.model_copy(update={"id": member_id(hyp.id, level.value), "over": None,
                                  "within": None, "levels": None, "members": None,
                                  "flag_method": None, "flag_level": None,
                                  "group_level": None})


def _empty_member(hyp: Hypothesis, plan: Any, level: Level) -> dict[str, Any]:
    return {"id": member_id(hyp.id, level.value), "level": level.value, "group": level.group,
            "table": {"groups": list(hyp.compare), "events": [0, 0], "totals": [0, 0]},
            "estimate": None, "test": hyp.test, "statistic": None, "df": None,
            "p_value": None, "p_adjusted": None, "p_group": None, "flagged": False,
            "rule": None, "rows": len(level.rows)}


def _from_entry(entry: dict[str, Any], level: Level) -> dict[str, Any]:
    estimate = entry["estimate"]
    if estimate is not None:
        estimate = {k: estimate[k] for k in ("measure", "value", "ci", "ci_method", "level")}
    return {"id": entry["id"], "level": level.value, "group": level.group,
            "table": entry["table"], "estimate": estimate, "test": entry["test"],
            "statistic": entry["statistic"], "df": entry["df"], "p_value": entry["p_value"],
            "p_adjusted": None, "p_group": None, "flagged": False, "rule": entry["rule"],
            "rows": len(level.rows)}


def members(plan: Any, hyp: Hypothesis, data: FamilyData, notes: list[Note], *,
            use_array: bool = True) -> list[dict[str, Any]]:
    """Every member's table, test and estimate, before the flagging.

    ``use_array=False`` computes every member with the ordinary machinery even where the
    array Fisher test could be used (the tests compare the two).
    """
    if use_array and hyp.test == "fisher-exact" and hyp.sparse is None:
        return _members_array(plan, hyp, data, notes)
    out = []
    for level in data.levels:
        if level.prepared is None:
            out.append(_empty_member(hyp, plan, level))
            continue
        entry = compute_hypothesis(_member(hyp, level), plan, level.prepared, notes)
        out.append(_from_entry(entry, level))
    return out


def _members_array(plan: Plan, hyp: Hypothesis, data: FamilyData,
                   notes: list[Note]) -> list[dict[str, Any]]:
    """Fisher's exact test for every member at once, the estimate member by member."""
    import numpy as np

    level_ci = interval_level(plan.alpha, hyp.alternative, hyp.comparison)
    out: list[dict[str, Any]] = []
    cells: list[tuple[int, int, int, int]] = []
    slots: list[int] = []
    for level in data.levels:
        if level.prepared is None:
            out.append(_empty_member(hyp, plan, level))
            continue
        member = _member(hyp, level)
        events, totals = level.prepared.counts_for(member.id, hyp.outcome).table(
            list(hyp.compare))
        row = _empty_member(hyp, plan, level)
        row["table"] = {"groups": list(hyp.compare), "events": events, "totals": totals}
        empty = [g for g, n in zip(hyp.compare, totals, strict=True) if n == 0]
        if empty:
            notes.append(Note("not-computable", f"{member.id}: no analysed participants in "
                              f"{', '.join(empty)}; test and estimate not computable"))
        else:
            table = methods.Table(events, totals)
            row["estimate"] = estimate_json(methods.estimate(member, table, level_ci),
                                             level_ci, member.id, notes)
            if row["estimate"] is not None:
                row["estimate"].pop("note", None)
            cells.append((events[0], totals[0] - events[0], events[1], totals[1] - events[1]))
            slots.append(len(out))
        out.append(row)
    if cells:
        a, b, c, d = (np.array(col, dtype=np.int64) for col in zip(*cells, strict=True))
        # the tie rule of the single-table test, so a member equals the ordinary machinery
        result = fisher_many(a, b, c, d, alternative=hyp.alternative,
                             tie_tolerance=TIE_TOLERANCE)
        for slot, p in zip(slots, np.asarray(result.p_value, dtype=float), strict=True):
            out[slot]["p_value"] = finite_or_note(float(p), f"{out[slot]['id']}: the p-value",
                                                  notes)
    return out


def bh_threshold(p: list[float], level: float) -> float:
    """The Benjamini–Hochberg cut-off k·q/m: p-values at or below it are flagged, the others
    not (k the largest i with p(i) <= i·q/m; q/m when there is none, which no p reaches).
    Reference: Benjamini and Hochberg (1995), the step-up procedure."""
    m = len(p)
    ordered = sorted(p)
    k = max((i for i in range(1, m + 1) if ordered[i - 1] <= i * level / m), default=0)
    return max(k, 1) * level / m if m else level


def flag(hyp: Hypothesis, rows: list[dict[str, Any]], notes: list[Note]) -> dict[str, Any]:
    """Fill ``p_adjusted``, ``p_group`` and ``flagged`` of each member; the family's summary.

    A member without a p-value enters the adjustment as 1 (it is never flagged and makes no
    other easier to flag), with a note.
    """
    raw = [1.0 if r["p_value"] is None else float(r["p_value"]) for r in rows]
    missing = [r["id"] for r in rows if r["p_value"] is None]
    if missing:
        shown = ", ".join(missing[:5]) + (f" and {len(missing) - 5} more"
                                          if len(missing) > 5 else "")
        notes.append(Note("not-computable", f"{hyp.id}: {len(missing)} member(s) without a "
                          f"p-value enter {hyp.flag_method} as 1: {shown}"))
    summary: dict[str, Any] = {"threshold": None, "groups": None}
    if not rows:
        return summary
    if hyp.flag_method == "double-fdr":
        result = double_fdr(raw, [str(r["group"]) for r in rows],
                            level_groups=hyp.group_level, level_terms=hyp.flag_level)
        for r, p_adj, p_grp, flagged in zip(rows, result.p_adjusted, result.p_group,
                                            result.flagged, strict=True):
            if r["p_value"] is not None:
                r["p_adjusted"], r["p_group"] = float(p_adj), float(p_grp)
            r["flagged"] = bool(flagged) and r["p_value"] is not None
        summary["groups"] = [
            {"group": g, "members": sum(1 for r in rows if r["group"] == g),
             "p_group": float(p), "flagged": bool(f),
             "members_flagged": sum(1 for r in rows if r["group"] == g and r["flagged"])}
            for g, p, f in zip(result.groups, result.group_p, result.group_flagged,
                               strict=True)]
        return summary
    adjusted = multiplicity.adjust(raw, "benjamini-hochberg")
    for r, p_adj in zip(rows, adjusted, strict=True):
        if r["p_value"] is not None:
            r["p_adjusted"] = float(p_adj)
            r["flagged"] = bool(p_adj <= hyp.flag_level)
    summary["threshold"] = bh_threshold(raw, hyp.flag_level)
    return summary


def analyse_family(plan: Plan, hyp: Hypothesis, data: FamilyData, notes: list[Note], *,
                   use_array: bool = True) -> dict[str, Any]:
    """The ``families`` entry of results.json for one template."""
    own: list[Note] = []
    rows = members(plan, hyp, data, own, use_array=use_array)
    summary = flag(hyp, rows, own)
    notes.extend(merged_notes(hyp.id, own))
    return {
        "id": hyp.id,
        "title": hyp.title,
        "outcome": hyp.outcome,
        "compare": list(hyp.compare),
        "over": hyp.over,
        **_level_column(plan, hyp),
        "within": hyp.within,
        "declared": hyp.levels is not None,
        "method": hyp.flag_method,
        "level": hyp.flag_level,
        "group_level": hyp.group_level,
        "planned_test": hyp.test,
        "alternative": hyp.alternative,
        "measure": hyp.measure,
        "interval": hyp.interval,
        "ci_level": interval_level(plan.alpha, hyp.alternative, hyp.comparison),
        "threshold": summary["threshold"],
        "groups": summary["groups"],
        "left_out": data.left_out,
        "members": rows,
        "members_total": len(rows),
        "members_flagged": sum(1 for r in rows if r["flagged"]),
        "members_without_data": sum(1 for r in rows if r["p_value"] is None),
    }


def _level_column(plan: Any, hyp: Hypothesis) -> dict[str, Any]:
    """``level_column`` of a family over the event table (the event table's level column,
    which the report heads its levels with); nothing for a family over a column."""
    if is_event_family(plan, hyp):
        return {"level_column": plan.data.events.level}
    return {}


def merged_notes(hyp_id: str, notes: list[Note]) -> list[Note]:
    """The members' notes, one per code: a code met by several members is said once."""
    by_code: dict[str, list[Note]] = {}
    for note in notes:
        by_code.setdefault(note.code, []).append(note)
    out = []
    for code, found in by_code.items():
        if len(found) == 1:
            out.append(found[0])
        else:
            out.append(Note(code, f"{hyp_id}: {len(found)} notes of this kind; the first: "
                            f"{found[0].detail}"))
    return out


def analyse_families(plan: Any, data: list[FamilyData], notes: list[Note]
                     ) -> list[dict[str, Any]]:
    """Every family of the plan, in plan order."""
    by_id = {h.id: h for h in templates(plan)}
    return [analyse_family(plan, by_id[d.hypothesis], d, notes) for d in data]


def member_ids(results: dict[str, Any]) -> dict[str, list[str]]:
    """Per family id, its member ids, as a run's log entry records them."""
    return {str(f["id"]): [str(m["id"]) for m in f["members"]]
            for f in results.get("families") or []}


def neg_log10(p: float | None) -> float | None:
    """−log10 p for the figure; None without a p-value; p = 0 is drawn at 300."""
    if p is None:
        return None
    return 300.0 if p <= 0 else -math.log10(p)


def family_details(results: dict[str, Any]) -> dict[str, Any]:
    """What a run's log entry adds for families: ``{"families": {id: [member ids]}}``, or
    nothing for a plan without families (its entry stays as before)."""
    ids = member_ids(results)
    return {"families": ids} if ids else {}


def declared_members(resolved: dict[str, Any]) -> dict[str, Any]:
    """What a lock or amend entry adds for families with declared levels: ``{"families":
    {id: [member ids]}}`` from the resolved plan, or nothing (the entry stays as before)."""
    ids = {str(h["id"]): list(h["members"]) for h in resolved.get("hypotheses") or []
           if isinstance(h, dict) and h.get("over") is not None and h.get("members")}
    return {"families": ids} if ids else {}


def rehearsal_families(plan: Any, data: list[FamilyData], executed: dict[str, Any]
                       ) -> list[dict[str, Any]]:
    """A rehearsal's families: per member its pooled counts (all groups together, so they do
    not depend on the dummy allocation) and whether the family's steps executed."""
    by_id = {h.id: h for h in templates(plan)}
    out = []
    for fam in data:
        hyp = by_id[fam.hypothesis]
        done = executed.get(hyp.id)
        rows = []
        for level in fam.levels:
            counts = None if level.prepared is None else level.prepared.outcomes[hyp.outcome]
            rows.append({
                "id": member_id(hyp.id, level.value), "level": level.value,
                "group": level.group,
                "events": 0 if counts is None else sum(g.events for g in counts.groups),
                "total": 0 if counts is None else sum(g.total for g in counts.groups),
                "missing": 0 if counts is None else sum(g.blank + g.unmapped
                                                        for g in counts.groups)})
        out.append({"id": hyp.id, "title": hyp.title, "over": hyp.over,
                    **_level_column(plan, hyp), "within": hyp.within,
                    "declared": hyp.levels is not None, "method": hyp.flag_method,
                    "level": hyp.flag_level, "members": rows,
                    "executed": bool(done and done.executed),
                    "problem": None if done is None else done.problem})
    return out
