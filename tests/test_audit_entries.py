"""The audit log entries' models (audit/entries.py): every entry of the logs an earlier prespec
wrote (tests/fixtures/studies/) and of a study run today validates against ``prespec schema
--of log-entry``, checked by jsonschema (a validator we did not write), and goes through the
models to the very bytes of its line; details the models do not hold are refused as an entry
is written, and verify names the key of an entry that holds them."""

from __future__ import annotations

import json
import shutil
from pathlib import Path
from typing import Any

import jsonschema
import pytest
from pydantic import ValidationError

import prespec.report
from prespec import api, audit, cli
from prespec.audit.entries import (
    DesignEntry,
    ReportEntry,
    VersionEntry,
    checked,
    read_entry,
)
from prespec.audit.log import entry_line
from prespec.common.records import first_problem
from prespec.demo.wound import demo_data

ROOT = Path(__file__).parents[1]
FIXTURES = ROOT / "tests" / "fixtures" / "studies"
OLD_LOGS = sorted(FIXTURES.rglob("*.audit.jsonl"))


@pytest.fixture(scope="module")
def validator() -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(api.schema("log-entry"))


def _lines(log: Path) -> list[tuple[bytes, dict[str, Any]]]:
    return [(line, json.loads(line)) for line in log.read_bytes().splitlines(keepends=True)]


def test_the_schema_is_a_draft_2020_12_schema(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["schema", "--of", "log-entry"]) == 0
    schema = json.loads(capsys.readouterr().out)
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["title"] == "prespec audit log entry"
    assert schema == api.schema("log-entry")
    with pytest.raises(SystemExit) as stopped:  # argparse: not one of the three
        cli.main(["schema", "--of", "lock"])
    assert stopped.value.code == 2
    assert "invalid choice: 'lock'" in capsys.readouterr().err


def test_there_are_old_logs_to_check() -> None:
    actions = sorted({entry["action"] for log in OLD_LOGS for _, entry in _lines(log)})
    assert actions == ["amend", "lock", "rehearse", "run"]


def _check(line: bytes, entry: dict[str, Any], validator: jsonschema.Draft202012Validator
           ) -> None:
    assert list(validator.iter_errors(entry)) == []
    read = read_entry(entry)
    assert entry_line(read.dumped()) == entry_line(entry)  # the bytes prespec writes
    assert read.dumped() == entry
    assert checked(entry["action"], entry["details"], entry["deviations"]) == entry["details"]
    kind = {"lock": VersionEntry, "amend": VersionEntry, "design": DesignEntry}
    assert isinstance(read, kind.get(entry["action"], ReportEntry))
    assert line in (entry_line(entry), json.dumps(entry, ensure_ascii=False).encode() + b"\n")


@pytest.mark.parametrize("log", OLD_LOGS, ids=lambda p: str(p.relative_to(FIXTURES)))
def test_every_old_log_entry_validates_and_keeps_its_bytes(
        log: Path, validator: jsonschema.Draft202012Validator) -> None:
    for line, entry in _lines(log):
        _check(line, entry, validator)


def test_every_kind_of_entry_written_today_validates(
        tmp_path: Path, validator: jsonschema.Draft202012Validator,
        monkeypatch: pytest.MonkeyPatch) -> None:
    """lock (signed), design, rehearse, run, amend, run with an override, a look."""
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    plan = tmp_path / "wound-dressing.yaml"
    shutil.copy(ROOT / "plans" / "wound-dressing.yaml", plan)
    data = tmp_path / "data.csv"
    data.write_text(demo_data(), encoding="utf-8")
    key = api.new_key(tmp_path / "monitor")
    api.lock(plan, actor="models", sign=key.private)
    api.design(plan, actor="models")
    api.rehearse(plan, data, actor="models")
    api.run(plan, data, actor="models")
    plan.write_text(plan.read_text().replace("alpha: 0.05", "alpha: 0.04"))
    api.amend(plan, reason="a stricter alpha", actor="models")
    api.run(plan, data, actor="models", accept_deviation="checking",
            overrides={"hypotheses.H2.test": "fisher-exact"})
    lines = _lines(audit.log_path(plan))
    assert [e["action"] for _, e in lines] == ["lock", "design", "rehearse", "run", "amend",
                                               "run"]
    assert "signature" in lines[0][1] and lines[4][1]["details"]["changes"]
    for line, entry in lines:
        _check(line, entry, validator)


LOOKS_PLAN = """\
prespec: 1
title: Film dressing versus gauze, two looks (invented)
data:
  id: participant
  group: arm
  groups: [film, gauze]
  planned_n: {film: 100, gauze: 100}
outcomes:
  infection: {column: infected, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
hypotheses:
  - id: H1
    outcome: infection
    compare: [film, gauze]
    test: two-proportion-z
    looks:
      sizes: [100, 200]
      efficacy: lan-demets-obrien-fleming
"""


def _looks_data(path: Path, per_arm: int) -> Path:
    rows = [f"{i},{arm},{1 if i % (5 if arm == 'film' else 4) == 0 else 0}"
            for arm in ("film", "gauze") for i in range(per_arm)]
    path.write_text("participant,arm,infected\n" + "\n".join(
        f"{n},{r.split(',', 1)[1]}" for n, r in enumerate(rows)) + "\n", encoding="utf-8")
    return path


def test_looks_write_entries_that_validate(
        tmp_path: Path, validator: jsonschema.Draft202012Validator,
        monkeypatch: pytest.MonkeyPatch) -> None:
    """An interim look and the final run of a plan with looks: their details hold the look."""
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    plan = tmp_path / "looks.yaml"
    plan.write_text(LOOKS_PLAN, encoding="utf-8")
    api.lock(plan, actor="models")
    api.run(plan, _looks_data(tmp_path / "look1.csv", 50), actor="models", look=1)
    api.run(plan, _looks_data(tmp_path / "final.csv", 100), actor="models")
    lines = _lines(audit.log_path(plan))
    assert [e["action"] for _, e in lines] == ["lock", "look", "run"]
    assert [(e["details"]["look"], e["details"]["of"]) for _, e in lines[1:]] == [(1, 2), (2, 2)]
    assert [h["analysed"] for h in lines[1][1]["details"]["hypotheses"]] == [100]
    for line, entry in lines:
        _check(line, entry, validator)


def test_details_the_models_do_not_hold_are_refused_before_writing() -> None:
    good = {"report": "reports/x/20270101T000000Z-run", "manifest": "sha256:" + "0" * 64}
    assert checked("run", good, []) == good
    with pytest.raises(ValidationError) as caught:
        checked("run", {**good, "manifest": "0" * 64}, [])
    assert first_problem(caught.value).startswith("manifest: String should match pattern")
    with pytest.raises(ValidationError) as caught:
        checked("lock", good, [])
    assert first_problem(caught.value) == "version: Field required"
    with pytest.raises(ValidationError) as caught:
        checked("run", good, [{"code": "override", "detail": "x", "expected": "a"}])
    assert first_problem(caught.value) == "found: Field required"
    with pytest.raises(ValueError, match="unknown log action 'publish'"):
        checked("publish", good, [])


def test_verify_names_the_key_of_an_entry_the_models_cannot_read(tmp_path: Path) -> None:
    """A log whose chain holds but whose run entry has no report (written by hand through
    log.append, which checks no details) fails verify with the entry and the key."""
    plan = tmp_path / "p.yaml"
    shutil.copy(ROOT / "plans" / "wound-dressing.yaml", plan)
    audit.append(audit.log_path(plan), audit.head_path(plan), actor="someone", action="run",
                 plan="sha256:" + "a" * 64, data="sha256:" + "b" * 64, details={"i": 0})
    with pytest.raises(Exception) as caught:
        api.verify(plan)
    assert str(caught.value) == "p.audit.jsonl: entry 1 (run): details.report: Field required"


def test_an_unknown_key_of_another_prespec_is_ignored_as_read() -> None:
    _, entry = _lines(OLD_LOGS[0])[0]
    later = {**entry, "details": {**entry["details"], "witness": "a later field"}}
    assert read_entry(later).dumped() == entry
