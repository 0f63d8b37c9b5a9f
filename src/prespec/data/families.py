"""A family's data: the rows split by the level of its ``over`` column, then prepared per level.

Each level's rows are a complete analysis set for that level (one row per unit, the outcome
saying whether the unit had the event), so the usual preparation runs on them unchanged: the
population filter, the group check, the outcome mapping and missing rule, the id check and
the sample-size check (:func:`prespec.data.prepare.prepare`). Every column is carried along
untouched, a weight column too. Levels match by the matching rule (``prespec.common.matching``).
Rows whose level is blank are left out with a note; with declared levels, rows holding another
level are left out as the departure ``undeclared-level`` and a declared level without rows is
a note (its member is reported with no data). A level belongs to one group of ``within``:
anything else is bad input naming the file and the rows.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from prespec.common.departures import Departure, Note
from prespec.common.matching import as_text, is_blank, value_key

from ..errors import DataError
from ..plan.families import declared, member_id
from .prepare import Prepared, _per_unique, prepare
from .read import missing_column

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

_SHOW = 5
_ROWS = re.compile(r"\(rows ([0-9][0-9, ]*)\)")


@dataclass(frozen=True)
class Level:
    """One level of a family: its text, its group (or None), its rows and their counts."""

    value: str
    group: str | None
    rows: np.ndarray  # positions in the frame
    prepared: Prepared | None  # None: a declared level without rows


@dataclass(frozen=True)
class FamilyData:
    """The levels of one family (declared order, or sorted by group and level), with the
    departures and notes of the split and of the per-level preparation, merged per code."""

    hypothesis: str
    levels: tuple[Level, ...]
    left_out: int  # rows with a blank or an undeclared level
    deviations: tuple[Departure, ...]
    notes: tuple[Note, ...]


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def _lines(positions: np.ndarray, offset: int) -> str:
    shown = ", ".join(str(int(p) + offset) for p in positions[:_SHOW])
    more = len(positions) - _SHOW
    return shown + (f" and {more} more" if more > 0 else "")


def _listing(values: Counter[str]) -> str:
    items = [f"{v!r} ({n})" for v, n in sorted(values.items(), key=lambda kv: (-kv[1], kv[0]))]
    return ", ".join(items[:_SHOW]) + (f" and {len(items) - _SHOW} more"
                                       if len(items) > _SHOW else "")


def _labels(column: pd.Series) -> np.ndarray:
    return _per_unique(column, lambda c: None if is_blank(c) else as_text(c))


def _member_plan(plan: Plan, hyp: Hypothesis) -> Any:
    """The plan that one level is prepared under: the family's outcome, no hypotheses."""
    return plan.model_copy(update={"hypotheses": [],
                                   "outcomes": {hyp.outcome: plan.outcomes[hyp.outcome]}})


def _remap(exc: DataError, rows: np.ndarray, offset: int, where: str) -> DataError:
    """A per-level preparation error with the frame's own row numbers and the level named."""
    def back(match: re.Match[str]) -> str:
        numbers = [int(x) for x in match.group(1).split(",") if x.strip()]
        return "(rows " + ", ".join(str(int(rows[n - offset]) + offset) for n in numbers) + ")"

    text = _ROWS.sub(back, str(exc))
    head, sep, tail = text.partition(": ")
    return DataError(f"{head}: {where}: {tail}" if sep else text)


def family_data(frame: pd.DataFrame, plan: Plan, hyp: Hypothesis, source: str | Path,
                progress: Callable[[int, int], None] | None = None) -> FamilyData:
    """Split ``frame`` by the levels of ``hyp.over`` and prepare each level's rows."""
    source = str(source)
    offset = 2 if source.lower().endswith((".csv", ".txt")) else 1
    present = list(frame.columns)
    for key in ("over", "within"):
        column = getattr(hyp, key)
        if column is not None and column not in present:
            raise missing_column(source, column, f"hypotheses.{hyp.id}.{key}",
                                 [str(c) for c in present])
    labels = _labels(frame[hyp.over])
    deviations: list[Departure] = []
    notes: list[Note] = []
    blank = np.array([x is None for x in labels], dtype=bool)
    if blank.any():
        notes.append(Note("family-blank-level", f"{hyp.id}: {_rows(int(blank.sum()))} with a "
                          f"blank {hyp.over!r} left out of the family"))
    order, groups_of, keep = _levels(frame, labels, blank, hyp, source, offset, deviations)
    # one take of the frame, sorted by level (stable), then a contiguous slice per level
    kept = np.flatnonzero(keep)
    rank = {value: k for k, value in enumerate(order)}
    codes = pd.Series(labels[kept], dtype=object).map(rank).to_numpy(dtype=np.int64)
    by_level = kept[np.argsort(codes, kind="stable")]
    bounds = np.searchsorted(np.sort(codes, kind="stable"), np.arange(len(order) + 1))
    grouped = frame.take(by_level)
    _check_ids_within(frame, plan.data.id, by_level, bounds, order, hyp, source, offset)
    member_plan = _member_plan(plan, hyp)
    levels: list[Level] = []
    per_level: list[tuple[str, Prepared]] = []
    for k, value in enumerate(order):
        rows = by_level[bounds[k]:bounds[k + 1]]
        if not len(rows):
            notes.append(Note("family-level-absent", f"{member_id(hyp.id, value)}: declared "
                              f"level {value!r} has no rows in the data; reported with no "
                              "data"))
            levels.append(Level(value, groups_of.get(value), rows, None))
            if progress is not None:
                progress(k + 1, len(order))
            continue
        sub = grouped.iloc[bounds[k]:bounds[k + 1]].reset_index(drop=True)
        where = f"hypotheses.{hyp.id}, the rows where {hyp.over} is {value!r}"
        try:
            prepared = prepare(sub, member_plan, source, check_ids=False)
        except DataError as exc:
            raise _remap(exc, rows, offset, where) from None
        levels.append(Level(value, groups_of.get(value), rows, prepared))
        per_level.append((value, prepared))
        if progress is not None:
            progress(k + 1, len(order))
    deviations.extend(_merged_departures(hyp.id, per_level))
    notes.extend(_merged_notes(hyp.id, per_level))
    return FamilyData(hyp.id, tuple(levels), int((~keep).sum()), tuple(deviations),
                      tuple(notes))


def _check_ids_within(frame: pd.DataFrame, id_column: str, by_level: np.ndarray,
                      bounds: np.ndarray, order: list[str], hyp: Hypothesis, source: str,
                      offset: int) -> None:
    """Unit ids: none blank, none repeated within a level (the rows of each level are one
    analysis set); checked for every level at once, the first level at fault named."""
    if id_column not in frame.columns:
        return  # prepare names the missing column
    ids = _labels(frame[id_column])[by_level]
    codes, _ = pd.factorize(pd.Series(ids, dtype=object), use_na_sentinel=True)
    level_of = np.repeat(np.arange(len(order)), np.diff(bounds))
    blank = codes < 0
    paired = level_of * (int(codes.max(initial=0)) + 1) + np.where(blank, 0, codes)
    _, inverse, counts = np.unique(paired, return_inverse=True, return_counts=True)
    repeated = ~blank & (counts[inverse] > 1)
    bad = blank | repeated
    if not bad.any():
        return
    k = int(level_of[np.flatnonzero(bad)[0]])
    where = f"hypotheses.{hyp.id}, the rows where {hyp.over} is {order[k]!r}"
    span = slice(bounds[k], bounds[k + 1])
    rows, in_level = by_level[span], np.arange(bounds[k], bounds[k + 1])
    if blank[span].any():
        raise DataError(f"{source}: {where}: blank id in column {id_column!r} (rows "
                        f"{_lines(np.sort(rows[blank[span]]), offset)})")
    shown = []
    dup_ids = list(dict.fromkeys(str(ids[i]) for i in in_level[repeated[span]]))
    for value in dup_ids[:_SHOW]:
        at = np.sort(rows[ids[span] == value])
        shown.append(f"{value!r} (rows {_lines(at, offset)})")
    more = len(dup_ids) - len(shown)
    raise DataError(f"{source}: {where}: duplicate ids in column {id_column!r}: "
                    f"{'; '.join(shown)}" + (f"; and {more} more" if more > 0 else ""))


def _levels(frame: pd.DataFrame, labels: np.ndarray, blank: np.ndarray, hyp: Hypothesis,
            source: str, offset: int, deviations: list[Departure]
            ) -> tuple[list[str], dict[str, str | None], np.ndarray]:
    """The levels in order, each level's group, and the rows kept (level known, not blank)."""
    keep = ~blank
    given = declared(hyp.levels) if hyp.levels is not None else None
    if given is not None:
        canonical = {value_key(term): term for term, _ in given}
        mapped = np.array([None if x is None else canonical.get(value_key(x)) for x in labels],
                          dtype=object)
        stray = keep & np.array([m is None for m in mapped], dtype=bool)
        if stray.any():
            found = Counter(str(x) for x in labels[stray])
            deviations.append(Departure.of_values(
                "undeclared-level",
                f"{hyp.id}: {_rows(int(stray.sum()))} left out: column {hyp.over!r} holds "
                f"levels outside the declared levels: {_listing(found)}",
                ", ".join(term for term, _ in given), found))
        keep = keep & ~stray
        labels[keep] = mapped[keep]
        groups_of: dict[str, str | None] = {term: group for term, group in given}
        if hyp.within is not None:
            _check_declared_groups(frame, labels, keep, groups_of, hyp, source, offset)
        return [term for term, _ in given], groups_of, keep
    values = sorted({str(labels[i]) for i in np.flatnonzero(keep)})
    if hyp.within is None:
        return values, dict.fromkeys(values), keep
    groups_of = _groups_from_data(frame, labels, keep, hyp, source, offset)
    values.sort(key=lambda t: (str(groups_of[t]), t))
    return values, groups_of, keep


def _term_group_pairs(frame: pd.DataFrame, labels: np.ndarray, keep: np.ndarray, hyp: Hypothesis
                      ) -> tuple[np.ndarray, np.ndarray, dict[str, set[str | None]]]:
    """Per kept row its level and group text (None when blank); per level the groups seen."""
    within = _labels(frame[hyp.within])
    idx = np.flatnonzero(keep)
    terms = pd.Series(labels[idx], dtype=object)
    groups = pd.Series(within[idx], dtype=object)
    t_codes, t_uniques = pd.factorize(terms)
    g_codes, g_uniques = pd.factorize(groups, use_na_sentinel=True)
    seen: dict[str, set[str | None]] = {}
    for t, g in np.unique(np.stack([t_codes, g_codes]), axis=1).T:
        seen.setdefault(str(t_uniques[t]), set()).add(None if g < 0 else str(g_uniques[g]))
    return labels, within, seen


def _check_declared_groups(frame: pd.DataFrame, labels: np.ndarray, keep: np.ndarray,
                           groups_of: dict[str, str | None], hyp: Hypothesis, source: str,
                           offset: int) -> None:
    labels, within, seen = _term_group_pairs(frame, labels, keep, hyp)
    for term in (t for t, _ in declared(hyp.levels)):
        for group in sorted(g for g in seen.get(term, set()) if g is not None):
            if group != groups_of[term]:
                bad = np.flatnonzero(keep & (labels == term) & (within == group))
                raise DataError(
                    f"{source}: level {term!r} of {hyp.over!r} is declared under "
                    f"{groups_of[term]!r} (hypotheses.{hyp.id}.levels), but column "
                    f"{hyp.within!r} puts it under {group!r} (rows {_lines(bad, offset)})")


def _groups_from_data(frame: pd.DataFrame, labels: np.ndarray, keep: np.ndarray, hyp: Hypothesis,
                      source: str, offset: int) -> dict[str, str | None]:
    labels, within, seen = _term_group_pairs(frame, labels, keep, hyp)
    out: dict[str, str | None] = {}
    for term in sorted(seen):
        groups = seen[term]
        at = keep & (labels == term)
        if None in groups:
            rows = np.flatnonzero(at & np.array([g is None for g in within], dtype=bool))
            raise DataError(f"{source}: level {term!r} of {hyp.over!r} has a blank "
                            f"{hyp.within!r} (hypotheses.{hyp.id}.within) in rows "
                            f"{_lines(rows, offset)}; each level needs its group")
        if len(groups) > 1:
            shown = "; ".join(f"{g!r} (rows {_lines(np.flatnonzero(at & (within == g)), offset)})"
                              for g in sorted(str(x) for x in groups))
            raise DataError(f"{source}: level {term!r} of {hyp.over!r} sits in more than one "
                            f"{hyp.within!r} (hypotheses.{hyp.id}.within): {shown}; a level "
                            "belongs to one group")
        out[term] = next(iter(groups))
    return out


def _merged_departures(hyp_id: str, per_level: list[tuple[str, Prepared]]
                       ) -> list[Departure]:
    """One departure per code over the levels, naming how many levels and which."""
    by_code: dict[str, list[tuple[str, Departure]]] = {}
    for value, prepared in per_level:
        for d in prepared.deviations:
            by_code.setdefault(d.code, []).append((value, d))
    out = []
    for code, found in by_code.items():
        values = [v for v, _ in found]
        first = found[0][1]
        if len(found) == 1:
            detail = f"{member_id(hyp_id, values[0])}: {first.detail}"
        else:
            shown = ", ".join(values[:_SHOW]) + (f" and {len(values) - _SHOW} more"
                                                 if len(values) > _SHOW else "")
            detail = (f"{hyp_id}: in {len(values)} of {len(per_level)} levels ({shown}); "
                      f"first, {values[0]}: {first.detail}")
        # each level's values split at commas, as merged before values were capped
        found_values = {x.strip() for _, d in found
                        for v in (d.values if d.values is not None else [d.found or ""])
                        for x in v.split(",") if x.strip()}
        out.append(Departure.of_values(code, detail, first.expected, found_values)
                   if found_values else Departure(code, detail, first.expected, None))
    return out


def _merged_notes(hyp_id: str, per_level: list[tuple[str, Prepared]]) -> list[Note]:
    by_code: dict[str, list[tuple[str, Note]]] = {}
    for value, prepared in per_level:
        for n in prepared.notes:
            by_code.setdefault(n.code, []).append((value, n))
    out = []
    for code, found in by_code.items():
        if len(found) == 1:
            value, note = found[0]
            out.append(Note(code, f"{member_id(hyp_id, value)}: {note.detail}"))
            continue
        values = [v for v, _ in found]
        shown = ", ".join(values[:_SHOW]) + (f" and {len(values) - _SHOW} more"
                                             if len(values) > _SHOW else "")
        out.append(Note(code, f"{hyp_id}: in {len(values)} of {len(per_level)} levels "
                    f"({shown}); first, {values[0]}: {found[0][1].detail}"))
    return out
