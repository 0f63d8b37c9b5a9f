"""The command line in process: exit statuses, one-line errors, nothing written on failure."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from test_plan_validate import CASES, Bad, _line_of

from prespec import cli
from prespec.demo.wound import PLAN_TEXT


def write_case(folder: Path, case: Bad) -> Path:
    path = folder / "plan.yaml"
    if isinstance(case.content, bytes):
        path.write_bytes(case.content)
    else:
        path.write_text(case.content, encoding="utf-8")
    return path


@pytest.mark.parametrize("command", ["check", "lock"])
@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_malformed_plans_exit_2_with_one_line_and_write_nothing(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], case: Bad, command: str) -> None:
    path = write_case(tmp_path, case)
    status = cli.main([command, str(path)])
    err = capsys.readouterr().err
    assert status == 2
    assert err.count("\n") == 1
    line = _line_of(case.content, case.marker, case.occurrence)
    assert err.startswith(f"prespec: {path}:{line}: ")
    assert [p.name for p in tmp_path.iterdir()] == ["plan.yaml"]


def test_schema_is_json(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    assert {"prespec", "title", "data", "outcomes", "alpha", "multiplicity",
            "hypotheses"} <= set(schema["properties"])


def test_check_prints_summary_and_fingerprint(tmp_path: Path,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    assert cli.main(["check", str(plan)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-2] == "lock: not locked"
    assert out[-1].startswith("fingerprint: sha256:") and len(out[-1]) == 13 + 7 + 64
    assert any(line.strip().startswith("H1 [primary]") for line in out)


def test_lock_prints_how_to_check_the_fingerprint(tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    assert cli.main(["lock", str(plan), "--actor", "ana"]) == 0
    out = capsys.readouterr().out
    fp = json.loads((tmp_path / "p.lock.json").read_text())["versions"][0]["fingerprint"]
    assert f"fingerprint: {fp}" in out and f"--expect {fp}" in out
    assert cli.main(["lock", str(plan)]) == 0
    assert "already locked" in capsys.readouterr().out


def test_usage_errors_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    # DATA is optional (the plan's data.source may name the data): the missing plan is named
    assert cli.main(["run", "only-a-plan.yaml"]) == 2
    with pytest.raises(SystemExit) as caught:
        cli.main(["run", "p.yaml", "d.csv", "--engine", "abacus"])
    assert caught.value.code == 2
    with pytest.raises(SystemExit) as caught:
        cli.main(["amend", "p.yaml"])  # --reason is required
    assert caught.value.code == 2


def test_missing_files_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["check", str(tmp_path / "absent.yaml")]) == 2
    assert capsys.readouterr().err.count("\n") == 1
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    assert cli.main(["lock", str(plan)]) == 0
    assert cli.main(["run", str(plan), str(tmp_path / "absent.csv")]) == 2
    assert "no such data file" in capsys.readouterr().err


def test_bad_data_exit_2_and_nothing_written(tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    assert cli.main(["lock", str(plan)]) == 0
    log_before = (tmp_path / "p.audit.jsonl").read_bytes()
    cases = {
        "dup.csv": (("participant,site,arm,consented,infected_30d\nP1,n,gauze,yes,1\n"
                    "P1,n,alginate,yes,0\n"), "duplicate ids in column 'participant': 'P1'"),
        "cols.csv": ("participant,site,group,consented,infected_30d\nP1,n,gauze,yes,1\n",
                     ("column 'arm' (data.group) is not in the data (columns: participant, "
                     "site, group, consented, infected_30d)")),
        "empty.csv": ("", "the data file is empty"),
    }
    for name, (text, message) in cases.items():
        (tmp_path / name).write_text(text)
        assert cli.main(["run", str(plan), str(tmp_path / name)]) == 2
        err = capsys.readouterr().err
        assert message in err and err.count("\n") == 1
    assert (tmp_path / "p.audit.jsonl").read_bytes() == log_before
    assert not (tmp_path / "reports").exists()


def test_a_run_in_another_environment_is_recorded(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    import prespec.report
    from prespec.demo.wound import demo_data

    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    plan, data = tmp_path / "p.yaml", tmp_path / "d.csv"
    plan.write_text(PLAN_TEXT)
    data.write_text(demo_data())
    assert cli.main(["lock", str(plan)]) == 0
    real = prespec.workflow.run.environment()
    monkeypatch.setattr(prespec.workflow.run, "environment", lambda: {**real, "python": "3.99.0",
                                                     "statsmodels": "0.1"})
    capsys.readouterr()
    assert cli.main(["run", str(plan), str(data), "--out", str(tmp_path / "r")]) == 0
    out = capsys.readouterr().out
    assert (f"departure: environment-differs-from-lock: versions differ from those recorded at "
            f"lock time: python {real['python']} → 3.99.0, statsmodels {real['statsmodels']} → "
            "0.1") in out
    results = json.loads((tmp_path / "r" / "results.json").read_text())
    (dev,) = [d for d in results["deviations"] if d["code"] == "environment-differs-from-lock"]
    assert dev["expected"] == f"python {real['python']}; statsmodels {real['statsmodels']}"
    assert dev["found"] == "python 3.99.0; statsmodels 0.1"
    entry = json.loads((tmp_path / "p.audit.jsonl").read_text().splitlines()[-1])
    assert entry["deviations"] == results["deviations"]


def test_verify_prints_notes_and_usage_of_report(tmp_path: Path,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    assert cli.main(["lock", str(plan)]) == 0
    (tmp_path / "p.audit.head").unlink()  # as after a first append stopped before its head
    capsys.readouterr()
    assert cli.main(["verify", str(plan)]) == 0
    out = capsys.readouterr().out
    assert "note  p.audit.head: the head names the entry before the last" in out
    assert cli.main(["verify", str(plan), "--report", "r1"]) == 2
    assert "--report goes with --rerun DATA" in capsys.readouterr().err
    assert cli.main(["run", str(plan), "d.csv", "--test", "H1"]) == 2
    assert "give ID=NAME" in capsys.readouterr().err


def test_verify_says_a_failure_once_and_counts_entries_in_words(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    assert cli.main(["lock", str(plan)]) == 0
    capsys.readouterr()
    assert cli.main(["verify", str(plan)]) == 0
    out = capsys.readouterr().out
    assert "ok    audit log: 1 entry, sequence, links and hashes intact; head matches\n" in out
    assert cli.main(["verify", str(plan), "--expect", "sha256:" + "0" * 64]) == 3
    got = capsys.readouterr()
    fails = [line for line in got.out.splitlines() if line.startswith("FAIL  ")]
    assert len(fails) == 1 and "expected fingerprint" in fails[0]
    message = fails[0].removeprefix("FAIL  ")
    assert message not in got.err  # not printed a second time
    assert got.err == "prespec: not verified; the FAIL line says what does not match\n"
