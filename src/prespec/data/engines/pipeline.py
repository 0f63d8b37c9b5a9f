"""A plan's data, through an engine, to count tables: what a run and a rehearsal call."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import pandas as pd

from ..prepare import Prepared, prepare
from .aggregate import AggregatingEngine
from .base import DataSource
from .choose import open_engine
from .request import count_request


@dataclass(frozen=True)
class Counted:
    """The count tables of a run and how they were made."""

    prepared: Prepared
    data_hash: str
    engine: str
    query: str | None


def count_source(plan: Any, source: DataSource, *, engine: str = "auto",
                 progress: Callable[[float], None] | None = None) -> Counted:
    """Reduce ``source`` to the plan's count tables with ``engine`` (or the ``auto`` choice)."""
    request = count_request(plan, source.shown)
    with open_engine(engine, source, progress) as eng:
        reduction = eng.reduce(request)
        prepared = prepare(reduction.frame, plan, source.shown, locate=reduction.locate)
    return Counted(prepared, reduction.data_hash, reduction.engine, reduction.query)


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
