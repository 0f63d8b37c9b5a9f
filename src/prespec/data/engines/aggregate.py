"""The reduction as aggregate SQL queries: what every SQL-speaking engine shares.

A subclass says how to reach its rows (``relation``), what columns they have (``column_kinds``)
and how to run a query (``fetch``, ``stream_lines``); this class checks the columns, sends the
one statement of ``compiler.compile_reduction`` (counts and id checks in one pass), names
blank or duplicate ids, computes the data fingerprint, and looks up the ids an error names.
"""

from __future__ import annotations

import abc
import glob as globbing
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from prespec.common.canonical import file_sha256

from ...errors import DataError
from ..read import missing_column
from . import columns
from .base import FAILED_COLUMN, KEEP_COLUMN, WEIGHT_COLUMN, CountRequest, Engine, Reduction
from .compiler import (
    BLANK_COLUMN,
    SET_COLUMN,
    EventJoin,
    Query,
    compile_bad_bytes,
    compile_blank_ids,
    compile_counts,
    compile_duplicate_ids,
    compile_event_tally,
    compile_locate,
    compile_reduction,
    compile_row_lines,
    compile_rows,
    quote_identifier,
)
from .fingerprint import LineHasher

_SHOW = 5


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


class AggregatingEngine(Engine):
    """An engine whose reduction is a handful of SQL queries in one ``dialect``."""

    dialect: ClassVar[str]

    @abc.abstractmethod
    def relation(self, request: CountRequest) -> str:
        """The FROM item: a quoted table name, or a table function over the files."""

    @abc.abstractmethod
    def column_kinds(self) -> dict[str, str]:
        """Every column of the source, in order, with its kind (``compiler.COLUMN_KINDS``)."""

    @abc.abstractmethod
    def fetch(self, query: Query) -> pd.DataFrame:
        """Run a query; its result as a frame (NULL as None)."""

    @abc.abstractmethod
    def stream_lines(self, query: Query) -> Iterator[list[str]]:
        """Run a query with one text column; its values in order, in batches."""

    def file_hash(self) -> str | None:
        """``sha256:`` of the file when the source is one file (else None: hash the rows)."""
        if self.source.kind == "file":
            return file_sha256(self.source.path)
        return None

    # -- the shared work ---------------------------------------------------------------------
    def check_header(self) -> None:
        """``columns.check_names`` on the names as the source holds them, before any reader
        renames them: each file's header for files (a table's engine overrides this)."""
        if self.source.kind == "file":
            columns.check_file(self.source.path, self.source.shown)
        elif self.source.kind == "glob":
            columns.check_files(sorted(globbing.glob(self.source.location)))

    def check_columns(self, request: CountRequest) -> dict[str, str]:
        self.check_header()
        kinds = self.column_kinds()
        present = list(kinds)
        for column, role in request.needed:
            if column not in kinds:
                raise missing_column(request.source, column, role, present)
        for column in request.read:
            quote_identifier(column, self.dialect)
        columns.check_nested(kinds, request)
        binary = columns.binary_columns(kinds, request)
        if binary:
            found = self.fetch(compile_bad_bytes(binary, self.relation(request), self.dialect,
                                                 kinds))
            columns.refuse_bad_bytes(request, {c: int(found[c].iloc[0] or 0) for c in binary})
        return kinds

    def check_ids(self, request: CountRequest, relation: str, kinds: dict[str, str]) -> None:
        """Blank or duplicate ids are bad input, named by count and by id (as prepare does).

        (``reduce`` finds both in its one pass and calls ``duplicate_ids`` only when two rows
        share an id hash; this method is the plain two-query form of the same check.)"""
        self.check_blank_ids(request, relation, kinds)
        self.duplicate_ids(request, relation, kinds)

    def check_blank_ids(self, request: CountRequest, relation: str,
                        kinds: dict[str, str]) -> None:
        """Counts the blank ids exactly (``compile_blank_ids``); an error if there are any."""
        blank = self.fetch(compile_blank_ids(request, relation, self.dialect, kinds))
        self.blank_ids(request, int(blank.iloc[0, 0]) if len(blank.index) else 0)

    @staticmethod
    def blank_ids(request: CountRequest, n_blank: int) -> None:
        if n_blank:
            raise DataError(f"{request.source}: blank id in column {request.id!r} "
                            f"({_rows(n_blank)})")

    def duplicate_ids(self, request: CountRequest, relation: str,
                      kinds: dict[str, str]) -> None:
        dups = self.fetch(compile_duplicate_ids(request, relation, self.dialect, kinds, _SHOW))
        if len(dups.index):
            shown = []
            for _, row in dups.iterrows():
                within = "".join(f", {c} {row[c]!r}" for c in request.unique_within)
                shown.append(f"{row['id']!r} ({_rows(int(row['n']))}{within})")
            more = int(dups["total"].iloc[0]) - len(shown)
            raise DataError(
                f"{request.source}: duplicate ids in column {request.id!r}: {'; '.join(shown)}"
                + (f"; and {more} more" if more > 0 else "")
            )

    def counts(self, request: CountRequest, relation: str, kinds: dict[str, str]
               ) -> tuple[pd.DataFrame, Query]:
        """The weighted frame by the plain aggregate (``compile_counts``; no id checks)."""
        query = compile_counts(request, relation, self.dialect, kinds)
        return self._weighted(self.fetch(query), request), query

    def reduction(self, request: CountRequest, relation: str, kinds: dict[str, str]
                  ) -> tuple[pd.DataFrame, Query]:
        """The weighted frame and the id checks in one pass (``compile_reduction``)."""
        query = compile_reduction(request, relation, self.dialect, kinds)
        result = self.fetch(query)
        is_counts = result[SET_COLUMN].astype(int) == 1
        counts = result.loc[is_counts]
        self.blank_ids(request, int(pd.to_numeric(counts[BLANK_COLUMN]).fillna(0).sum()))
        if not is_counts.all():  # an id hash on several rows: name the duplicates, if any
            self.duplicate_ids(request, relation, kinds)
        frame = counts[[KEEP_COLUMN, FAILED_COLUMN, *request.grouped, WEIGHT_COLUMN]]
        return self._weighted(frame.copy(), request), query

    @staticmethod
    def _weighted(frame: pd.DataFrame, request: CountRequest) -> pd.DataFrame:
        frame[KEEP_COLUMN] = frame[KEEP_COLUMN].astype(bool)
        frame[FAILED_COLUMN] = frame[FAILED_COLUMN].astype(np.int64)
        frame[WEIGHT_COLUMN] = frame[WEIGHT_COLUMN].astype(np.int64)
        for column in request.grouped:  # NULL as None, never NaN (is_blank reads both alike)
            frame[column] = frame[column].astype(object).where(frame[column].notna(), None)
        return frame.reset_index(drop=True)

    def row_hash(self, request: CountRequest, relation: str, kinds: dict[str, str]) -> str:
        hasher = LineHasher()
        for batch in self.stream_lines(compile_row_lines(request, relation, self.dialect,
                                                         kinds)):
            hasher.update(batch)
        return hasher.tag()

    def rows(self, request: CountRequest) -> pd.DataFrame:
        """The raw cells of every column the request reads, every row (a rehearsal's
        dictionary needs them); the query names no other column."""
        self.check_columns(request)
        frame = self.fetch(self.rows_query(request))
        self._not_empty(len(frame.index), request)
        return frame

    def rows_query(self, request: CountRequest) -> Query:
        return compile_rows(request, self.relation(request), self.dialect,
                            self.column_kinds())

    def _not_empty(self, rows: int, request: CountRequest) -> None:
        if rows == 0:
            what = "table has no rows" if self.source.kind == "url" else (
                "data file has a header but no rows")
            raise DataError(f"{request.source}: the {what}")

    def event_relation(self, other: AggregatingEngine) -> tuple[str, dict[str, Any]]:
        """The FROM item of ``other``'s source (the event table, opened by an engine of this
        kind) as this engine's queries reach it, and the parameters it needs."""
        return other.relation(None), {}

    def event_tally(self, join: EventJoin, request: CountRequest, other: AggregatingEngine,
                    events: CountRequest) -> tuple[pd.DataFrame, Query]:
        """The tally of the families over the event table (``prespec.data.events``): the
        join done where the data are, in one query; ``other`` reads the event table."""
        kinds = self.check_columns(request)
        event_kinds = other.check_columns(events)
        relation, extra = self.event_relation(other)
        query = compile_event_tally(join, self.relation(request), relation, self.dialect,
                                    kinds, event_kinds)
        query = Query(query.text, {**query.params, **extra}, query.dialect)
        return self.fetch(query), query

    def reduce(self, request: CountRequest) -> Reduction:
        kinds = self.check_columns(request)
        relation = self.relation(request)
        # a single file's SHA-256 is read beside the reduction (hashlib releases the GIL)
        with ThreadPoolExecutor(max_workers=1) as pool:
            file_hash = pool.submit(self.file_hash)
            frame, query = self.reduction(request, relation, kinds)
            self._not_empty(int(frame[WEIGHT_COLUMN].sum()), request)
            data_hash = file_hash.result() or self.row_hash(request, relation, kinds)

        def locate(mask: Any) -> list[str]:
            chosen = frame.loc[np.asarray(mask, dtype=bool), list(request.grouped)]
            rows = [dict(r) for r in chosen.to_dict(orient="records")]
            found = self.fetch(compile_locate(request, relation, self.dialect, kinds, rows,
                                              _SHOW))
            return [str(v) for v in found["id"]]

        return Reduction(frame=frame, engine=self.name, data_hash=data_hash, query=query.text,
                         locate=locate)
