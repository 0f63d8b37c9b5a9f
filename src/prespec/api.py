"""The public Python interface of prespec: one function per command.

Every function takes paths and plain values, returns a small result, and raises a
``PrespecError`` subclass for anything the user must fix (see ``errors.py``).
"""

from __future__ import annotations

import copy
import dataclasses
import functools
import getpass
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from prespec import audit
from prespec.analysis.families import declared_members, ordinary_plan
from prespec.analysis.results import finish
from prespec.common.departures import Departure, Note
from prespec.common.environment import differences, environment
from prespec.workflow.execute import check_out_folder, compute_results, default_folder
from prespec.workflow.publish import RunOutcome, complete_interrupted, publish

from .audit.lockfile import complete_pending, version_digest, write_pending
from .errors import BadInput, IntegrityStop, plain_os_error, raise_recorded
from .plan import LoadedPlan, fingerprint, json_schema, load_plan, plan_from_resolved, summary

__all__ = [
    "CheckResult",
    "LockResult",
    "VerifyResult",
    "amend",
    "apply_overrides",
    "check",
    "demo",
    "design",
    "history",
    "lock",
    "new_key",
    "rehearse",
    "resolve_actor",
    "run",
    "schema",
    "verify",
]


def resolve_actor(actor: str | None) -> str:
    """``--actor``, else ``PRESPEC_ACTOR``, else the login name."""
    if actor:
        return actor
    if env := os.environ.get("PRESPEC_ACTOR"):
        return env
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # pragma: no cover - no passwd entry
        return "unknown"


@dataclass(frozen=True)
class CheckResult:
    loaded: LoadedPlan
    summary: str
    lock_status: str
    source: str = ""  # the data a run reads without DATA (``sources.describe_source``)


def _lock_status(loaded: LoadedPlan) -> str:
    doc = audit.read_lock(audit.lock_path(loaded.path))
    if doc is None:
        return "not locked"
    last = audit.latest(doc)
    if last.get("fingerprint") == loaded.fingerprint:
        return f"locked (version {last.get('version')}), unchanged"
    return f"differs from its lock (version {last.get('version')})"


def check(plan: str | Path) -> CheckResult:
    """Validate a plan; nothing is written. ``data.source`` must be inside its folder."""
    from .data.engines.sources import describe_source

    loaded = load_plan(Path(plan))
    source = describe_source(loaded.path, loaded.model)
    return CheckResult(loaded, summary(loaded.model), _lock_status(loaded), source)


def _load_for_lock(plan: str | Path) -> LoadedPlan:
    """The plan to lock or amend; its ``data.source`` must be inside its folder."""
    from .data.engines.sources import check_declared_source

    loaded = load_plan(Path(plan))
    check_declared_source(loaded.path, loaded.model)
    return loaded


SCHEMAS = ("plan", "results", "log-entry")


def schema(of: str = "plan") -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of a plan, of a results.json or of one audit log entry,
    each from its models."""
    if of == "plan":
        return json_schema()
    if of == "results":
        from prespec.analysis.results import json_schema as results_schema

        return results_schema()
    if of == "log-entry":
        from prespec.audit.entries import json_schema as entry_schema

        return entry_schema()
    raise BadInput(f"schema --of: {of!r} is not one of {', '.join(SCHEMAS)}")


@dataclass(frozen=True)
class LockResult:
    fingerprint: str
    version: int
    created: bool  # False when the plan was already locked unchanged
    note: str | None = None


def _version_record(loaded: LoadedPlan, version: int, previous: str | None, reason: str | None,
                    actor: str) -> dict[str, Any]:
    return {
        "version": version,
        "fingerprint": loaded.fingerprint,
        "plan": loaded.resolved,
        "plan_file_sha256": loaded.file_sha256,
        "previous": previous,
        "reason": reason,
        "at": audit.utc_now(),
        "actor": actor,
        "environment": environment(),
    }


def _write_version(loaded: LoadedPlan, doc: dict[str, Any] | None, record: dict[str, Any],
                   action: str, actor: str, deviations: list[dict[str, Any]],
                   sign: audit.log.Signer | None = None,
                   changes: list[str] | None = None) -> None:
    """Write the next lock document beside the lock, append the log entry (the moment the
    version counts), then rename the document over the lock. A failure before the entry
    leaves the lock as it was and nothing beside it; after it, nothing is removed: a failed
    head write or rename is completed by the next command (``_finish_stopped_writes``), and
    verify checks the waiting document meanwhile. The caller holds the folder's lock."""
    plan_path = loaded.path
    lock_file = audit.lock_path(plan_path)
    new_doc = {"prespec": 1, "versions": [*(doc["versions"] if doc else []), record]}
    log = audit.log_path(plan_path)
    entries = audit.read_log(log)
    audit.check_chain(entries, log.name)
    audit.check_head(entries, audit.head_path(plan_path))
    pending = write_pending(lock_file, new_doc)
    size = audit.log.log_size(log)
    try:
        audit.append(
            log,
            audit.head_path(plan_path),
            actor=actor,
            action=action,
            plan=record["fingerprint"],
            data=None,
            details={"version": record["version"], "plan_file_sha256": record["plan_file_sha256"],
                     "reason": record["reason"], "record": version_digest(record),
                     **({"changes": changes} if changes is not None else {}),
                     **declared_members(record["plan"])},
            deviations=deviations,
            sign=sign,
        )
    except BaseException as exc:
        if audit.log.log_size(log) == size:  # no entry: the version never counted
            pending.unlink(missing_ok=True)
            raise
        if isinstance(exc, Exception):  # the entry is in: finish what is left, if we can
            try:
                pending.replace(lock_file)
                audit.files.fsync_dir(lock_file.parent)
            except OSError:
                pass
        raise_recorded(exc, plan_path.parent, f"version {record['version']} was locked and "
                       f"recorded in {log.name}; the next prespec command completes what is left")
    pending.replace(lock_file)
    audit.files.fsync_dir(lock_file.parent)


def _finish_stopped_writes(plan: Path) -> list[dict[str, Any]]:
    """Check the log, then complete a head write, a lock write or a report rename that a stop
    interrupted; the log's entries. Holds the folder's lock exclusively: the caller keeps it
    while it reads the lock and the log to decide what to do."""
    with audit.guard.hold(plan.parent, exclusive=True):
        log = audit.log_path(plan)
        entries = audit.read_log(log)
        audit.check_chain(entries, log.name)
        if audit.check_head(entries, audit.head_path(plan)) is not None:
            audit.log.repair_head(log, audit.head_path(plan))
        complete_pending(audit.lock_path(plan), entries)
        complete_interrupted(plan, entries)
        return entries


def _signer(sign: str | Path | None) -> audit.log.Signer | None:
    if sign is None:
        return None
    from prespec.audit.signing import signer

    return signer(sign)


def _plain_errors(fn: Callable[..., Any]) -> Callable[..., Any]:
    """A full disk (``no space left on PATH``) or a file that may not be read or written
    (``PATH: permission denied``) is a one-line error, exit status 2, never a traceback."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except OSError as exc:
            plan = args[0] if args else kwargs.get("plan", ".")
            plain = plain_os_error(exc, Path(plan).parent)
            if plain is None:
                raise
            raise plain from None

    return wrapper


def _serialised(fn: Callable[..., LockResult]) -> Callable[..., LockResult]:
    """Hold the plan folder's lock exclusively while a lock or amend reads the lock,
    numbers the next version and writes it, so that two at once cannot claim one number and
    no run repairs or reads the files half way."""

    @functools.wraps(fn)
    def wrapper(plan: str | Path, **kwargs: Any) -> LockResult:
        with audit.guard.hold(Path(plan).parent, exclusive=True):
            return fn(plan, **kwargs)

    return wrapper


@_plain_errors
@_serialised
def lock(plan: str | Path, *, actor: str | None = None,
         sign: str | Path | None = None) -> LockResult:
    """Resolve the plan, write the lock and a ``lock`` entry; a no-op if already locked.

    ``sign``: a private key file (``prespec key new``) that signs the entry.
    """
    signer = _signer(sign)
    loaded = _load_for_lock(plan)
    _finish_stopped_writes(loaded.path)
    doc = audit.read_lock(audit.lock_path(loaded.path))
    if doc is not None:
        last = audit.latest(doc)
        if last.get("fingerprint") == loaded.fingerprint:
            note = None
            if last.get("plan_file_sha256") != loaded.file_sha256:
                note = "the file's bytes differ from the locked file's (layout or comments only)"
            return LockResult(loaded.fingerprint, int(last["version"]), False, note)
        raise IntegrityStop(
            f"{loaded.path}: the plan's meaning differs from its lock (version "
            f"{last.get('version')}, {last.get('fingerprint')}); to lock the change as the next "
            f"version run: prespec amend {loaded.path} --reason \"...\""
        )
    actor = resolve_actor(actor)
    record = _version_record(loaded, 1, None, None, actor)
    _write_version(loaded, None, record, "lock", actor, [], signer)
    return LockResult(loaded.fingerprint, 1, True)


@_plain_errors
@_serialised
def amend(plan: str | Path, *, reason: str, actor: str | None = None,
          sign: str | Path | None = None,
          warn: Callable[[str], None] | None = None) -> LockResult:
    """Lock a changed plan as the next version, chained to the previous one.

    The entry lists what changed in meaning (as ``prespec history`` shows it); an amendment
    after a run on the data is recorded as ``amended-after-unblinding`` in the amend entry,
    and ``warn(message)`` is called with a warning before anything is written.
    """
    from prespec.audit.history import plan_changes

    if not reason or not reason.strip():
        raise BadInput("amend: --reason must say why the plan changed")
    signer = _signer(sign)
    loaded = _load_for_lock(plan)
    _finish_stopped_writes(loaded.path)
    doc = audit.read_lock(audit.lock_path(loaded.path))
    if doc is None:
        raise BadInput(f"{loaded.path}: not locked yet; lock it first: prespec lock {loaded.path}")
    last = audit.latest(doc)
    if last.get("fingerprint") == loaded.fingerprint:
        return LockResult(loaded.fingerprint, int(last["version"]), False,
                          "the plan's meaning is unchanged; nothing to amend")
    actor = resolve_actor(actor)
    version = int(last["version"]) + 1
    record = _version_record(loaded, version, last["fingerprint"], reason.strip(), actor)
    runs = [e for e in audit.read_log(audit.log_path(loaded.path))
            if e.get("action") in ("run", "look")]
    deviations = []
    if runs:
        deviations.append(Departure(
            "amended-after-unblinding",
            f"version {version} locked after {len(runs)} run(s) on data (reason: {reason.strip()})",
            "no amendment after a run",
            f"amendment to version {version}",
        ).to_json())
        if warn is not None:
            count = "1 run" if len(runs) == 1 else f"{len(runs)} runs"
            warn(f"{loaded.path}: {count} on the data on record, so this amendment comes after "
                 f"unblinding: version {version} is recorded as amended-after-unblinding, and "
                 "verify reports every run of it as not the locked analysis")
    changes = [str(c) for c in plan_changes(last["plan"], loaded.resolved)]
    _write_version(loaded, doc, record, "amend", actor, deviations, signer, changes)
    return LockResult(loaded.fingerprint, version, True)


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


def _hypothesis_index(resolved: dict[str, Any], ident: str, key: str) -> int:
    ids = [h.get("id") for h in resolved.get("hypotheses", [])]
    if ident not in ids:
        raise BadInput(f"{key}: the plan has no hypothesis {ident!r} (it has: "
                       f"{', '.join(str(i) for i in ids)})")
    return ids.index(ident)


def apply_overrides(resolved: dict[str, Any], overrides: Mapping[str, Any]
                    ) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """The resolved plan with ``overrides`` applied, and the keys whose value changed.

    Keys are ``alpha``, ``multiplicity`` and ``hypotheses.<id>.<key>`` (e.g.
    ``hypotheses.H1.test``). A value equal to the locked one changes nothing and is not
    listed. Each change is ``{"key", "locked", "used"}``. A hypothesis's ``sparse`` switch to
    the very test now used no longer applies: it is removed, and listed as a change too.
    """
    plan = copy.deepcopy(resolved)
    changed: list[dict[str, Any]] = []
    for key, value in overrides.items():
        parts = key.split(".")
        if parts[0] == "hypotheses" and len(parts) == 3:
            target = plan["hypotheses"][_hypothesis_index(plan, parts[1], key)]
            name = parts[2]
            if name == "id":
                raise BadInput(f"{key}: a hypothesis id cannot be overridden")
        elif len(parts) == 1 and parts[0] in ("alpha", "multiplicity"):
            target, name = plan, parts[0]
        else:
            raise BadInput(f"{key}: not a key that can be overridden (alpha, multiplicity, "
                           "hypotheses.<id>.<key>)")
        locked = target.get(name)
        if locked == value and type(locked) is type(value):
            continue
        target[name] = value
        changed.append({"key": key, "locked": locked, "used": value})
        sparse = target.get("sparse") if name == "test" else None
        if isinstance(sparse, dict) and sparse.get("test") == value:
            # the pre-specified switch would switch to the test now used: it no longer applies
            target["sparse"] = None
            changed.append({"key": key.rsplit(".", 1)[0] + ".sparse", "locked": sparse,
                            "used": None})
    return plan, changed


def _show(value: Any) -> str:
    from prespec.audit.history import show

    return show(value)


def _override_departures(changes: list[dict[str, Any]], accept: str | None) -> list[Departure]:
    if not changes:
        return []
    if accept is None:
        listed = ", ".join(f"{c['key']} {_show(c['locked'])} → {_show(c['used'])}"
                           for c in changes)
        raise IntegrityStop(
            f"the command line changes the locked analysis ({listed}); give "
            "--accept-deviation \"REASON\" to run it, recorded as override and marked as not "
            "pre-specified"
        )
    return [Departure("override", f"{c['key']}: {_show(c['locked'])} as locked, "
                      f"{_show(c['used'])} used (set on the command line; not pre-specified)",
                      _show(c["locked"]), _show(c["used"]), accepted=accept) for c in changes]


def _environment_departures(record: dict[str, Any], env: dict[str, str]) -> list[Departure]:
    """``environment-differs-from-lock`` when a version differs from the lock version's."""
    diffs = differences(record.get("environment") or {}, env)
    if not diffs:
        return []
    return [Departure(
        "environment-differs-from-lock",
        "versions differ from those recorded at lock time: "
        + ", ".join(f"{n} {a} → {b}" for n, a, b in diffs),
        "; ".join(f"{n} {a}" for n, a, _ in diffs),
        "; ".join(f"{n} {b}" for n, _, b in diffs))]


@_plain_errors
def run(plan: str | Path, data: str | Path | None = None, *, out: str | Path | None = None,
        actor: str | None = None, accept_deviation: str | None = None,
        overrides: Mapping[str, Any] | None = None, look: int | None = None,
        engine: str = "auto", progress: Callable[[str, int, int], None] | None = None,
        counting: Callable[[float], None] | None = None) -> RunOutcome:
    """Run the locked plan on ``data``; write the report folder and the ``run`` entry.

    ``progress(what, done, total)`` is called as the levels of a long family are prepared.

    ``overrides`` (``{"alpha": 0.025, "hypotheses.H1.test": "fisher-exact"}``) change the
    locked analysis for this run only; each change is an ``override`` departure and needs
    ``accept_deviation``. The fingerprint recorded stays the locked one.
    ``look``: run interim look K of a plan with looks (a ``look`` entry); a plain run of such a
    plan is its final analysis (see ``looks.py``). ``data``: a file or a glob; without it, the
    plan's ``data.source``. ``engine``: ``auto`` (by the source), ``pandas``, ``duckdb``,
    ``sql`` or ``spark``; ``counting(percent)`` reports a long reduction.
    """
    from .data.engines.sources import check_source, resolve_source

    if accept_deviation is not None and not accept_deviation.strip():
        raise BadInput("--accept-deviation needs a reason")
    loaded = load_plan(Path(plan))
    with audit.guard.hold(loaded.path.parent, exclusive=True):  # the files as one state
        entries = _finish_stopped_writes(loaded.path)
        model, fp, version, deviations, notes, record = _plan_in_force(loaded, accept_deviation)
    source, source_notes = resolve_source(loaded.path, model, data)
    check_source(source)
    notes.extend(source_notes)
    changes: list[dict[str, Any]] = []
    if overrides:
        base = record["plan"] if record is not None else loaded.resolved
        changed_plan, changes = apply_overrides(base, overrides)
        deviations.extend(_override_departures(changes, accept_deviation))
        if changes:
            model = plan_from_resolved(changed_plan, source="command line")
    env = environment()
    if record is not None:
        deviations.extend(_environment_departures(record, env))
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
    results = compute_results(
        plan_path=loaded.path, plan=model, fingerprint=fp, version=version,
        data_path=None, actor=resolve_actor(actor), environment=env,
        deviations=deviations, notes=notes,
        previous_data=runs[-1].get("data") if runs and looks is None else None,
        looks=looks, progress=progress, source=source, engine=engine, counting=counting,
    )
    results = finish(results, changes)  # the overrides and each result's pre_specified
    action = "look" if look is not None else "run"
    in_force = record["fingerprint"] if record is not None else None
    outcome = publish(loaded.path, out_path, results, numbered=out is None, action=action,
                      details=look_details(results),
                      before_entry=lambda: _still_as_read(loaded.path, in_force, entries,
                                                          looks is not None))
    return dataclasses.replace(outcome, procedures=procedures(model))


def procedures(model: Any) -> dict[str, str]:
    """The multiplicity procedure of each family of hypotheses that a run adjusts: ``main``
    (the plan's ``multiplicity``) and ``<id> pairwise`` (a hypothesis's ``then``)."""
    from prespec.analysis.hypotheses import MAIN_FAMILY

    main = model.multiplicity
    out = {MAIN_FAMILY: main if isinstance(main, str) else str(main.method)}
    for hyp in model.hypotheses:
        if hyp.then is not None and hyp.role != "exploratory":
            out[f"{hyp.id} pairwise"] = str(hyp.then.multiplicity)
    return out


@_plain_errors
def rehearse(plan: str | Path, data: str | Path | None = None, *,
             out: str | Path | None = None, actor: str | None = None,
             engine: str = "auto") -> RunOutcome:
    """A blinded dry run of the plan file on ``data``: the group column is never read.

    The plan may be locked or not (a missing or changed lock is a note, never a stop). The
    run is computed on a random dummy allocation and its report rendered and discarded; the
    report folder (default ``reports/<stem>/<time>-rehearsal``) holds pooled figures and the
    data dictionary only, and the log records a ``rehearse`` entry. The lock is not touched.
    ``data`` and ``engine`` as in ``run``; no engine's query names the group column.
    """
    from prespec.workflow.rehearse import NOTE_DIFFERS_FROM_LOCK, NOTE_NOT_LOCKED, compute_rehearsal

    from .data.engines.sources import check_source, resolve_source

    loaded = load_plan(Path(plan))
    source, source_notes = resolve_source(loaded.path, loaded.model, data)
    check_source(source)
    with audit.guard.hold(loaded.path.parent, exclusive=True):  # the files as one state
        entries = _finish_stopped_writes(loaded.path)
        doc = audit.read_lock(audit.lock_path(loaded.path))
    deviations: list[Departure] = []
    notes: list[Note] = []
    version = None
    env = environment()
    notes.extend(source_notes)
    if doc is None:
        notes.append(Note(NOTE_NOT_LOCKED, "the plan is not locked: a rehearsal needs no lock, "
                          "but lock the plan before the run on unblinded data"))
    elif audit.latest(doc).get("fingerprint") != loaded.fingerprint:
        notes.append(Note(NOTE_DIFFERS_FROM_LOCK, "the plan file differs in meaning from its "
                          f"lock (version {audit.latest(doc).get('version')}); the plan file was "
                          "rehearsed; amend the lock before the run on unblinded data"))
    else:
        last = audit.latest(doc)
        version = int(last["version"])
        deviations.extend(_environment_departures(last, env))
    out_path = Path(out) if out is not None else default_folder(loaded.path, "rehearsal")
    if out is not None:
        check_out_path(loaded.path, out_path)
    results = compute_rehearsal(
        plan_path=loaded.path, plan=loaded.model, fingerprint=loaded.fingerprint,
        version=version, data_path=None, actor=resolve_actor(actor), environment=env,
        deviations=deviations, notes=notes, source=source, engine=engine,
    )
    in_force = audit.latest(doc)["fingerprint"] if doc is not None else None
    return publish(loaded.path, out_path, results, numbered=out is None, action="rehearse",
                   before_entry=lambda: _still_as_read(loaded.path, in_force, entries, False))


def _still_as_read(plan: Path, in_force: str | None, entries: list[dict[str, Any]],
                   runs_matter: bool) -> None:
    """Called under the folder's lock just before a run's log entry: the lock must still hold
    the version the run started from (an amend while it computed would make the report claim
    a version no longer in force), and for a plan with looks, no other run or look may have
    been recorded meanwhile (the look numbers and boundaries were taken from the log)."""
    now = _finish_stopped_writes(plan)
    doc = audit.read_lock(audit.lock_path(plan))
    latest = audit.latest(doc) if doc is not None else None
    if (latest["fingerprint"] if latest else None) != in_force:
        raise IntegrityStop(
            f"{plan}: the lock changed while this ran (now version "
            f"{latest['version'] if latest else None}); nothing was recorded; run it again")
    if runs_matter and [e for e in now if e.get("action") in ("run", "look")] != \
            [e for e in entries if e.get("action") in ("run", "look")]:
        raise IntegrityStop(f"{plan}: another run or look of this plan was recorded while this "
                            "one ran; nothing was recorded; run it again")


@_plain_errors
def design(plan: str | Path, *, simulate: int | None = None, seed: int | None = None,
           actor: str | None = None,
           progress: Callable[[str, int, int], None] | None = None) -> dict[str, Any]:
    """Sample size and power per hypothesis of the plan file as written; with ``simulate``,
    the operating characteristics of the plan's whole decision rule over that many trials per
    scenario (``seed``: default 1). Appends a ``design`` entry to the log; returns the design
    document (SPEC.md, "Design and interim looks"). ``progress(scenario, done, total)`` is
    called after each chunk of simulated trials.
    """
    from prespec.common.canonical import canonical_json, sha256_tag

    from .design import design_document
    from .design.planned import designed_n_line, load_for_design, refuse_unsimulated

    if simulate is not None and simulate < 1:
        raise BadInput(f"--simulate: the number of trials must be at least 1, got {simulate}")
    if seed is not None and seed < 0:
        raise BadInput(f"--seed must be 0 or more, got {seed}")
    loaded, designed_n = load_for_design(Path(plan))  # designed_n: for a missing planned_n
    sized = ordinary_plan(loaded.model)  # families are flagged, not sized
    if simulate is not None:
        refuse_unsimulated(loaded.path, loaded.model)
    if not sized.hypotheses:
        raise BadInput(f"{loaded.path}: design sizes the plan's ordinary hypotheses, and this "
                       "plan has only families (over), which are not sized")
    doc = design_document(sized, where=str(loaded.path),
                          fingerprint=loaded.fingerprint,
                          simulate_trials=simulate, seed=seed, progress=progress)
    if designed_n is not None:
        doc["planned_n_from_design"] = designed_n
        doc["notes"].insert(0, designed_n_line(designed_n))
        if doc["simulation"] is not None:
            doc["simulation"]["sizes_from"] = "the designed sizes; the plan has no data.planned_n"
    sim = doc["simulation"]
    details = {
        "plan_file_sha256": loaded.file_sha256,
        "simulate": None if sim is None else sim["trials"],
        "seed": None if sim is None else sim["seed"],
        "hypotheses": [{k: h[k] for k in ("id", "alpha", "n_per_group", "n_enrol_per_group",
                                          "power")} for h in doc["hypotheses"]],
        "scenarios": [{k: s[k] for k in ("name", "trials", "fwer", "fdr", "any", "all")}
                      for s in doc["scenarios"]],
        "document": sha256_tag(canonical_json(doc)),
    }
    if designed_n is not None:
        details["planned_n_from_design"] = designed_n
    with audit.guard.hold(loaded.path.parent, exclusive=True):
        _finish_stopped_writes(loaded.path)
        audit.append(audit.log_path(loaded.path), audit.head_path(loaded.path),
                     actor=resolve_actor(actor), action="design", plan=loaded.fingerprint,
                     data=None, details=details)
    return doc


def check_out_path(plan_path: Path, out: Path) -> None:
    """``--out`` must be a new or empty plain folder: no link, not a file. Outside the plan's
    folder it must sit in an existing folder the user can write (no parents are made there)."""
    check_out_folder(out)
    if out.is_symlink():
        raise BadInput(f"{out}: is a symbolic link; give a plain folder")
    here = plan_path.parent.resolve()
    target = out.parent.resolve() / out.name
    inside = here in target.parents
    parent = out.parent
    if not inside:
        if not parent.is_dir() or parent.is_symlink():
            raise BadInput(f"{out}: outside the plan's folder, the report folder must go into "
                           "an existing plain folder")
        if not os.access(parent, os.W_OK | os.X_OK):
            raise BadInput(f"{out}: cannot write into {parent}")


@dataclass
class VerifyResult:
    passed: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    #: one ``verify.RunVerdict`` per run and look of the log: the locked analysis, or why not
    runs: list[Any] = field(default_factory=list)
    #: the last line: true of the files and of every run
    summary: str = ""

    @property
    def departed(self) -> list[Any]:
        """The runs that were not the locked analysis."""
        return [r for r in self.runs if not r.locked]
    # things in the report folders that no recorded run wrote; failures under ``strict``
    warnings: list[str] = field(default_factory=list)


@_plain_errors
def verify(plan: str | Path, *, expect: str | None = None, rerun: str | Path | None = None,
           report: str | None = None, key: str | Path | None = None,
           strict: bool = False) -> VerifyResult:
    """Check the lock, the log and every report the log names, from the files alone.

    ``expect``: the fingerprint registered elsewhere at lock time. ``rerun``: a data file;
    every run report made from it (or only ``report``) is recomputed and must be identical.
    ``key``: a public key file; every lock and amend entry must carry its valid signature.
    ``strict``: the warnings (things in the report folders no recorded run wrote) fail.
    """
    from prespec.workflow.verify import verify_all

    with audit.guard.hold(Path(plan).parent, exclusive=False):  # no writer half way
        return verify_all(Path(plan), expect=expect, rerun=Path(rerun) if rerun else None,
                          report=report, key=Path(key) if key else None,
                          strict=strict)


@_plain_errors
def history(plan: str | Path, *, from_version: int | None = None,
            to_version: int | None = None) -> Any:
    """The locked versions of a plan and the changes in meaning between two of them."""
    from prespec.audit.history import history as _history

    with audit.guard.hold(Path(plan).parent, exclusive=False):
        return _history(plan, from_version=from_version, to_version=to_version)


def new_key(name: str | Path) -> Any:
    """Write an Ed25519 key pair ``NAME.key`` (mode 0600) and ``NAME.pub``."""
    from prespec.audit.signing import new_key as _new_key

    return _new_key(name)


def demo(folder: str | Path = "prespec-demo", *, actor: str | None = None) -> Path:
    """Write the invented demo study, lock and run it; return the path of report.html."""
    from prespec.demo.wound import write_demo

    plan_path, data_path = write_demo(Path(folder))
    lock(plan_path, actor=actor)
    outcome = run(plan_path, data_path, actor=actor)
    return outcome.folder / "report.html"
