"""The record of the log's checked prefix, so that an append need not re-check the whole chain.

After each append, ``<stem>.audit.checked`` (beside the head) is replaced atomically with the
length in bytes of the log as it then stood, the SHA-256 of those bytes, and the ``seq`` and
``hash`` of its last entry: the log up to there was checked, entry by entry, before that
append wrote. The next append re-hashes those bytes as raw bytes (one SHA-256 pass at the speed
of the hash, no parsing, no canonical JSON) and, when they still match, parses and checks only
the entries after them, joined to the prefix by its last entry's ``hash``. A record that is
missing, unreadable, longer than the log or that disagrees with it in any way is ignored: the
append checks the whole chain as before and writes a new one.

The record is a speed-up, never evidence: ``verify`` does not read it and re-derives every
hash. Whoever can write the study folder could forge it consistently with an edited log and
get an append past an edit inside the prefix, but that writer could as well re-hash the chain
itself, which nothing but ``--expect`` and signatures can show; verify still fails on such an
edit. Only ``audit/`` writes it.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from pathlib import Path

from .files import replace_atomically

_HEX64 = re.compile(r"[0-9a-f]{64}")


def checked_path(log: Path) -> Path:
    """``<stem>.audit.checked`` beside ``<stem>.audit.jsonl``."""
    return log.with_suffix(".checked")


@dataclass(frozen=True)
class Checked:
    """The first ``size`` bytes of the log, their SHA-256 (hex), and the last entry in them."""

    size: int
    sha256: str
    seq: int
    hash: str

    def line(self) -> bytes:
        return (json.dumps({"bytes": self.size, "sha256": self.sha256, "seq": self.seq,
                            "hash": self.hash}) + "\n").encode("utf-8")


def read_checked(path: Path) -> Checked | None:
    """The record, or None when it is absent or not exactly in the form prespec writes."""
    try:
        raw = path.read_bytes()
        doc = json.loads(raw.decode("utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None
    if not isinstance(doc, dict) or set(doc) != {"bytes", "sha256", "seq", "hash"}:
        return None
    size, digest, seq, last = doc["bytes"], doc["sha256"], doc["seq"], doc["hash"]
    if not all(isinstance(n, int) and not isinstance(n, bool) and n > 0 for n in (size, seq)):
        return None
    if not all(isinstance(h, str) and _HEX64.fullmatch(h) for h in (digest, last)):
        return None
    record = Checked(size, digest, seq, last)
    return record if record.line() == raw else None


def write_checked(path: Path, record: Checked) -> None:
    """Replace the record atomically. It is written after the head, so a failure here (a full
    disk) is raised like a failed head write: the entry counts, and the record left in place,
    if any, still names a prefix of the log (a missing one only costs a full check). It is
    not fsynced: the log it describes was, and a record lost or emptied by a power cut names
    no prefix, so the next append checks the whole chain."""
    replace_atomically(path, record.line(), durable=False)
