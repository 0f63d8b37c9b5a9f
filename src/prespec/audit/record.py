"""The commit point of every step, and the only writer of the log, its head and the lock file.

A step (lock, amend, run, look, rehearse, design) counts from the moment its entry is in the
log. Before that moment a failure or a stop undoes what the step made; after it nothing is
removed, and what is left (the head, the rename of the lock or of a report folder) is completed
here or by the next command (:func:`settle`). The workflow decides *what* an entry says; this
module writes it. The caller holds the study folder's lock (``audit.guard.hold``) throughout.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.errors import raise_recorded

from .entries import checked
from .files import fsync_dir, head_path, lock_path, log_path
from .lockfile import complete_pending, read_lock, version_digest, write_pending
from .log import Signer, append, check_chain, check_head, log_size, read_log, repair_head

if TYPE_CHECKING:
    from .timestamp import Stamp


def settle(plan: Path) -> list[dict[str, Any]]:
    """Check the chain, then complete a head write or a lock rename that a stop interrupted;
    the log's entries. (A report rename is the workflow's: ``publish.complete_interrupted``.)"""
    log = log_path(plan)
    entries = read_log(log)
    check_chain(entries, log.name)
    if check_head(entries, head_path(plan)) is not None:
        repair_head(log, head_path(plan))
    complete_pending(lock_path(plan), entries)
    return entries


def commit_entry(plan: Path, *, actor: str, action: str, fingerprint: str,
                 data: str | None, details: dict[str, Any],
                 deviations: list[dict[str, Any]] | None = None, sign: Signer | None = None,
                 before: Callable[[], None] | None = None,
                 undo: Callable[[], None] | None = None,
                 finish: Callable[[], None] | None = None,
                 recorded: str = "") -> dict[str, Any]:
    """Append one entry: the moment the step counts; the entry.

    ``before()`` may still refuse the entry (it raises); ``undo()`` removes what the step made
    when no entry was written; ``finish()`` completes the step once the entry is in (when it
    fails, the entry stays and the next command completes it; ``recorded`` says what was
    recorded, for the one-line error of a full disk). The details and departures are built
    through the entry's model (``audit.entries``): a key or value it does not hold is refused
    before anything is written.
    """
    log = log_path(plan)
    size = log_size(log)
    try:
        details = checked(action, details, deviations or [])  # the entry's model, or no entry
        if before is not None:
            before()
            size = log_size(log)
        entry = append(log, head_path(plan), actor=actor, action=action, plan=fingerprint,
                       data=data, details=details, deviations=deviations or [], sign=sign)
    except BaseException as exc:
        if log_size(log) == size:  # no entry: the step never counted
            if undo is not None:
                undo()
            raise
        if isinstance(exc, Exception) and finish is not None:  # the entry is in: finish
            try:
                finish()
            except OSError:
                pass
        raise_recorded(exc, plan.parent, recorded)
    if finish is not None:
        finish()
    return entry


def record_version(plan: Path, record: dict[str, Any], *, action: str, actor: str,
                   deviations: list[dict[str, Any]], details: dict[str, Any],
                   sign: Signer | None = None, stamp: Stamp | None = None) -> None:
    """Lock ``record`` as the next version of ``plan``: the next lock document is written
    beside the lock, the ``lock`` or ``amend`` entry appended (the moment the version counts),
    then the document renamed over the lock. Before the entry a failure leaves the lock as it
    was and nothing beside it; after it, nothing is removed (:func:`settle` completes it, and
    verify checks the waiting document meanwhile). ``details``: the entry's details beyond
    what the record gives (the version, the plan file's hash, the reason, the record's digest).
    ``stamp``: the time-stamp token of the record's digest, obtained before anything was
    written; its file is written beside the lock with the pending document, removed with it
    when no entry was written, and named with its digest in the entry.
    """
    lock_file = lock_path(plan)
    doc = read_lock(lock_file)
    new_doc = {"prespec": 1, "versions": [*(doc["versions"] if doc else []), record]}
    log = log_path(plan)
    entries = read_log(log)
    check_chain(entries, log.name)
    check_head(entries, head_path(plan))
    pending = write_pending(lock_file, new_doc)
    token_file = None
    if stamp is not None:
        from .timestamp import DETAILS_KEY, remove_token, version_file, write_token

        token_file = version_file(plan, record["version"])

    def undo() -> None:
        pending.unlink(missing_ok=True)
        if token_file is not None:
            remove_token(plan, token_file)

    if stamp is not None and token_file is not None:
        try:
            write_token(plan, token_file, stamp.der)
        except BaseException:
            undo()
            raise
        details = {**details, DETAILS_KEY: stamp.details(token_file)}

    def into_place() -> None:
        pending.replace(lock_file)
        fsync_dir(lock_file.parent)

    commit_entry(
        plan, actor=actor, action=action, fingerprint=record["fingerprint"], data=None,
        details={"version": record["version"], "plan_file_sha256": record["plan_file_sha256"],
                 "reason": record["reason"], "record": version_digest(record), **details},
        deviations=deviations, sign=sign,
        undo=undo, finish=into_place,
        recorded=(f"version {record['version']} was locked and recorded in {log.name}; the "
                  "next prespec command completes what is left"))
