"""``prespec verify``: re-derive every hash from the files alone and trust nothing stored.

The order of the checks follows SPEC.md, "What verify checks"; the first failure stops
with exit status 3 and names what does not match.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from . import audit
from .api import VerifyResult, version_digest
from .canonical import file_sha256
from .errors import IntegrityStop, PrespecError
from .manifest import check_manifest
from .plan import fingerprint, load_plan


class VerifyFailure(IntegrityStop):
    """A failed check, carrying the checks that passed before it."""

    def __init__(self, message: str, passed: list[str]) -> None:
        super().__init__(message)
        self.passed = passed


def _fail(result: VerifyResult, message: str) -> VerifyFailure:
    return VerifyFailure(message, list(result.passed))


def _version_of(entry: dict[str, Any]) -> int | None:
    """The lock version a lock/amend entry names, or None when it names none readable."""
    details = entry.get("details")
    version = details.get("version") if isinstance(details, dict) else None
    return version if isinstance(version, int) and not isinstance(version, bool) else None


def _check_log(plan: Path, result: VerifyResult) -> list[dict[str, Any]]:
    log, head = audit.log_path(plan), audit.head_path(plan)
    try:
        entries = audit.read_log(log)
        audit.check_chain(entries, log.name)
        audit.check_head(entries, head)
    except IntegrityStop as exc:
        raise _fail(result, str(exc)) from None
    if log.exists() or head.exists():
        result.passed.append(
            f"audit log: {len(entries)} entries, sequence, links and hashes intact; head matches"
        )
    return entries


def _check_lock(plan: Path, entries: list[dict[str, Any]], result: VerifyResult
                ) -> dict[str, Any] | None:
    try:
        doc = audit.read_lock(audit.lock_path(plan))
    except IntegrityStop as exc:
        raise _fail(result, str(exc)) from None
    if doc is None:
        if any(e["action"] in ("lock", "amend") for e in entries):
            raise _fail(result, f"{audit.lock_path(plan).name}: missing, but the log records a lock")
        return None
    name = audit.lock_path(plan).name
    previous = None
    for index, version in enumerate(doc["versions"], start=1):
        where = f"{name}: version {index}"
        if version.get("version") != index:
            raise _fail(result, f"{where}: numbered {version.get('version')!r}")
        try:
            derived = fingerprint(version["plan"])
        except (KeyError, TypeError, ValueError) as exc:
            raise _fail(result, f"{where}: the resolved plan is unreadable ({exc})") from None
        if derived != version.get("fingerprint"):
            raise _fail(result, f"{where}: the fingerprint does not match its resolved plan")
        if version.get("previous") != previous:
            raise _fail(result, f"{where}: 'previous' does not name version {index - 1}")
        action = "lock" if index == 1 else "amend"
        logged = [e for e in entries if e["action"] == action and e["plan"] == derived
                  and _version_of(e) == index]
        if not logged:
            raise _fail(result, f"{where}: the log has no {action} entry for {derived}")
        if logged[0]["details"].get("record") != version_digest(version):
            raise _fail(result, f"{where}: differs from the version its {action} entry recorded "
                        "(the lock was edited)")
        previous = derived
    extra = [e for e in entries if e["action"] in ("lock", "amend")
             and (_version_of(e) or 0) > len(doc["versions"])]
    if extra:
        raise _fail(result, f"{name}: the log records version {_version_of(extra[0])}, "
                    "the lock does not (a version was removed)")
    result.passed.append(f"lock: {len(doc['versions'])} version(s), fingerprints and links intact, "
                         "each recorded in the log")
    return doc


def _check_plan_file(plan: Path, doc: dict[str, Any], entries: list[dict[str, Any]],
                     result: VerifyResult) -> None:
    latest = audit.latest(doc)
    try:
        loaded = load_plan(plan)
    except PrespecError as exc:
        raise _fail(result, f"plan file: does not load: {exc}") from None
    if loaded.fingerprint == latest["fingerprint"]:
        same = "same bytes" if loaded.file_sha256 == latest.get("plan_file_sha256") else \
            "layout differs, meaning identical"
        result.passed.append(f"plan file: matches lock version {latest['version']} ({same})")
        return
    accepted = any(
        d.get("code") == "plan-modified-after-lock" and d.get("found") == loaded.fingerprint
        and d.get("accepted")
        for e in entries for d in (e.get("deviations") or []) if isinstance(d, dict)
    )
    if not accepted:
        raise _fail(result, f"plan file: {plan.name} differs in meaning from lock version "
                    f"{latest['version']} ({loaded.fingerprint} vs {latest['fingerprint']})")
    result.passed.append("plan file: differs from its lock, recorded as an accepted departure")


def _check_reports(plan: Path, entries: list[dict[str, Any]], result: VerifyResult) -> None:
    count = 0
    for entry in entries:
        if entry["action"] not in ("run", "rehearse"):
            continue
        where = f"log entry {entry['seq']} ({entry['action']})"
        details = entry.get("details") if isinstance(entry.get("details"), dict) else {}
        rel = details.get("report")
        if not isinstance(rel, str) or Path(rel).is_absolute():
            raise _fail(result, f"{where}: no relative report path")
        folder = plan.parent / rel
        if not folder.is_dir():
            raise _fail(result, f"{where}: report folder {rel} is missing")
        problem = check_manifest(folder)
        if problem:
            raise _fail(result, f"report {rel}: {problem}")
        if file_sha256(folder / "manifest.json") != details.get("manifest"):
            raise _fail(result, f"report {rel}: manifest.json is not the one the log recorded")
        try:
            doc = json.loads((folder / "results.json").read_text("utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError):
            raise _fail(result, f"report {rel}: results.json is missing or unreadable") from None
        if doc.get("plan") != entry["plan"]:
            raise _fail(result, f"report {rel}: results.json names plan {doc.get('plan')}, "
                        f"the log {entry['plan']}")
        if doc.get("data") != entry["data"]:
            raise _fail(result, f"report {rel}: results.json names data {doc.get('data')}, "
                        f"the log {entry['data']}")
        count += 1
    result.passed.append(f"reports: {count} folder(s) match their manifests and log entries")


def verify_all(plan: Path, *, expect: str | None = None) -> VerifyResult:
    result = VerifyResult()
    if not audit.lock_path(plan).exists() and not audit.log_path(plan).exists() \
            and not audit.head_path(plan).exists():
        raise VerifyFailure(f"{plan}: nothing to verify (no lock and no audit log)", [])
    entries = _check_log(plan, result)
    doc = _check_lock(plan, entries, result)
    if doc is not None:
        _check_plan_file(plan, doc, entries, result)
    _check_reports(plan, entries, result)
    if expect is not None:
        first = next((e for e in entries if e["action"] == "lock"), None)
        if first is None or first["plan"] != expect:
            raise _fail(result, f"expected fingerprint: the first lock entry holds "
                        f"{first['plan'] if first else 'nothing'}, not {expect}")
        result.passed.append("expected fingerprint: matches the first lock entry")
    return result
