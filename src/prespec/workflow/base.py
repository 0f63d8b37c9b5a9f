"""What every step of the workflow shares: who acts, the one-line errors of a full disk or a
refused file, the stopped writes completed before a step reads the study's files, the lock
still in force when a step records, and where a report folder may go."""

from __future__ import annotations

import functools
import getpass
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

from prespec import audit
from prespec.audit.record import settle
from prespec.common.departures import Departure
from prespec.common.environment import differences
from prespec.errors import BadInput, IntegrityStop, plain_os_error


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


def plain_errors(fn: Callable[..., Any]) -> Callable[..., Any]:
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


def finish_stopped_writes(plan: Path) -> list[dict[str, Any]]:
    """Check the log, then complete a head write, a lock write or a report rename that a stop
    interrupted; the log's entries. Holds the folder's lock exclusively: the caller keeps it
    while it reads the lock and the log to decide what to do."""
    from prespec.workflow.publish import complete_interrupted

    with audit.guard.hold(plan.parent, exclusive=True):
        entries = settle(plan)
        complete_interrupted(plan, entries)
        return entries


def still_as_read(plan: Path, in_force: str | None, entries: list[dict[str, Any]],
                  runs_matter: bool) -> None:
    """Called under the folder's lock just before a run's log entry: the lock must still hold
    the version the run started from (an amend while it computed would make the report claim
    a version no longer in force), and for a plan with looks, no other run or look may have
    been recorded meanwhile (the look numbers and boundaries were taken from the log)."""
    now = finish_stopped_writes(plan)
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


def environment_departures(record: dict[str, Any], env: dict[str, str]) -> list[Departure]:
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


def lock_versions(entries: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Every ``lock`` and ``amend`` entry of ``entries`` as results.json's ``locked.versions``
    holds it: version, action, time, actor, reason."""
    return [{"version": e["details"].get("version"), "action": e["action"], "at": e["at"],
             "actor": e["actor"], "reason": e["details"].get("reason")}
            for e in entries if e.get("action") in ("lock", "amend")]


def lock_history_problem(entries: list[dict[str, Any]], entry: dict[str, Any],
                         doc: dict[str, Any]) -> str | None:
    """Why a report's ``locked`` versions are not the log's lock and amend entries before its
    own entry, or None (also for a report without them)."""
    if "locked" not in doc:
        return None
    locked = doc["locked"]
    before = [e for e in entries if e["seq"] < entry["seq"]]
    if not isinstance(locked, dict) or locked.get("versions") != lock_versions(before):
        return ("its lock history (results.json locked.versions) differs from the lock and "
                "amend entries of the log before it")
    return None


def with_lock_history(results: dict[str, Any], entries: list[dict[str, Any]],
                      record: dict[str, Any] | None) -> dict[str, Any]:
    """``results`` with its ``locked`` block (docs/files.md) after ``environment``: every
    ``lock`` and ``amend`` entry of the log read before the run (version, time, actor, reason)
    and the environment recorded with ``record``, the lock version in force. Unchanged when the
    plan ran unlocked (``record`` None)."""
    if record is None:
        return results
    locked = {"versions": lock_versions(entries),
              "environment": dict(record.get("environment") or {})}
    out: dict[str, Any] = {}
    for key, value in results.items():
        out[key] = value
        if key == "environment":
            out["locked"] = locked
    return out


def check_out_path(plan_path: Path, out: Path) -> None:
    """``--out`` must be a new or empty plain folder: no link, not a file. Outside the plan's
    folder it must sit in an existing folder the user can write (no parents are made there)."""
    from prespec.workflow.execute import check_out_folder

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
