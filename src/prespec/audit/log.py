"""The append-only, hash-chained audit log (JSON Lines) and its head file.

Each entry carries ``prev`` (the previous entry's ``hash``; 64 zeros for the first) and
``hash``, the SHA-256 of the RFC 8785 form of the entry without ``hash``, so that any edit,
deletion, reordering or insertion breaks the chain, the way a content-addressed history does.
The head file records the last ``seq`` and ``hash`` so that a truncated log is detected too.
A third file, the record of the checked prefix (:mod:`prespec.audit.prefix`), lets an append
check only the entries written since the last one, so that its cost does not grow with the
log's entries. Only this module writes the log.
"""

from __future__ import annotations

import errno
import fcntl
import hashlib
import json
import os
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from prespec.common.canonical import canonical_json, sha256_hex
from prespec.common.shown import json_text

from ..errors import IntegrityStop
from . import guard
from .files import fsync_dir, replace_atomically
from .prefix import Checked, checked_path, read_checked, write_checked

GENESIS = "0" * 64
ACTIONS = frozenset({"lock", "amend", "run", "rehearse", "design", "look"})
ENTRY_KEYS = ("seq", "at", "actor", "action", "plan", "data", "details", "deviations", "prev")
# An optional key, only on lock and amend entries: an Ed25519 signature of the entry's content
# (see ``prespec.audit.signing``). It sits before ``hash``, so the chain hash covers it as well.
SIGNATURE_KEY = "signature"
SIGNED_ACTIONS = frozenset({"lock", "amend"})


def entry_line(entry: dict[str, Any]) -> bytes:
    """The exact bytes prespec writes for one entry: its JSON in key order, and a newline.

    Bidi controls, C1 controls and line separators in a value are written as ``\\uNNNN``
    escapes (:func:`prespec.common.shown.json_text`), so that the raw log shows them."""
    return json_text(entry, sort_keys=False).encode("utf-8") + b"\n"


def earlier_entry_line(entry: dict[str, Any]) -> bytes:
    """The form written before :func:`entry_line` escaped hidden characters (they
    stood raw); still accepted, so that an old log keeps verifying. Both forms hold the same
    values, and the hashes are over the values."""
    return json.dumps(entry, ensure_ascii=False, sort_keys=False).encode("utf-8") + b"\n"


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


def parse_log(data: bytes, name: str, *, first_line: int = 1) -> list[dict[str, Any]]:
    """Parse the log's bytes into entries; an incomplete or unreadable line is an integrity stop.

    ``first_line`` numbers the first line of ``data`` (the log's lines after a checked prefix)."""
    if not data:
        return []
    if not data.endswith(b"\n"):
        raise IntegrityStop(f"{name}: the last line is incomplete (no newline): the log was cut")
    entries = []
    for number, line in enumerate(data.split(b"\n")[:-1], start=first_line):
        try:
            entry = json.loads(line.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise IntegrityStop(f"{name}:{number}: not a JSON entry ({exc})") from None
        if not isinstance(entry, dict):
            raise IntegrityStop(f"{name}:{number}: an entry must be a JSON object")
        if entry_line(entry) != line + b"\n" and earlier_entry_line(entry) != line + b"\n":
            raise IntegrityStop(f"{name}:{number}: not in the form prespec writes (the line was "
                                "edited: spacing, key order, escapes or a repeated key)")
        entries.append(entry)
    return entries


def read_log(log: Path) -> list[dict[str, Any]]:
    """All entries of a log (empty when the file does not exist)."""
    if not log.exists():
        return []
    return parse_log(log.read_bytes(), log.name)


Signer = Callable[[bytes], dict[str, str]]
SIGNATURE_CONTEXT = b"prespec entry signature v1\n"


def signing_message(entry: dict[str, Any]) -> bytes:
    """What a signature signs: a fixed context line, then the RFC 8785 form of the entry
    without ``hash`` and ``signature``. The context keeps it distinct from the chain hash's
    input, which covers the signature too."""
    body = {k: v for k, v in entry.items() if k not in ("hash", SIGNATURE_KEY)}
    return SIGNATURE_CONTEXT + canonical_json(body)


def head_line(entry: dict[str, Any]) -> bytes:
    """The exact bytes of the head file naming ``entry``."""
    return (json.dumps({"seq": entry["seq"], "hash": entry["hash"]}) + "\n").encode("utf-8")


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
    sign: Signer | None = None,
) -> dict[str, Any]:
    """Append one entry under an exclusive lock, in one write, fsynced; then replace the head.

    The existing chain is checked before anything is written: appending to a broken log
    would hide the break behind a valid-looking new entry, and a log whose last line is
    incomplete is refused (the half entry is reported, never dropped). The bytes that the
    record of the checked prefix names are re-hashed as raw bytes, and only the entries after
    them are parsed and checked; without a record that matches, the whole chain is (and the
    record is written anew after the head). If the write itself
    fails, the log is cut back to its size before it, under the same lock. A head that lags
    one entry behind (an append stopped between the log and the head) is brought up to date.
    ``sign``, for lock and amend entries, returns the ``signature`` of the entry's content.

    The whole append holds the study folder's lock (``guard``) exclusively. Once the entry is
    written and fsynced it counts: a failure after it (the head write, on a full disk) is
    raised, and the log grew; callers tell the two cases apart with :func:`log_size`.
    """
    if action not in ACTIONS:
        raise ValueError(f"unknown log action {action!r}")
    if sign is not None and action not in SIGNED_ACTIONS:
        raise ValueError(f"only {', '.join(sorted(SIGNED_ACTIONS))} entries are signed")
    with guard.hold(log.parent, exclusive=True):
        existed = log.exists()
        with _locked(log) as fd:
            try:
                entry, checked = _write_entry(fd, log, head, actor=actor, action=action,
                                              plan=plan, data=data, details=details,
                                              deviations=deviations, at=at, sign=sign)
            except BaseException:
                if not existed and os.fstat(fd).st_size == 0:
                    log.unlink(missing_ok=True)  # a first entry that failed leaves no log
                raise
            fsync_dir(log.parent)
            replace_atomically(head, head_line(entry))
            write_checked(checked_path(log), checked)
    return entry


def _write_entry(fd: int, log: Path, head: Path, *, actor: str, action: str, plan: str,
                 data: str | None, details: dict[str, Any] | None,
                 deviations: list[dict[str, Any]] | None, at: str | None,
                 sign: Signer | None) -> tuple[dict[str, Any], Checked]:
    """Check the chain and the head, then write and fsync the next entry (see ``append``);
    the entry, and the record of the log's bytes up to and with it, all checked."""
    size = os.fstat(fd).st_size
    raw = os.pread(fd, size, 0) if size else b""
    checked = _past_checked_prefix(raw, log)
    if checked is None:  # no usable record: the whole chain, as verify checks it
        existing = parse_log(raw, log.name)
        check_chain(existing, log.name)
        count, tail, digest = len(existing), existing[-2:], hashlib.sha256(raw)
    else:
        count, tail, digest = checked
    _check_head_tail(head, count, tail)
    last = tail[-1] if tail else None
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
    if sign is not None:
        entry[SIGNATURE_KEY] = sign(signing_message(entry))
    entry["hash"] = entry_hash(entry)
    line = entry_line(entry)
    try:
        written = os.write(fd, line)
        if written != len(line):
            # a short write to a regular file is a full disk
            raise OSError(errno.ENOSPC, f"short write ({written} of {len(line)} bytes)",
                          str(log))
        os.fsync(fd)
    except Exception:
        os.ftruncate(fd, size)  # no half entry left behind by a failure we see
        os.fsync(fd)
        raise
    digest.update(line)
    return entry, Checked(size + len(line), digest.hexdigest(), entry["seq"], entry["hash"])


def _past_checked_prefix(data: bytes, log: Path
                         ) -> tuple[int, list[dict[str, Any]], Any] | None:
    """Check the log's bytes ``data`` against the record of its checked prefix
    (:mod:`prespec.audit.prefix`) and the entries after that prefix one by one: the number of
    entries, the last two (or the one) of them, and a SHA-256 over ``data``. None when there is
    no record, or it names no prefix of these bytes: the caller checks the whole chain.

    The prefix must hash to the record's digest and end with the entry the record names,
    whole and hashing to its content; the entries after it must continue its chain. A break
    after the prefix is an integrity stop, as in a full check.
    """
    record = read_checked(checked_path(log))
    if record is None or record.size > len(data):
        return None
    view = memoryview(data)
    digest = hashlib.sha256(view[:record.size])
    if digest.hexdigest() != record.sha256:
        return None
    start = data.rfind(b"\n", 0, record.size - 1) + 1
    try:
        (last,) = parse_log(data[start:record.size], log.name, first_line=record.seq)
        check_chain([last], log.name, first_seq=record.seq, prev=last.get("prev", GENESIS))
    except IntegrityStop:
        return None
    if last["hash"] != record.hash:
        return None
    rest = parse_log(data[record.size:], log.name, first_line=record.seq + 1)
    check_chain(rest, log.name, first_seq=record.seq + 1, prev=record.hash)
    digest.update(view[record.size:])
    # the entry before ``last`` is named by its ``prev`` (for a head that lags one behind)
    before = [{"seq": record.seq - 1, "hash": last["prev"]}] if record.seq > 1 else []
    return record.seq + len(rest), [*before, last, *rest][-2:], digest


def check_chain(entries: list[dict[str, Any]], name: str, *, first_seq: int = 1,
                prev: str = GENESIS) -> None:
    """Raise IntegrityStop at the first entry whose seq, prev, keys or hash do not hold.

    ``first_seq`` and ``prev`` continue a chain whose earlier entries were checked already."""
    for index, entry in enumerate(entries, start=first_seq):
        where = f"{name}: entry {index}"
        missing = [k for k in (*ENTRY_KEYS, "hash") if k not in entry]
        if missing:
            raise IntegrityStop(f"{where}: missing {', '.join(missing)}")
        extra = sorted(set(entry) - set(ENTRY_KEYS) - {"hash", SIGNATURE_KEY})
        if extra:
            raise IntegrityStop(f"{where}: unexpected key {', '.join(extra)}")
        if SIGNATURE_KEY in entry and entry["action"] not in SIGNED_ACTIONS:
            raise IntegrityStop(f"{where}: a {entry['action']!r} entry carries a signature")
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
    raw = head.read_bytes()
    try:
        doc = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise IntegrityStop(f"{head.name}: not a readable head record") from None
    if not isinstance(doc, dict) or set(doc) != {"seq", "hash"}:
        raise IntegrityStop(f"{head.name}: a head record holds exactly seq and hash")
    if not isinstance(doc["seq"], int) or isinstance(doc["seq"], bool) or head_line(doc) != raw:
        raise IntegrityStop(f"{head.name}: not in the form prespec writes (edited)")
    return doc


HEAD_LAGS = "the head names the entry before the last (an append stopped before its head update)"


def check_head(entries: list[dict[str, Any]], head: Path) -> str | None:
    """The head file must name the last entry; a log shorter than its head was truncated.

    A head naming the entry before the last (or missing, for a one-entry log) is what an
    append stopped between its two writes leaves: accepted, and returned as a note. Anyone
    able to write the folder could rewrite the head anyway, so this weakens nothing.
    """
    return _check_head_tail(head, len(entries), entries[-2:])


def _check_head_tail(head: Path, count: int, tail: list[dict[str, Any]]) -> str | None:
    """``check_head`` from the number of entries and the last two of them (``seq`` and
    ``hash`` are all it reads), so that an append past a checked prefix can ask it too."""
    doc = read_head(head)
    if doc is None:
        if count == 1:
            return HEAD_LAGS
        if count:
            raise IntegrityStop(f"{head.name}: missing, but the log has {count} entries")
        return None
    if not count:
        raise IntegrityStop(f"{head.name}: names entry {doc['seq']} but the log is empty or gone")
    last = tail[-1]
    if doc["seq"] == last["seq"] and doc["hash"] == last["hash"]:
        return None
    if doc["seq"] > last["seq"]:
        raise IntegrityStop(
            f"{head.name}: names entry {doc['seq']} but the log ends at {last['seq']} "
            "(entries removed from the end)"
        )
    if count >= 2 and len(tail) >= 2 and doc["seq"] == tail[-2]["seq"] \
            and doc["hash"] == tail[-2]["hash"]:
        return HEAD_LAGS
    raise IntegrityStop(f"{head.name}: does not match the last entry of the log")


def repair_head(log: Path, head: Path) -> bool:
    """Bring a head that lags one entry behind up to date, under the log's lock; True if so."""
    if not log.exists():
        return False
    with guard.hold(log.parent, exclusive=True), _locked(log) as fd:
        size = os.fstat(fd).st_size
        entries = parse_log(os.pread(fd, size, 0), log.name) if size else []
        check_chain(entries, log.name)
        if check_head(entries, head) is None:
            return False
        replace_atomically(head, head_line(entries[-1]))
    return True


def log_size(log: Path) -> int:
    """The log's size in bytes (0 when absent). Taken before an append under the folder's
    lock, it tells afterwards whether the entry went in: a failed write is cut back."""
    try:
        return log.stat().st_size
    except FileNotFoundError:
        return 0
