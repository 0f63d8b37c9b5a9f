"""From raw rows to count tables: population filter, group check, outcome mapping.

Everything the statistics need is a count table (events and totals per group and outcome);
this module produces those tables together with the departures and notes that the data give
rise to (unexpected groups, unmapped outcome values, blanks under the missing rule,
sample-size shortfalls).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..departures import Departure, Note
from ..errors import DataError
from ..matching import ValueSet, as_number, as_text, is_blank

_SHOW = 5  # how many offending values an error message lists


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


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def _listing(values: Counter[str]) -> str:
    items = [f"{v!r} ({n})" for v, n in sorted(values.items(), key=lambda kv: (-kv[1], kv[0]))]
    shown = ", ".join(items[:_SHOW])
    return shown + (f" and {len(items) - _SHOW} more" if len(items) > _SHOW else "")


def _per_unique(column: pd.Series, fn: Any) -> np.ndarray:
    """Apply ``fn`` once per distinct cell and spread the answers back over the rows."""
    codes, uniques = pd.factorize(column, use_na_sentinel=True)
    answers = [fn(u) for u in uniques]
    na_answer = fn(None)
    return np.array([answers[c] if c >= 0 else na_answer for c in codes], dtype=object)


def _condition(op: str, arg: Any) -> Any:
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
    present = list(frame.columns)
    for column, role in needed.items():
        if column not in present:
            raise DataError(
                f"{source}: column {column!r} ({role}) is not in the data "
                f"(columns: {', '.join(present)})"
            )


def _check_ids(frame: pd.DataFrame, id_column: str, source: str, line_offset: int) -> None:
    ids = frame[id_column]
    blank = [i for i, cell in enumerate(ids) if is_blank(cell)]
    if blank:
        lines = ", ".join(str(i + line_offset) for i in blank[:_SHOW])
        raise DataError(f"{source}: blank id in column {id_column!r} (rows {lines})")
    texts = pd.Series([as_text(c) for c in ids])
    dup = texts[texts.duplicated(keep=False)]
    if len(dup):
        shown = []
        for value, rows in list(dup.groupby(dup, sort=False).groups.items())[:_SHOW]:
            lines = ", ".join(str(r + line_offset) for r in rows)
            shown.append(f"{value!r} (rows {lines})")
        more = dup.nunique() - len(shown)
        raise DataError(
            f"{source}: duplicate ids in column {id_column!r}: {'; '.join(shown)}"
            + (f"; and {more} more" if more > 0 else "")
        )


def prepare(frame: pd.DataFrame, plan: Any, source: str | Path) -> Prepared:
    """Reduce ``frame`` to count tables as ``plan`` (a validated plan model) prescribes."""
    source = str(source)
    spec = plan.data
    line_offset = 2 if source.lower().endswith((".csv", ".txt")) else 1
    needed = {spec.id: "data.id", spec.group: "data.group"}
    for index, cond in enumerate(spec.include, start=1):
        needed.setdefault(cond.column, f"data.include[{index}]")
    for name, outcome in plan.outcomes.items():
        needed.setdefault(outcome.column, f"outcomes.{name}.column")
    stratified = {(h.outcome, tuple(h.strata)): h.id for h in plan.hypotheses if h.strata}
    for (_, columns), hyp_id in stratified.items():
        for column in columns:
            needed.setdefault(column, f"hypotheses.{hyp_id}.strata")
    _check_columns(frame, needed, source)
    _check_ids(frame, spec.id, source, line_offset)

    rows_read = len(frame.index)
    keep = np.ones(rows_read, dtype=bool)
    for cond in spec.include:
        op, arg = cond.op()
        keep &= _per_unique(frame[cond.column], _condition(op, arg)).astype(bool)
    excluded_by_filter = int((~keep).sum())

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
        found = Counter(
            "(blank)" if is_blank(c) else as_text(c) for c in frame[spec.group][stray]
        )
        deviations.append(
            Departure(
                "unexpected-group",
                f"{_rows(int(stray.sum()))} left out: column {spec.group!r} holds values "
                f"outside data.groups: {_listing(found)}",
                ", ".join(groups),
                ", ".join(sorted(found)),
            )
        )
    analysed_rows = keep & in_group
    kinds = {
        name: _classify_outcome(frame, name, outcome, analysed_rows, source, line_offset,
                                deviations)
        for name, outcome in plan.outcomes.items()
    }
    outcomes = {
        name: _tally(name, kinds[name], group_col, analysed_rows, groups, outcome.missing)
        for name, outcome in plan.outcomes.items()
    }
    for name, counts in outcomes.items():
        _missing_note(name, plan.outcomes[name].missing, counts, notes)
    strata = {
        key: _strata(frame, key, kinds[key[0]], group_col, analysed_rows, groups,
                     plan.outcomes[key[0]].missing, notes)
        for key in stratified
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
    return Prepared(
        rows_read=rows_read,
        excluded_by_filter=excluded_by_filter,
        excluded_group=int(stray.sum()),
        analysed=int(analysed_rows.sum()),
        outcomes=outcomes,
        deviations=tuple(deviations),
        notes=tuple(notes),
        strata=strata,
    )


def _classify_outcome(
    frame: pd.DataFrame,
    name: str,
    outcome: Any,
    rows: np.ndarray,
    source: str,
    line_offset: int,
    deviations: list[Departure],
) -> np.ndarray:
    """Per row: "event", "no-event", "blank" or "unmapped"; departures and errors as SPEC.md."""
    events, no_events = ValueSet(outcome.event), ValueSet(outcome.no_event)

    def classify(cell: Any) -> str:
        if is_blank(cell):
            return "blank"
        if cell in events:
            return "event"
        if cell in no_events:
            return "no-event"
        return "unmapped"

    column = frame[outcome.column]
    kind = _per_unique(column, classify)
    unmapped_rows = rows & (kind == "unmapped")
    blank_rows = rows & (kind == "blank")
    if unmapped_rows.any():
        found = Counter(as_text(c) for c in column[unmapped_rows])
        if outcome.missing == "error":
            where = np.flatnonzero(unmapped_rows)[:_SHOW] + line_offset
            raise DataError(
                f"{source}: outcome {name!r} (column {outcome.column!r}) has values that are "
                f"neither event nor no_event: {_listing(found)} (rows "
                f"{', '.join(map(str, where))}); missing: error"
            )
        deviations.append(
            Departure(
                "unmapped-outcome-value",
                f"outcome {name!r} (column {outcome.column!r}): {_rows(int(unmapped_rows.sum()))} "
                f"with values that are neither event nor no_event: {_listing(found)}; "
                f"treated by the missing rule ({outcome.missing})",
                "event: " + ", ".join(map(as_text, outcome.event))
                + "; no_event: " + ", ".join(map(as_text, outcome.no_event)),
                ", ".join(sorted(found)),
            )
        )
    if blank_rows.any() and outcome.missing == "error":
        where = np.flatnonzero(blank_rows)[:_SHOW] + line_offset
        raise DataError(
            f"{source}: outcome {name!r} (column {outcome.column!r}) is blank in "
            f"{int(blank_rows.sum())} analysed rows (rows {', '.join(map(str, where))}); "
            "missing: error"
        )
    return kind


def _tally(name: str, kind: np.ndarray, group_col: np.ndarray, rows: np.ndarray,
           groups: list[str], missing: str) -> OutcomeCounts:
    """Events and totals per group over ``rows``, blanks and unmapped values by the rule."""
    counts = []
    for group in groups:
        in_group = rows & (group_col == group)
        n_event = int((in_group & (kind == "event")).sum())
        n_no = int((in_group & (kind == "no-event")).sum())
        n_blank = int((in_group & (kind == "blank")).sum())
        n_unmapped = int((in_group & (kind == "unmapped")).sum())
        if missing == "event":
            n_event += n_blank + n_unmapped
        elif missing == "no-event":
            n_no += n_blank + n_unmapped
        counts.append(GroupCounts(group, n_event, n_event + n_no, n_blank, n_unmapped))
    return OutcomeCounts(name, tuple(counts))


def _missing_note(name: str, missing: str, counts: OutcomeCounts, notes: list[Note]) -> None:
    missing_total = sum(c.blank + c.unmapped for c in counts.groups)
    if not missing_total:
        return
    per_group = ", ".join(f"{c.group} {c.blank + c.unmapped}" for c in counts.groups)
    action = {
        "exclude": "left out of the analysis",
        "event": "counted as events",
        "no-event": "counted as no event",
    }[missing]
    notes.append(
        Note(
            f"missing-{missing}",
            f"outcome {name!r}: {missing_total} missing outcomes {action} "
            f"(missing: {missing}); per group: {per_group}",
        )
    )


def _strata(frame: pd.DataFrame, key: tuple[str, tuple[str, ...]], kind: np.ndarray,
            group_col: np.ndarray, rows: np.ndarray, groups: list[str], missing: str,
            notes: list[Note]) -> tuple[Stratum, ...]:
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
                          f"{_rows(int((rows & blank).sum()))} with a blank stratum value left "
                          "out of the stratified analysis"))
    rows = rows & ~blank
    combined = np.array(["\x1f".join(parts) if rows[i] else "" for i, parts in
                         enumerate(zip(*labels, strict=True))], dtype=object)
    values = sorted({combined[i] for i in np.flatnonzero(rows)})
    return tuple(
        Stratum(tuple(v.split("\x1f")),
                _tally(name, kind, group_col, rows & (combined == v), groups, missing))
        for v in values
    )
