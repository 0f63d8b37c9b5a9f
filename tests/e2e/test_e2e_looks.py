"""A three-look trial through the ``prespec`` command, as its statistician runs it: lock, look 1,
look 2 and the final analysis on data that grow, the reports (real executed notebooks), the
log and verify; then --look on a plan without looks, and design --json.

The z statistics are checked against statsmodels ``proportions_ztest`` (pooled variance) and
the boundaries against ``prespec.stats.sequential`` (itself checked against published tables).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from statsmodels.stats.proportion import proportions_ztest

from prespec.stats import sequential

PRESPEC = [sys.executable, "-m", "prespec"]
PLAN = """\
prespec: 1
title: Negative-pressure dressing versus gauze, 30-day wound infection (three looks)
protocol: WD-2027-02 (invented demonstration study)
data:
  id: participant
  group: arm
  groups: [negative-pressure, gauze]
  planned_n: {negative-pressure: 300, gauze: 300}
outcomes:
  infection: {column: infected_30d, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
design:
  assumed: {negative-pressure: 0.10, gauze: 0.20}
  power: 0.8
hypotheses:
  - id: H1
    title: Negative-pressure vs gauze, 30-day infection
    outcome: infection
    compare: [negative-pressure, gauze]
    test: pearson-chi-square
    looks:
      fractions: [0.3333333333333333, 0.6666666666666666, 1]
      efficacy: lan-demets-obrien-fleming
      futility: {spending: hwang-shih-decani, gamma: -2}
"""
# Cumulative (events, total): negative-pressure, gauze (invented).
LOOKS = [((12, 100), (18, 100)), ((30, 200), (44, 200)), ((42, 300), (62, 300))]


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "trial-statistician"}
    return subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=600)


def ok(done: subprocess.CompletedProcess[str]) -> list[str]:
    assert done.returncode == 0, done.stderr
    return done.stdout.splitlines()


def write_data(folder: Path) -> list[str]:
    rows: list[str] = []
    before = {"negative-pressure": (0, 0), "gauze": (0, 0)}
    names = []
    for k, counts in enumerate(LOOKS, start=1):
        for arm, (events, total) in zip(("negative-pressure", "gauze"), counts, strict=True):
            e0, n0 = before[arm]
            rows += [f"P{len(rows) + i + 1:04d},{arm},{1 if i < events - e0 else 0}"
                     for i in range(total - n0)]
            before[arm] = (events, total)
        name = f"enrolled-{k}.csv"
        (folder / name).write_text("participant,arm,infected_30d\n" + "\n".join(rows) + "\n")
        names.append(name)
    return names


@pytest.fixture(scope="module")
def trial(tmp_path_factory: pytest.TempPathFactory) -> dict[str, object]:
    study = tmp_path_factory.mktemp("looks")
    (study / "trial.yaml").write_text(PLAN)
    data = write_data(study)
    ok(cli("lock", "trial.yaml", cwd=study))
    outs = [ok(cli("run", "trial.yaml", name, "--look", str(k), "--out", f"look-{k}",
                   cwd=study)) for k, name in enumerate(data, start=1)]
    return {"study": study, "data": data, "outs": outs}


def test_each_look_prints_its_decision(trial: dict[str, object]) -> None:
    outs = trial["outs"]
    assert isinstance(outs, list)
    assert outs[0][-1] == "look-1"
    assert outs[0][-2].startswith("  look 1 of 3 (information fraction 0.333): z = -1.188, "
                                  "efficacy boundary ±3.710: continue")
    assert outs[1][-2].startswith("  look 2 of 3 (information fraction 0.667): z = -1.803, "
                                  "efficacy boundary ±2.511: continue")
    assert "final analysis: the efficacy boundary is crossed (H0 rejected); adjusted p = " \
        in outs[2][-2]
    assert not any(line.startswith("departure:") for out in outs for line in out)


def test_reports_show_the_whole_sequence(trial: dict[str, object]) -> None:
    study = trial["study"]
    assert isinstance(study, Path)
    fractions = [1 / 3, 2 / 3, 1.0]
    for k in (1, 2, 3):
        folder = study / f"look-{k}"
        results = json.loads((folder / "results.json").read_text())
        lk = results["hypotheses"][0]["looks"]
        (a, n), (b, m) = LOOKS[k - 1]
        assert lk["z"] == pytest.approx(proportions_ztest([a, b], [n, m])[0], rel=1e-9)
        # the signed root of the uncorrected X² is the same z
        assert lk["z"] ** 2 == pytest.approx(results["hypotheses"][0]["statistic"], rel=1e-9)
        planned = sequential.boundaries(fractions, alpha=0.05, sides=2,
                                        efficacy="lan-demets-obrien-fleming",
                                        futility="hwang-shih-decani", futility_gamma=-2,
                                        power=0.8)
        assert [row["z"] for row in lk["boundaries"]] == pytest.approx(list(planned.z[:k]),
                                                                       rel=1e-9)
        assert len(lk["history"]) == k - 1
        html = (folder / "report.html").read_text()
        assert "Interim looks of H1" in html and "Boundaries at the information observed" in html
        assert 'alt="Efficacy and futility boundaries of H1' in html
        assert "does not judge whether the plan suits the study" in html
        assert (folder / "figures" / "looks-H1.png").stat().st_size > 1000
        assert (folder / "report.ipynb").is_file()
    final = json.loads((study / "look-3" / "results.json").read_text())["hypotheses"][0]
    assert final["looks"]["decision"] == "reject-at-final" and final["reject"] is True
    assert final["looks"]["adjusted"]["ordering"] == "stage-wise"
    assert [r["look"] for r in final["looks"]["repeated_ci"]] == [1, 2, 3]
    assert "Median-unbiased estimate" in (study / "look-3" / "report.html").read_text()


def test_log_and_verify(trial: dict[str, object]) -> None:
    study = trial["study"]
    assert isinstance(study, Path)
    entries = [json.loads(line) for line in (study / "trial.audit.jsonl").read_text().splitlines()]
    looks = [e for e in entries if e["action"] == "look"]
    assert [e["details"]["look"] for e in looks] == [1, 2, 3]
    assert [e["details"]["report"] for e in looks] == ["look-1", "look-2", "look-3"]
    assert [e["details"]["hypotheses"][0]["fraction"] for e in looks] == pytest.approx(
        [1 / 3, 2 / 3, 1.0])
    out = ok(cli("verify", "trial.yaml", cwd=study))
    assert "ok    reports: 3 folder(s) match their manifests and log entries" in out
    assert any(line.startswith("ok    interim looks: 3 look(s)") for line in out)
    data = trial["data"]
    assert isinstance(data, list)
    out = ok(cli("verify", "trial.yaml", "--rerun", data[1], cwd=study))
    assert out[-5].startswith("ok    rerun: 1 report(s) recomputed")
    assert [line.split(":")[0] for line in out[-4:-1]] == [
        f"ok    run {k} (look {k}, log entry {k + 1}, report look-{k})" for k in (1, 2, 3)]
    assert all(line.endswith("the locked analysis (lock version 1)") for line in out[-4:-1])
    assert out[-1] == "verified: files intact; all 3 runs were the locked analysis"


def test_look_on_a_plan_without_looks_and_design(trial: dict[str, object],
                                                 tmp_path: Path) -> None:
    plain = PLAN[:PLAN.index("    looks:")]
    (tmp_path / "plain.yaml").write_text(plain)
    ok(cli("lock", "plain.yaml", cwd=tmp_path))
    write_data(tmp_path)
    done = cli("run", "plain.yaml", "enrolled-1.csv", "--look", "1", cwd=tmp_path)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1
    assert "the plan names no interim looks" in done.stderr
    study = trial["study"]
    assert isinstance(study, Path)
    doc = json.loads("\n".join(ok(cli("design", "trial.yaml", "--json", cwd=study))))
    rows = doc["hypotheses"][0]["boundaries"]
    assert [r["look"] for r in rows] == [1, 2, 3]
    assert rows[-1]["alpha_spent"] == pytest.approx(0.05, abs=1e-9)
    text = ok(cli("design", "trial.yaml", cwd=study))
    assert any("maximum sample size:" in line for line in text)
