"""A family through the command, as a user runs it: lock, run, verify, rehearse (subprocess).

The data are the invented hand-gel safety review of ``prespec.demo.safety``: two gels of 200
participants, 30 terms in 3 body systems, one row per participant and term.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from prespec.demo.safety import TERMS, safety_frame, write_safety_demo

PRESPEC = [sys.executable, "-m", "prespec"]


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "safety-reviewer"}
    return subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=300)


def log_of(study: Path, stem: str = "safety-review") -> list[dict[str, Any]]:
    return [json.loads(x) for x in (study / f"{stem}.audit.jsonl").read_text().splitlines()]


@dataclass(frozen=True)
class Study:
    folder: Path
    report: Path
    results: dict[str, Any]
    run: subprocess.CompletedProcess[str]


@pytest.fixture(scope="module")
def declared(tmp_path_factory: pytest.TempPathFactory) -> Study:
    """The example plan (levels declared) locked and run through the command."""
    folder = tmp_path_factory.mktemp("declared")
    write_safety_demo(folder)
    locked = cli("lock", "safety-review.yaml", cwd=folder)
    assert locked.returncode == 0, locked.stderr
    done = cli("run", "safety-review.yaml", "safety-review.csv", "--out", "report", cwd=folder)
    assert done.returncode == 0, done.stderr
    report = folder / "report"
    return Study(folder, report, json.loads((report / "results.json").read_text()), done)


def test_lock_expands_the_declared_levels(declared: Study) -> None:
    expected = [f"AE[{term}]" for terms in TERMS.values() for term in terms]
    lock_entry = log_of(declared.folder)[0]
    assert lock_entry["action"] == "lock"
    assert lock_entry["details"]["families"] == {"AE": expected}
    lock = json.loads((declared.folder / "safety-review.lock.json").read_text())
    hyp = lock["versions"][0]["plan"]["hypotheses"][0]
    assert hyp["members"] == expected and hyp["flag_level"] == 0.1
    assert hyp["group_level"] == 0.1 and hyp["role"] == "exploratory"


def test_run_reports_the_family(declared: Study) -> None:
    results, report = declared.results, declared.report
    assert results["hypotheses"] == [] and results["groups"] == {}
    (fam,) = results["families"]
    assert (fam["id"], fam["over"], fam["within"], fam["method"], fam["level"]) == (
        "AE", "event_term", "body_system", "double-fdr", 0.1)
    assert fam["members_total"] == 30 and fam["members_without_data"] == 0
    member = next(m for m in fam["members"] if m["id"] == "AE[dryness]")
    frame = safety_frame()
    rows = frame[frame["event_term"] == "dryness"]
    events = [int((rows[rows["gel"] == g]["had_event"] == "1").sum()) for g in ("new", "standard")]
    assert member["table"] == {"groups": ["new", "standard"], "events": events,
                               "totals": [200, 200]}
    assert member["group"] == "skin" and member["flagged"] is True
    assert fam["members_flagged"] == sum(m["flagged"] for m in fam["members"]) >= 2
    run_entry = log_of(declared.folder)[-1]
    assert run_entry["details"]["families"] == {"AE": [m["id"] for m in fam["members"]]}
    assert (report / "figures" / "family-AE-volcano.png").is_file()
    csv_rows = (report / "tables" / "family-AE.csv").read_text().splitlines()
    assert len(csv_rows) == 31
    html = (report / "report.html").read_text()
    assert "Family AE" in html and 'id="prespec-family-1"' in html
    assert "qualified statistician" in html and "a flag is not a rejected hypothesis" in html
    assert f"AE: family over event_term, {fam['members_flagged']} of 30 members flagged" in \
        declared.run.stdout
    assert "preparing" not in declared.run.stderr  # no progress bar off a terminal


def test_verify_passes_and_notices_a_changed_member_list(declared: Study,
                                                         tmp_path: Path) -> None:
    done = cli("verify", "safety-review.yaml", cwd=declared.folder)
    assert done.returncode == 0, done.stdout + done.stderr
    copy = tmp_path / "copy"
    shutil.copytree(declared.folder, copy)
    results = json.loads((copy / "report" / "results.json").read_text())
    results["families"][0]["members"].pop()
    (copy / "report" / "results.json").write_text(json.dumps(results, indent=2) + "\n")
    failed = cli("verify", "safety-review.yaml", cwd=copy)
    assert failed.returncode == 3 and "results.json" in failed.stdout + failed.stderr


def test_the_table_sorts_in_a_browser(declared: Study, tmp_path: Path) -> None:
    """The exported report.html, opened in headless Chromium: clicking the p-value heading
    orders the members by p-value, a second click reverses it. (Without Chromium this test
    skips; CI installs it and sets PRESPEC_REQUIRE_SERVICES, so there it fails instead.)"""
    from prespec.report.paper import Browser, find_chromium

    if find_chromium() is None:
        reason = "no headless Chromium on this machine (Debian: apt-get install chromium)"
        if os.environ.get("PRESPEC_REQUIRE_SERVICES", "") not in ("", "0"):
            pytest.fail(f"{reason} (PRESPEC_REQUIRE_SERVICES is set)", pytrace=False)
        pytest.skip(reason)
    page = tmp_path / "page.html"
    clicks = """<script>
(function () {
  var t = document.getElementById("prespec-family-1");
  var head = t.tHead.rows[0].cells[6];
  function order() { return Array.prototype.map.call(t.tBodies[0].rows,
    function (r) { return r.cells[0].textContent; }).join("|"); }
  head.click(); var up = order(); head.click();
  document.body.setAttribute("data-up", up); document.body.setAttribute("data-down", order());
})();
</script>"""
    page.write_text((declared.report / "report.html").read_text() + clicks)
    with Browser() as browser:
        browser.open(page)
        dom = browser.evaluate("document.documentElement.outerHTML")
    up = re.search(r'data-up="([^"]*)"', dom)
    down = re.search(r'data-down="([^"]*)"', dom)
    assert up and down, "the page's scripts did not run"
    members = declared.results["families"][0]["members"]
    by_p = [m["level"] for m in sorted(members, key=lambda m: m["p_value"])]
    assert [p for p in sorted(m["p_value"] for m in members)] == [
        next(m["p_value"] for m in members if m["level"] == x) for x in up.group(1).split("|")]
    assert len(up.group(1).split("|")) == len(by_p) == 30
    assert down.group(1).split("|") != up.group(1).split("|")
    assert [next(m["p_value"] for m in members if m["level"] == x)
            for x in down.group(1).split("|")] == sorted((m["p_value"] for m in members),
                                                         reverse=True)


def test_run_time_levels_and_an_undeclared_level(tmp_path: Path) -> None:
    folder = tmp_path / "runtime"
    plan, data = write_safety_demo(folder, per_group=60)
    text = plan.read_text()
    start = text.index("    levels:\n")
    end = text.index("    flag_method:")
    plan.write_text(text[:start] + text[end:])
    assert cli("lock", plan.name, cwd=folder).returncode == 0
    assert "families" not in log_of(folder)[0]["details"]
    done = cli("run", plan.name, data.name, "--out", "report", cwd=folder)
    assert done.returncode == 0, done.stderr
    results = json.loads((folder / "report" / "results.json").read_text())
    ids = [m["id"] for m in results["families"][0]["members"]]
    assert len(ids) == 30 and ids[0] == "AE[blurred vision]"  # sorted: eyes first
    assert log_of(folder)[-1]["details"]["families"] == {"AE": ids}
    assert results["families"][0]["declared"] is False

    # the declared plan on data holding a term it does not declare: a recorded departure
    other = tmp_path / "undeclared"
    plan, data = write_safety_demo(other, per_group=60)
    frame = pd.read_csv(data, dtype=str, keep_default_na=False)
    extra = frame[frame["event_term"] == "nausea"].assign(event_term="hiccups")
    pd.concat([frame, extra]).to_csv(data, index=False)
    assert cli("lock", plan.name, cwd=other).returncode == 0
    done = cli("run", plan.name, data.name, "--out", "report", cwd=other)
    assert done.returncode == 0, done.stderr
    results = json.loads((other / "report" / "results.json").read_text())
    codes = [d["code"] for d in results["deviations"]]
    assert codes == ["undeclared-level", "sample-size-shortfall"]  # 60 of 200 planned
    dev = results["deviations"][0]
    assert dev["found"] == "hiccups"
    assert "120 rows left out" in dev["detail"]
    assert log_of(other)[-1]["deviations"] == results["deviations"]
    assert "departure: undeclared-level" in done.stdout


def _standing_alone(number: int, text: str) -> bool:
    pattern = rf"(?<![0-9A-Za-z])(?<![0-9]\.){number}(?![0-9A-Za-z])(?!\.[0-9])"
    return re.search(pattern, text) is not None


def test_a_rehearsal_of_a_family_leaks_no_group_number(tmp_path: Path) -> None:
    """Per-group counts of at least 100 (so that no small number is mistaken for one) must
    appear nowhere: not in any file of the report, the log entry, stdout or stderr."""
    terms = {"skin": {"dryness": (0.30, 0.55), "redness": (0.45, 0.33)},
             "eyes": {"watering": (0.35, 0.50)}}
    folder = tmp_path / "rehearsal"
    plan, data = write_safety_demo(folder, per_group=400)
    frame = safety_frame(per_group=400, seed=9, terms=terms)
    frame.to_csv(data, index=False)
    text = plan.read_text()
    start, end = text.index("    levels:\n"), text.index("    flag_method:")
    plan.write_text(text[:start] + "    levels: {skin: [dryness, redness], eyes: [watering]}\n"
                    + text[end:])
    secrets: set[int] = set()
    pooled: set[int] = set()
    for term in ("dryness", "redness", "watering"):
        rows = frame[frame["event_term"] == term]
        for gel in ("new", "standard"):
            secrets.add(int((rows[rows["gel"] == gel]["had_event"] == "1").sum()))
        pooled.add(int((rows["had_event"] == "1").sum()))
    assert min(secrets) >= 100 and not secrets & pooled
    done = cli("rehearse", plan.name, data.name, "--out", "rehearsal", cwd=folder)
    assert done.returncode == 0, done.stderr
    report = folder / "rehearsal"
    places = {p.name: p.read_text(errors="replace") for p in report.rglob("*") if p.is_file()
              and p.suffix in (".json", ".csv", ".html", ".ipynb")}
    places |= {"log": json.dumps(log_of(folder)[-1]), "stdout": done.stdout,
               "stderr": done.stderr}
    leaks = [(where, n) for where, body in places.items() for n in sorted(secrets)
             if _standing_alone(n, body)]
    assert leaks == []
    results = json.loads((report / "results.json").read_text())
    assert results["kind"] == "rehearsal" and not (report / "figures").exists()
    (fam,) = results["families"]
    assert fam["executed"] is True
    assert {m["events"] for m in fam["members"]} == pooled
    assert all(m["total"] == 800 for m in fam["members"])
    assert all(_standing_alone(n, places["report.html"]) for n in pooled)
    assert log_of(folder)[-1]["details"]["families"] == {
        "AE": ["AE[dryness]", "AE[redness]", "AE[watering]"]}
