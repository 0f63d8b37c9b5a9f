"""A plan's data, through an engine, to count tables: what a run and a rehearsal call."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import pandas as pd

from ..events import (
    EventData,
    declared_levels,
    event_data,
    event_templates,
    events_request,
    tally_frames,
)
from ..prepare import Prepared, prepare
from .aggregate import AggregatingEngine
from .base import DataSource, Filter
from .choose import auto_engine, open_engine
from .compiler import EventJoin
from .request import count_request


@dataclass(frozen=True)
class Counted:
    """The count tables of a run and how they were made; with an event table, its families'
    counts (``events``), its fingerprint and the query that joined it."""

    prepared: Prepared
    data_hash: str
    engine: str
    query: str | None
    events: EventData | None = None
    events_hash: str | None = None
    events_query: str | None = None


def unit_plan(plan: Any) -> Any:
    """The plan without its families over the event table: what the unit table is counted
    for (the population, the groups, the ordinary hypotheses)."""
    ids = {h.id for h in event_templates(plan)}
    return plan.model_copy(update={"hypotheses": [h for h in plan.hypotheses
                                                  if h.id not in ids]})


def count_source(plan: Any, source: DataSource, *, engine: str = "auto",
                 progress: Callable[[float], None] | None = None,
                 events: DataSource | None = None) -> Counted:
    """Reduce ``source`` to the plan's count tables with ``engine`` (or the ``auto`` choice);
    with ``events`` (the event table of ``data.events``), also the tally of the families
    over it, joined by the same engine where the data are."""
    units = unit_plan(plan) if events is not None else plan
    if engine == "auto" and events is not None and source.kind != "url":
        # a large event table beside a small unit table is joined out of core too
        engine = "duckdb" if "duckdb" in (auto_engine(source), auto_engine(events)) else "auto"
    request = count_request(units, source.shown)
    with open_engine(engine, source, progress) as eng:
        reduction = eng.reduce(request)
        prepared = prepare(reduction.frame, units, source.shown, locate=reduction.locate)
        if events is None:
            return Counted(prepared, reduction.data_hash, reduction.engine, reduction.query)
        tally, events_hash, query = _event_tally(plan, eng, request, events)
    data = event_data(tally, plan, prepared, events.shown)
    return Counted(prepared, reduction.data_hash, reduction.engine, reduction.query, data,
                   events_hash, query)


def event_join(plan: Any) -> EventJoin:
    spec, ev = plan.data, plan.data.events
    levels = declared_levels(plan)
    return EventJoin(spec.id, spec.group, tuple(spec.groups),
                     tuple(Filter(c.column, *c.op()) for c in spec.include), ev.id, ev.level,
                     ev.within, None if levels is None else tuple(levels))


def _event_tally(plan: Any, eng: Any, request: Any, events: DataSource
                 ) -> tuple[pd.DataFrame, str, str | None]:
    """The tally, the event table's fingerprint and the query (None in-process)."""
    from prespec.common.canonical import file_sha256

    from .choose import open_engine as open_events

    ev_request = events_request(plan, events.shown)
    with open_events(eng.name, events) as other:
        if isinstance(eng, AggregatingEngine):
            tally, query = eng.event_tally(event_join(plan), request, other, ev_request)
            kinds = other.column_kinds()
            digest = other.file_hash() or other.row_hash(ev_request, other.relation(ev_request),
                                                         kinds)
            return tally, digest, query.text
        frame = other.rows(ev_request)
        units = eng.rows(request)
        return tally_frames(units, frame, plan), file_sha256(events.path), None


@dataclass(frozen=True)
class BlindedRows:
    """A rehearsal's rows: every column the plan reads except the group column."""

    frame: pd.DataFrame
    data_hash: str
    engine: str
    query: str | None


def blinded_rows(plan: Any, source: DataSource, *, engine: str = "auto") -> BlindedRows:
    """The rows a rehearsal reads; the request (and any query) never names the group column.

    Every engine reads only the columns the request names, never the group column (the
    pandas engine parses those columns alone, ``read.py``)."""
    request = count_request(plan, source.shown, blinded=True)
    with open_engine(engine, source) as eng:
        frame = eng.rows(request)
        if isinstance(eng, AggregatingEngine):
            query: str | None = eng.rows_query(request).text
            kinds = eng.column_kinds()
            data_hash = eng.file_hash() or eng.row_hash(request, eng.relation(request), kinds)
        else:
            query = None
            from prespec.common.canonical import file_sha256

            data_hash = file_sha256(source.path)
        return BlindedRows(frame, data_hash, eng.name, query)


@dataclass(frozen=True)
class EventRows:
    """A rehearsal's event table: the raw cells of its id, level and within columns."""

    frame: pd.DataFrame
    data_hash: str
    shown: str


def event_rows(plan: Any, events: DataSource, *, engine: str = "auto") -> EventRows:
    """The rows of the event table that a rehearsal joins in-process (it holds no group)."""
    request = events_request(plan, events.shown)
    with open_engine(engine, events) as eng:
        frame = eng.rows(request)
        if isinstance(eng, AggregatingEngine):
            data_hash = eng.file_hash() or eng.row_hash(request, eng.relation(request),
                                                        eng.column_kinds())
        else:
            from prespec.common.canonical import file_sha256

            data_hash = file_sha256(events.path)
    return EventRows(frame, data_hash, events.shown)
