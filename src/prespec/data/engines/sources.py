"""Where a run's rows come from: DATA on the command line, or ``data.source`` in the plan."""

from __future__ import annotations

import glob
import os
from pathlib import Path
from typing import Any

from ...departures import Note
from ...errors import BadInput
from .base import DataSource

NOTE_DATA_OVER_SOURCE = "data-argument-over-source"


def _is_glob(text: str) -> bool:
    return glob.has_magic(text)


def _file_or_glob(location: Path, shown: str) -> DataSource:
    text = str(location)
    if _is_glob(text) and not location.is_file():
        return DataSource("glob", text, shown)
    return DataSource("file", text, shown)


def resolve_source(plan_path: Path, plan: Any, data: str | Path | None
                   ) -> tuple[DataSource, list[Note]]:
    """The data source of a run or rehearsal, and a note when DATA overrides ``data.source``.

    DATA (a file or a glob, relative to the working folder) wins over ``data.source`` (a
    file or glob relative to the plan's folder, or a database URL with ``data.table``).
    """
    spec = plan.data
    declared = getattr(spec, "source", None)
    notes: list[Note] = []
    if data is not None:
        if declared is not None:
            notes.append(Note(NOTE_DATA_OVER_SOURCE, f"the data given on the command line "
                              f"({data}) were read, not data.source ({declared})"))
        return _file_or_glob(Path(data), str(data)), notes
    if declared is None:
        raise BadInput(f"{plan_path}: give the data (prespec run PLAN DATA), or name them in "
                       "the plan's data.source")
    if "://" in declared:
        return DataSource("url", declared, f"{declared} (table {spec.table})", table=spec.table,
                          password_from=getattr(spec, "password_from", None)), notes
    location = plan_path.parent / declared
    return _file_or_glob(location, str(location)), notes


def check_source(source: DataSource) -> None:
    """A file must exist; a glob must match; a database source is checked when read."""
    if source.kind == "file" and not source.path.is_file():
        raise BadInput(f"{source.shown}: no such data file")
    if source.kind == "glob" and not glob.glob(source.location):
        raise BadInput(f"{source.shown}: no data file matches")


def data_file_field(plan_path: Path, source: DataSource) -> str:
    """``data_file`` of results.json: a path relative to the plan's folder, or the URL."""
    if source.kind == "url":
        return source.shown
    return os.path.relpath(Path(source.location).resolve(), plan_path.parent.resolve())
