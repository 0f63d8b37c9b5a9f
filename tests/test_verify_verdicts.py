"""verify's verdict per run: was it the locked analysis, and if not, why; and a last line
that is true of the files and of every run (never locked, overridden, amended after
unblinding, clean). In process; the notebook step is a no-op here."""

from __future__ import annotations

from pathlib import Path

import pytest

import prespec.report
from prespec import api, audit, cli
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.workflow.verify import run_verdicts


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    data = tmp_path / "data.csv"
    data.write_text(demo_data())
    return plan, data


def verify_lines(plan: Path, capsys: pytest.CaptureFixture[str], *extra: str
                 ) -> tuple[int, list[str], str]:
    capsys.readouterr()
    status = cli.main(["verify", str(plan), *extra])
    done = capsys.readouterr()
    return status, done.out.splitlines(), done.err


def test_a_run_of_a_never_locked_plan_is_not_verified_as_locked(
        study: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    api.run(plan, data, out=plan.parent / "r1", accept_deviation="no time")
    res = api.verify(plan)
    (run,) = res.runs
    assert not run.locked and run.version is None
    assert run.reasons == ('the plan was never locked (run-without-lock, accepted: "no time")',)
    assert run.departures == ("unexpected-group",)  # the demo data hold one stray label
    assert res.summary == ("files intact; 1 of 1 run was not the locked analysis: run 1 "
                           "(never locked)")
    status, out, err = verify_lines(plan, capsys)
    assert status == 0 and err == ""
    assert out[-2:] == [
        ('off   run 1 (log entry 1, report r1): not the locked analysis: the plan was never '
        'locked (run-without-lock, accepted: "no time"); other departures on record: '
        'unexpected-group'),
        "files intact; 1 of 1 run was not the locked analysis: run 1 (never locked)"]
    assert not any(line.startswith("verified") for line in out)
    status, out, err = verify_lines(plan, capsys, "--strict")
    assert status == 3 and out[-1].startswith("files intact; 1 of 1 run was not")
    assert err == "prespec: --strict: run 1 not the locked analysis\n"


def test_expect_on_a_never_locked_plan_says_it_was_never_locked(
        study: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    api.run(plan, data, out=plan.parent / "r1", accept_deviation="no time")
    status, out, _ = verify_lines(plan, capsys, "--expect", "sha256:" + "0" * 64)
    assert status == 3
    assert out[-1] == ("FAIL  expected fingerprint: the plan was never locked (the log has no "
                       "lock entry), so nothing matches sha256:" + "0" * 64)


def test_an_overridden_run_names_each_override_with_its_values(
        study: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    api.lock(plan)
    api.run(plan, data, out=plan.parent / "r1")
    api.run(plan, data, out=plan.parent / "r2", accept_deviation="because",
            overrides={"alpha": 0.5, "hypotheses.H2.test": "fisher-exact"})
    res = api.verify(plan)
    first, second = res.runs
    assert first.locked and first.version == 1 and first.reasons == ()
    assert not second.locked and second.version == 1
    # H2's sparse switch to Fisher no longer applies once Fisher is the test: a change too
    assert second.reasons == (
        ('overrides alpha 0.05 → 0.5, hypotheses.H2.test pearson-chi-square → fisher-exact, '
        'hypotheses.H2.sparse {"min_expected": 5.0, "test": "fisher-exact"} → null '
        '(override, accepted: "because")'),)
    assert res.summary == (
        "files intact; 1 of 2 runs was not the locked analysis: run 2 (overrides alpha, "
        "hypotheses.H2.test, hypotheses.H2.sparse)")
    status, out, _ = verify_lines(plan, capsys)
    assert status == 0
    assert out[-3].startswith("ok    run 1 (log entry 2, report r1): the locked analysis "
                              "(lock version 1)")
    assert out[-2].startswith("off   run 2 (log entry 3, report r2): not the locked analysis: "
                              "overrides alpha 0.05 → 0.5, ")
    assert verify_lines(plan, capsys, "--strict")[0] == 3


def test_runs_after_an_amendment_after_unblinding_are_not_the_locked_analysis(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    api.run(plan, data, out=plan.parent / "r1")
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    api.amend(plan, reason="the committee asked")
    api.run(plan, data, out=plan.parent / "r2")
    res = api.verify(plan)
    assert [r.locked for r in res.runs] == [True, False]
    assert res.runs[1].version == 2
    assert res.runs[1].reasons == (
        ("the plan was amended after unblinding (version 2 locked after a run on the data; "
        "amended-after-unblinding)"),)
    assert res.summary == ("files intact; 1 of 2 runs was not the locked analysis: run 2 "
                           "(amended after unblinding)")


def test_a_clean_study_is_verified_and_strict_passes(
        study: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    api.lock(plan)
    status, out, _ = verify_lines(plan, capsys, "--strict")
    assert status == 0 and out[-1] == "verified: files intact; no run on record"
    api.run(plan, data, out=plan.parent / "r1")
    status, out, _ = verify_lines(plan, capsys, "--strict")
    assert status == 0
    assert out[-1] == "verified: files intact; the run was the locked analysis"
    assert out[-2] == ("ok    run 1 (log entry 2, report r1): the locked analysis (lock version "
                       "1); other departures on record: unexpected-group")
    api.run(plan, data, out=plan.parent / "r2")
    assert api.verify(plan).summary == "verified: files intact; all 2 runs were the locked analysis"


def test_an_amended_plan_before_any_run_is_the_locked_analysis(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    api.amend(plan, reason="before unblinding")
    api.run(plan, data, out=plan.parent / "r1")
    (run,) = api.verify(plan).runs
    assert run.locked and run.version == 2


def test_a_changed_plan_file_run_as_locked_is_the_locked_analysis_with_its_departure(
        study: tuple[Path, Path]) -> None:
    """The locked plan ran, so the run was the locked analysis; the changed file is listed."""
    plan, data = study
    api.lock(plan)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.10"))
    api.run(plan, data, out=plan.parent / "r1", accept_deviation="typo in a title")
    (run,) = api.verify(plan).runs
    assert run.locked
    assert run.departures == ("plan-modified-after-lock", "unexpected-group")


def _entry(seq: int, action: str, plan: str, deviations: list[dict[str, str]] | None = None,
           **details: object) -> dict[str, object]:
    return {"seq": seq, "action": action, "plan": plan, "details": details,
            "deviations": deviations or []}


def test_verdicts_follow_from_the_log_entries_alone() -> None:
    """An older log whose amend and run entries carry no amended-after-unblinding code (as a
    folder written before the code existed would) still gets the verdict from the order of
    its entries; a run whose plan is not the lock version in force is named."""
    entries = [
        _entry(1, "lock", "sha256:a", version=1),
        _entry(2, "run", "sha256:a", report="r1"),
        _entry(3, "rehearse", "sha256:a", report="h1"),
        _entry(4, "amend", "sha256:b", version=2),
        _entry(5, "look", "sha256:b", report="r2", look=1),
        _entry(6, "run", "sha256:c", report="r3"),
    ]
    first, second, third = run_verdicts(entries)
    assert first.locked and first.version == 1 and first.report == "r1"
    assert not second.locked and second.look == 1 and second.labels == (
        "amended after unblinding",)
    assert second.line.startswith("run 2 (look 1, log entry 5, report r2): not the "
                                  "locked analysis: the plan was amended after unblinding")
    assert third.labels == ("plan changed", "amended after unblinding")
    assert third.reasons[0] == "the plan that ran (sha256:c) is not lock version 2 (sha256:b)"



def test_amend_after_a_run_warns_before_it_writes(
        study: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    api.lock(plan)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    heard: list[str] = []
    api.amend(plan, reason="before any run", warn=heard.append)
    assert heard == []  # no run on record: nothing to warn of
    api.run(plan, data, out=plan.parent / "r1")
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.01"))

    def warn(message: str) -> None:  # at the warning, nothing of the amendment is written yet
        heard.append(message)
        assert len(audit.read_lock(audit.lock_path(plan))["versions"]) == 2
        assert [e["action"] for e in audit.read_log(audit.log_path(plan))][-1] == "run"

    api.amend(plan, reason="the committee asked", warn=warn)
    assert heard == [(f"{plan}: 1 run on the data on record, so this amendment comes after "
                     "unblinding: version 3 is recorded as amended-after-unblinding, and verify "
                     "reports every run of it as not the locked analysis")]
    entry = audit.read_log(audit.log_path(plan))[-1]
    assert entry["action"] == "amend"
    assert [d["code"] for d in entry["deviations"]] == ["amended-after-unblinding"]
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.02"))
    capsys.readouterr()
    assert cli.main(["amend", str(plan), "--reason", "again"]) == 0
    done = capsys.readouterr()
    assert done.err == (f"prespec: warning: {plan}: 1 run on the data on record, so this "
                        "amendment comes after unblinding: version 4 is recorded as "
                        "amended-after-unblinding, and verify reports every run of it as not "
                        "the locked analysis\n")
    assert done.out.splitlines()[0] == (f"amended {plan}: locked as version 4 (after "
                                        "unblinding: recorded as amended-after-unblinding)")


def test_a_run_before_the_plan_was_locked_says_so(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.run(plan, data, out=plan.parent / "r1", accept_deviation="no time")
    api.lock(plan)
    api.run(plan, data, out=plan.parent / "r2")
    res = api.verify(plan)
    assert res.runs[0].reasons == (
        ('the plan was not locked when it ran (locked later, log entry 2; run-without-lock, '
        'accepted: "no time")'),)
    assert res.runs[1].locked and res.runs[1].version == 1
    assert res.summary == ("files intact; 1 of 2 runs was not the locked analysis: run 1 (not "
                           "locked when it ran)")
