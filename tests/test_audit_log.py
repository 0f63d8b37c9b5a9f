"""The hash-chained log: append, chain checks, head checks, lock file reading."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest

from prespec import audit
from prespec.common.canonical import canonical_json
from prespec.errors import IntegrityStop


def _append(tmp: Path, n: int) -> list[dict]:
    log, head = tmp / "p.audit.jsonl", tmp / "p.audit.head"
    return [
        audit.append(log, head, actor="ana", action="lock" if i == 0 else "run",
                     plan="sha256:" + "a" * 64, data=None if i == 0 else "sha256:" + "b" * 64,
                     details={"i": i}, at="2026-12-01T00:00:00Z")
        for i in range(n)
    ]


def test_entries_chain_and_hash(tmp_path: Path) -> None:
    entries = _append(tmp_path, 3)
    assert [e["seq"] for e in entries] == [1, 2, 3]
    assert entries[0]["prev"] == "0" * 64
    assert entries[1]["prev"] == entries[0]["hash"]
    # The hash is SHA-256 over the RFC 8785 form of the entry without "hash" (docs/files.md).
    body = {k: v for k, v in entries[2].items() if k != "hash"}
    assert entries[2]["hash"] == hashlib.sha256(canonical_json(body)).hexdigest()
    assert audit.read_log(tmp_path / "p.audit.jsonl") == entries
    head = json.loads((tmp_path / "p.audit.head").read_text())
    assert head == {"seq": 3, "hash": entries[2]["hash"]}


def test_canonical_json_is_rfc8785() -> None:
    # RFC 8785 §3.2: keys sorted by UTF-16 code units, no whitespace, shortest number form.
    assert canonical_json({"b": 1, "a": [1.0, "x", None, True]}) == b'{"a":[1,"x",null,true],"b":1}'


def test_each_line_is_one_json_object(tmp_path: Path) -> None:
    _append(tmp_path, 2)
    lines = (tmp_path / "p.audit.jsonl").read_bytes().split(b"\n")
    assert lines[-1] == b"" and len(lines) == 3
    assert all(json.loads(line)["actor"] == "ana" for line in lines[:-1])


@pytest.mark.parametrize("field,value", [("actor", "eve"), ("seq", 7), ("details", {}),
                                         ("prev", "1" * 64), ("at", "2026-12-02T00:00:00Z")])
def test_an_edited_entry_breaks_the_chain(tmp_path: Path, field: str, value: object) -> None:
    entries = _append(tmp_path, 3)
    entries[1][field] = value
    with pytest.raises(IntegrityStop, match="entry 2"):
        audit.check_chain(entries, "p.audit.jsonl")


def test_reordered_and_removed_entries_fail(tmp_path: Path) -> None:
    entries = _append(tmp_path, 3)
    with pytest.raises(IntegrityStop):
        audit.check_chain([entries[0], entries[2], entries[1]], "log")
    with pytest.raises(IntegrityStop):
        audit.check_chain([entries[0], entries[2]], "log")


def test_truncated_log_fails_against_its_head(tmp_path: Path) -> None:
    entries = _append(tmp_path, 3)
    log = tmp_path / "p.audit.jsonl"
    text = log.read_bytes().split(b"\n")
    log.write_bytes(b"\n".join(text[:2]) + b"\n")
    short = audit.read_log(log)
    audit.check_chain(short, log.name)  # the shorter chain is itself valid
    with pytest.raises(IntegrityStop, match="entries removed from the end"):
        audit.check_head(short, tmp_path / "p.audit.head")
    assert len(entries) == 3


def test_cut_last_line_is_detected(tmp_path: Path) -> None:
    _append(tmp_path, 2)
    log = tmp_path / "p.audit.jsonl"
    log.write_bytes(log.read_bytes()[:-10])
    with pytest.raises(IntegrityStop, match="incomplete"):
        audit.read_log(log)


def test_append_refuses_a_broken_log(tmp_path: Path) -> None:
    _append(tmp_path, 2)
    log = tmp_path / "p.audit.jsonl"
    lines = log.read_text().splitlines()
    first = json.loads(lines[0])
    first["actor"] = "eve"
    log.write_text(json.dumps(first) + "\n" + lines[1] + "\n")
    before = log.read_bytes()
    with pytest.raises(IntegrityStop):
        _append(tmp_path, 1)
    assert log.read_bytes() == before  # nothing appended to a broken chain


def test_missing_head_is_detected(tmp_path: Path) -> None:
    entries = _append(tmp_path, 2)
    (tmp_path / "p.audit.head").unlink()
    with pytest.raises(IntegrityStop, match="missing"):
        audit.check_head(entries, tmp_path / "p.audit.head")
    # With one entry, a missing head is what a first append stopped before its head leaves.
    assert audit.check_head(entries[:1], tmp_path / "p.audit.head") == audit.log.HEAD_LAGS


def test_lock_file_must_hold_versions(tmp_path: Path) -> None:
    path = tmp_path / "p.lock.json"
    assert audit.read_lock(path) is None
    path.write_text('{"prespec": 1, "versions": []}')
    with pytest.raises(IntegrityStop):
        audit.read_lock(path)
    path.write_text("{not json")
    with pytest.raises(IntegrityStop):
        audit.read_lock(path)
    path.write_text('{"prespec": 1, "versions": [{"version": 1}]}')
    with pytest.raises(IntegrityStop, match="version 1 lacks fingerprint, plan"):
        audit.read_lock(path)
    doc = {"prespec": 1, "versions": [{"version": 1, "fingerprint": "sha256:0", "plan": {},
                                       "plan_file_sha256": "sha256:1", "previous": None,
                                       "reason": None, "at": "2026-12-01T00:00:00Z",
                                       "actor": "ana", "environment": {}}]}
    audit.write_lock(path, doc)
    assert audit.read_lock(path) == doc
    assert not list(tmp_path.glob(".*tmp"))  # the temporary file was renamed, not left behind


def _hammer(folder: str, worker: int) -> None:
    log, head = Path(folder) / "p.audit.jsonl", Path(folder) / "p.audit.head"
    for i in range(15):
        audit.append(log, head, actor=f"w{worker}", action="run", plan="sha256:" + "a" * 64,
                     data=None, details={"i": i})


def test_concurrent_appends_keep_one_chain(tmp_path: Path) -> None:
    import multiprocessing

    ctx = multiprocessing.get_context("fork")
    procs = [ctx.Process(target=_hammer, args=(str(tmp_path), w)) for w in range(3)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(30)
    assert all(p.exitcode == 0 for p in procs)
    entries = audit.read_log(tmp_path / "p.audit.jsonl")
    assert len(entries) == 45
    audit.check_chain(entries, "log")
    audit.check_head(entries, tmp_path / "p.audit.head")
