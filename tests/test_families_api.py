"""Families through the Python interface: overrides reach a family, verify --rerun recomputes it."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from prespec import api
from prespec.audit import log as audit_log
from prespec.errors import IntegrityStop
from prespec.safety_demo import write_safety_demo


def test_an_override_marks_the_family_and_a_rerun_reproduces_it(tmp_path: Path) -> None:
    plan, data = write_safety_demo(tmp_path, per_group=60)
    api.lock(plan, actor="reviewer")
    plain = api.run(plan, data, out=tmp_path / "plain", actor="reviewer")
    assert plain.results["families"][0]["pre_specified"] is True
    changed = api.run(plan, data, out=tmp_path / "changed", actor="reviewer",
                      accept_deviation="a check of the test's influence",
                      overrides={"hypotheses.AE.test": "pearson-chi-square"})
    fam = changed.results["families"][0]
    assert fam["pre_specified"] is False
    assert {m["test"] for m in fam["members"]} == {"pearson-chi-square"}
    assert [d["code"] for d in changed.results["deviations"]][:1] == ["override"]
    assert changed.entry["details"]["families"]["AE"] == [m["id"] for m in fam["members"]]
    done = api.verify(plan, rerun=data)
    assert any(line.startswith("rerun: 2 report(s) recomputed") for line in done.passed)
    stored = json.loads((tmp_path / "plain" / "results.json").read_text())
    assert stored["families"][0]["members"] == plain.results["families"][0]["members"]


def test_verify_checks_the_lock_entry_members_against_the_locked_plan(tmp_path: Path) -> None:
    plan, _ = write_safety_demo(tmp_path, per_group=20)
    api.lock(plan, actor="reviewer")
    log = tmp_path / "safety-review.audit.jsonl"
    (entry,) = [json.loads(x) for x in log.read_text().splitlines()]
    assert len(entry["details"]["families"]["AE"]) == 30
    assert api.verify(plan).passed
    # a consistent chain whose lock entry names one member fewer than the locked plan
    entry["details"]["families"]["AE"].pop()
    entry["hash"] = audit_log.entry_hash(entry)
    log.write_bytes(audit_log.entry_line(entry))
    (tmp_path / "safety-review.audit.head").write_bytes(audit_log.head_line(entry))
    with pytest.raises(IntegrityStop, match="family members differ from those its lock entry"):
        api.verify(plan)
