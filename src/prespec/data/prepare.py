"""From raw rows to count tables: population filter, group check, outcome mapping.

Everything the statistics need is a count table (events and totals per group and outcome);
this module produces those tables together with the departures and notes that the data give
rise to (unexpected groups, unmapped outcome values, blanks under the missing rule,
sample-size shortfalls).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from prespec.common.departures import Departure, Note
from prespec.common.matching import ValueSet, as_number, as_text, is_blank

from ..errors import DataError
from .read import missing_column

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

_SHOW = 5  # how many offending values an error message lists
# A frame with this column is weighted: each row stands for that many source rows (an engine's
# aggregate); with KEEP_COLUMN it also says whether those rows pass the population filter.
WEIGHT_COLUMN = "__prespec_rows__"
KEEP_COLUMN = "__prespec_keep__"
# With KEEP_COLUMN, an engine's aggregate may say which population condition left its rows
# out: the 1-based index of the first condition (in the plan's order) they fail, 0 when kept.
FAILED_COLUMN = "__prespec_failed__"


@dataclass(frozen=True)
class GroupCounts:
    group: str
    events: int
    total: int  # analysed: after the population filter and the missing rule
    blank: int  # blank outcome cells
    unmapped: int  # non-blank cells that are neither event nor no_event


@dataclass(frozen=True)
class OutcomeCounts:
    outcome: str
    groups: tuple[GroupCounts, ...]

    def of(self, group: str) -> GroupCounts:
        for counts in self.groups:
            if counts.group == group:
                return counts
        raise KeyError(group)

    def table(self, groups: list[str]) -> tuple[list[int], list[int]]:
        """Events and totals, in the order of ``groups``."""
        return [self.of(g).events for g in groups], [self.of(g).total for g in groups]


@dataclass(frozen=True)
class Stratum:
    """The counts of one stratum: its value in each stratification column, and the tables."""

    values: tuple[str, ...]
    counts: OutcomeCounts


@dataclass(frozen=True)
class IntercurrentCount:
    """How often one intercurrent event of an estimand happened among the analysed rows."""

    event: str
    column: str
    strategy: str
    happened: dict[str, int]  # per group: analysed rows whose column says it happened
    blank: int  # analysed rows with a blank cell in the column (read as: did not happen)


@dataclass(frozen=True)
class HypothesisCounts:
    """The counts of a hypothesis whose estimand names intercurrent events.

    The strategies change the outcome of the rows where an intercurrent event happened, so
    these counts can differ from the plain per-outcome counts of ``Prepared.outcomes``.
    """

    hypothesis: str
    counts: OutcomeCounts
    intercurrent: tuple[IntercurrentCount, ...]
    strata: tuple[Stratum, ...] | None = None


@dataclass(frozen=True, eq=False)
class Units:
    """The analysed units of a covariate-adjusted hypothesis (test g-computation).

    One entry per row of the frame read, each standing for ``weights`` source rows (1 from
    the pandas engine; an aggregating engine's count of the distinct combination). Units
    with a blank covariate or randomisation stratum are left out (``missing_covariate``).
    """

    hypothesis: str
    groups: tuple[str, str]  # (a, b): the first group of compare is "treated"
    outcome: np.ndarray  # 1.0 event, 0.0 no event (after the missing rule and the estimand)
    treated: np.ndarray  # 1.0 for the first group of compare, 0.0 for the second
    covariates: tuple[tuple[str, str, np.ndarray], ...]  # (column, kind, values)
    weights: np.ndarray  # int64
    strata: np.ndarray | None  # randomisation stratum label of each unit, or None
    missing_covariate: dict[str, dict[str, int]]  # per group, per column: units left out

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Units):
            return NotImplemented
        same = (self.hypothesis, self.groups, self.missing_covariate) == (
            other.hypothesis, other.groups, other.missing_covariate)
        arrays = [(self.outcome, other.outcome), (self.treated, other.treated),
                  (self.weights, other.weights)]
        if (self.strata is None) != (other.strata is None) or len(self.covariates) != len(
                other.covariates):
            return False
        if self.strata is not None:
            arrays.append((self.strata, other.strata))
        for (c1, k1, v1), (c2, k2, v2) in zip(self.covariates, other.covariates, strict=True):
            same = same and (c1, k1) == (c2, k2)
            arrays.append((v1, v2))
        return same and all(x.shape == y.shape and bool((x == y).all()) for x, y in arrays)

    __hash__ = None  # type: ignore[assignment]

    def table(self) -> tuple[list[int], list[int]]:
        """Events and totals of the two groups over these units."""
        events, totals = [], []
        for flag in (1.0, 0.0):
            mine = self.treated == flag
            events.append(int(self.weights[mine & (self.outcome == 1.0)].sum()))
            totals.append(int(self.weights[mine].sum()))
        return events, totals


@dataclass(frozen=True)
class Flow:
    """The participant flow by group: per group value (a plan group, or ``None`` for any
    other value and a blank cell) the rows read, the rows each population condition left out
    (a row counted under the first condition it fails, in the plan's order, so that the
    counts add up), and the rows analysed."""

    read: dict[str | None, int]
    excluded: tuple[dict[str | None, int], ...]  # one per condition of data.include
    analysed: dict[str, int]


@dataclass(frozen=True)
class Prepared:
    rows_read: int
    excluded_by_filter: int
    excluded_group: int
    analysed: int
    outcomes: dict[str, OutcomeCounts]
    deviations: tuple[Departure, ...]
    notes: tuple[Note, ...]
    # per (outcome, stratification columns) used by a hypothesis: the strata, sorted
    strata: dict[tuple[str, tuple[str, ...]], tuple[Stratum, ...]] = field(default_factory=dict)
    # per hypothesis id whose estimand names intercurrent events: its own counts
    by_hypothesis: dict[str, HypothesisCounts] = field(default_factory=dict)
    # per covariate-adjusted hypothesis id: its analysed units
    units: dict[str, Units] = field(default_factory=dict)
    # the participant flow by group (None where the engine did not say which condition failed)
    flow: Flow | None = None

    def counts_for(self, hyp_id: str, outcome: str) -> OutcomeCounts:
        """The counts a hypothesis is analysed on: its own under an estimand, else the plain."""
        own = self.by_hypothesis.get(hyp_id)
        return own.counts if own is not None else self.outcomes[outcome]

    def strata_for(self, hyp_id: str, outcome: str,
                   columns: tuple[str, ...]) -> tuple[Stratum, ...]:
        """The strata a stratified hypothesis is analysed on (its own under an estimand)."""
        own = self.by_hypothesis.get(hyp_id)
        if own is not None and own.strata is not None:
            return own.strata
        return self.strata[(outcome, columns)]


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def _listing(values: Counter[str]) -> str:
    items = [f"{v!r} ({n})" for v, n in sorted(values.items(), key=lambda kv: (-kv[1], kv[0]))]
    shown = ", ".join(items[:_SHOW])
    return shown + (f" and {len(items) - _SHOW} more" if len(items) > _SHOW else "")


@dataclass(frozen=True)
class _Rows:
    """How rows are counted and named: one each (a full frame: errors name file lines) or by
    ``WEIGHT_COLUMN`` (an engine's aggregate: errors name up to five ids via ``locate``)."""

    weights: np.ndarray | None
    line_offset: int
    locate: Callable[[np.ndarray], list[str]] | None = None

    def count(self, mask: np.ndarray) -> int:
        return int(mask.sum()) if self.weights is None else int(self.weights[mask].sum())

    def where(self, mask: np.ndarray) -> str:
        """"rows 2, 5" (file lines), or "ids 'P1', 'P7'" in an aggregate."""
        if self.weights is None:
            return "rows " + ", ".join(map(str, np.flatnonzero(mask)[:_SHOW] + self.line_offset))
        ids = self.locate(mask) if self.locate is not None else []
        return ("ids " + ", ".join(repr(i) for i in ids[:_SHOW])) if ids else _rows(
            self.count(mask))

    def found(self, cells: pd.Series, mask: np.ndarray, label: Any = None) -> Counter[str]:
        """The text of the cells under ``mask`` (``label`` maps a cell), counted by row."""
        label = label or as_text
        if self.weights is None:
            return Counter(label(c) for c in cells[mask])
        found: Counter[str] = Counter()
        for cell, weight in zip(cells[mask], self.weights[mask], strict=True):
            found[label(cell)] += int(weight)
        return found


def _per_unique(column: pd.Series, fn: Any) -> np.ndarray:
    """Apply ``fn`` once per distinct cell and spread the answers back over the rows."""
    codes, uniques = pd.factorize(column, use_na_sentinel=True)
    answers = [fn(u) for u in uniques]
    na_answer = fn(None)
    return np.array([answers[c] if c >= 0 else na_answer for c in codes], dtype=object)


def cell_predicate(op: str, arg: Any) -> Any:
    """The cell predicate of one structured population condition."""
    if op == "is_missing":
        return lambda cell: is_blank(cell) == bool(arg)
    if op in ("in", "not_in", "equals"):
        values = ValueSet(arg if op != "equals" else [arg])
        if op == "not_in":
            return lambda cell: not is_blank(cell) and cell not in values
        return lambda cell: cell in values
    if op == "between":
        low, high = arg
        lo_n, hi_n = as_number(low), as_number(high)

        def between(cell: Any) -> bool:
            if is_blank(cell):
                return False
            number = as_number(cell)
            if lo_n is not None and hi_n is not None:
                return number is not None and lo_n <= number <= hi_n
            return str(low) <= as_text(cell) <= str(high)

        return between
    raise ValueError(f"unknown condition {op!r}")  # the plan model admits no other


def _check_columns(frame: pd.DataFrame, needed: dict[str, str], source: str) -> None:
    present = [str(c) for c in frame.columns]
    for column, role in needed.items():
        if column not in present:
            raise missing_column(source, column, role, present)


def _check_ids(frame: pd.DataFrame, id_column: str, source: str, line_offset: int) -> None:
    ids = frame[id_column]
    blank = [i for i, cell in enumerate(ids) if is_blank(cell)]
    if blank:
        lines = ", ".join(str(i + line_offset) for i in blank[:_SHOW])
        raise DataError(f"{source}: blank id in column {id_column!r} (rows {lines})")
    texts = pd.Series([as_text(c) for c in ids])
    at = np.flatnonzero(texts.duplicated(keep=False).to_numpy())
    if len(at):
        codes, values = pd.factorize(texts.iloc[at])  # in the order of first appearance
        shown = []
        for k, value in enumerate(values[:_SHOW]):
            rows = at[codes == k] + line_offset
            more_rows = len(rows) - _SHOW
            lines = ", ".join(map(str, rows[:_SHOW])) + (
                f" and {more_rows:,} more" if more_rows > 0 else "")
            shown.append(f"{value!r} (rows {lines})")
        more = len(values) - len(shown)
        raise DataError(
            f"{source}: duplicate ids in column {id_column!r}: {'; '.join(shown)}"
            + (f"; and {more} more" if more > 0 else "")
        )


def needed_columns(plan: Plan) -> dict[str, str]:
    """Every column the reduction reads, in first-use order, with the plan key that names it."""
    spec = plan.data
    needed = {spec.id: "data.id", spec.group: "data.group"}
    for index, cond in enumerate(spec.include, start=1):
        needed.setdefault(cond.column, f"data.include[{index}]")
    for name, outcome in plan.outcomes.items():
        needed.setdefault(outcome.column, f"outcomes.{name}.column")
    stratified = {(h.outcome, tuple(h.strata)): h.id for h in plan.hypotheses if h.strata}
    for (_, columns), hyp_id in stratified.items():
        for column in columns:
            needed.setdefault(column, f"hypotheses.{hyp_id}.strata")
    for hyp in plan.hypotheses:
        for column in getattr(hyp, "covariates", None) or {}:
            needed.setdefault(column, f"hypotheses.{hyp.id}.covariates.{column}")
        for column in getattr(hyp, "randomisation_strata", None) or []:
            needed.setdefault(column, f"hypotheses.{hyp.id}.randomisation_strata")
    for hyp in plan.hypotheses:
        for j, ice in enumerate(_intercurrent(hyp), start=1):
            where = f"hypotheses.{hyp.id}.estimand.intercurrent[{j}]"
            needed.setdefault(ice.column, f"{where}.column")
            if ice.strategy == "while-on-treatment" and ice.outcome_column:
                needed.setdefault(ice.outcome_column, f"{where}.outcome_column")
    return needed


def read_columns(plan: Plan, *, blinded: bool = False) -> dict[str, str]:
    """Every column a run reads from the data, with the plan key that names it: those of
    ``needed_columns`` and each family's ``over`` and ``within``; ``blinded`` (a rehearsal):
    without the group column."""
    columns = needed_columns(plan)
    for hyp in plan.hypotheses:
        for key in ("over", "within"):
            column = getattr(hyp, key, None)
            if column:
                columns.setdefault(column, f"hypotheses.{hyp.id}.{key}")
    if blinded:
        columns.pop(plan.data.group, None)
    return columns


def prepare(frame: pd.DataFrame, plan: Plan, source: str | Path, *,
            locate: Callable[[np.ndarray], list[str]] | None = None,
            check_ids: bool = True) -> Prepared:
    """Reduce ``frame`` to count tables as ``plan`` (a validated plan model) prescribes.

    ``check_ids=False`` when the caller has checked the ids already (a family checks them
    within each level, at once for all levels).

    A frame with ``WEIGHT_COLUMN`` is an engine's aggregate (``engines/base.py``): its rows
    are counted by weight, its ``KEEP_COLUMN`` is the population filter, and the columns and
    ids were checked by the engine; ``locate`` names the ids behind its rows in errors.
    """
    source = str(source)
    spec = plan.data
    line_offset = 2 if source.lower().endswith((".csv", ".txt")) else 1
    weighted = WEIGHT_COLUMN in frame.columns
    at = _Rows(frame[WEIGHT_COLUMN].to_numpy(dtype=np.int64) if weighted else None,
               line_offset, locate)
    needed = needed_columns(plan)
    stratified = {(h.outcome, tuple(h.strata)): h.id for h in plan.hypotheses if h.strata}
    with_events = [h for h in plan.hypotheses if _intercurrent(h)]
    if not weighted:
        _check_columns(frame, needed, source)
        if check_ids:
            _check_ids(frame, spec.id, source, line_offset)

    rows_read = at.count(np.ones(len(frame.index), dtype=bool))
    keep = np.ones(len(frame.index), dtype=bool)
    failed: np.ndarray | None = np.zeros(len(frame.index), dtype=np.int64)
    if KEEP_COLUMN in frame.columns:
        keep = frame[KEEP_COLUMN].to_numpy(dtype=bool)
        failed = (frame[FAILED_COLUMN].to_numpy(dtype=np.int64)
                  if FAILED_COLUMN in frame.columns else None)
    else:
        for index, cond in enumerate(spec.include, start=1):
            op, arg = cond.op()
            passes = _per_unique(frame[cond.column], cell_predicate(op, arg)).astype(bool)
            failed[keep & ~passes] = index  # the first condition a row fails
            keep &= passes
    excluded_by_filter = at.count(~keep)

    groups = list(spec.groups)
    group_of = {as_text(g): g for g in groups}
    group_values = ValueSet(groups)

    def canonical_group(cell: Any) -> str | None:
        if cell in group_values:
            return group_of.get(as_text(cell)) or next(g for g in groups if cell in ValueSet([g]))
        return None

    group_col = _per_unique(frame[spec.group], canonical_group)
    in_group = np.array([g is not None for g in group_col])
    stray = keep & ~in_group
    deviations: list[Departure] = []
    notes: list[Note] = []
    if stray.any():
        found = at.found(frame[spec.group], stray,
                         lambda c: "(blank)" if is_blank(c) else as_text(c))
        deviations.append(
            Departure.of_values(
                "unexpected-group",
                f"{_rows(at.count(stray))} left out: column {spec.group!r} holds values "
                f"outside data.groups: {_listing(found)}",
                ", ".join(groups),
                found,
            )
        )
    analysed_rows = keep & in_group
    kinds = {
        name: _classify_outcome(frame, name, outcome, analysed_rows, source, at,
                                deviations, blank_error=_blanks_matter(plan, name))
        for name, outcome in plan.outcomes.items()
    }
    outcomes = {
        name: _tally(name, kinds[name], group_col, analysed_rows, groups, outcome.missing, at)
        for name, outcome in plan.outcomes.items()
    }
    for name, counts in outcomes.items():
        _missing_note(name, plan.outcomes[name].missing, counts, notes)
    strata = {
        key: _strata(frame, key, kinds[key[0]], group_col, analysed_rows, groups,
                     plan.outcomes[key[0]].missing, notes, at)
        for key in stratified
    }
    own_kinds: dict[str, np.ndarray] = {}
    by_hypothesis = {
        hyp.id: _hypothesis_counts(frame, hyp, plan, kinds[hyp.outcome], group_col,
                                   analysed_rows, source, at, deviations, notes, own_kinds)
        for hyp in with_events
    }
    units = {
        hyp.id: _units(frame, hyp, plan, own_kinds.get(hyp.id, kinds[hyp.outcome]), group_col,
                       analysed_rows, source, at, deviations)
        for hyp in plan.hypotheses if getattr(hyp, "covariates", None) is not None
    }
    if spec.planned_n:
        for name, counts in outcomes.items():
            for gc in counts.groups:
                planned = spec.planned_n.get(gc.group)
                if planned is not None and gc.total < planned:
                    deviations.append(
                        Departure(
                            "sample-size-shortfall",
                            f"outcome {name!r}, group {gc.group!r}: {gc.total} analysed, "
                            f"{planned} planned",
                            str(planned),
                            str(gc.total),
                        )
                    )
    flow = None if failed is None else _flow(at, failed, group_col, analysed_rows, groups,
                                             len(spec.include))
    return Prepared(
        rows_read=rows_read,
        excluded_by_filter=excluded_by_filter,
        excluded_group=at.count(stray),
        analysed=at.count(analysed_rows),
        outcomes=outcomes,
        deviations=tuple(deviations),
        notes=tuple(notes),
        strata=strata,
        by_hypothesis=by_hypothesis,
        units=units,
        flow=flow,
    )


def _flow(at: _Rows, failed: np.ndarray, group_col: np.ndarray, analysed: np.ndarray,
          groups: list[str], conditions: int) -> Flow:
    """Per group value: rows read, rows left out by each condition, rows analysed."""
    other = np.array([g is None for g in group_col], dtype=bool)
    masks: dict[str | None, np.ndarray] = {g: group_col == g for g in groups}
    masks[None] = other

    def by_group(rows: np.ndarray) -> dict[str | None, int]:
        return {g: at.count(rows & mask) for g, mask in masks.items()}

    return Flow(
        read=by_group(np.ones(len(failed), dtype=bool)),
        excluded=tuple(by_group(failed == index) for index in range(1, conditions + 1)),
        analysed={g: at.count(analysed & masks[g]) for g in groups},
    )


def condition_words(op: str, arg: Any) -> str:
    """A population condition in words, as the flow names it: ``is one of: yes, y``,
    ``between 18 and 90``, ``is blank``."""
    def shown(values: Any) -> str:
        return ", ".join(as_text(v) for v in values)

    if op == "is_missing":
        return "is blank" if arg else "is not blank"
    if op == "in":
        return f"is one of: {shown(arg)}"
    if op == "not_in":
        return f"is none of: {shown(arg)} (and not blank)"
    if op == "equals":
        return f"equals {as_text(arg)}"
    low, high = arg
    return f"between {as_text(low)} and {as_text(high)}"


def flow_entry(plan: Plan, flow: Flow) -> dict[str, Any]:
    """The ``flow`` block of results.json: per plan group (and ``other`` for any other group
    value, a blank cell included) the rows read and those each condition of ``data.include``
    left out, the rows outside the groups, the rows analysed per group, and per outcome its
    missing rule and favourable value."""
    groups = list(plan.data.groups)

    def counts(by: dict[str | None, int]) -> dict[str, Any]:
        return {"groups": {g: by[g] for g in groups}, "other": by[None]}

    conditions = []
    for cond, excluded in zip(plan.data.include, flow.excluded, strict=True):
        op, arg = cond.op()
        conditions.append({"column": cond.column, "condition": condition_words(op, arg),
                           "excluded": counts(excluded)})
    outside = flow.read[None] - sum(c[None] for c in flow.excluded)  # kept, yet no group
    return {
        "read": counts(flow.read),
        "conditions": conditions,
        "outside_groups": outside,
        "analysed": dict(flow.analysed),
        "outcomes": {name: {"missing": o.missing, "favourable": o.favourable}
                     for name, o in plan.outcomes.items()},
    }


def _intercurrent(hyp: Any) -> list[Any]:
    """The intercurrent events of a hypothesis's estimand (none without an estimand)."""
    estimand = getattr(hyp, "estimand", None)
    return list(estimand.intercurrent) if estimand is not None else []


def _blanks_matter(plan: Plan, name: str) -> bool:
    """Whether a blank outcome under ``missing: error`` is bad input in the plain counts.

    It is unless every hypothesis on the outcome has an estimand whose strategies may decide
    the outcome of such a row (composite, while-on-treatment); those hypotheses check their
    own rows after the strategies.
    """
    users = [h for h in plan.hypotheses if h.outcome == name]
    return not users or any(
        all(ice.strategy == "treatment-policy" for ice in _intercurrent(h)) for h in users
    )


def _hypothesis_counts(frame: pd.DataFrame, hyp: Hypothesis, plan: Plan, plain: np.ndarray,
                       group_col: np.ndarray, rows: np.ndarray, source: str, at: _Rows,
                       deviations: list[Departure], notes: list[Note],
                       kinds_out: dict[str, np.ndarray] | None = None) -> HypothesisCounts:
    """The hypothesis's counts after its estimand's strategies (ICH E9(R1)).

    Row by row, the first intercurrent event listed that happened decides: treatment-policy
    keeps the outcome as observed, composite sets it to ``counts_as``, while-on-treatment
    takes it from ``outcome_column`` (mapped by the outcome's values and missing rule).
    Rows where none happened keep the outcome as observed.
    """
    name = hyp.outcome
    outcome = plan.outcomes[name]
    groups = list(plan.data.groups)
    kind = plain.copy()
    decided = np.zeros(len(rows), dtype=bool)
    counts: list[IntercurrentCount] = []
    for ice in _intercurrent(hyp):
        marks = ValueSet(ice.happened)
        happened = rows & _per_unique(frame[ice.column], lambda c, m=marks: c in m).astype(bool)
        blank = rows & _per_unique(frame[ice.column], is_blank).astype(bool)
        applies = happened & ~decided
        if ice.strategy == "composite":
            kind[applies] = ice.counts_as
        elif ice.strategy == "while-on-treatment":
            before = _classify_outcome(frame, name, outcome, applies, source, at,
                                       deviations, column=ice.outcome_column,
                                       where="the outcome before an intercurrent event")
            kind[applies] = before[applies]
        decided |= happened
        counts.append(IntercurrentCount(
            ice.event, ice.column, ice.strategy,
            {g: at.count(happened & (group_col == g)) for g in groups}, at.count(blank)))
        if blank.any():
            notes.append(Note("intercurrent-blank", f"{hyp.id}: column {ice.column!r} "
                              f"(intercurrent event {ice.event!r}) is blank in "
                              f"{_rows(at.count(blank))}, read as: it did not happen"))
    still_blank = rows & (kind == "blank")
    if outcome.missing == "error" and still_blank.any():
        raise DataError(
            f"{source}: hypotheses.{hyp.id}: outcome {name!r} (column {outcome.column!r}) is "
            f"blank in {at.count(still_blank)} analysed rows that no intercurrent event "
            f"decides ({at.where(still_blank)}); missing: error"
        )
    if kinds_out is not None:
        kinds_out[hyp.id] = kind
    tally = _tally(name, kind, group_col, rows, groups, outcome.missing, at)
    if any(ice.strategy != "treatment-policy" for ice in _intercurrent(hyp)):
        _missing_note(name, outcome.missing, tally, notes, who=f"{hyp.id} (after its "
                      "estimand's strategies)")
    strata = None
    if getattr(hyp, "strata", None):
        strata = _strata(frame, (name, tuple(hyp.strata)), kind, group_col, rows, groups,
                         outcome.missing, [], at)
    return HypothesisCounts(hyp.id, tally, tuple(counts), strata)


def _classify_outcome(
    frame: pd.DataFrame,
    name: str,
    outcome: Any,
    rows: np.ndarray,
    source: str,
    at: _Rows,
    deviations: list[Departure],
    *,
    column: str | None = None,
    blank_error: bool = True,
    where: str | None = None,
) -> np.ndarray:
    """Per row: "event", "no-event", "blank" or "unmapped"; departures and errors as
    docs/plan-format.md, "Reading the data".

    ``column`` reads another column by the outcome's values (a while-on-treatment outcome,
    named by ``where``); ``blank_error=False`` leaves blanks under ``missing: error`` to be
    checked after the estimands' strategies.
    """
    events, no_events = ValueSet(outcome.event), ValueSet(outcome.no_event)
    column_name = outcome.column if column is None else column
    label = f"column {column_name!r}" + (f", {where}" if where else "")

    def classify(cell: Any) -> str:
        if is_blank(cell):
            return "blank"
        if cell in events:
            return "event"
        if cell in no_events:
            return "no-event"
        return "unmapped"

    cells = frame[column_name]
    kind = _per_unique(cells, classify)
    unmapped_rows = rows & (kind == "unmapped")
    blank_rows = rows & (kind == "blank")
    if unmapped_rows.any():
        found = at.found(cells, unmapped_rows)
        if outcome.missing == "error":
            raise DataError(
                f"{source}: outcome {name!r} ({label}) has values that are "
                f"neither event nor no_event: {_listing(found)} "
                f"({at.where(unmapped_rows)}); missing: error"
            )
        departure = Departure.of_values(
            "unmapped-outcome-value",
            f"outcome {name!r} ({label}): {_rows(at.count(unmapped_rows))} "
            f"with values that are neither event nor no_event: {_listing(found)}; "
            f"treated by the missing rule ({outcome.missing})",
            "event: " + ", ".join(map(as_text, outcome.event))
            + "; no_event: " + ", ".join(map(as_text, outcome.no_event)),
            found,
        )
        if departure not in deviations:
            deviations.append(departure)
    if blank_rows.any() and outcome.missing == "error" and blank_error:
        raise DataError(
            f"{source}: outcome {name!r} ({label}) is blank in "
            f"{at.count(blank_rows)} analysed rows ({at.where(blank_rows)}); "
            "missing: error"
        )
    return kind


def _tally(name: str, kind: np.ndarray, group_col: np.ndarray, rows: np.ndarray,
           groups: list[str], missing: str, at: _Rows) -> OutcomeCounts:
    """Events and totals per group over ``rows``, blanks and unmapped values by the rule."""
    counts = []
    for group in groups:
        in_group = rows & (group_col == group)
        n_event = at.count(in_group & (kind == "event"))
        n_no = at.count(in_group & (kind == "no-event"))
        n_blank = at.count(in_group & (kind == "blank"))
        n_unmapped = at.count(in_group & (kind == "unmapped"))
        if missing == "event":
            n_event += n_blank + n_unmapped
        elif missing == "no-event":
            n_no += n_blank + n_unmapped
        counts.append(GroupCounts(group, n_event, n_event + n_no, n_blank, n_unmapped))
    return OutcomeCounts(name, tuple(counts))


def _missing_note(name: str, missing: str, counts: OutcomeCounts, notes: list[Note],
                  who: str | None = None) -> None:
    missing_total = sum(c.blank + c.unmapped for c in counts.groups)
    if not missing_total:
        return
    per_group = ", ".join(f"{c.group} {c.blank + c.unmapped}" for c in counts.groups)
    action = {
        "exclude": "left out of the analysis",
        "event": "counted as events",
        "no-event": "counted as no event",
        "error": "left out of these counts (each hypothesis on the outcome decides them by "
                 "its estimand's strategies)",
    }[missing]
    notes.append(
        Note(
            f"missing-{missing}",
            f"{who + ', ' if who else ''}outcome {name!r}: {missing_total} missing outcomes "
            f"{action} "
            f"(missing: {missing}); per group: {per_group}",
        )
    )


def _strata(frame: pd.DataFrame, key: tuple[str, tuple[str, ...]], kind: np.ndarray,
            group_col: np.ndarray, rows: np.ndarray, groups: list[str], missing: str,
            notes: list[Note], at: _Rows) -> tuple[Stratum, ...]:
    """The count tables of each stratum (the distinct values of the columns), sorted.

    Rows with a blank stratification value belong to no stratum and are left out of the
    stratified analysis, with a note.
    """
    name, columns = key
    labels = [_per_unique(frame[c], lambda cell: None if is_blank(cell) else as_text(cell))
              for c in columns]
    blank = np.zeros(len(rows), dtype=bool)
    for lab in labels:
        blank |= np.array([x is None for x in lab])
    if (rows & blank).any():
        notes.append(Note("blank-stratum", f"outcome {name!r}, strata {', '.join(columns)}: "
                          f"{_rows(at.count(rows & blank))} with a blank stratum value left "
                          "out of the stratified analysis"))
    rows = rows & ~blank
    combined = np.array(["\x1f".join(parts) if rows[i] else "" for i, parts in
                         enumerate(zip(*labels, strict=True))], dtype=object)
    values = sorted({combined[i] for i in np.flatnonzero(rows)})
    return tuple(
        Stratum(tuple(v.split("\x1f")),
                _tally(name, kind, group_col, rows & (combined == v), groups, missing, at))
        for v in values
    )


def _units(frame: pd.DataFrame, hyp: Hypothesis, plan: Plan, kind: np.ndarray,
           group_col: np.ndarray, rows: np.ndarray, source: str, at: _Rows,
           deviations: list[Departure]) -> Units:
    """The analysed units of a g-computation hypothesis: its two groups, the outcome after
    the missing rule (and the estimand's strategies), each covariate read by its kind.

    A blank covariate or randomisation-stratum cell leaves the unit out with the departure
    ``missing-covariate`` (``covariate_missing: error``: bad input); a numeric covariate
    holding anything but a number is bad input.
    """
    missing = plan.outcomes[hyp.outcome].missing
    a, b = hyp.compare
    counted = np.isin(kind, ["event", "no-event"])
    if missing in ("event", "no-event"):
        counted = np.isin(kind, ["event", "no-event", "blank", "unmapped"])
    event = (kind == "event") | (missing == "event") & np.isin(kind, ["blank", "unmapped"])
    mine = rows & counted & ((group_col == a) | (group_col == b))
    where = f"hypotheses.{hyp.id}"
    blank_by: dict[str, np.ndarray] = {}
    columns: list[tuple[str, str, np.ndarray]] = []
    for column, ckind in hyp.covariates.items():
        cells = frame[column]
        blank = _per_unique(cells, is_blank).astype(bool)
        blank_by[column] = blank
        if ckind == "numeric":
            values = _per_unique(cells, lambda c: np.nan if is_blank(c) else as_number(c))
            values = np.array([np.nan if v is None else v for v in values], dtype=float)
            bad = mine & ~blank & np.isnan(values)
            if bad.any():
                raise DataError(
                    f"{source}: {where}.covariates.{column}: column {column!r} is numeric "
                    f"in the plan and holds values that are not numbers: "
                    f"{_listing(at.found(cells, bad))} ({at.where(bad)})")
        else:
            values = _per_unique(cells, lambda c: "" if is_blank(c) else as_text(c))
        columns.append((column, ckind, values))
    strata_labels = None
    if hyp.randomisation_strata:
        parts = []
        for column in hyp.randomisation_strata:
            cells = frame[column]
            blank_by.setdefault(column, _per_unique(cells, is_blank).astype(bool))
            parts.append(_per_unique(cells, lambda c: "" if is_blank(c) else as_text(c)))
        strata_labels = np.array(["\x1f".join(x) for x in zip(*parts, strict=True)],
                                 dtype=object)
    any_blank = np.zeros(len(rows), dtype=bool)
    for blank in blank_by.values():
        any_blank |= blank
    left_out = mine & any_blank
    missing_covariate: dict[str, dict[str, int]] = {}
    if left_out.any():
        per_column = {c: at.count(mine & blank) for c, blank in blank_by.items()
                      if (mine & blank).any()}
        if hyp.covariate_missing == "error":
            shown = ", ".join(f"{c!r} ({n})" for c, n in per_column.items())
            raise DataError(f"{source}: {where}: blank covariates in "
                            f"{_rows(at.count(left_out))} analysed: {shown} "
                            f"({at.where(left_out)}); covariate_missing: error")
        for g in (a, b):
            counts = {c: at.count(mine & blank & (group_col == g))
                      for c, blank in blank_by.items()}
            missing_covariate[g] = {c: n for c, n in counts.items() if n}
        per_group = {g: at.count(left_out & (group_col == g)) for g in (a, b)}
        deviations.append(Departure(
            "missing-covariate",
            f"{hyp.id}: {_rows(at.count(left_out))} with a blank covariate left out of the "
            f"adjusted analysis; per group: "
            + ", ".join(f"{g} {n}" for g, n in per_group.items())
            + "; per column: " + ", ".join(f"{c} {n}" for c, n in per_column.items()),
            "every analysed unit with its covariates",
            ", ".join(f"{g}: {n} left out" for g, n in per_group.items())))
    use = mine & ~any_blank
    weights = (at.weights[use] if at.weights is not None
               else np.ones(int(use.sum()), dtype=np.int64))
    return _canonical_units(
        hyp.id, (a, b), event[use].astype(float), (group_col[use] == a).astype(float),
        [(c, k, vals[use]) for c, k, vals in columns], np.asarray(weights, dtype=np.int64),
        None if strata_labels is None else strata_labels[use], missing_covariate)


def _canonical_units(hyp_id: str, groups: tuple[str, str], outcome: np.ndarray,
                     treated: np.ndarray, covariates: list[tuple[str, str, np.ndarray]],
                     weights: np.ndarray, strata: np.ndarray | None,
                     missing_covariate: dict[str, dict[str, int]]) -> Units:
    """The units as one row per distinct (group, outcome, covariates, stratum) with its
    count, sorted: the same arrays whichever engine read the rows, so the working model is
    fitted on identical numbers everywhere."""
    frame = pd.DataFrame({"treated": treated, "outcome": outcome})
    for j, (_, kind, values) in enumerate(covariates):
        frame[f"c{j}"] = values.astype(float if kind == "numeric" else str)
    if strata is not None:
        frame["stratum"] = strata.astype(str)
    keys = list(frame.columns)
    frame["weight"] = weights
    if len(frame.index):
        frame = frame.groupby(keys, sort=True, as_index=False)["weight"].sum()
    return Units(
        hypothesis=hyp_id,
        groups=groups,
        outcome=frame["outcome"].to_numpy(dtype=float),
        treated=frame["treated"].to_numpy(dtype=float),
        covariates=tuple(
            (c, k, frame[f"c{j}"].to_numpy(dtype=float if k == "numeric" else object))
            for j, (c, k, _) in enumerate(covariates)),
        weights=frame["weight"].to_numpy(dtype=np.int64),
        strata=None if strata is None else frame["stratum"].to_numpy(dtype=object),
        missing_covariate=missing_covariate,
    )
