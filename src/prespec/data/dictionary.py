"""The data dictionary of a rehearsal: every column the plan uses and what its values mean.

A data manager signs this page off before the lock: for each column the plan reads (the id,
the population filter, the outcomes, the strata, the intercurrent events) it lists the
distinct values, how many rows hold each, and what the plan makes of it (event, no event,
passes or fails the filter, an intercurrent event, blank, or unmapped). The group column is
never read, so it is named but not counted; the id column shows only how many ids there are,
how many are blank and how many occur more than once, never the ids themselves.

Counts are over all rows of the file, before the population filter.

A transport or dataset file may declare a label for a column and for its stored values; the
dictionary shows them beside the column and the value (``label``, written only where the file
declares one). The plan still matches the stored value (a code ``1``), never its label.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from prespec.common.matching import ValueSet, as_text, is_blank, value_key
from prespec.data.datasets import Labels
from prespec.data.prepare import cell_predicate
from prespec.data.read import missing_column

if TYPE_CHECKING:
    from prespec.plan.model import Plan

#: At most this many values are listed per column; the rest are counted in ``more``.
MAX_VALUES = 50

# The order in which meanings are listed within a column (then by count, then by value).
_RANK = {"event": 0, "no-event": 1, "unmapped": 2, "passes filter": 0, "fails filter": 1,
         "intercurrent event": 0, None: 3, "blank": 4}


@dataclass(frozen=True)
class ValueCount:
    """One distinct value of a column (``None`` for blank cells), its rows and its meaning."""

    value: str | None
    count: int
    meaning: str | None
    label: str | None = None  # the value label the file declares for this stored value

    def to_json(self) -> dict[str, Any]:
        doc: dict[str, Any] = {"value": self.value, "count": self.count,
                               "meaning": self.meaning}
        if self.label is not None:
            doc["label"] = self.label
        return doc


@dataclass(frozen=True)
class ColumnSummary:
    """What one column holds, for one role (or several identical roles) in the plan."""

    column: str
    role: str
    distinct: int  # distinct non-blank values
    blank: int  # blank cells
    values: tuple[ValueCount, ...]  # at most MAX_VALUES; none for the id column
    more: int  # distinct values not listed
    more_count: int  # rows holding the values not listed
    duplicates: int | None = None  # the id column only: ids that occur more than once
    label: str | None = None  # the column label the file declares

    def to_json(self) -> dict[str, Any]:
        doc: dict[str, Any] = {
            "column": self.column,
            **({"label": self.label} if self.label is not None else {}),
            "role": self.role,
            "distinct": self.distinct,
            "blank": self.blank,
            "values": [v.to_json() for v in self.values],
            "more": self.more,
            "more_count": self.more_count,
        }
        if self.duplicates is not None:
            doc["duplicates"] = self.duplicates
        return doc


Meaning = Callable[[Any], str | None]


@dataclass(frozen=True)
class _Use:
    """A column as one part of the plan reads it: its role and how a value is read."""

    column: str
    role: str
    key: tuple[Any, ...]  # uses with equal keys read the column alike and are listed once
    meaning: Meaning | None  # None: the id column


def _outcome_meaning(outcome: Any) -> Meaning:
    events, no_events = ValueSet(outcome.event), ValueSet(outcome.no_event)

    def meaning(cell: Any) -> str:
        if is_blank(cell):
            return "blank"
        if cell in events:
            return "event"
        return "no-event" if cell in no_events else "unmapped"

    return meaning


def _filter_meaning(cond: Any) -> Meaning:
    op, arg = cond.op()
    holds = cell_predicate(op, arg)
    return lambda cell: "passes filter" if holds(cell) else "fails filter"


def _happened_meaning(values: list[Any]) -> Meaning:
    happened = ValueSet(values)

    def meaning(cell: Any) -> str | None:
        if is_blank(cell):
            return "blank"
        return "intercurrent event" if cell in happened else None

    return meaning


def _plain_meaning(cell: Any) -> str | None:
    return "blank" if is_blank(cell) else None


def _keyed(values: list[Any]) -> tuple[str, ...]:
    return tuple(sorted(as_text(v) for v in values))


def uses(plan: Plan) -> list[_Use]:
    """Every column the plan reads, with its role, in the order of the plan (group excluded)."""
    spec = plan.data
    out = [_Use(spec.id, "data.id", ("id",), None)]
    for i, cond in enumerate(spec.include, start=1):
        op, arg = cond.op()
        out.append(_Use(cond.column, f"data.include[{i}]", ("filter", op, repr(arg)),
                        _filter_meaning(cond)))
    for name, outcome in plan.outcomes.items():
        out.append(_Use(outcome.column, f"outcomes.{name}.column",
                        ("outcome", _keyed(outcome.event), _keyed(outcome.no_event)),
                        _outcome_meaning(outcome)))
    for hyp in plan.hypotheses:
        for column in hyp.strata or []:
            out.append(_Use(column, f"hypotheses.{hyp.id}.strata", ("strata",), _plain_meaning))
        for column in getattr(hyp, "covariates", None) or {}:  # a covariate: its values as read
            out.append(_Use(column, f"hypotheses.{hyp.id}.covariates.{column}", ("strata",),
                            _plain_meaning))
        for column in getattr(hyp, "randomisation_strata", None) or []:
            out.append(_Use(column, f"hypotheses.{hyp.id}.randomisation_strata", ("strata",),
                            _plain_meaning))
        for key in ("over", "within"):  # a family's level and group columns
            if getattr(hyp, key, None):
                out.append(_Use(getattr(hyp, key), f"hypotheses.{hyp.id}.{key}", ("strata",),
                                _plain_meaning))
        estimand = getattr(hyp, "estimand", None)
        for j, ice in enumerate(estimand.intercurrent if estimand else [], start=1):
            where = f"hypotheses.{hyp.id}.estimand.intercurrent[{j}]"
            out.append(_Use(ice.column, f"{where}.column", ("happened", _keyed(ice.happened)),
                            _happened_meaning(ice.happened)))
            if ice.outcome_column:
                outcome = plan.outcomes[hyp.outcome]
                out.append(_Use(ice.outcome_column, f"{where}.outcome_column",
                                ("outcome", _keyed(outcome.event), _keyed(outcome.no_event)),
                                _outcome_meaning(outcome)))
    return out


def _grouped(plan_uses: list[_Use]) -> Iterator[tuple[_Use, str]]:
    """Uses that read one column alike are merged; their roles are joined with ``, ``."""
    merged: dict[tuple[str, tuple[Any, ...]], list[_Use]] = {}
    for use in plan_uses:
        merged.setdefault((use.column, use.key), []).append(use)
    for same in merged.values():
        roles = list(dict.fromkeys(u.role for u in same))
        yield same[0], ", ".join(roles)


def _texts(column: pd.Series) -> tuple[np.ndarray, list[str | None]]:
    """Per row the code of its distinct trimmed text (-1 for blank), and the texts."""
    codes, uniques = pd.factorize(column, use_na_sentinel=True)
    texts: list[str | None] = [None if is_blank(u) else as_text(u) for u in uniques]
    distinct = list(dict.fromkeys(t for t in texts if t is not None))
    index = {t: k for k, t in enumerate(distinct)}
    remap = np.array([-1 if t is None else index[t] for t in texts] + [-1], dtype=np.int64)
    return remap[codes], distinct  # code -1 (a null) maps to the last entry, -1


def _id_summary(use: _Use, role: str, column: pd.Series) -> ColumnSummary:
    codes, distinct = _texts(column)
    counts = np.bincount(codes[codes >= 0], minlength=len(distinct))
    return ColumnSummary(use.column, role, len(distinct), int((codes < 0).sum()), (), 0, 0,
                         duplicates=int((counts > 1).sum()))


def _summary(use: _Use, role: str, column: pd.Series,
             value_labels: dict[str, str] | None = None) -> ColumnSummary:
    assert use.meaning is not None
    codes, distinct = _texts(column)
    counts = np.bincount(codes[codes >= 0], minlength=len(distinct))
    blank = int((codes < 0).sum())
    named = value_labels or {}
    rows = [ValueCount(text, int(n), use.meaning(text), named.get(text))
            for text, n in zip(distinct, counts, strict=True)]
    if blank:
        rows.append(ValueCount(None, blank, use.meaning(None)))
    rows.sort(key=lambda r: (_RANK.get(r.meaning, 3), r.value is None, -r.count,
                             r.value or ""))
    shown, rest = rows[:MAX_VALUES], rows[MAX_VALUES:]
    return ColumnSummary(use.column, role, len(distinct), blank, tuple(shown), len(rest),
                         sum(r.count for r in rest))


def data_dictionary(frame: pd.DataFrame, plan: Plan, source: str | Path,
                    labels: Labels | None = None) -> dict[str, Any]:
    """The ``data_dictionary`` of a rehearsal's results.json, from the rows as read.

    ``frame`` must not hold the group column: it is named here but never counted.
    ``labels``: the column and value labels the data file declares (a dataset file's).
    """
    labels = labels or Labels()
    group = plan.data.group
    if group in frame.columns:
        raise ValueError("the data dictionary is built without the group column")
    present = list(frame.columns)
    columns = []
    for use, role in _grouped(uses(plan)):
        if use.column not in present:
            raise missing_column(str(source), use.column, role, [str(c) for c in present])
        if use.meaning is None:
            summary = _id_summary(use, role, frame[use.column])
        else:
            summary = _summary(use, role, frame[use.column], labels.values.get(use.column))
        label = labels.columns.get(use.column)
        if label is not None:
            summary = dataclasses.replace(summary, label=label)
        columns.append(summary.to_json())
    return {"rows": len(frame.index), "counted_over": "all rows read",
            "group_column": {"column": group, "read": False}, "columns": columns}



def _plan_values(plan: Plan) -> list[tuple[str, str, list[Any]]]:
    """(column, role, the values the plan names for it) for the group column and every column
    the plan reads, in the order of the plan."""
    spec = plan.data
    out: list[tuple[str, str, list[Any]]] = [(spec.group, "data.group", list(spec.groups))]
    for use in uses(plan):
        out.append((use.column, use.role, []))
    for i, cond in enumerate(spec.include, start=1):
        op, arg = cond.op()
        if op in ("in", "not_in", "equals"):  # values, not a range or a missing test
            named = list(arg) if isinstance(arg, list | tuple) else [arg]
            out.append((cond.column, f"data.include[{i}]", named))
    for name, outcome in plan.outcomes.items():
        out.append((outcome.column, f"outcomes.{name}.column",
                    [*outcome.event, *outcome.no_event]))
    return out


def plan_labels(plan: Plan, labels: Labels) -> list[dict[str, Any]] | None:
    """The labels a data file declares for the columns a run reads and for the values the plan
    names (``data_labels`` of a run's results.json): per column its label, and per plan value
    the label of the stored value it matches. None when the file declares none of them."""
    columns: dict[str, dict[str, Any]] = {}
    for column, role, values in _plan_values(plan):
        entry = columns.setdefault(column, {"column": column, "roles": [], "values": {}})
        if role not in entry["roles"]:
            entry["roles"].append(role)
        # by the matching rule: a plan's 1, "1" and 1.0 all name the stored code 1
        declared = {value_key(k): v for k, v in labels.values.get(column, {}).items()}
        for value in values:
            key = value_key(value)
            if key in declared:
                entry["values"].setdefault(as_text(value), declared[key])
    out = []
    for column, entry in columns.items():
        label = labels.columns.get(column)
        if label is None and not entry["values"]:
            continue
        doc: dict[str, Any] = {"column": column, "role": ", ".join(entry["roles"])}
        if label is not None:
            doc["label"] = label
        doc["values"] = [{"value": v, "label": lab} for v, lab in entry["values"].items()]
        out.append(doc)
    return out or None
