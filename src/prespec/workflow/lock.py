"""``check``, ``lock``, ``amend`` and ``history``: the plan before the data.

``lock`` resolves the plan and records its first version; ``amend`` records a changed plan as
the next version, chained to the one before; both write through ``audit.record``, the only
writer of the lock file and the log. docs/verify.md says what verify later checks of them.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec import audit
from prespec.audit.record import record_version
from prespec.common.departures import Departure
from prespec.common.environment import environment
from prespec.errors import BadInput, IntegrityStop
from prespec.plan import LoadedPlan, json_schema, load_plan, summary
from prespec.workflow.base import finish_stopped_writes, plain_errors, resolve_actor

if TYPE_CHECKING:
    from prespec.audit.timestamp import Stamp


@dataclass(frozen=True)
class CheckResult:
    loaded: LoadedPlan
    summary: str
    lock_status: str
    source: str = ""  # the data a run reads without DATA (``sources.describe_source``)
    warnings: tuple[str, ...] = ()  # e.g. a Bayesian rule whose type I error exceeds alpha


@dataclass(frozen=True)
class LockResult:
    fingerprint: str
    version: int
    created: bool  # False when the plan was already locked unchanged
    note: str | None = None
    warnings: tuple[str, ...] = ()  # e.g. a Bayesian rule whose type I error exceeds alpha
    #: the authority's time-stamp of the new version (``--timestamp``), else None
    timestamp: Stamp | None = None


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
    from prespec.data.engines.sources import describe_source

    loaded = load_plan(Path(plan))
    source = describe_source(loaded.path, loaded.model)
    text = summary(loaded.model)
    if loaded.model.design is not None:  # the sizes it gives (``prespec design`` has the detail)
        from prespec.design.document import design_summary

        text = "\n".join([text, *design_summary(loaded.model)])
    return CheckResult(loaded, text, _lock_status(loaded), source,
                       tuple(_plan_warnings(loaded.model)))


def _plan_warnings(plan: Any) -> list[str]:
    """What a plan may intend but should be told: a Bayesian rule whose exact type I error at
    the planned sizes exceeds alpha (loads the statistics only for such a plan)."""
    from prespec.plan import vocabulary as v

    if not any(h.test in v.BAYESIAN_TESTS for h in plan.hypotheses):
        return []
    from prespec.analysis.bayes import type_one_error_warnings

    return type_one_error_warnings(plan)


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


def _load_for_lock(plan: str | Path) -> LoadedPlan:
    """The plan to lock or amend; its ``data.source`` must be inside its folder."""
    from prespec.data.engines.sources import check_declared_source

    loaded = load_plan(Path(plan))
    check_declared_source(loaded.path, loaded.model)
    return loaded


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


def _write_version(loaded: LoadedPlan, record: dict[str, Any], action: str, actor: str,
                   deviations: list[dict[str, Any]], sign: audit.log.Signer | None = None,
                   changes: list[str] | None = None, stamp_url: str | None = None
                   ) -> Stamp | None:
    """Record the version through ``audit.record``; the entry also names what changed in
    meaning (amend) and the members each family declares. With ``stamp_url``, the version's
    digest is time-stamped by that authority first: an unreachable authority or a bad answer
    stops here, before anything is written. The stamp, or None."""
    from prespec.analysis.families import declared_members

    stamp = None
    if stamp_url is not None:
        from prespec.audit.lockfile import version_digest
        from prespec.audit.timestamp import request_token

        stamp = request_token(stamp_url, version_digest(record))
    details = {**({"changes": changes} if changes is not None else {}),
               **declared_members(record["plan"])}
    record_version(loaded.path, record, action=action, actor=actor, deviations=deviations,
                   details=details, sign=sign, stamp=stamp)
    return stamp


def _authority(timestamp: str | None) -> str | None:
    """``--timestamp URL``, else ``PRESPEC_TSA_URL``, else None; checked before any work."""
    from prespec.audit.timestamp import authority_url

    return authority_url(timestamp)


def _signer(sign: str | Path | None) -> audit.log.Signer | None:
    if sign is None:
        return None
    from prespec.audit.signing import signer

    return signer(sign)


def _serialised(fn: Callable[..., LockResult]) -> Callable[..., LockResult]:
    """Hold the plan folder's lock exclusively while a lock or amend reads the lock,
    numbers the next version and writes it, so that two at once cannot claim one number and
    no run repairs or reads the files half way."""

    @functools.wraps(fn)
    def wrapper(plan: str | Path, **kwargs: Any) -> LockResult:
        with audit.guard.hold(Path(plan).parent, exclusive=True):
            return fn(plan, **kwargs)

    return wrapper


@plain_errors
@_serialised
def lock(plan: str | Path, *, actor: str | None = None,
         sign: str | Path | None = None, timestamp: str | None = None) -> LockResult:
    """Resolve the plan, write the lock and a ``lock`` entry; a no-op if already locked.

    ``sign``: a private key file (``prespec key new``) that signs the entry. ``timestamp``:
    the URL of an RFC 3161 time-stamping authority (default ``$PRESPEC_TSA_URL``) that
    stamps the version's digest before anything is written (``audit/timestamp.py``).
    """
    url = _authority(timestamp)
    signer = _signer(sign)
    loaded = _load_for_lock(plan)
    finish_stopped_writes(loaded.path)
    doc = audit.read_lock(audit.lock_path(loaded.path))
    if doc is not None:
        last = audit.latest(doc)
        if last.get("fingerprint") == loaded.fingerprint:
            note = None
            if last.get("plan_file_sha256") != loaded.file_sha256:
                note = "the file's bytes differ from the locked file's (layout or comments only)"
            if url is not None:
                unstamped = ("no time-stamp was asked for: a version is time-stamped when it "
                             "is locked")
                note = f"{note}; {unstamped}" if note else unstamped
            return LockResult(loaded.fingerprint, int(last["version"]), False, note)
        raise IntegrityStop(
            f"{loaded.path}: the plan's meaning differs from its lock (version "
            f"{last.get('version')}, {last.get('fingerprint')}); to lock the change as the next "
            f"version run: prespec amend {loaded.path} --reason \"...\""
        )
    actor = resolve_actor(actor)
    record = _version_record(loaded, 1, None, None, actor)
    stamp = _write_version(loaded, record, "lock", actor, [], signer, stamp_url=url)
    return LockResult(loaded.fingerprint, 1, True, warnings=tuple(_plan_warnings(loaded.model)),
                      timestamp=stamp)


@plain_errors
@_serialised
def amend(plan: str | Path, *, reason: str, actor: str | None = None,
          sign: str | Path | None = None,
          warn: Callable[[str], None] | None = None,
          timestamp: str | None = None) -> LockResult:
    """Lock a changed plan as the next version, chained to the previous one.

    The entry lists what changed in meaning (as ``prespec history`` shows it); an amendment
    after a run on the data is recorded as ``amended-after-unblinding`` in the amend entry,
    and ``warn(message)`` is called with a warning before anything is written.
    ``timestamp``: as for :func:`lock`.
    """
    from prespec.audit.history import plan_changes

    if not reason or not reason.strip():
        raise BadInput("amend: --reason must say why the plan changed")
    url = _authority(timestamp)
    signer = _signer(sign)
    loaded = _load_for_lock(plan)
    finish_stopped_writes(loaded.path)
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
    stamp = _write_version(loaded, record, "amend", actor, deviations, signer, changes,
                           stamp_url=url)
    return LockResult(loaded.fingerprint, version, True,
                      warnings=tuple(_plan_warnings(loaded.model)), timestamp=stamp)


@plain_errors
def history(plan: str | Path, *, from_version: int | None = None,
            to_version: int | None = None) -> Any:
    """The locked versions of a plan and the changes in meaning between two of them."""
    from prespec.audit.history import history as _history

    with audit.guard.hold(Path(plan).parent, exclusive=False):
        return _history(plan, from_version=from_version, to_version=to_version)
