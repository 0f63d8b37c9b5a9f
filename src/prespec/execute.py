"""The computation of one run: data → count tables → statistics → the results document.

``publish.py`` then writes the report folder and the log entry; ``api.run`` calls the two in
that order.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from . import audit
from .analysis import analyse, group_summaries
from .caution import CAUTION
from .data import Prepared
from .data.engines.base import DataSource
from .departures import Departure, Note
from .errors import BadInput


def default_folder(plan_path: Path, kind: str) -> Path:
    """``reports/<plan stem>/<YYYYMMDDTHHMMSSZ>-run`` beside the plan (not yet reserved)."""
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    return plan_path.parent / "reports" / plan_path.stem / f"{stamp}-{kind}"


def check_out_folder(out: Path) -> None:
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise BadInput(f"{out}: the report folder must not exist yet or be empty")


def provenance(*, kind: str, plan: Any, fingerprint: str, version: int | None,
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
    plan: Any,
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
        "groups": group_summaries(plan, prepared),
        "hypotheses": hypotheses,
        "deviations": [d.to_json() for d in deviations],
        "notes": [n.to_json() for n in notes],
        "caution": CAUTION,
    }
    if plan.design is not None:
        results["design"] = design_entry(plan, kind, hypotheses)
    return results


def design_entry(plan: Any, kind: str, hypotheses: list[dict[str, Any]]) -> dict[str, Any] | None:
    """Planned versus achieved: the design's n per group for each hypothesis and, in a run,
    the analysed n of its table (a rehearsal shows no group's size)."""
    from .design import planned_vs_achieved

    achieved = None
    if kind == "run":
        achieved = {h["id"]: dict(zip(h["table"]["groups"], h["table"]["totals"], strict=True))
                    for h in hypotheses if h.get("parent") is None}
    return planned_vs_achieved(plan, achieved)


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
    source: DataSource | None = None,
    engine: str = "auto",
    progress: Callable[[float], None] | None = None,
) -> dict[str, Any]:
    """Read the data, reduce it, run the statistics: the results.json document (not written).

    ``source`` (default: the file ``data_path``) is reduced by ``engine`` (``auto``: by the
    source's kind and size); the engine and its query are recorded in the document.
    """
    from .data.engines.pipeline import count_source
    from .data.engines.sources import data_file_field

    if source is None:
        source = DataSource("file", str(data_path), str(data_path))
    counted = count_source(plan, source, engine=engine, progress=progress)
    data_hash, prepared = counted.data_hash, counted.prepared
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
    deviations.extend(prepared.deviations)
    notes = [*notes, *prepared.notes]
    hypotheses, stat_notes = analyse(plan, prepared)
    notes.extend(stat_notes)
    results = build_results(
        kind="run",
        plan=plan,
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
    return with_engine(results, counted.engine, counted.query)


def with_engine(results: dict[str, Any], engine: str, query: str | None) -> dict[str, Any]:
    """``engine`` beside the provenance fields, and the ``query`` it sent (None for pandas)."""
    out: dict[str, Any] = {}
    for key, value in results.items():
        out[key] = value
        if key == "data_file":
            out["engine"] = engine
            out["query"] = query
    return out


