"""The prespec command as a user runs it, in a temporary folder (subprocess)."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from prespec import api
from prespec.errors import IntegrityStop

PRESPEC = [sys.executable, "-m", "prespec"]


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "test-monitor"}
    return subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=env, capture_output=True,
                          text=True,
                          timeout=300)


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One demo, written, locked and run through the command; its folder."""
    where = tmp_path_factory.mktemp("demo")
    done = cli("demo", "study", cwd=where)
    assert done.returncode == 0, done.stderr
    # the command's whole output: the report's path, nothing from the notebook's kernel
    assert done.stderr == "" and len(done.stdout.splitlines()) == 1, done.stdout + done.stderr
    html = Path(done.stdout.strip().splitlines()[-1])
    assert html.name == "report.html" and (where / html).is_file()
    return where / "study"


def test_demo_report_folder(demo: Path) -> None:
    (folder,) = (demo / "reports" / "wound-dressing").iterdir()
    names = sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file())
    assert {"results.json", "report.ipynb", "report.html", "manifest.json",
            "figures/differences.png", "figures/proportions-infection.png",
            "tables/H1.csv", "tables/H2.csv", "tables/H3.csv",
            "tables/groups-infection.csv"} <= set(names)
    results = json.loads((folder / "results.json").read_text())
    assert results["kind"] == "run" and results["plan_version"] == 1
    assert [h["id"] for h in results["hypotheses"]] == ["H1", "H2", "H3"]
    assert [d["code"] for d in results["deviations"]] == ["unexpected-group"]
    h3 = results["hypotheses"][2]
    assert h3["role"] == "exploratory" and h3["p_adjusted"] is None and h3["reject"] is None
    assert h3["df"] == 2 and h3["estimate"] is None
    html = (folder / "report.html").read_text()
    assert "qualified statistician" in html and results["plan"] in html
    log = [json.loads(x) for x in (demo / "wound-dressing.audit.jsonl").read_text().splitlines()]
    assert [e["action"] for e in log] == ["lock", "run"]
    assert log[1]["details"]["report"] == folder.relative_to(demo).as_posix()
    assert log[1]["deviations"] == results["deviations"]


def test_verify_passes_and_checks_the_registered_fingerprint(demo: Path) -> None:
    lock = json.loads((demo / "wound-dressing.lock.json").read_text())
    fp = lock["versions"][0]["fingerprint"]
    done = cli("verify", "wound-dressing.yaml", "--expect", fp, cwd=demo)
    assert done.returncode == 0, done.stderr
    assert "expected fingerprint: matches" in done.stdout
    wrong = cli("verify", "wound-dressing.yaml", "--expect", "sha256:" + "0" * 64, cwd=demo)
    assert wrong.returncode == 3 and "FAIL  expected fingerprint" in wrong.stdout
    assert wrong.stderr == "prespec: not verified; the FAIL line says what does not match\n"


def test_a_handed_over_folder_still_verifies(demo: Path, tmp_path: Path) -> None:
    moved = tmp_path / "elsewhere" / "handed-over"
    shutil.copytree(demo, moved)
    assert len(api.verify(moved / "wound-dressing.yaml").passed) >= 4


def test_lock_again_is_a_no_op_and_a_change_points_to_amend(demo: Path, tmp_path: Path) -> None:
    copy = tmp_path / "s"
    shutil.copytree(demo, copy)
    log = copy / "wound-dressing.audit.jsonl"
    before = log.read_bytes()
    plan = copy / "wound-dressing.yaml"
    plan.write_text("# a comment added\n" + plan.read_text())
    again = cli("lock", "wound-dressing.yaml", cwd=copy)
    assert again.returncode == 0 and "already locked" in again.stdout
    assert log.read_bytes() == before
    plan.write_text(plan.read_text().replace("alpha: 0.05", "alpha: 0.025"))
    changed = cli("lock", "wound-dressing.yaml", cwd=copy)
    assert changed.returncode == 3 and "prespec amend" in changed.stderr
    assert log.read_bytes() == before
    refused = cli("run", "wound-dressing.yaml", "data/wound-dressing.csv", cwd=copy)
    assert refused.returncode == 3 and "--accept-deviation" in refused.stderr
    assert log.read_bytes() == before
    assert cli("verify", "wound-dressing.yaml", cwd=copy).returncode == 3


def test_bad_plan_is_one_line_exit_2_nothing_written(tmp_path: Path) -> None:
    from prespec.demo.wound import PLAN_TEXT

    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT.replace("compare: [negative-pressure, gauze]",
                                      "compare: [negative-presure, gauze]"))
    for command in (["check", "p.yaml"], ["lock", "p.yaml"]):
        done = cli(*command, cwd=tmp_path)
        assert done.returncode == 2
        lines = done.stderr.strip().splitlines()
        assert len(lines) == 1
        line_no = PLAN_TEXT.splitlines().index("    compare: [negative-pressure, gauze]") + 1
        assert lines[0].startswith(f"prespec: p.yaml:{line_no}: hypotheses.H1.compare")
        assert "negative-pressure" in lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.yaml"]


def test_run_without_lock_needs_a_reason(tmp_path: Path) -> None:
    from prespec.demo.wound import write_demo

    plan, data = write_demo(tmp_path / "s")
    refused = cli("run", str(plan), str(data), cwd=tmp_path)
    assert refused.returncode == 3 and "not locked" in refused.stderr
    assert not (tmp_path / "s" / "reports").exists()
    out = tmp_path / "out"
    done = cli("run", str(plan), str(data), "--out", str(out), "--accept-deviation",
               "dry run for the data manager", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == str(out)
    results = json.loads((out / "results.json").read_text())
    dev = results["deviations"][0]
    assert dev["code"] == "run-without-lock" and dev["accepted"] == "dry run for the data manager"
    assert results["plan_version"] is None


# --- integrity: any edit to the log, the lock or a report file makes verify stop (exit 3) ---

def _tamper_cases() -> dict[str, object]:
    def edit_log(root: Path) -> None:
        log = root / "wound-dressing.audit.jsonl"
        log.write_text(log.read_text().replace("test-monitor", "someone-else", 1))

    def drop_last_entry(root: Path) -> None:
        log = root / "wound-dressing.audit.jsonl"
        log.write_text(log.read_text().splitlines(keepends=True)[0])

    def edit_lock(root: Path) -> None:
        lock = root / "wound-dressing.lock.json"
        doc = json.loads(lock.read_text())
        doc["versions"][0]["plan"]["alpha"] = 0.1
        lock.write_text(json.dumps(doc))

    def report(root: Path) -> Path:
        return next((root / "reports" / "wound-dressing").iterdir())

    def edit_results(root: Path) -> None:
        path = report(root) / "results.json"
        path.write_text(path.read_text().replace('"reject": true', '"reject": false', 1))

    def add_file(root: Path) -> None:
        (report(root) / "figures" / "extra.png").write_bytes(b"x")

    def remove_file(root: Path) -> None:
        (report(root) / "tables" / "H1.csv").unlink()

    def remove_report(root: Path) -> None:
        shutil.rmtree(report(root))

    def edit_plan(root: Path) -> None:
        plan = root / "wound-dressing.yaml"
        plan.write_text(plan.read_text().replace("multiplicity: holm", "multiplicity: none"))

    return {f.__name__: f for f in (edit_log, drop_last_entry, edit_lock, edit_results,
                                    add_file, remove_file, remove_report, edit_plan)}


@pytest.mark.parametrize("case", list(_tamper_cases()))
def test_tampering_makes_verify_stop(demo: Path, tmp_path: Path, case: str) -> None:
    copy = tmp_path / "s"
    shutil.copytree(demo, copy)
    api.verify(copy / "wound-dressing.yaml")  # intact before
    _tamper_cases()[case](copy)  # type: ignore[operator]
    with pytest.raises(IntegrityStop):
        api.verify(copy / "wound-dressing.yaml")


def test_verify_command_names_the_failure(demo: Path, tmp_path: Path) -> None:
    copy = tmp_path / "s"
    shutil.copytree(demo, copy)
    (next((copy / "reports" / "wound-dressing").iterdir()) / "report.html").write_text("<p>")
    done = cli("verify", "wound-dressing.yaml", cwd=copy)
    assert done.returncode == 3
    assert "report.html does not match its manifest hash" in done.stdout
    assert "ok    audit log" in done.stdout
    # the failure is said once, in the checklist; stderr points to it without repeating it
    assert done.stdout.count("does not match its manifest hash") == 1
    assert done.stderr == "prespec: not verified; the FAIL line says what does not match\n"
    nothing = cli("verify", "none.yaml", cwd=tmp_path)
    assert nothing.returncode == 3 and "nothing to verify" in nothing.stdout
    assert nothing.stdout.startswith("FAIL  ") and "nothing to verify" not in nothing.stderr


def test_the_methods_tour_runs_to_a_report(tmp_path: Path) -> None:
    """plans/methods-tour.yaml names every kind of comparison; its report renders them all."""
    from prespec.demo.wound import demo_data

    root = Path(__file__).parents[2]
    shutil.copy(root / "plans" / "methods-tour.yaml", tmp_path / "tour.yaml")
    (tmp_path / "data.csv").write_text(demo_data())
    assert cli("lock", "tour.yaml", cwd=tmp_path).returncode == 0
    done = cli("run", "tour.yaml", "data.csv", "--out", "report", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    html = (tmp_path / "report" / "report.html").read_text()
    results = json.loads((tmp_path / "report" / "results.json").read_text())
    for hyp in results["hypotheses"]:
        assert f"{hyp['id']} —" in html or f"{hyp['id']} &mdash;" in html, hyp["id"]
    assert (tmp_path / "report" / "figures" / "multiplicity-graph.png").is_file()
    assert "Bretz" in html and "Stratum: site = north" in html
    assert cli("verify", "tour.yaml", cwd=tmp_path).returncode == 0
