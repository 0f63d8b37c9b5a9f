"""Families through the Python interface: overrides reach a family, verify --rerun recomputes it."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from prespec import api
from prespec.audit import log as audit_log
from prespec.demo.safety import write_safety_demo
from prespec.errors import BadInput, IntegrityStop


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


MIXED = """\
prespec: 1
title: One row per participant, an ordinary hypothesis beside a family (invented)
data:
  id: participant
  group: gel
  groups: [new, standard]
outcomes:
  reported:
    column: had_event
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
design:
  assumed: {new: 0.3, standard: 0.15}
  power: 0.8
hypotheses:
  - id: H1
    outcome: reported
    compare: [new, standard]
    test: pearson-chi-square
  - id: AE
    outcome: reported
    compare: [new, standard]
    test: fisher-exact
    over: worst_term
    flag_method: benjamini-hochberg
"""


def test_a_mixed_plan_runs_both_and_design_sizes_only_the_ordinary(tmp_path: Path) -> None:
    rng = np.random.default_rng(4)
    n = 240
    gel = np.array(["new", "standard"] * (n // 2))
    frame = pd.DataFrame({"participant": [f"U{i}" for i in range(n)], "gel": gel,
                          "worst_term": rng.choice(["dryness", "redness", "itching"], n),
                          "had_event": (rng.random(n) < np.where(gel == "new", 0.3, 0.15))
                          .astype(int).astype(str)})
    plan, data = tmp_path / "mixed.yaml", tmp_path / "mixed.csv"
    plan.write_text(MIXED)
    frame.to_csv(data, index=False)
    doc = api.design(plan, actor="reviewer")
    assert [h["id"] for h in doc["hypotheses"]] == ["H1"]
    api.lock(plan, actor="reviewer")
    out = api.run(plan, data, out=tmp_path / "report", actor="reviewer")
    (h1,) = out.results["hypotheses"]
    assert h1["id"] == "H1" and h1["p_adjusted"] == h1["p_value"]  # Holm over H1 alone
    assert h1["table"]["totals"] == [120, 120]
    fam = out.results["families"][0]
    assert [m["level"] for m in fam["members"]] == ["dryness", "itching", "redness"]
    assert sum(sum(m["table"]["totals"]) for m in fam["members"]) == n
    assert out.results["groups"]["reported"][0]["total"] == 120  # the per-unit summary stays


def test_design_refuses_a_plan_of_families_only(tmp_path: Path) -> None:
    plan, _ = write_safety_demo(tmp_path, per_group=20)
    text = plan.read_text().replace("hypotheses:", "design:\n  assumed: {new: 0.2, standard: "
                                    "0.1}\n  power: 0.8\nhypotheses:")
    plan.write_text(text)
    with pytest.raises(BadInput, match="this plan has only families"):
        api.design(plan, actor="reviewer")


def test_the_safety_demo_module_writes_its_plan_and_data_and_says_where(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import os
    import subprocess
    import sys

    from prespec.demo import safety as safety_demo

    folder = tmp_path / "gel"
    assert safety_demo.main([str(folder)]) == 0
    plan, data = folder / "safety-review.yaml", folder / "safety-review.csv"
    assert capsys.readouterr().out == (
        "Wrote the invented safety review (demonstration data, nothing real):\n"
        f"  plan: {plan}\n  data: {data}\n"
        f"Lock and run it: prespec lock {plan} && prespec run {plan} {data}\n")
    assert plan.read_text() == safety_demo.PLAN_TEXT
    assert data.read_text() == safety_demo.safety_frame().to_csv(index=False)
    (folder / "mine.txt").write_text("keep")
    assert safety_demo.main([str(folder)]) == 2
    got = capsys.readouterr()
    assert got.out == "" and got.err == (
        f"prespec: {folder}: exists and holds other files; choose an empty folder\n")
    # run as `python -m prespec.demo.safety` (the default folder, in the working directory)
    import prespec

    env = {**os.environ, "PYTHONPATH": str(Path(prespec.__file__).parents[1])}
    done = subprocess.run([sys.executable, "-m", "prespec.demo.safety"], cwd=tmp_path, env=env,
                          capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    assert (tmp_path / "safety-demo" / "safety-review.csv").is_file()
    assert "  plan: safety-demo/safety-review.yaml\n" in done.stdout
