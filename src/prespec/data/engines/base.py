"""The engine interface: one job, the reduction of raw rows to what ``prepare`` counts.

An engine reads a data source and answers a ``CountRequest`` with a ``Reduction``: either the
full frame of raw cells (the pandas engine) or a small *weighted* frame, one row per distinct
combination of the needed (mapped) values with a column ``WEIGHT_COLUMN`` saying how many
source rows it stands for, and a column ``KEEP_COLUMN`` saying whether those rows pass the
population filter (the SQL engines). ``prepare`` turns either into the same count tables, so
the matching rule of ``matching.py`` is applied in one place.

Columns of a weighted frame: ``KEEP_COLUMN`` (bool), ``FAILED_COLUMN`` (int: the first
population condition the rows fail, 1-based in the plan's order, 0 when kept), then every
column of the request under its own name (the group and the outcome columns of
``CountRequest.mapped`` hold a canonical plan value, None for a blank cell, or the raw trimmed
text where nothing matched; the columns of ``CountRequest.raw`` hold the cell itself, None for
a blank), then ``WEIGHT_COLUMN`` (int). Excluded rows have None in every column but these and
the group column (``CountRequest.group``), which the participant flow counts them by.
"""

from __future__ import annotations

import abc
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, ClassVar, Self

import pandas as pd

from ..prepare import FAILED_COLUMN, KEEP_COLUMN, WEIGHT_COLUMN

__all__ = [
    "ENGINE_NAMES",
    "FAILED_COLUMN",
    "KEEP_COLUMN",
    "WEIGHT_COLUMN",
    "ColumnMap",
    "CountRequest",
    "DataSource",
    "Engine",
    "Filter",
    "Reduction",
]

ENGINE_NAMES: tuple[str, ...] = ("auto", "pandas", "duckdb", "sql", "spark")


def expand_glob(pattern: str) -> list[str]:
    """The regular files ``pattern`` matches under Python's rules (``glob.glob`` with
    ``recursive=True``): ``*``, ``?`` and ``[...]`` never match a name that begins with ``.``
    (a hidden file or folder is matched only by a pattern part that itself begins with
    ``.``), ``**`` matches any depth of folders; folders and other non-files are left out;
    sorted. Engines that glob by their own rules (DuckDB reads hidden files) are given this
    list instead of the pattern."""
    import glob
    import os

    return sorted(p for p in glob.glob(pattern, recursive=True) if os.path.isfile(p))


@dataclass(frozen=True)
class DataSource:
    """Where the rows are: one file, a glob of files, or a database table.

    ``location``: an absolute file path or glob, or an SQLAlchemy URL (no password in it);
    ``table``: the table (or ``schema.table``) of a database; ``password_from``: the name of
    the environment variable holding the database password; ``shown``: how messages name it.
    """

    kind: str  # "file" | "glob" | "url"
    location: str
    shown: str
    table: str | None = None
    password_from: str | None = None
    files: tuple[str, ...] | None = None  # a glob's matches, expanded once (see ``matches``)

    @property
    def path(self) -> Path:
        return Path(self.location)

    def matches(self) -> list[str]:
        """The files a glob reads: ``files`` when expanded already, else :func:`expand_glob`
        of ``location``; every engine reads exactly these, never the pattern itself."""
        return list(self.files) if self.files is not None else expand_glob(self.location)

    @property
    def is_parquet(self) -> bool:
        return self.location.lower().endswith((".parquet", ".pq"))


@dataclass(frozen=True)
class Filter:
    """One population condition: the column, the operator and its operand (``Condition.op``)."""

    column: str
    op: str  # in | not_in | equals | between | is_missing
    arg: Any


@dataclass(frozen=True)
class ColumnMap:
    """A column mapped to canonical plan values: the first label whose values the cell matches.

    ``labels``: ``(canonical text, plan values)`` in the order they are tried; for the group
    column each group maps to itself, for an outcome column the first ``event`` value stands
    for all event values and the first ``no_event`` value for all no-event values.
    """

    column: str
    labels: tuple[tuple[str, tuple[Any, ...]], ...]


@dataclass(frozen=True)
class CountRequest:
    """What a reduction must read and keep. A blinded rehearsal's request never names the
    group column (it is then in neither ``mapped`` nor ``raw``)."""

    source: str  # how messages name the data
    id: str
    include: tuple[Filter, ...]
    mapped: tuple[ColumnMap, ...]
    raw: tuple[str, ...]
    needed: tuple[tuple[str, str], ...]  # (column, role) for the missing-column message
    unique_within: tuple[str, ...] = ()  # ids need be unique only within these columns' values
    group: str | None = None  # the group column, kept for excluded rows too (None: blinded)

    @property
    def grouped(self) -> tuple[str, ...]:
        """The columns of the weighted frame, in order (without keep and weight)."""
        return tuple(m.column for m in self.mapped) + self.raw

    @property
    def read(self) -> tuple[str, ...]:
        """Every column the analysis reads: the id first, then the others once each."""
        seen: dict[str, None] = {self.id: None}
        for f in self.include:
            seen.setdefault(f.column, None)
        for column in (*self.grouped, *self.unique_within):
            seen.setdefault(column, None)
        return tuple(seen)


@dataclass(frozen=True)
class Reduction:
    """An engine's answer: the frame for ``prepare`` and how it was obtained.

    ``data_hash``: ``sha256:`` of the file for a single file, else of the rows read
    (``fingerprint.py``); ``query``: the SQL text with its placeholders (None for pandas);
    ``locate``: given the rows of a weighted frame (a boolean mask over it), up to five ids of
    source rows they stand for, sorted (errors name ids where they cannot name file lines).
    """

    frame: pd.DataFrame
    engine: str
    data_hash: str
    query: str | None = None
    locate: Callable[[Any], list[str]] | None = field(default=None, compare=False)


class Engine(abc.ABC):
    """Reads one data source; ``reduce`` is its one job."""

    name: ClassVar[str]

    def __init__(self, source: DataSource) -> None:
        self.source = source

    @abc.abstractmethod
    def reduce(self, request: CountRequest) -> Reduction:
        """The frame ``prepare`` counts, after checking that the needed columns exist and
        (for the aggregating engines) that ids are present and unique."""

    @abc.abstractmethod
    def rows(self, request: CountRequest) -> pd.DataFrame:
        """The raw cells of the columns ``request.read``, every row, nothing else (a
        rehearsal's data dictionary counts them; the group column is never among them)."""

    def close(self) -> None:
        """Release connections or sessions."""

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
