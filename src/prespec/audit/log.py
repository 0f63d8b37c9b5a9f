"""The append-only, hash-chained audit log (JSON Lines) and its head file.

Each entry carries ``prev`` (the previous entry's ``hash``; 64 zeros for the first) and
``hash``, the SHA-256 of the RFC 8785 form of the entry without ``hash``, so that any edit,
deletion, reordering or insertion breaks the chain, the way a content-addressed history does.
The head file records the last ``seq`` and ``hash`` so that a truncated log is detected too.
Only this module writes the log.
"""

from __future__ import annotations

import fcntl
import json
import os
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..canonical import canonical_json, sha256_hex
from ..errors import IntegrityStop
from .files import fsync_dir, replace_atomically

GENESIS = "0" * 64
ACTIONS = frozenset({"lock", "amend", "run", "rehearse", "design", "look"})
ENTRY_KEYS = ("seq", "at", "actor", "action", "plan", "data", "details", "deviations", "prev")


def utc_now() -> str:
    """RFC 3339 UTC time with a ``Z``, to the second."""
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def entry_hash(entry: dict[str, Any]) -> str:
    """Hex SHA-256 of the canonical JSON of ``entry`` without its ``hash`` key."""
    body = {k: v for k, v in entry.items() if k != "hash"}
    return sha256_hex(canonical_json(body))


@contextmanager
def _locked(log: Path) -> Iterator[int]:
    """Hold an exclusive advisory lock on the log for the duration of one append."""
    fd = os.open(log, os.O_RDWR | os.O_CREAT | os.O_APPEND, 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield fd
    finally:
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)


def parse_log(data: bytes, name: str) -> list[dict[str, Any]]:
    """Parse the log's bytes into entries; an incomplete or unreadable line is an integrity stop."""
    if not data:
        return []
    if not data.endswith(b"\n"):
        raise IntegrityStop(f"{name}: the last line is incomplete (no newline): the log was cut")
    entries = []
    for number, line in enumerate(data.split(b"\n")[:-1], start=1):
        try:
            entry = json.loads(line.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise IntegrityStop(f"{name}:{number}: not a JSON entry ({exc})") from None
        if not isinstance(entry, dict):
            raise IntegrityStop(f"{name}:{number}: an entry must be a JSON object")
        entries.append(entry)
    return entries


def read_log(log: Path) -> list[dict[str, Any]]:
    """All entries of a log (empty when the file does not exist)."""
    if not log.exists():
        return []
    return parse_log(log.read_bytes(), log.name)


def append(
    log: Path,
    head: Path,
    *,
    actor: str,
    action: str,
    plan: str,
    data: str | None,
    details: dict[str, Any] | None = None,
    deviations: list[dict[str, Any]] | None = None,
    at: str | None = None,
) -> dict[str, Any]:
    """Append one entry under an exclusive lock, in one write, fsynced; then replace the head.

    The existing chain is checked before anything is written: appending to a broken log
    would hide the break behind a valid-looking new entry.
    """
    if action not in ACTIONS:
        raise ValueError(f"unknown log action {action!r}")
    with _locked(log) as fd:
        size = os.fstat(fd).st_size
        existing = parse_log(os.pread(fd, size, 0), log.name) if size else []
        check_chain(existing, log.name)
        check_head(existing, head)
        last = existing[-1] if existing else None
        entry: dict[str, Any] = {
            "seq": (last["seq"] + 1) if last else 1,
            "at": at or utc_now(),
            "actor": actor,
            "action": action,
            "plan": plan,
            "data": data,
            "details": details or {},
            "deviations": deviations or [],
            "prev": last["hash"] if last else GENESIS,
        }
        entry["hash"] = entry_hash(entry)
        line = json.dumps(entry, ensure_ascii=False, sort_keys=False).encode("utf-8") + b"\n"
        written = os.write(fd, line)
        if written != len(line):  # pragma: no cover - a short write on a regular file
            raise OSError(f"{log.name}: short write ({written} of {len(line)} bytes)")
        os.fsync(fd)
        fsync_dir(log.parent)
        head_doc = {"seq": entry["seq"], "hash": entry["hash"]}
        replace_atomically(head, (json.dumps(head_doc) + "\n").encode("utf-8"))
    return entry


def check_chain(entries: list[dict[str, Any]], name: str) -> None:
    """Raise IntegrityStop at the first entry whose seq, prev, keys or hash do not hold."""
    prev = GENESIS
    for index, entry in enumerate(entries, start=1):
        where = f"{name}: entry {index}"
        missing = [k for k in (*ENTRY_KEYS, "hash") if k not in entry]
        if missing:
            raise IntegrityStop(f"{where}: missing {', '.join(missing)}")
        extra = sorted(set(entry) - set(ENTRY_KEYS) - {"hash"})
        if extra:
            raise IntegrityStop(f"{where}: unexpected key {', '.join(extra)}")
        if entry["seq"] != index or isinstance(entry["seq"], bool):
            raise IntegrityStop(f"{where}: seq is {entry['seq']!r}, expected {index}")
        if entry["prev"] != prev:
            raise IntegrityStop(f"{where}: prev does not match the hash of entry {index - 1}")
        if entry["hash"] != entry_hash(entry):
            raise IntegrityStop(f"{where}: hash does not match its content (edited)")
        prev = entry["hash"]


def read_head(head: Path) -> dict[str, Any] | None:
    if not head.exists():
        return None
    try:
        doc = json.loads(head.read_text("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise IntegrityStop(f"{head.name}: not a readable head record") from None
    if not isinstance(doc, dict) or set(doc) != {"seq", "hash"}:
        raise IntegrityStop(f"{head.name}: a head record holds exactly seq and hash")
    return doc


def check_head(entries: list[dict[str, Any]], head: Path) -> None:
    """The head file must name the last entry; a log shorter than its head was truncated."""
    doc = read_head(head)
    if doc is None:
        if entries:
            raise IntegrityStop(f"{head.name}: missing, but the log has {len(entries)} entries")
        return
    if not entries:
        raise IntegrityStop(f"{head.name}: names entry {doc['seq']} but the log is empty or gone")
    last = entries[-1]
    if doc["seq"] != last["seq"] or doc["hash"] != last["hash"]:
        if isinstance(doc["seq"], int) and doc["seq"] > last["seq"]:
            raise IntegrityStop(
                f"{head.name}: names entry {doc['seq']} but the log ends at {last['seq']} "
                "(entries removed from the end)"
            )
        raise IntegrityStop(f"{head.name}: does not match the last entry of the log")
