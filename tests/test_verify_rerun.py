"""``verify --rerun DATA``: a report's results recomputed from the data must be identical."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import prespec.report
from prespec import api, audit, cli
from prespec.audit.log import entry_hash, entry_line, head_line
from prespec.audit.manifest import write_manifest
from prespec.common.canonical import file_sha256
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import IntegrityStop
from prespec.workflow.verify import first_difference


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    plan, data = tmp_path / "trial.yaml", tmp_path / "data.csv"
    plan.write_text(PLAN_TEXT)
    data.write_text(demo_data())
    api.lock(plan)
    return plan, data


def _rewrite_trail(plan: Path, folder: Path) -> None:
    """What a careful forger does after editing a report: a new manifest, the run entry
    pointing at it, every later hash and the head recomputed."""
    manifest = write_manifest(folder)
    log = audit.log_path(plan)
    entries = audit.read_log(log)
    rel = folder.relative_to(plan.parent).as_posix()
    prev = entries[0]["prev"]
    for entry in entries:
        if entry["details"].get("report") == rel:
            entry["details"]["manifest"] = manifest
        entry["prev"] = prev
        entry["hash"] = entry_hash(entry)
        prev = entry["hash"]
    log.write_bytes(b"".join(entry_line(e) for e in entries))
    audit.head_path(plan).write_bytes(head_line(entries[-1]))


def test_rerun_confirms_identical_results(study: tuple[Path, Path],
                                          capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    api.run(plan, data, out=plan.parent / "r1")
    plan.write_text(PLAN_TEXT.replace("multiplicity: holm", "multiplicity: hochberg"))
    api.amend(plan, reason="Hochberg")
    api.run(plan, data, out=plan.parent / "r2", overrides={"hypotheses.H2.test": "fisher-exact"},
            accept_deviation="exact test asked by the monitor")
    assert cli.main(["verify", str(plan), "--rerun", str(data)]) == 0
    out = capsys.readouterr().out
    assert "ok    rerun: 2 report(s) recomputed from data.csv, every result identical" in out
    res = api.verify(plan, rerun=data, report="r1")
    assert res.passed[-1].startswith("rerun: 1 report(s)")


def test_rerun_names_the_first_differing_field(study: tuple[Path, Path]) -> None:
    plan, data = study
    out = api.run(plan, data, out=plan.parent / "r1").folder
    path = out / "results.json"
    doc = json.loads(path.read_text())
    true_p = doc["hypotheses"][1]["p_value"]
    doc["hypotheses"][1]["p_value"] = 0.04
    path.write_text(json.dumps(doc, indent=2, ensure_ascii=False) + "\n")
    _rewrite_trail(plan, out)
    api.verify(plan)  # the rewritten trail is self-consistent
    with pytest.raises(IntegrityStop) as caught:
        api.verify(plan, rerun=data)
    assert str(caught.value) == (f"rerun r1: hypotheses[1].p_value differs: the report has "
                                 f"0.04, the recomputation {json.dumps(true_p)}")


def test_rerun_needs_the_data_the_report_was_made_from(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.run(plan, data, out=plan.parent / "r1")
    other = plan.parent / "other.csv"
    other.write_text(data.read_text().replace(",Gauze,yes,0", ",Gauze,yes,1"))
    with pytest.raises(IntegrityStop, match="no run in the log was made from other.csv"):
        api.verify(plan, rerun=other)
    with pytest.raises(IntegrityStop, match=f"the report was made from {file_sha256(data)}"):
        api.verify(plan, rerun=other, report="r1")
    with pytest.raises(IntegrityStop, match="the log names no run report r9"):
        api.verify(plan, rerun=data, report="r9")


def test_moment_dependent_fields_do_not_count(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.run(plan, data, out=plan.parent / "r1")
    changed = plan.parent / "changed.csv"
    changed.write_text(data.read_text().replace(",Gauze,yes,0", ",Gauze,yes,1"))
    second = api.run(plan, changed, out=plan.parent / "r2", actor="someone")
    assert "data-changed-since-last-run" in [d["code"] for d in second.results["deviations"]]
    api.verify(plan, rerun=changed)  # recomputed without the earlier run: still identical


def test_first_difference() -> None:
    assert first_difference({"a": [1, {"b": 2}]}, {"a": [1, {"b": 3}]}) == "a[1].b"
    assert first_difference({"a": [1]}, {"a": [1, 2]}) == "a[1]"
    assert first_difference({"a": 1}, {"a": 1.0}) is None  # the same JSON number
    assert first_difference({"a": True}, {"a": 1}) == "a"
    assert first_difference({"a": 1}, {"b": 1}) == "a"


def test_a_report_whose_design_power_left_out_the_far_tail_still_verifies(
        study: tuple[Path, Path], monkeypatch: pytest.MonkeyPatch) -> None:
    # A report written when the power of a two-sided test counted one tail only (its design
    # entry has no "two_sided_power" key) must keep verifying under --rerun.
    import prespec.workflow.execute
    import prespec.workflow.verify

    plan, data = study
    current = prespec.workflow.execute.design_entry
    with monkeypatch.context() as m:
        m.setattr(prespec.workflow.execute, "design_entry",
                  lambda p, kind, hyps: current(p, kind, hyps, both_tails=False))
        old = api.run(plan, data, out=plan.parent / "old").results
    new = api.run(plan, data, out=plan.parent / "new").results
    assert "two_sided_power" not in old["design"]
    assert new["design"]["two_sided_power"] == "both tails"
    before = old["design"]["hypotheses"][0]["power_at_achieved"]
    after = new["design"]["hypotheses"][0]["power_at_achieved"]
    assert after > before  # the far tail, now counted
    assert api.verify(plan, rerun=data).passed[-1] == (
        "rerun: 2 report(s) recomputed from data.csv, every result identical (numbers to 1e-12 relative)")
    with monkeypatch.context() as m:  # without the old rule, the old report would not verify
        m.setattr(prespec.workflow.verify, "_design_as_written", lambda stored, again, model: None)
        with pytest.raises(IntegrityStop, match=r"rerun old: design\.hypotheses\[0\]\."
                                                r"power_at_achieved differs"):
            api.verify(plan, rerun=data, report="old")
