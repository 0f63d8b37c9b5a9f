"""``prespec describe`` and ``prespec verify --document`` as a user runs them (subprocess)."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

TOUR = Path(__file__).resolve().parents[2] / "plans" / "methods-tour.yaml"


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "test-statistician"}
    return subprocess.run([sys.executable, "-m", "prespec", *args], check=False, cwd=cwd,
                          env=env, capture_output=True, text=True, timeout=300)


def test_lock_describe_verify_through_the_command(tmp_path: Path) -> None:
    shutil.copyfile(TOUR, tmp_path / "tour.yaml")
    refused = cli("describe", "tour.yaml", cwd=tmp_path)
    assert refused.returncode == 2 and refused.stdout == ""
    assert refused.stderr == ("prespec: tour.yaml: not locked; the plan document is written "
                              "from the lock (run prespec lock tour.yaml first)\n")
    assert cli("lock", "tour.yaml", cwd=tmp_path).returncode == 0
    made = cli("describe", "tour.yaml", cwd=tmp_path)
    assert made.returncode == 0 and made.stderr == ""
    lines = made.stdout.splitlines()
    assert lines[0] == "wrote the plan document of lock version 1: tour.plan-v1.html"
    assert lines[-1] == ("anyone can check it with: prespec verify tour.yaml --document "
                         "tour.plan-v1.html")
    checked = cli("verify", "tour.yaml", "--document", "tour.plan-v1.html", cwd=tmp_path)
    assert checked.returncode == 0, checked.stdout + checked.stderr
    assert ("ok    document: tour.plan-v1.html (HTML) carries the fingerprint of lock version 1"
            in checked.stdout)
    assert checked.stdout.splitlines()[-1] == "verified: files intact; no run on record"
    page = tmp_path / "tour.plan-v1.html"
    page.write_text(page.read_text("utf-8").replace("<code>0.15</code>", "<code>0.20</code>"),
                    "utf-8")
    failed = cli("verify", "tour.yaml", "--document", "tour.plan-v1.html", cwd=tmp_path)
    assert failed.returncode == 3
    assert "FAIL  document tour.plan-v1.html: its words differ" in failed.stdout
    assert "0.20" in failed.stdout
    assert failed.stderr == "prespec: not verified; the FAIL line says what does not match\n"
