"""The audit trail through the ``prespec`` command, as a statistician and a monitor use it:
a signed lock, a run, an amendment after it, history, a second run on changed data with an
accepted override, a refused override, and verify with --key, --expect and --rerun."""

from __future__ import annotations

import html
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from prespec.demo.wound import PLAN_TEXT, demo_data

PRESPEC = [sys.executable, "-m", "prespec"]


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "trial-statistician"}
    return subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=300)


def ok(done: subprocess.CompletedProcess[str]) -> list[str]:
    assert done.returncode == 0, done.stderr
    return done.stdout.splitlines()


@pytest.fixture(scope="module")
def trail(tmp_path_factory: pytest.TempPathFactory) -> dict[str, object]:
    root = tmp_path_factory.mktemp("trail")
    study = root / "study"
    study.mkdir()
    (study / "trial.yaml").write_text(PLAN_TEXT)
    (study / "data.csv").write_text(demo_data())
    keys = ok(cli("key", "new", str(root / "statistician"), cwd=root))
    locked = ok(cli("lock", "trial.yaml", "--sign", str(root / "statistician.key"), cwd=study))
    fp = next(line.split()[1] for line in locked if line.startswith("fingerprint: "))
    ok(cli("run", "trial.yaml", "data.csv", "--out", "r1", cwd=study))
    (study / "trial.yaml").write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    amending = cli("amend", "trial.yaml", "--reason", "steering committee: alpha 0.025",
                   "--sign", str(root / "statistician.key"), cwd=study)
    amended = ok(amending)
    (study / "data2.csv").write_text(demo_data().replace(",Gauze,yes,0", ",Gauze,yes,1"))
    second = ok(cli("run", "trial.yaml", "data2.csv", "--out", "r2", "--test",
                    "H2=two-proportion-z", "--accept-deviation", "the monitor asked for a z test",
                    cwd=study))
    return {"root": root, "study": study, "fp": fp, "keys": keys, "amended": amended,
            "amend_warning": amending.stderr, "second": second}


def test_amend_and_history(trail: dict[str, object]) -> None:
    study = trail["study"]
    assert isinstance(study, Path)
    assert trail["amended"][0] == ("amended trial.yaml: locked as version 2 (after unblinding: "  # type: ignore[index]
                                   "recorded as amended-after-unblinding)")
    assert trail["amend_warning"] == (
        "prespec: warning: trial.yaml: 1 run on the data on record, so this amendment comes "
        "after unblinding: version 2 is recorded as amended-after-unblinding, and verify "
        "reports every run of it as not the locked analysis\n")
    out = ok(cli("history", "trial.yaml", cwd=study))
    assert out[1].startswith("version 2 ") and out[1].endswith("[amended after unblinding]")
    assert out[2] == "   reason: steering committee: alpha 0.025"
    assert out[-2:] == ["changes in meaning from version 1 to 2:", "  alpha: 0.05 → 0.025"]


def test_every_departure_in_results_log_and_report(trail: dict[str, object]) -> None:
    study = trail["study"]
    assert isinstance(study, Path)
    results = json.loads((study / "r2" / "results.json").read_text())
    devs = {d["code"]: d for d in results["deviations"]}
    assert {"amended-after-unblinding", "data-changed-since-last-run", "override",
            "unexpected-group"} <= set(devs)
    first = json.loads((study / "r1" / "results.json").read_text())
    assert devs["data-changed-since-last-run"]["expected"] == first["data"]
    assert devs["data-changed-since-last-run"]["found"] == results["data"]
    assert devs["override"]["expected"] == "pearson-chi-square"
    assert devs["override"]["found"] == "two-proportion-z"
    assert devs["override"]["accepted"] == "the monitor asked for a z test"
    assert devs["amended-after-unblinding"]["found"] == "amendment to version 2"
    assert results["alpha"] == 0.025 and results["plan_version"] == 2
    assert results["overrides"] == [{"key": "hypotheses.H2.test", "locked": "pearson-chi-square",
                                     "used": "two-proportion-z"}]
    assert [h["pre_specified"] for h in results["hypotheses"]] == [True, False, True]
    log = [json.loads(x) for x in (study / "trial.audit.jsonl").read_text().splitlines()]
    assert [e["action"] for e in log] == ["lock", "run", "amend", "run"]
    assert log[-1]["deviations"] == results["deviations"]
    page = (study / "r2" / "report.html").read_text()
    for dev in results["deviations"]:
        assert html.escape(dev["code"]) in page
        for key in ("expected", "found"):
            assert html.escape(str(dev[key]), quote=False) in page, (dev["code"], key)
    assert "departure: override: hypotheses.H2.test" in "\n".join(trail["second"])  # type: ignore[arg-type]


def test_an_override_without_a_reason_stops_and_writes_nothing(trail: dict[str, object]) -> None:
    study = trail["study"]
    assert isinstance(study, Path)
    before = (study / "trial.audit.jsonl").read_bytes()
    done = cli("run", "trial.yaml", "data2.csv", "--out", "r3", "--alpha", "0.1", cwd=study)
    assert done.returncode == 3 and "--accept-deviation" in done.stderr
    assert done.stderr.count("\n") == 1
    assert (study / "trial.audit.jsonl").read_bytes() == before and not (study / "r3").exists()


def test_the_monitor_verifies_with_key_expect_and_rerun(trail: dict[str, object]) -> None:
    study, root, fp = trail["study"], trail["root"], trail["fp"]
    assert isinstance(study, Path) and isinstance(root, Path) and isinstance(fp, str)
    out = ok(cli("verify", "trial.yaml", "--key", str(root / "statistician.pub"), "--expect", fp,
                 "--rerun", "data2.csv", cwd=study))
    assert [line.split(":")[0] for line in out[:-1]] == [
        "ok    audit log", "ok    signatures", "ok    lock", "ok    plan file", "ok    reports",
        "ok    expected fingerprint", "ok    rerun",
        "ok    run 1 (log entry 2, report r1)", "off   run 2 (log entry 4, report r2)"]
    assert out[-2].endswith(
        "not the locked analysis: overrides hypotheses.H2.test pearson-chi-square → "
        'two-proportion-z (override, accepted: "the monitor asked for a z test"); the plan was '
        "amended after unblinding (version 2 locked after a run on the data; "
        "amended-after-unblinding); other departures on record: data-changed-since-last-run, "
        "unexpected-group")
    assert out[-1] == ("files intact; 1 of 2 runs was not the locked analysis: run 2 (overrides "
                       "hypotheses.H2.test; amended after unblinding)")
    strict = cli("verify", "trial.yaml", "--strict", cwd=study)
    assert strict.returncode == 3 and strict.stdout.splitlines()[-1] == out[-1]
    assert strict.stderr == "prespec: --strict: run 2 not the locked analysis\n"
    other = root / "other"
    ok(cli("key", "new", str(other), cwd=root))
    done = cli("verify", "trial.yaml", "--key", str(root / "other.pub"), cwd=study)
    assert done.returncode == 3
    assert "FAIL  log entry 1 (lock, version 1): signed by another key" in done.stdout
