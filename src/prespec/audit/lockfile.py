"""The lock file: every locked version of a plan, each chained to the one before."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from ..errors import IntegrityStop
from .files import replace_atomically

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
    if lock_bytes(doc) != raw:
        raise IntegrityStop(f"{path.name}: not in the form prespec writes (spacing, key order or "
                            "escapes differ: the lock was edited)")
    return doc


def latest(doc: dict[str, Any]) -> dict[str, Any]:
    return doc["versions"][-1]


def lock_bytes(doc: dict[str, Any]) -> bytes:
    """The exact bytes prespec writes for a lock document."""
    return (json.dumps(doc, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


def write_lock(path: Path, doc: dict[str, Any]) -> None:
    replace_atomically(path, lock_bytes(doc))
