"""The record of the log's checked prefix: an append checks only what was written since the
last one, and still never appends to a log that was edited, cut, extended by hand, or whose
record was deleted or forged (prespec.audit.prefix)."""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path
from typing import Any

import pytest

from prespec import audit
from prespec.audit import log as audit_log
from prespec.audit.prefix import Checked, checked_path, read_checked
from prespec.errors import IntegrityStop

FP = "sha256:" + "a" * 64
FIXTURES = Path(__file__).parent / "fixtures" / "studies"


def _paths(tmp: Path) -> tuple[Path, Path, Path]:
    log = tmp / "p.audit.jsonl"
    return log, tmp / "p.audit.head", checked_path(log)


def _append(tmp: Path, n: int, actor: str = "ana") -> list[dict[str, Any]]:
    log, head, _ = _paths(tmp)
    return [audit.append(log, head, actor=actor, action="run", plan=FP,
                         data="sha256:" + "b" * 64, details={"i": i},
                         at="2026-12-01T00:00:00Z") for i in range(n)]


class Hashes:
    """Counts the entries whose canonical hash an append recomputes (the chain check's work)."""

    def __init__(self, monkeypatch: pytest.MonkeyPatch) -> None:
        self.count = 0
        real = audit_log.entry_hash

        def counted(entry: dict[str, Any]) -> str:
            self.count += 1
            return real(entry)

        monkeypatch.setattr(audit_log, "entry_hash", counted)

    def during(self, fn: Any) -> int:
        self.count = 0
        fn()
        return self.count


def test_the_record_names_the_whole_log_after_each_append(tmp_path: Path) -> None:
    entries = _append(tmp_path, 3)
    log, _, record = _paths(tmp_path)
    raw = log.read_bytes()
    assert record.name == "p.audit.checked"
    assert json.loads(record.read_text()) == {
        "bytes": len(raw), "sha256": hashlib.sha256(raw).hexdigest(),  # hashlib.sha256
        "seq": 3, "hash": entries[-1]["hash"]}
    assert read_checked(record) == Checked(len(raw), hashlib.sha256(raw).hexdigest(), 3,
                                           entries[-1]["hash"])


def test_an_append_past_the_record_rehashes_no_earlier_entry(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The cost that grew with the log: re-hashing every entry's canonical form. With the
    record, an append at 60 entries hashes as many entries as one at 2: the prefix's last
    entry (its junction) and the new one."""
    _append(tmp_path, 1)
    hashes = Hashes(monkeypatch)
    assert hashes.during(lambda: _append(tmp_path, 1)) == 2
    _append(tmp_path, 58)
    assert hashes.during(lambda: _append(tmp_path, 1)) == 2
    # without the record: every entry of the chain, and the record is written anew
    _, _, record = _paths(tmp_path)
    record.unlink()
    assert hashes.during(lambda: _append(tmp_path, 1)) == 61 + 1
    assert read_checked(record).seq == 62  # type: ignore[union-attr]
    assert hashes.during(lambda: _append(tmp_path, 1)) == 2
    log, head, _ = _paths(tmp_path)
    entries = audit.read_log(log)
    audit.check_chain(entries, log.name)
    assert audit.check_head(entries, head) is None and len(entries) == 63


def test_entries_written_since_the_record_are_checked_one_by_one(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A record left behind (an append stopped before it) names a shorter prefix; the entries
    after it are parsed and checked, and the next record covers them all."""
    _append(tmp_path, 2)
    log, _, record = _paths(tmp_path)
    older = record.read_bytes()
    _append(tmp_path, 3)
    record.write_bytes(older)
    hashes = Hashes(monkeypatch)
    assert hashes.during(lambda: _append(tmp_path, 1)) == 1 + 3 + 1
    assert read_checked(record).seq == 6  # type: ignore[union-attr]
    assert read_checked(record).size == log.stat().st_size  # type: ignore[union-attr]


def _edit_inside(log: Path, number: int, old: bytes, new: bytes) -> None:
    lines = log.read_bytes().split(b"\n")
    assert old in lines[number - 1] and len(old) == len(new)
    lines[number - 1] = lines[number - 1].replace(old, new)
    log.write_bytes(b"\n".join(lines))


def _refused(tmp: Path, match: str) -> None:
    log, head, record = _paths(tmp)
    before = (log.read_bytes(), head.read_bytes() if head.exists() else None,
              record.read_bytes() if record.exists() else None)
    with pytest.raises(IntegrityStop, match=match):
        _append(tmp, 1)
    after = (log.read_bytes(), head.read_bytes() if head.exists() else None,
             record.read_bytes() if record.exists() else None)
    assert after == before  # nothing appended, nothing rewritten


def test_an_entry_edited_inside_the_checked_prefix_is_refused(tmp_path: Path) -> None:
    _append(tmp_path, 5)
    log, _, _ = _paths(tmp_path)
    _edit_inside(log, 2, b'"actor": "ana"', b'"actor": "eve"')  # the same length, the same form
    _refused(tmp_path, r"p\.audit\.jsonl: entry 2: hash does not match its content")


def test_an_edited_entry_with_its_hash_recomputed_is_refused(tmp_path: Path) -> None:
    entries = _append(tmp_path, 4)
    log, _, _ = _paths(tmp_path)
    edited = {**entries[2], "actor": "eve"}
    edited["hash"] = audit.entry_hash(edited)
    lines = log.read_bytes().split(b"\n")
    lines[2] = audit_log.entry_line(edited).rstrip(b"\n")
    log.write_bytes(b"\n".join(lines))
    _refused(tmp_path, "entry 4: prev does not match the hash of entry 3")


def test_the_last_entry_of_the_prefix_edited_is_refused(tmp_path: Path) -> None:
    _append(tmp_path, 3)
    log, _, _ = _paths(tmp_path)
    _edit_inside(log, 3, b'"actor": "ana"', b'"actor": "eve"')
    _refused(tmp_path, "entry 3: hash does not match its content")


@pytest.mark.parametrize("keep", [0, 2, 3])
def test_a_log_cut_by_whole_entries_is_refused(tmp_path: Path, keep: int) -> None:
    _append(tmp_path, 4)
    log, _, _ = _paths(tmp_path)
    log.write_bytes(b"".join(log.read_bytes().splitlines(keepends=True)[:keep]))
    _refused(tmp_path, "names entry 4 but the log (is empty|ends at 3|ends at 2)")


def test_a_log_cut_back_to_an_older_record_is_refused(tmp_path: Path) -> None:
    """Entries removed from the end, and the record put back as it was then: the prefix
    matches, and the head still names the last entry that was cut."""
    _append(tmp_path, 2)
    log, _, record = _paths(tmp_path)
    size, older = log.stat().st_size, record.read_bytes()
    _append(tmp_path, 3)
    log.write_bytes(log.read_bytes()[:size])
    record.write_bytes(older)
    _refused(tmp_path, r"names entry 5 but the log ends at 2 \(entries removed from the end\)")


def test_a_log_cut_inside_a_line_is_refused(tmp_path: Path) -> None:
    _append(tmp_path, 3)
    log, _, _ = _paths(tmp_path)
    log.write_bytes(log.read_bytes()[:-7])
    _refused(tmp_path, "the last line is incomplete")


@pytest.mark.parametrize("garbage,match", [
    (b"garbage\n", r"p\.audit\.jsonl:4: not a JSON entry"),
    (b'{"seq": 4}', "the last line is incomplete"),
    (b"\n", r"p\.audit\.jsonl:4: not a JSON entry"),
])
def test_garbage_appended_after_the_prefix_is_refused(tmp_path: Path, garbage: bytes,
                                                      match: str) -> None:
    _append(tmp_path, 3)
    log, _, _ = _paths(tmp_path)
    with log.open("ab") as fh:
        fh.write(garbage)
    _refused(tmp_path, match)


def test_a_well_formed_entry_appended_by_hand_is_refused(tmp_path: Path) -> None:
    """An entry in prespec's own form, hashing to its content, but not linked to the chain."""
    entries = _append(tmp_path, 3)
    log, _, _ = _paths(tmp_path)
    forged = {**entries[-1], "seq": 4, "prev": "1" * 64, "actor": "eve"}
    forged["hash"] = audit.entry_hash(forged)
    with log.open("ab") as fh:
        fh.write(audit_log.entry_line(forged))
    _refused(tmp_path, "entry 4: prev does not match the hash of entry 3")


def test_a_deleted_record_falls_back_to_the_whole_chain(tmp_path: Path) -> None:
    _append(tmp_path, 4)
    log, _, record = _paths(tmp_path)
    _edit_inside(log, 1, b'"actor": "ana"', b'"actor": "eve"')
    record.unlink()
    _refused(tmp_path, "entry 1: hash does not match its content")
    assert not record.exists()


def _forged(record: Path, **change: Any) -> None:
    doc = json.loads(record.read_text())
    doc.update(change)
    record.write_text(json.dumps(doc) + "\n")


@pytest.mark.parametrize("forge", [
    lambda r: r.write_text("not a record\n"),
    lambda r: r.write_text(""),
    lambda r: _forged(r, bytes=10 ** 9),  # longer than the log
    lambda r: _forged(r, sha256="0" * 64),
    lambda r: _forged(r, seq=2),  # 2 entries claimed, 4 lines hashed
    lambda r: _forged(r, hash="f" * 64),
    lambda r: _forged(r, extra=1),
    lambda r: r.write_text(r.read_text().replace(", ", ",")),  # not the form prespec writes
])
def test_a_forged_record_falls_back_to_the_whole_chain(tmp_path: Path, forge: Any) -> None:
    """A record that names no prefix of the log is not used: the edit in entry 2 is found
    by the full check."""
    _append(tmp_path, 4)
    log, _, record = _paths(tmp_path)
    _edit_inside(log, 2, b'"actor": "ana"', b'"actor": "eve"')
    forge(record)
    _refused(tmp_path, "entry 2: hash does not match its content")


@pytest.mark.parametrize("forge", [
    lambda r: r.write_text("not a record\n"),
    lambda r: _forged(r, sha256="0" * 64),
    lambda r: _forged(r, bytes=100),  # a size inside a line
])
def test_a_damaged_record_over_an_intact_log_is_rewritten(tmp_path: Path, forge: Any) -> None:
    _append(tmp_path, 3)
    log, _, record = _paths(tmp_path)
    forge(record)
    (entry,) = _append(tmp_path, 1)
    raw = log.read_bytes()
    assert read_checked(record) == Checked(len(raw), hashlib.sha256(raw).hexdigest(), 4,
                                           entry["hash"])


def test_a_record_forged_to_match_an_edited_log_leaves_the_edit_for_verify(
        tmp_path: Path) -> None:
    """The record has no secret (see prespec.audit.prefix): whoever rewrites it to hash an
    edited log gets one append past the check, as one who re-hashes the chain would; the
    edit is still there for verify's chain check, which never reads the record, to find."""
    _append(tmp_path, 4)
    log, _, record = _paths(tmp_path)
    _edit_inside(log, 2, b'"actor": "ana"', b'"actor": "eve"')
    _forged(record, sha256=hashlib.sha256(log.read_bytes()).hexdigest())
    _append(tmp_path, 1)  # the documented limit: the forged record is believed
    with pytest.raises(IntegrityStop, match="entry 2: hash does not match its content"):
        audit.check_chain(audit.read_log(log), log.name)


def test_a_head_one_behind_is_brought_up_to_date_past_the_record(tmp_path: Path) -> None:
    _, head, _ = _paths(tmp_path)
    _append(tmp_path, 3)
    behind = head.read_bytes()
    _append(tmp_path, 1)
    head.write_bytes(behind)  # an append stopped between the log and the head
    (entry,) = _append(tmp_path, 1)
    assert json.loads(head.read_text()) == {"seq": 5, "hash": entry["hash"]}
    head.write_bytes(behind)  # two behind: fails, as without the record
    _refused(tmp_path, "does not match the last entry of the log")


def test_an_old_log_gets_its_record_on_its_first_append(tmp_path: Path) -> None:
    """A log written before the record existed (here in the raw form of its time): the first
    append checks it whole and writes the record, the next goes past it."""
    folder = tmp_path / "study"
    shutil.copytree(FIXTURES / "before-issue-13", folder)
    plan = folder / "wound-dressing.yaml"
    log, head = audit.log_path(plan), audit.head_path(plan)
    record = checked_path(log)
    assert not record.exists() and record.name == "wound-dressing.audit.checked"
    old = log.read_bytes()
    for _ in range(2):
        audit.append(log, head, actor="ana", action="design", plan=FP, data=None)
    entries = audit.read_log(log)
    audit.check_chain(entries, log.name)
    assert audit.check_head(entries, head) is None
    assert [e["seq"] for e in entries] == [1, 2, 3, 4, 5, 6]
    assert log.read_bytes().startswith(old)
    assert read_checked(record) == Checked(log.stat().st_size,
                                           hashlib.sha256(log.read_bytes()).hexdigest(), 6,
                                           entries[-1]["hash"])
