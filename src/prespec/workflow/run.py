"""``run``: the locked plan on the data, into a report folder and a ``run`` (or ``look``) entry.

The plan in force is the lock's latest version (a plan file that differs in meaning runs only
with ``--accept-deviation``, recorded); ``execute.compute_results`` computes the results
document and ``publish`` writes the report folder and its entry (docs/files.md).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec import audit
from prespec.analysis.results import finish
from prespec.common.departures import Departure, Note
from prespec.common.environment import environment
from prespec.errors import BadInput, IntegrityStop
from prespec.plan import LoadedPlan, fingerprint, load_plan, plan_from_resolved
from prespec.workflow.base import (
    check_out_path,
    environment_departures,
    finish_stopped_writes,
    plain_errors,
    resolve_actor,
    still_as_read,
    with_lock_history,
)
from prespec.workflow.execute import compute_results, default_folder
from prespec.workflow.overrides import apply_overrides, override_departures
from prespec.workflow.publish import RunOutcome, kernel_ahead, publish

if TYPE_CHECKING:
    from prespec.plan.model import Plan


def _plan_in_force(loaded: LoadedPlan, accept: str | None) -> tuple[Any, str, int | None,
                                                                     list[Departure], list[Note],
                                                                     dict[str, Any] | None]:
    doc = audit.read_lock(audit.lock_path(loaded.path))
    path = loaded.path
    if doc is None:
        if accept is None:
            raise IntegrityStop(
                f"{path}: not locked; lock it first (prespec lock {path}), or give "
                "--accept-deviation \"REASON\" to run it unlocked, recorded as run-without-lock"
            )
        dev = Departure("run-without-lock", "the plan as written was run without a lock",
                        "a locked plan", loaded.fingerprint, accepted=accept)
        return loaded.model, loaded.fingerprint, None, [dev], [], None
    last = audit.latest(doc)
    if fingerprint(last["plan"]) != last.get("fingerprint"):
        raise IntegrityStop(f"{audit.lock_path(path).name}: version {last.get('version')} does "
                            "not match its own fingerprint (the lock was edited)")
    model = plan_from_resolved(last["plan"], source=audit.lock_path(path).name)
    deviations: list[Departure] = []
    notes: list[Note] = []
    if loaded.fingerprint != last["fingerprint"]:
        if accept is None:
            raise IntegrityStop(
                f"{path}: the plan file no longer matches its lock (version {last['version']}); "
                f"lock the change with prespec amend {path} --reason \"...\", or give "
                "--accept-deviation \"REASON\" to run the locked plan, recorded as "
                "plan-modified-after-lock"
            )
        deviations.append(Departure(
            "plan-modified-after-lock",
            "the plan file differs in meaning from its lock; the locked plan was run",
            last["fingerprint"], loaded.fingerprint, accepted=accept))
    elif loaded.file_sha256 != last.get("plan_file_sha256"):
        notes.append(Note("plan-file-reformatted",
                          "the plan file's bytes differ from the locked file's, its meaning "
                          "does not (layout or comments)"))
    return model, last["fingerprint"], int(last["version"]), deviations, notes, last


@plain_errors
def run(plan: str | Path, data: str | Path | None = None, *, out: str | Path | None = None,
        actor: str | None = None, accept_deviation: str | None = None,
        overrides: Mapping[str, Any] | None = None, look: int | None = None,
        engine: str = "auto", progress: Callable[[str, int, int], None] | None = None,
        counting: Callable[[float], None] | None = None,
        timestamp: str | None = None, pdf: bool = False) -> RunOutcome:
    """Run the locked plan on ``data``; write the report folder and the ``run`` entry.

    ``progress(what, done, total)`` is called as the levels of a long family are prepared.

    ``overrides`` (``{"alpha": 0.025, "hypotheses.H1.test": "fisher-exact"}``) change the
    locked analysis for this run only; each change is an ``override`` departure and needs
    ``accept_deviation``. The fingerprint recorded stays the locked one.
    ``look``: run interim look K of a plan with looks (a ``look`` entry); a plain run of such a
    plan is its final analysis (see ``looks.py``). ``data``: a file or a glob; without it, the
    plan's ``data.source``. ``engine``: ``auto`` (by the source), ``pandas``, ``duckdb``,
    ``sql`` or ``spark``; ``counting(percent)`` reports a long reduction. ``timestamp``: the
    URL of an RFC 3161 time-stamping authority (default ``$PRESPEC_TSA_URL``) that stamps
    the report's results.json before anything is written. ``pdf``: the report
    folder also holds ``report.pdf`` (printed by headless Chromium; none found is bad input,
    said before anything is read or written).
    """
    from prespec.audit.timestamp import authority_url
    from prespec.data.engines.sources import check_source, resolve_source

    if accept_deviation is not None and not accept_deviation.strip():
        raise BadInput("--accept-deviation needs a reason")
    stamp_url = authority_url(timestamp)
    if pdf:
        from prespec.report.paper import require_chromium

        require_chromium()
    loaded = load_plan(Path(plan))
    with audit.guard.hold(loaded.path.parent, exclusive=True):  # the files as one state
        entries = finish_stopped_writes(loaded.path)
        model, fp, version, deviations, notes, record = _plan_in_force(loaded, accept_deviation)
    source, source_notes = resolve_source(loaded.path, model, data)
    check_source(source)
    notes.extend(source_notes)
    changes: list[dict[str, Any]] = []
    if overrides:
        base = record["plan"] if record is not None else loaded.resolved
        changed_plan, changes = apply_overrides(base, overrides)
        deviations.extend(override_departures(changes, accept_deviation))
        if changes:
            model = plan_from_resolved(changed_plan, source="command line")
    env = environment()
    if record is not None:
        deviations.extend(environment_departures(record, env))
    for e in entries:
        for d in e.get("deviations", []):
            if e.get("action") == "amend" and d.get("code") == "amended-after-unblinding":
                deviations.append(Departure("amended-after-unblinding", d.get("detail", ""),
                                            d.get("expected"), d.get("found")))
    runs = [e for e in entries if e.get("action") == "run"]
    from prespec.analysis.looks import look_details, look_run

    looks = look_run(model, entries, fp, look)
    out_path = Path(out) if out is not None else default_folder(loaded.path, "run")
    if out is not None:
        check_out_path(loaded.path, out_path)  # before the work; the default is numbered
    with kernel_ahead():  # the report's kernel starts while the data are read and reduced
        results = compute_results(
            plan_path=loaded.path, plan=model, fingerprint=fp, version=version,
            data_path=None, actor=resolve_actor(actor), environment=env,
            deviations=deviations, notes=notes,
            previous_data=runs[-1].get("data") if runs and looks is None else None,
            looks=looks, progress=progress, source=source, engine=engine, counting=counting,
        )
        results = with_lock_history(results, entries, record)  # when locked, by the log
        results = finish(results, changes)  # the overrides and each result's pre_specified
        action = "look" if look is not None else "run"
        in_force = record["fingerprint"] if record is not None else None
        outcome = publish(loaded.path, out_path, results, numbered=out is None, action=action,
                          details=look_details(results),
                          before_entry=lambda: still_as_read(loaded.path, in_force, entries,
                                                              looks is not None),
                          stamp_url=stamp_url, pdf=pdf)
    return dataclasses.replace(outcome, procedures=procedures(model))


def procedures(model: Plan) -> dict[str, str]:
    """The multiplicity procedure of each family of hypotheses that a run adjusts: ``main``
    (the plan's ``multiplicity``) and ``<id> pairwise`` (a hypothesis's ``then``)."""
    from prespec.analysis.hypotheses import MAIN_FAMILY

    main = model.multiplicity
    out = {MAIN_FAMILY: main if isinstance(main, str) else str(main.method)}
    for hyp in model.hypotheses:
        if hyp.then is not None and hyp.role != "exploratory":
            out[f"{hyp.id} pairwise"] = str(hyp.then.multiplicity)
    return out
