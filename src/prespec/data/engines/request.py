"""The ``CountRequest`` of a plan: which columns the reduction reads, maps and keeps raw."""

from __future__ import annotations

from collections import Counter
from typing import TYPE_CHECKING, Any

from prespec.common.matching import ValueSet, as_text

from ..prepare import read_columns
from .base import ColumnMap, CountRequest, Filter

if TYPE_CHECKING:
    from prespec.plan.model import Plan


def _grouped_uses(plan: Plan, blinded: bool) -> Counter[str]:
    """How many parts of the plan read each column of the weighted frame (filters aside)."""
    uses: Counter[str] = Counter()
    if not blinded:
        uses[plan.data.group] += 1
    for outcome in plan.outcomes.values():
        uses[outcome.column] += 1
    for hyp in plan.hypotheses:
        for column in hyp.strata or []:
            uses[column] += 1
        # a covariate-adjusted hypothesis: its covariates and randomisation strata stay raw,
        # so the reduction is one row per distinct (group, outcome, covariates) with its count
        for column in getattr(hyp, "covariates", None) or {}:
            uses[column] += 1
        for column in getattr(hyp, "randomisation_strata", None) or []:
            uses[column] += 1
        estimand = getattr(hyp, "estimand", None)
        for ice in estimand.intercurrent if estimand is not None else []:
            uses[ice.column] += 1
            if ice.strategy == "while-on-treatment" and ice.outcome_column:
                uses[ice.outcome_column] += 1
    return uses


def _outcome_map(column: str, outcome: Any) -> ColumnMap | None:
    """The outcome's column mapped to its first event and first no-event value, or None when
    those two stand-ins would not keep their meaning (a value listed on both sides)."""
    event, no_event = outcome.event[0], outcome.no_event[0]
    if as_text(no_event) in ValueSet(outcome.event) or as_text(event) in ValueSet(
            outcome.no_event):
        return None
    return ColumnMap(column, ((as_text(event), tuple(outcome.event)),
                              (as_text(no_event), tuple(outcome.no_event))))


def count_request(plan: Plan, source: str, *, blinded: bool = False,
                  unique_within: tuple[str, ...] = ()) -> CountRequest:
    """What an engine must read for ``plan``: the group column and each outcome column read
    by that one use alone are mapped to canonical values, every other column stays raw.

    ``blinded`` (a rehearsal): the group column is not named at all. ``needed`` also names a
    family's ``over`` and ``within`` columns (a plan with families is read by the pandas
    engine, which reads the columns of ``needed`` only).
    """
    spec = plan.data
    needed = read_columns(plan, blinded=blinded)
    uses = _grouped_uses(plan, blinded)
    mapped: list[ColumnMap] = []
    if not blinded and uses[spec.group] == 1:
        mapped.append(ColumnMap(spec.group, tuple((g, (g,)) for g in spec.groups)))
    for outcome in plan.outcomes.values():
        if uses[outcome.column] == 1 and outcome.column != spec.group:
            m = _outcome_map(outcome.column, outcome)
            if m is not None:
                mapped.append(m)
    done = {m.column for m in mapped}
    raw = tuple(c for c in uses if c not in done and not (blinded and c == spec.group))
    include = tuple(Filter(c.column, *c.op()) for c in spec.include)
    return CountRequest(
        source=source,
        id=spec.id,
        include=include,
        mapped=tuple(mapped),
        raw=raw,
        needed=tuple(needed.items()),
        unique_within=unique_within,
        group=None if blinded else spec.group,
    )
