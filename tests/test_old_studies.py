"""Study folders locked and run by an earlier prespec verify under this one, and their plans
keep their fingerprints. The folders under ``tests/fixtures/studies/`` are kept as that
version wrote them; never regenerate them to make a test pass.

``before-issue-13``: written by prespec at commit 8d867b5 (the demo: its plan locked, run,
then amended after that run with a reason holding U+202E in the raw form the log had then, and
run again with an overridden test, accepted). The earlier verify called both runs "the analysis
that ran is the one that was locked"; this one says which was not, and why."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

import prespec.report
from prespec import api, cli
from prespec.plan import load_plan
from prespec.workflow.verify import first_difference

FIXTURES = Path(__file__).parent / "fixtures" / "studies"
V1 = "sha256:7f1707a66696d7cb2301f395720e7f624fce4f13b8bd0d9a6c13f8c8f4a615ac"
V2 = "sha256:e7674e508a74bd31cbac5895a5ea650f6301334dad53c2c1803c6fa751a3552b"
FIRST = "reports/wound-dressing/20261203T113546Z-run"
SECOND = "reports/wound-dressing/20261203T113558Z-run"


@pytest.fixture
def study(tmp_path: Path) -> Path:
    """A copy of the old study (verify and the rerun must not need to write, but a test that
    goes on to run must not touch the fixture)."""
    folder = tmp_path / "study"
    shutil.copytree(FIXTURES / "before-issue-13", folder)
    return folder / "wound-dressing.yaml"


def test_the_old_plan_keeps_its_fingerprint(study: Path) -> None:
    assert load_plan(study).fingerprint == V2
    lock = json.loads(study.with_suffix(".lock.json").read_text("utf-8"))
    assert [v["fingerprint"] for v in lock["versions"]] == [V1, V2]


def test_the_old_study_verifies_and_says_which_run_was_the_locked_analysis(
        study: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["verify", str(study), "--expect", V1]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == ("ok    audit log: 4 entries, sequence, links and hashes intact; "
                      "head matches")
    assert out[-3] == (f"ok    run 1 (log entry 2, report {FIRST}): the locked analysis (lock "
                       "version 1); other departures on record: unexpected-group")
    assert out[-2].startswith(f"off   run 2 (log entry 4, report {SECOND}): not the locked "
                              "analysis: overrides hypotheses.H2.test pearson-chi-square → "
                              "fisher-exact")
    assert "the plan was amended after unblinding" in out[-2]
    assert out[-1] == ("files intact; 1 of 2 runs was not the locked analysis: run 2 "
                       "(overrides hypotheses.H2.test, hypotheses.H2.sparse; amended after "
                       "unblinding)")
    assert cli.main(["verify", str(study), "--strict"]) == 3


def test_the_old_reports_are_recomputed_from_their_data(study: Path) -> None:
    data = study.parent / "data" / "wound-dressing.csv"
    res = api.verify(study, rerun=data)
    assert res.passed[-1] == ("rerun: 2 report(s) recomputed from wound-dressing.csv, every "
                              "result identical (numbers to 1e-12 relative)")


def test_the_old_study_takes_another_run_and_still_verifies(
        study: Path, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    data = study.parent / "data" / "wound-dressing.csv"
    api.run(study, data)
    res = api.verify(study)
    assert [r.locked for r in res.runs] == [True, False, False]  # v2 came after unblinding
    assert cli.main(["history", str(study)]) == 0  # the old raw U+202E of the reason, shown
    out = capsys.readouterr().out
    assert "   reason: stricter alpha \\u202eafter review" in out and "\u202e" not in out


def test_numbers_agree_to_a_relative_1e_12_and_nothing_else_moves() -> None:
    p = 0.0013635007316657962  # the old report's Fisher p; recomputed ...954 (stats.tails)
    assert first_difference({"p": p}, {"p": 0.0013635007316657954}) is None
    assert first_difference({"p": p}, {"p": p * (1 + 1e-9)}) == "p"
    assert first_difference({"p": 0.0}, {"p": 2.5e-277}) == "p"  # a tail that once underflowed
    assert first_difference({"n": 181}, {"n": 182}) == "n"
    assert first_difference({"n": 10**15}, {"n": 10**15 + 1}) == "n"  # counts compare exactly
    assert first_difference({"a": True}, {"a": 1}) == "a"


# ``before-issue-15``: written by prespec at commit 85b8b4f, before the rooms were rearranged
# (issue 15): ``demo`` is ``prespec demo`` (locked and run); ``tour`` is plans/methods-tour.yaml
# on the demo's data, locked, run, amended after that run (alpha 0.05 → 0.025) and run again;
# ``safety`` is ``python -m prespec.demo.safety`` (a family over event terms), locked, run and
# rehearsed. Each must verify against its registered fingerprint and recompute identically.
BEFORE_15 = FIXTURES / "before-issue-15"
STUDIES_15 = {
    # folder: (plan file, data file, fingerprints of its locked versions, run reports)
    "demo": ("wound-dressing.yaml", "data/wound-dressing.csv",
             ["sha256:7f1707a66696d7cb2301f395720e7f624fce4f13b8bd0d9a6c13f8c8f4a615ac"], 1),
    "tour": ("methods-tour.yaml", "data/wound-dressing.csv",
             ["sha256:2c6b68cc3c720ef6b89c2435dedbe18764406850ef132c2149bcb7ab30ed389d",
              "sha256:3203204587b43c36273feb7378abc3d12c3dc6bc88ca31eb33e1e9f919e0d591"], 2),
    "safety": ("safety-review.yaml", "safety-review.csv",
               ["sha256:a9ad4a412b45f68eb171f68e72fa1e66e9a1fa8b2b363b0a2875c3a7bec5a22d"], 1),
}


@pytest.fixture(params=sorted(STUDIES_15))
def study_15(request: pytest.FixtureRequest, tmp_path: Path) -> tuple[Path, Path, list[str], int]:
    name = request.param
    plan_name, data_name, prints, runs = STUDIES_15[name]
    folder = tmp_path / name
    shutil.copytree(BEFORE_15 / name, folder)
    return folder / plan_name, folder / data_name, prints, runs


def test_studies_before_issue_15_keep_their_fingerprints(
        study_15: tuple[Path, Path, list[str], int]) -> None:
    plan, _, prints, _ = study_15
    assert load_plan(plan).fingerprint == prints[-1]
    lock = json.loads(plan.with_suffix(".lock.json").read_text("utf-8"))
    assert [v["fingerprint"] for v in lock["versions"]] == prints


def test_studies_before_issue_15_verify_against_their_first_fingerprint(
        study_15: tuple[Path, Path, list[str], int],
        capsys: pytest.CaptureFixture[str]) -> None:
    plan, _, prints, runs = study_15
    code = cli.main(["verify", str(plan), "--expect", prints[0]])
    out = capsys.readouterr().out.splitlines()
    assert code == 0, out
    assert out[0].startswith("ok    audit log: ") and out[0].endswith("head matches")
    verdicts = [line for line in out if line.split()[:2] in (["ok", "run"], ["off", "run"])]
    assert len(verdicts) == runs
    if len(prints) == 1:  # locked once, before its run: the run was the locked analysis
        assert out[-1] == "verified: files intact; the run was the locked analysis"
    else:  # amended after the first run: the second run is not the locked analysis
        assert verdicts[0].startswith("ok    run 1") and verdicts[1].startswith("off   run 2")
        assert out[-1] == ("files intact; 1 of 2 runs was not the locked analysis: run 2 "
                           "(amended after unblinding)")


def test_studies_before_issue_15_recompute_identically(
        study_15: tuple[Path, Path, list[str], int]) -> None:
    plan, data, _, runs = study_15
    res = api.verify(plan, rerun=data)
    assert res.passed[-1] == (f"rerun: {runs} report(s) recomputed from {data.name}, every "
                              "result identical (numbers to 1e-12 relative)")
