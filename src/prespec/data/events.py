"""Families over an event table: units from the unit table, events from a second table.

A plan's ``data.events`` names a table of one row per event (``id``, ``level``, optional
``within``); a family with ``over: events`` counts, for each level, the units of the analysis
population (the unit table after ``data.include`` and ``data.groups``) with at least one event
of that level. The denominator of every level is the unit table's population, so a unit with
no event counts as a non-event everywhere, and a unit with the same level twice counts once.

Every engine does the join where the data are and answers with the same small *tally*
(``TALLY_COLUMNS``): the SQL engines in one query (``compiler.compile_event_tally``), the
pandas engine in-process (:func:`tally_frames`), both by the matching rule of
``prespec.common.matching`` (ids joined by their trimmed text, levels matched to declared
levels by ``value_key``). :func:`event_data` turns a tally into the families' per-level counts
and the departures: event rows whose id is blank or not in the unit table
(``unmatched-event-id``), rows of a known unit whose level is blank (``blank-event-level``),
and rows holding a level outside the declared ones (``undeclared-level``).

Tally rows, by ``kind``: ``units`` (per group ``arm``: the units of the population), ``events``
(per level, within and arm: the distinct units of the population with an event of the level),
``pairs`` (per level and within: the event rows of known units), ``unmatched`` (per id text,
``None`` when blank, in ``level``: the event rows whose id is not in the unit table),
``blank`` (the event rows of known units with a blank level) and ``outside`` (the event rows
of known units outside the population).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from prespec.common.departures import Departure, Note
from prespec.common.matching import as_text, is_blank, value_key

from ..errors import DataError
from ..plan.families import EVENT_OUTCOME, declared, is_event_family
from .families import FamilyData, Level
from .prepare import GroupCounts, OutcomeCounts, Prepared, cell_predicate

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

    from .engines.base import CountRequest

TALLY_COLUMNS = ("kind", "level", "within", "arm", "n")
_SHOW = 5


def event_templates(plan: Plan) -> list[Any]:
    """The plan's families over the event table, in plan order."""
    return [h for h in plan.hypotheses if is_event_family(plan, h)]


def events_request(plan: Plan, shown: str) -> CountRequest:
    """What an engine reads of the event table: the id, the level and the within column."""
    from .engines.base import CountRequest

    spec = plan.data.events
    assert spec is not None
    needed = [(spec.id, "data.events.id"), (spec.level, "data.events.level")]
    if spec.within is not None:
        needed.append((spec.within, "data.events.within"))
    raw = tuple(c for c, _ in needed[1:])
    return CountRequest(source=shown, id=spec.id, include=(), mapped=(), raw=raw,
                        needed=tuple(needed))


def declared_levels(plan: Plan) -> list[str] | None:
    """The levels every event family declares (their union, in plan order), or None when
    one of them takes its levels from the data (then every level is kept as found)."""
    out: dict[str, None] = {}
    for hyp in event_templates(plan):
        if hyp.levels is None:
            return None
        out.update((term, None) for term, _ in declared(hyp.levels))
    return list(out)


def _each(column: pd.Series, fn: Any) -> np.ndarray:
    """``fn`` of each distinct cell, spread back over the rows (an array of objects)."""
    codes, uniques = pd.factorize(column, use_na_sentinel=True)
    answers = np.empty(len(uniques) + 1, dtype=object)
    answers[:-1] = [fn(u) for u in uniques]
    answers[-1] = fn(None)  # code -1: a missing cell
    return answers[codes]


def _texts(column: pd.Series) -> np.ndarray:
    return _each(column, lambda c: None if is_blank(c) else as_text(c))


def _codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Integer codes of texts (-1 for None) and the texts they stand for."""
    codes, uniques = pd.factorize(pd.Series(values, dtype=object), use_na_sentinel=True)
    return codes.astype(np.int64), np.asarray(uniques, dtype=object)


def tally_frames(units: pd.DataFrame, events: pd.DataFrame, plan: Plan) -> pd.DataFrame:
    """The tally from the raw cells of both tables, in-process (the pandas engine): the
    event rows matched to the units by the trimmed text of the id, then counted on integer
    codes (the unit ids are unique: the unit table's preparation refuses a repeated one)."""
    spec, ev = plan.data, plan.data.events
    assert ev is not None
    keep = np.ones(len(units.index), dtype=bool)
    for cond in spec.include:
        keep &= _each(units[cond.column], cell_predicate(*cond.op())).astype(bool)
    by_key = {value_key(g): g for g in spec.groups}
    arm = _each(units[spec.group], lambda c: None if is_blank(c) else by_key.get(value_key(c)))
    u_ids = _texts(units[spec.id])
    known = np.array([x is not None for x in u_ids], dtype=bool)
    inside = keep & np.array([a is not None for a in arm], dtype=bool) & known
    levels = declared_levels(plan)
    canonical = {value_key(t): t for t in levels} if levels is not None else None
    e_ids = _texts(events[ev.id])
    e_level = _each(events[ev.level], lambda c: None if is_blank(c) else (
        canonical.get(value_key(c), as_text(c)) if canonical is not None else as_text(c)))
    e_within = (_texts(events[ev.within]) if ev.within is not None
                else np.full(len(events.index), None, dtype=object))
    # one factorisation of both id columns: unit_at is the unit's position, -1 for none
    both, _ = pd.factorize(np.concatenate([u_ids[known], e_ids]), use_na_sentinel=True)
    n_known = int(known.sum())
    position = np.full(int(both.max(initial=-1)) + 2, -1, dtype=np.int64)
    position[both[:n_known]] = np.arange(n_known)
    unit_at = position[both[n_known:]]  # a blank id has code -1: the last entry, -1
    unit_rows = np.flatnonzero(known)
    matched = unit_at >= 0
    unit_of = np.where(matched, unit_rows[np.maximum(unit_at, 0)], -1)
    inside_e = matched & inside[np.maximum(unit_of, 0)]
    level_code, level_text = _codes(e_level)
    within_code, within_text = _codes(e_within)
    has_level = level_code >= 0
    arms = list(spec.groups)
    arm_code = np.array([arms.index(a) if a is not None else -1 for a in arm], dtype=np.int64)
    out: list[pd.DataFrame] = []
    sizes = np.bincount(arm_code[inside], minlength=len(arms))
    out.append(pd.DataFrame({"kind": "units", "level": None, "within": None,
                             "arm": arms, "n": sizes}))
    # distinct (unit, level, within) of the population, then counted per (level, within, arm)
    pick = inside_e & has_level
    key = pd.DataFrame({"unit": unit_of[pick], "level": level_code[pick],
                        "within": within_code[pick]}).drop_duplicates()
    key["arm"] = arm_code[key["unit"].to_numpy()]
    counted = key.groupby(["level", "within", "arm"]).size().reset_index(name="n")
    out.append(pd.DataFrame({
        "kind": "events", "level": level_text[counted["level"].to_numpy()],
        "within": _decode(within_text, counted["within"].to_numpy()),
        "arm": [arms[a] for a in counted["arm"]], "n": counted["n"].to_numpy()}))
    pick = matched & has_level
    pairs = pd.DataFrame({"level": level_code[pick], "within": within_code[pick]}).groupby(
        ["level", "within"]).size().reset_index(name="n")
    out.append(pd.DataFrame({
        "kind": "pairs", "level": level_text[pairs["level"].to_numpy()],
        "within": _decode(within_text, pairs["within"].to_numpy()), "arm": None,
        "n": pairs["n"].to_numpy()}))
    unmatched = pd.Series(e_ids[~matched], dtype=object).value_counts(dropna=False)
    out.append(pd.DataFrame({"kind": "unmatched", "level": unmatched.index.astype(object),
                             "within": None, "arm": None, "n": unmatched.to_numpy()}))
    for kind, mask in (("blank", matched & ~has_level), ("outside", matched & ~inside_e)):
        out.append(pd.DataFrame({"kind": [kind], "level": [None], "within": [None],
                                 "arm": [None], "n": [int(mask.sum())]}))
    return normal_tally(pd.concat(out, ignore_index=True))


def _decode(texts: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """The texts of codes, None for -1."""
    table = np.empty(len(texts) + 1, dtype=object)
    table[:-1] = texts
    table[-1] = None
    return table[codes]


def _null(cell: Any) -> bool:
    return cell is None or (isinstance(cell, float) and np.isnan(cell)) or cell is pd.NA


def normal_tally(frame: pd.DataFrame) -> pd.DataFrame:
    """A tally as every engine's answer is compared: text cells (None for NULL or NaN),
    integer counts, the rows with a zero count dropped, sorted."""
    out = pd.DataFrame({c: pd.Series([None if _null(x) else str(x) for x in frame[c]],
                                     dtype=object) for c in TALLY_COLUMNS[:-1]})
    out["n"] = pd.to_numeric(frame["n"]).fillna(0).astype(np.int64).to_numpy()
    out = out.loc[out["n"] > 0]
    key = out[list(TALLY_COLUMNS[:-1])].fillna("\x00").astype(str)
    order = np.lexsort([key[c].to_numpy() for c in reversed(TALLY_COLUMNS[:-1])])
    return out.iloc[order].reset_index(drop=True)


@dataclass(frozen=True)
class EventData:
    """The families over the event table and what the event table held."""

    families: tuple[FamilyData, ...]
    deviations: tuple[Departure, ...]
    notes: tuple[Note, ...]
    summary: dict[str, Any]  # rows, matched, unmatched, blank level, outside, per-level


def _rows(n: int) -> str:
    return f"{n:,} event row" if n == 1 else f"{n:,} event rows"


def event_data(tally: pd.DataFrame, plan: Plan, units: Prepared, shown: str) -> EventData:
    """The families' per-level counts from a tally (``units``: the unit table's counts)."""
    ev = plan.data.events
    assert ev is not None
    tally = normal_tally(tally)
    kind = tally["kind"]
    if not int(tally.loc[kind.isin(["pairs", "unmatched", "blank"]), "n"].sum()):
        raise DataError(f"{shown}: the event table has no rows")
    deviations: list[Departure] = []
    notes: list[Note] = []
    unmatched = tally.loc[kind == "unmatched"]
    n_unmatched = int(unmatched["n"].sum())
    if n_unmatched:
        found = Counter({("(blank)" if i is None else str(i)): int(n)
                         for i, n in zip(unmatched["level"], unmatched["n"], strict=True)})
        deviations.append(Departure.of_values(
            "unmatched-event-id", f"{shown}: {_rows(n_unmatched)} left out: their "
            f"{ev.id!r} is blank or not an id of the unit table ({len(found):,} ids)",
            f"every {ev.id!r} an id of the unit table", found))
    n_blank = int(tally.loc[kind == "blank", "n"].sum())
    if n_blank:
        deviations.append(Departure("blank-event-level",
                                    f"{shown}: {_rows(n_blank)} of known units (ids in the "
                                    f"unit table) with a blank {ev.level!r} left out",
                                    f"a level in every row of {ev.level!r}",
                                    f"{n_blank:,} blank"))
    n_outside = int(tally.loc[kind == "outside", "n"].sum())
    if n_outside:
        notes.append(Note("event-rows-outside-population", f"{shown}: {_rows(n_outside)} "
                          "belong to units outside the analysis population and are not "
                          "counted"))
    units_rows = tally.loc[kind == "units"]
    totals = {g: int(units_rows.loc[units_rows["arm"] == g, "n"].sum())
              for g in plan.data.groups}
    pairs = tally.loc[kind == "pairs"]
    counted = tally.loc[kind == "events"]
    families = tuple(_family(plan, hyp, pairs, counted, totals, units, shown, deviations)
                     for hyp in event_templates(plan))
    per_level = {str(lv): int(n) for lv, n in pairs.groupby("level")["n"].sum().items()}
    summary = {"rows": int(pairs["n"].sum()) + n_unmatched + n_blank,
               "unmatched_rows": n_unmatched, "unmatched_ids": len(unmatched.index),
               "blank_level_rows": n_blank, "outside_rows": n_outside,
               "levels": per_level}
    return EventData(families, tuple(deviations), tuple(notes), summary)


def _family(plan: Plan, hyp: Hypothesis, pairs: pd.DataFrame, counted: pd.DataFrame,
            totals: dict[str, int], units: Prepared, shown: str,
            deviations: list[Departure]) -> FamilyData:
    ev = plan.data.events
    assert ev is not None
    seen = pairs.groupby("level")["n"].sum()
    given = declared(hyp.levels) if hyp.levels is not None else None
    left_out = 0
    if given is not None:
        names = [t for t, _ in given]
        known = set(names)
        stray = seen.loc[[lv not in known for lv in seen.index]]
        if len(stray):
            left_out = int(stray.sum())
            found = Counter({str(k): int(v) for k, v in stray.items()})
            listing = ", ".join(f"{k!r} ({v})" for k, v in found.most_common(_SHOW)) + (
                f" and {len(found) - _SHOW} more" if len(found) > _SHOW else "")
            deviations.append(Departure.of_values(
                "undeclared-level", f"{hyp.id}: {_rows(left_out)} left out: column "
                f"{ev.level!r} of the event table holds levels outside the declared levels: "
                f"{listing}", ", ".join(names), found))
        groups_of: dict[str, str | None] = dict(given)
        order = names
    else:
        order = sorted(str(x) for x in seen.index)
        groups_of = dict.fromkeys(order)
    if hyp.within is not None:
        _check_groups(pairs, order, groups_of, given is not None, hyp, shown)
        if given is None:
            order.sort(key=lambda t: (str(groups_of[t]), t))
    levels = []
    for value in order:
        rows = counted.loc[counted["level"] == value]
        events = {g: int(rows.loc[rows["arm"] == g, "n"].sum()) for g in plan.data.groups}
        counts = OutcomeCounts(EVENT_OUTCOME, tuple(
            GroupCounts(g, events[g], totals[g], 0, 0) for g in plan.data.groups))
        prepared = Prepared(rows_read=units.rows_read,
                            excluded_by_filter=units.excluded_by_filter,
                            excluded_group=units.excluded_group, analysed=sum(totals.values()),
                            outcomes={EVENT_OUTCOME: counts}, deviations=(), notes=())
        # ``rows``: as many entries as event rows of known units hold the level
        n_rows = int(seen.get(value, 0))
        levels.append(Level(value, groups_of.get(value), np.arange(n_rows), prepared))
    return FamilyData(hyp.id, tuple(levels), left_out, (), ())


def _check_groups(pairs: pd.DataFrame, order: list[str], groups_of: dict[str, str | None],
                  fixed: bool, hyp: Hypothesis, shown: str) -> None:
    """Each level sits in one group of ``within`` (the declared one, when declared)."""
    within = hyp.within
    for value in order:
        rows = pairs.loc[pairs["level"] == value]
        found: dict[str | None, int] = {}
        for w, n in zip(rows["within"], rows["n"], strict=True):
            key = None if _null(w) else str(w)
            found[key] = found.get(key, 0) + int(n)
        if None in found:
            raise DataError(f"{shown}: level {value!r} has a blank "
                            f"{within!r} (data.events.within) in {_rows(found[None])}; "
                            "each level needs its group")
        if fixed:
            other = sorted(g for g in found if g != groups_of[value])
            if other:
                raise DataError(f"{shown}: level {value!r} is declared under "
                                f"{groups_of[value]!r} (hypotheses.{hyp.id}.levels), but "
                                f"column {within!r} puts it under {other[0]!r} "
                                f"({_rows(found[other[0]])})")
        elif len(found) > 1:
            shown_groups = "; ".join(f"{g!r} ({_rows(n)})" for g, n in sorted(found.items()))
            raise DataError(f"{shown}: level {value!r} sits in more than one {within!r} "
                            f"(data.events.within): {shown_groups}; a level belongs to one "
                            "group")
        elif found:
            groups_of[value] = next(iter(found))

