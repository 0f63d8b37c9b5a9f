"""The computation of one run: data → count tables → statistics → the results document.

``publish.py`` then writes the report folder and the log entry; ``api.run`` calls the two in
that order.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec import audit
from prespec.analysis.families import analyse_families, ordinary_plan, prepare_run, templates
from prespec.analysis.hypotheses import analyse, group_summaries
from prespec.common.caution import CAUTION
from prespec.common.departures import Departure, Note
from prespec.data import Prepared, file_sha256, read_data
from prespec.data.engines.base import DataSource
from prespec.data.prepare import flow_entry, read_columns
from prespec.errors import BadInput

if TYPE_CHECKING:
    from prespec.plan.model import Plan


def default_folder(plan_path: Path, kind: str) -> Path:
    """``reports/<plan stem>/<YYYYMMDDTHHMMSSZ>-run`` beside the plan (not yet reserved);
    the places above it checked by :func:`check_report_place`."""
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    stem = plan_path.stem
    if stem in ("", ".", "..") or "/" in stem or "\\" in stem:
        raise BadInput(f"{plan_path}: the plan's file name gives no report folder name "
                       f"(reports/{stem}/); rename the plan file, or give --out")
    place = plan_path.parent / "reports" / stem
    check_report_place(place)
    return place / f"{stamp}-{kind}"


def check_report_place(place: Path) -> None:
    """``reports/`` and ``reports/<plan stem>/`` must each be a real folder (or not exist yet):
    a symbolic link or any other file there would send the report, and its log entry,
    somewhere else. One line naming the place; nothing is written."""
    for where in (place.parent, place):
        if where.is_symlink():
            raise BadInput(f"{where}: is a symbolic link; report folders are written only "
                           "into real folders inside the study (remove the link, or give --out)")
        if where.exists() and not where.is_dir():
            raise BadInput(f"{where}: is not a folder; report folders are written into "
                           f"{place.parent.name}/{place.name}/ inside the study (move it away, "
                           "or give --out)")


def check_out_folder(out: Path) -> None:
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise BadInput(f"{out}: the report folder must not exist yet or be empty")


def provenance(*, kind: str, plan: Plan, fingerprint: str, version: int | None,
               data_hash: str, data_file: str, actor: str,
               environment: dict[str, str]) -> dict[str, Any]:
    """The fields that open every results document: what ran, on what, by whom, with what."""
    return {
        "prespec": 1,
        "kind": kind,
        "title": plan.title,
        "protocol": plan.protocol,
        "plan": fingerprint,
        "plan_version": version,
        "data": data_hash,
        "data_file": data_file,
        "created": audit.utc_now(),
        "actor": actor,
        "alpha": plan.alpha,
        "multiplicity": (plan.multiplicity if isinstance(plan.multiplicity, str)
                         else plan.multiplicity.model_dump(mode="json")),
        "environment": environment,
    }


def build_results(
    *,
    kind: str,
    plan: Plan,
    fingerprint: str,
    version: int | None,
    data_hash: str,
    data_file: str,
    actor: str,
    environment: dict[str, str],
    prepared: Prepared,
    hypotheses: list[dict[str, Any]],
    deviations: list[Departure],
    notes: list[Note],
) -> dict[str, Any]:
    results: dict[str, Any] = {
        **provenance(kind=kind, plan=plan, fingerprint=fingerprint, version=version,
                     data_hash=data_hash, data_file=data_file, actor=actor,
                     environment=environment),
        "population": {
            "rows_read": prepared.rows_read,
            "excluded_by_filter": prepared.excluded_by_filter,
            "excluded_group": prepared.excluded_group,
            "analysed": prepared.analysed,
        },
        **({"flow": flow_entry(plan, prepared.flow)} if prepared.flow is not None else {}),
        "groups": group_summaries(plan, prepared),
        "hypotheses": hypotheses,
        "deviations": [d.to_json() for d in deviations],
        "notes": [n.to_json() for n in notes],
        "caution": CAUTION,
    }
    if plan.design is not None:
        results["design"] = design_entry(plan, kind, hypotheses)
    return results


def design_entry(plan: Any, kind: str, hypotheses: list[dict[str, Any]], *,
                 both_tails: bool = True) -> dict[str, Any] | None:
    """Planned versus achieved: the design's n per group for each hypothesis and, in a run,
    the analysed n of its table (a rehearsal shows no group's size). ``both_tails=False``:
    as written before the power of a two-sided test counted its far tail."""
    from prespec.design import planned_vs_achieved

    achieved = None
    if kind == "run":
        achieved = {h["id"]: dict(zip(h["table"]["groups"], h["table"]["totals"], strict=True))
                    for h in hypotheses if h.get("parent") is None}
    return planned_vs_achieved(plan, achieved, both_tails=both_tails)


def compute_results(
    *,
    plan_path: Path,
    plan: Any,
    fingerprint: str,
    version: int | None,
    data_path: Path | None,
    actor: str,
    environment: dict[str, str],
    deviations: list[Departure],
    notes: list[Note],
    previous_data: str | None,
    looks: Any = None,
    progress: Callable[[str, int, int], None] | None = None,
    source: DataSource | None = None,
    engine: str = "auto",
    counting: Callable[[float], None] | None = None,
) -> dict[str, Any]:
    """Read the data, reduce it, run the statistics: the results.json document (not written).

    ``source`` (default: the file ``data_path``) is reduced by ``engine`` (``auto``: by the
    source's kind and size); the engine and its query are recorded in the document;
    ``counting(percent)`` reports a long reduction. ``looks`` (a
    :class:`prespec.analysis.looks.LookRun`) makes it the run of an interim look or of the final
    analysis of a plan with looks (``looks.py``). Family templates (``over``) are run per level
    (:mod:`prespec.analysis.families`) and listed under ``families``; ``progress(what, done, total)`` is
    called as a family's levels are prepared."""
    from prespec.data.engines.columns import check_file
    from prespec.data.engines.pipeline import count_source
    from prespec.data.engines.sources import (
        data_file_field,
        data_files_field,
        file_stamps,
        resolve_events_source,
    )
    from prespec.data.events import event_templates

    if source is None:
        source = DataSource("file", str(data_path), str(data_path))
    before = file_stamps(source)
    family_data: list[Any] = []
    events = resolve_events_source(plan_path, plan, source) if event_templates(plan) else None
    event_table: dict[str, Any] | None = None
    event_result: Any = None
    if templates(plan) and events is None:
        path = family_file(source, engine)
        check_file(path, source.shown)  # a repeated column name, as every engine refuses it
        frame = read_data(path, read_columns(plan), source.shown)
        data_hash = file_sha256(path)
        prepared, family_data = prepare_run(frame, plan, path, progress)
        used_engine, query = "pandas", None
    else:
        counted = count_source(plan, source, engine=engine, progress=counting, events=events)
        data_hash, prepared = counted.data_hash, counted.prepared
        used_engine, query = counted.engine, counted.query
        if counted.events is not None and events is not None:
            event_result = counted.events
            family_data = list(event_result.families)
            event_table = event_table_field(plan_path, events, counted)
    files = data_files_field(plan_path, source, before)
    deviations = list(deviations)
    if previous_data is not None and previous_data != data_hash:
        deviations.append(
            Departure(
                "data-changed-since-last-run",
                "the data file's hash differs from the one the previous run recorded",
                previous_data,
                data_hash,
            )
        )
    found = list(prepared.deviations)
    notes = [*notes, *prepared.notes]
    if looks is not None and not looks.final:  # an interim look is short of planned_n by design
        notes += [Note("interim-below-planned-n", d.detail) for d in found
                  if d.code == "sample-size-shortfall"]
        found = [d for d in found if d.code != "sample-size-shortfall"]
    deviations.extend(found)
    for fam in family_data:
        deviations.extend(fam.deviations)
        notes.extend(fam.notes)
    if event_result is not None:
        deviations.extend(event_result.deviations)
        notes.extend(event_result.notes)
    hypotheses, stat_notes = analyse(ordinary_plan(plan), prepared)
    notes.extend(stat_notes)
    if looks is not None:
        from prespec.analysis.looks import apply_looks

        deviations.extend(apply_looks(plan, hypotheses, looks, notes))
    families = analyse_families(plan, family_data, notes)
    results = build_results(
        kind="run",
        plan=ordinary_plan(plan),
        fingerprint=fingerprint,
        version=version,
        data_hash=data_hash,
        data_file=data_file_field(plan_path, source),
        actor=actor,
        environment=environment,
        prepared=prepared,
        hypotheses=hypotheses,
        deviations=deviations,
        notes=notes,
    )
    if family_data:
        results["families"] = families
    if event_table is not None:
        results["event_table"] = event_table
    from prespec.data.dictionary import plan_labels
    from prespec.data.engines.sources import source_labels

    labelled = plan_labels(plan, source_labels(source))  # a dataset file's labels, if any
    if labelled is not None:
        results["data_labels"] = labelled
    return with_engine(results, used_engine, query, files)


def event_table_field(plan_path: Path, events: DataSource, counted: Any) -> dict[str, Any]:
    """``event_table`` of results.json (only with ``data.events``): the event table read, its
    fingerprint (a file's SHA-256), the query that joined it (None in-process), and what it
    held: rows, rows with an id not in the unit table, rows with a blank level."""
    from prespec.data.engines.sources import data_file_field

    summary = counted.events.summary
    return {"data_file": data_file_field(plan_path, events), "data": counted.events_hash,
            "query": counted.events_query,
            **{k: summary[k] for k in ("rows", "unmatched_rows", "unmatched_ids",
                                       "blank_level_rows", "outside_rows")}}


def family_file(source: DataSource, engine: str) -> Path:
    """The single data file a plan with families is read from (the pandas engine)."""
    if source.kind != "file" or engine not in ("auto", "pandas"):
        raise BadInput(f"{source.shown}: a plan with families (over:) is counted by the pandas "
                       "engine from one data file in this version; give one file and "
                       "--engine pandas (or auto)")
    return Path(source.location)


def with_engine(results: dict[str, Any], engine: str, query: str | None,
                files: list[dict[str, str]] | None = None) -> dict[str, Any]:
    """``engine`` beside the provenance fields, the versions it counted with
    (``engine_library``), and the ``query`` it sent (None for pandas); for a glob, first
    ``data_files``: every file read with its SHA-256 (``sources.data_files_field``)."""
    from prespec.data.engines.choose import engine_library

    out: dict[str, Any] = {}
    for key, value in results.items():
        out[key] = value
        if key == "data_file":
            if files is not None:
                out["data_files"] = files
            out["engine"] = engine
            out["engine_library"] = engine_library(engine)
            out["query"] = query
    return out


