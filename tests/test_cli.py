"""The command line in process: exit statuses, one-line errors, nothing written on failure."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from test_plan_validate import CASES, Bad, _line_of

from prespec import cli
from prespec.demo import PLAN_TEXT


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
    with pytest.raises(SystemExit) as caught:
        cli.main(["run", "only-a-plan.yaml"])
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
