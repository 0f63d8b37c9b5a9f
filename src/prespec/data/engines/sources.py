"""Where a run's rows come from: DATA on the command line, or ``data.source`` in the plan.

A plan may come from someone else, so ``data.source`` must name data inside the plan's own
folder: a file or glob that resolves (after symbolic links, each matched file too) outside
it is refused at check, lock, amend, run and rehearsal, one line naming the plan's line.
DATA given on the command line is the user's own choice and may be anywhere.
"""

from __future__ import annotations

import glob
import os
from pathlib import Path
from typing import TYPE_CHECKING

from prespec.common.canonical import file_sha256
from prespec.common.departures import Note

from ...errors import BadInput, DataError, PlanError
from ..datasets import Labels, is_dataset
from ..read import open_data_file
from .base import DataSource, expand_glob

if TYPE_CHECKING:
    from prespec.plan.model import Plan

NOTE_DATA_OVER_SOURCE = "data-argument-over-source"


def _is_glob(text: str) -> bool:
    return glob.has_magic(text)


def _file_or_glob(location: Path, shown: str) -> DataSource:
    text = str(location)
    if _is_glob(text) and not location.is_file():
        return DataSource("glob", text, shown, files=tuple(expand_glob(text)))
    return DataSource("file", text, shown)


def _source_error(plan_path: Path, message: str) -> PlanError:
    """A one-line error at the plan file's ``data.source`` line."""
    from ...plan.yamlread import parse_plan_yaml, read_plan_bytes

    line = None
    try:
        doc = parse_plan_yaml(read_plan_bytes(plan_path, str(plan_path)), str(plan_path))
        line = doc.lines.get(("data", "source"))
    except BadInput:  # the plan in force came from the lock; the file no longer loads
        pass
    return PlanError(str(plan_path), line, "data.source", message)


def _outside(folder: Path, target: Path) -> bool:
    return not target.resolve().is_relative_to(folder)


def check_declared_source(plan_path: Path, plan: Plan, files: list[str] | None = None) -> None:
    """``data.source`` (a file or a glob) must resolve inside the plan's folder, after
    symbolic links; so must each file of ``files`` (a glob's matches, when read). A database
    URL is not a path and is not checked here."""
    declared = getattr(plan.data, "source", None)
    if declared is None or "://" in declared:
        return
    folder = plan_path.parent.resolve()
    if Path(declared).is_absolute():
        raise _source_error(plan_path, f"{declared!r} is an absolute path; a plan's data must "
                            "be inside the plan's folder (name data elsewhere on the command "
                            "line: prespec run PLAN DATA)")
    # the part before the first wildcard, resolved (a glob's matches are checked when read)
    parts = Path(declared).parts
    first = next((i for i, p in enumerate(parts) if _is_glob(p)), len(parts))
    if ".." in parts[first:]:
        raise _source_error(plan_path, f"{declared!r} has '..' after a wildcard; name the "
                            "data by a path inside the plan's folder")
    if _outside(folder, plan_path.parent.joinpath(*parts[:first])):
        raise _source_error(plan_path, f"{declared!r} resolves outside the plan's folder; a "
                            "plan's data must be inside its folder (name data elsewhere on the "
                            "command line: prespec run PLAN DATA)")
    for name in files or []:
        if _outside(folder, Path(name)):
            raise _source_error(plan_path, f"{declared!r} matches "
                                f"{os.path.relpath(name, plan_path.parent)}, which resolves "
                                "outside the plan's folder (a symbolic link?); a plan's data "
                                "must be inside its folder")


def resolve_source(plan_path: Path, plan: Plan, data: str | Path | None
                   ) -> tuple[DataSource, list[Note]]:
    """The data source of a run or rehearsal, and a note when DATA overrides ``data.source``.

    DATA (a file or a glob, relative to the working folder) wins over ``data.source`` (a
    file or glob relative to the plan's folder, and inside it, or a database URL with
    ``data.table``). A glob is expanded once here, by Python's rules (:func:`expand_glob`).
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
    check_declared_source(plan_path, plan)
    location = plan_path.parent / declared
    source = _file_or_glob(location, str(location))
    check_declared_source(plan_path, plan, [source.location] if source.kind == "file"
                          else list(source.files or ()))
    return source, notes


def describe_source(plan_path: Path, plan: Plan) -> str:
    """What ``prespec check`` says about the data a run would read without DATA."""
    declared = getattr(plan.data, "source", None)
    if declared is None:
        return "none named in the plan (give it to run: prespec run PLAN DATA)"
    if "://" in declared:
        return f"{declared} (a database, table {plan.data.table})"
    source, _ = resolve_source(plan_path, plan, None)
    if source.kind == "glob":
        count = len(source.files or ())
        found = f"{count} file{'' if count == 1 else 's'} match now"
        return f"{source.shown} (a glob; {found})"
    found = "found" if source.path.is_file() else "not there yet"
    return f"{source.shown} (a file; {found})"


def source_labels(source: DataSource) -> Labels:
    """The column and value labels a single dataset file declares (none for CSV, Parquet, a
    glob or a database), for the data dictionary."""
    if source.kind != "file" or not is_dataset(source.location):
        return Labels()
    return open_data_file(Path(source.location), source.shown).labels()


def check_source(source: DataSource) -> None:
    """A file must exist; a glob must match; a database source is checked when read."""
    if source.kind == "file" and not source.path.is_file():
        raise BadInput(f"{source.shown}: no such data file")
    if source.kind == "glob" and not source.matches():
        raise BadInput(f"{source.shown}: no data file matches")


def data_file_field(plan_path: Path, source: DataSource) -> str:
    """``data_file`` of results.json: a path relative to the plan's folder, or the URL."""
    if source.kind == "url":
        return source.shown
    return os.path.relpath(Path(source.location).resolve(), plan_path.parent.resolve())


def _stamps(names: list[str]) -> list[tuple[str, int, int]]:
    stamps = []
    for name in names:
        try:
            st = os.stat(name)
            stamps.append((name, st.st_size, st.st_mtime_ns))
        except OSError:
            stamps.append((name, -1, -1))
    return stamps


def file_stamps(source: DataSource) -> list[tuple[str, int, int]] | None:
    """(file, size, modification time) of each file of a glob, taken before it is read."""
    return _stamps(source.matches()) if source.kind == "glob" else None


def data_files_field(plan_path: Path, source: DataSource,
                     before: list[tuple[str, int, int]] | None) -> list[dict[str, str]] | None:
    """``data_files`` of results.json for a glob: every file read, in the order read, as a
    path relative to the plan's folder and its ``sha256:``. The files are hashed after the
    reading and must be as they were before it (``before``: :func:`file_stamps`); a file
    changed meanwhile is an error, so the hashes are those of what was read. None for one
    file (``data`` is its SHA-256) and for a database."""
    if before is None:
        return None
    here = plan_path.parent.resolve()
    out = []
    for name, _, _ in before:
        digest = file_sha256(Path(name))
        out.append({"path": os.path.relpath(Path(name).resolve(), here), "sha256": digest})
    if _stamps(expand_glob(source.location)) != before:
        raise DataError(f"{source.shown}: a data file changed, appeared or went while it was "
                        "read; run again when the data are still")
    return out


def resolve_events_source(plan_path: Path, plan: Plan, units: DataSource) -> DataSource | None:
    """The event table of ``data.events`` (None without one), opened as the unit table is:
    a file or glob inside the plan's folder (relative to it), or, with ``data.events.table``,
    a table of the unit table's database."""
    events = getattr(plan.data, "events", None)
    if events is None:
        return None
    if events.table is not None:
        if units.kind != "url":
            raise BadInput(f"{units.shown}: data.events.table names a table of a database, but "
                           "the unit table read is a file; read the units from data.source")
        return DataSource("url", units.location, f"{units.location} (table {events.table})",
                          table=events.table, password_from=units.password_from)
    declared = str(events.source)
    folder = plan_path.parent.resolve()
    parts = Path(declared).parts
    first = next((i for i, p in enumerate(parts) if _is_glob(p)), len(parts))

    def refuse(message: str) -> PlanError:
        from ...plan.yamlread import parse_plan_yaml, read_plan_bytes

        line = None
        try:
            doc = parse_plan_yaml(read_plan_bytes(plan_path, str(plan_path)), str(plan_path))
            line = doc.lines.get(("data", "events", "source"))
        except BadInput:
            pass
        return PlanError(str(plan_path), line, "data.events.source", message)

    if Path(declared).is_absolute() or ".." in parts[first:] or _outside(
            folder, plan_path.parent.joinpath(*parts[:first])):
        raise refuse(f"{declared!r} is not inside the plan's folder; a plan's event table "
                     "must be inside its folder, named relative to it")
    source = _file_or_glob(plan_path.parent / declared, str(plan_path.parent / declared))
    for name in [source.location] if source.kind == "file" else list(source.files or ()):
        if _outside(folder, Path(name)):
            raise refuse(f"{declared!r} resolves outside the plan's folder (a symbolic "
                         "link?); a plan's event table must be inside its folder")
    check_source(source)
    return source
