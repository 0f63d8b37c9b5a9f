"""``prespec design`` as a statistician runs it, in a temporary folder (subprocess)."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from prespec.demo.wound import PLAN_TEXT as DEMO_PLAN
from prespec.demo.wound import demo_data

# The demo plan without its own design section; these tests add the design they need.
PLAN_TEXT = re.sub(r"^design:\n(?:  .*\n)+", "", DEMO_PLAN, flags=re.MULTILINE)

PRESPEC = [sys.executable, "-m", "prespec"]

DESIGN = """\
design:
  assumed: {gauze: 0.20, alginate: 0.14, negative-pressure: 0.10}
  power: 0.8
  dropout: 0.15
  scenarios:
    pessimistic: {gauze: 0.20, alginate: 0.18, negative-pressure: 0.15}
"""


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "trial-statistician"}
    return subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=300)


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    (tmp_path / "trial.yaml").write_text(PLAN_TEXT.replace("hypotheses:\n",
                                                           DESIGN + "hypotheses:\n", 1))
    (tmp_path / "data.csv").write_text(demo_data())
    return tmp_path


def test_design_then_lock_run_and_verify(folder: Path) -> None:
    first = cli("design", "trial.yaml", "--simulate", "2000", "--seed", "5", "--json",
                cwd=folder)
    assert first.returncode == 0, first.stderr
    assert first.stderr == ""  # no progress bar off a terminal
    doc = json.loads(first.stdout)
    h1 = doc["hypotheses"][0]
    assert h1["id"] == "H1" and h1["alpha"] == pytest.approx(0.025)
    n = h1["n_per_group"]["gauze"]
    assert h1["n_enrol_per_group"]["gauze"] == -(-n * 100 // 85)  # ⌈n / 0.85⌉
    null = doc["scenarios"][-1]
    assert null["name"] == "global-null" and null["trials"] == 2000
    assert 0.0 <= null["fwer"] <= 0.05 + 4 * null["mc_se"]["fwer"]

    assert cli("lock", "trial.yaml", cwd=folder).returncode == 0
    ran = cli("run", "trial.yaml", "data.csv", cwd=folder)
    assert ran.returncode == 0, ran.stderr
    results = json.loads((folder / ran.stdout.strip().splitlines()[-1] / "results.json")
                         .read_text())
    assert results["design"]["hypotheses"][0]["n_per_group"] == h1["n_per_group"]

    log = [json.loads(line) for line in (folder / "trial.audit.jsonl").read_text().splitlines()]
    assert [e["action"] for e in log] == ["design", "lock", "run"]
    verified = cli("verify", "trial.yaml", cwd=folder)
    assert verified.returncode == 0, verified.stdout + verified.stderr


def test_design_refusals_exit_2_and_write_nothing(folder: Path) -> None:
    (folder / "plain.yaml").write_text(PLAN_TEXT)
    none = cli("design", "plain.yaml", cwd=folder)
    assert none.returncode == 2
    assert none.stderr.strip().startswith("prespec: plain.yaml: the plan has no design section")
    assert not (folder / "plain.audit.jsonl").exists()
    assert not (folder / "trial.audit.jsonl").exists()
