"""The lock file: every locked version of a plan, each chained to the one before."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from prespec.common.canonical import canonical_json, sha256_tag
from prespec.common.shown import json_text

from ..errors import IntegrityStop
from .files import fsync_dir, replace_atomically

VERSION_KEYS = ("version", "fingerprint", "plan", "plan_file_sha256", "previous", "reason", "at",
                "actor", "environment")


def read_lock(path: Path) -> dict[str, Any] | None:
    """The lock document, or None when the plan was never locked."""
    if not path.exists():
        return None
    raw = path.read_bytes()
    try:
        doc = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise IntegrityStop(f"{path.name}: not a readable lock file ({exc})") from None
    if (
        not isinstance(doc, dict)
        or doc.get("prespec") != 1
        or not isinstance(doc.get("versions"), list)
        or not doc["versions"]
        or not all(isinstance(v, dict) for v in doc["versions"])
    ):
        raise IntegrityStop(f"{path.name}: not a prespec lock file (prespec: 1, versions: [...])")
    for index, version in enumerate(doc["versions"], start=1):
        missing = [k for k in VERSION_KEYS if k not in version]
        if missing:
            raise IntegrityStop(f"{path.name}: version {index} lacks {', '.join(missing)}")
        if not isinstance(version["plan"], dict) or not isinstance(version["fingerprint"], str) \
                or not isinstance(version["version"], int):
            raise IntegrityStop(f"{path.name}: version {index} is malformed")
    if lock_bytes(doc) != raw and earlier_lock_bytes(doc) != raw:
        raise IntegrityStop(f"{path.name}: not in the form prespec writes (spacing, key order or "
                            "escapes differ: the lock was edited)")
    return doc


def latest(doc: dict[str, Any]) -> dict[str, Any]:
    return doc["versions"][-1]


def lock_bytes(doc: dict[str, Any]) -> bytes:
    """The exact bytes prespec writes for a lock document (hidden characters as ``\\u``
    escapes, :func:`prespec.common.shown.json_text`)."""
    return (json_text(doc, indent=2) + "\n").encode("utf-8")


def earlier_lock_bytes(doc: dict[str, Any]) -> bytes:
    """The form written before hidden characters were escaped (they stood raw); still accepted,
    so that an old lock keeps verifying. Both forms hold the same values."""
    return (json.dumps(doc, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


def write_lock(path: Path, doc: dict[str, Any]) -> None:
    replace_atomically(path, lock_bytes(doc))


def version_digest(record: dict[str, Any]) -> str:
    """``sha256:`` of the canonical JSON of a whole lock version, kept in its log entry, so
    that an edit to any field of the lock (reason, actor, time, environment) is detected."""
    return sha256_tag(canonical_json(record))


def pending_path(path: Path) -> Path:
    """Where the next lock document waits while its log entry is written."""
    return path.with_name(f".{path.name}.pending")


def logged_pending(path: Path, entries: list[dict[str, Any]]) -> dict[str, Any] | None:
    """The waiting lock document if its new version has its log entry (the write stopped
    between the log and the lock), else None. It must extend the lock by exactly that one
    version."""
    pending = pending_path(path)
    if not pending.is_file():
        return None
    try:
        doc = read_lock(pending)
        current = read_lock(path)
    except IntegrityStop:
        return None
    if doc is None:
        return None
    old = current["versions"] if current else []
    new = doc["versions"][-1]
    if doc["versions"][:-1] != old or new.get("version") != len(old) + 1:
        return None
    action = "lock" if new["version"] == 1 else "amend"
    for e in entries:
        details = e.get("details") if isinstance(e.get("details"), dict) else {}
        if e.get("action") == action and details.get("version") == new["version"] \
                and details.get("record") == version_digest(new):
            return doc
    return None


def complete_pending(path: Path, entries: list[dict[str, Any]]) -> bool:
    """Finish a lock write stopped after its log entry; drop one stopped before it.
    True when the lock was completed."""
    pending = pending_path(path)
    if not pending.exists():
        return False
    if logged_pending(path, entries) is not None:
        try:
            pending.replace(path)
        except FileNotFoundError:  # another process completed it
            return False
        fsync_dir(path.parent)
        return True
    pending.unlink(missing_ok=True)
    return False


def write_pending(path: Path, doc: dict[str, Any]) -> Path:
    """Write the next lock document beside the lock; it replaces the lock after its entry."""
    pending = pending_path(path)
    replace_atomically(pending, lock_bytes(doc))
    return pending
