"""Amend racing with runs and verify, in separate processes.

One process amends the plan again and again while three others start runs in a loop (on a
data path that does not exist: each run reads the lock, the log and the head, repairs what a
stop left, then fails on the data) and one verifies in a loop (through the command: one of
each, as every command starts a Python). Every amend must succeed and
be recorded once; the lock and the log must end with one version per amend entry; and no
reader may see a half state (the only failures allowed are the true ones: no data, and a
plan file edited but not yet amended). Run twice through the Python interface and once
through the command.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from prespec import api, audit
from prespec.demo.wound import PLAN_TEXT
from prespec.errors import PrespecError

# the true failures a reader may meet while the plan is being amended
EXPECTED = (
    "no such data file",  # the data path that does not exist
    "does not exist",
    "no longer matches its lock",  # run: the plan file edited, its amend not yet written
    "differs in meaning from lock version",  # verify: the same moment
)


def plan_text(step: int) -> str:
    return PLAN_TEXT.replace("alpha: 0.05", f"alpha: {0.05 - 0.001 * step:.3f}")


def write_plan(plan: Path, step: int) -> None:
    """Replace the plan file whole, as an editor saving it does."""
    tmp = plan.with_name(f".{plan.name}.edit")
    tmp.write_text(plan_text(step))
    os.replace(tmp, plan)


def unexpected(message: str) -> bool:
    return not any(e in message for e in EXPECTED)


def _amender(plan: str, amends: int, out: str) -> None:
    failures = []
    for step in range(1, amends + 1):
        write_plan(Path(plan), step)
        try:
            res = api.amend(plan, reason=f"step {step}", actor="amender")
            if not res.created:
                failures.append(f"step {step}: not created ({res.note})")
        except BaseException as exc:  # noqa: BLE001 - every failure is the finding
            failures.append(f"step {step}: {type(exc).__name__}: {exc}")
    Path(out).write_text(json.dumps(failures))


def _runner(plan: str, stop: str, out: str, verify: bool) -> None:
    seen: list[str] = []
    rounds = 0
    while not Path(stop).exists():
        rounds += 1
        try:
            if verify:
                api.verify(plan)
            else:
                api.run(plan, Path(plan).parent / "missing.csv", actor="runner")
        except PrespecError as exc:
            if unexpected(str(exc)):
                seen.append(f"{type(exc).__name__}: {exc}")
        except BaseException as exc:  # noqa: BLE001 - a traceback is the finding
            seen.append(f"{type(exc).__name__}: {exc}")
    Path(out).write_text(json.dumps({"rounds": rounds, "unexpected": seen}))


def locked_study(root: Path) -> Path:
    root.mkdir()
    plan = root / "trial.yaml"
    plan.write_text(plan_text(0))
    api.lock(plan, actor="ana")
    return plan


def check_end_state(plan: Path, amends: int) -> None:
    entries = audit.read_log(audit.log_path(plan))
    doc = audit.read_lock(audit.lock_path(plan))
    assert doc is not None
    assert [e["action"] for e in entries] == ["lock"] + ["amend"] * amends
    assert [e["details"]["version"] for e in entries] == list(range(1, amends + 2))
    assert [v["fingerprint"] for v in doc["versions"]] == [e["plan"] for e in entries]
    res = api.verify(plan)
    assert f"lock: {amends + 1} version(s)" in " ".join(res.passed) and not res.notes


def test_amend_racing_with_runs_and_verify_through_the_api(tmp_path: Path) -> None:
    fork = multiprocessing.get_context("fork")
    amends = 15
    for round_ in range(2):
        folder = tmp_path / f"r{round_}"
        plan = locked_study(folder)
        stop = folder / "stop"
        readers = [fork.Process(target=_runner, args=(str(plan), str(stop),
                                                      str(folder / f"reader{i}.json"), i == 3))
                   for i in range(4)]
        for p in readers:
            p.start()
        time.sleep(0.2)
        amender = fork.Process(target=_amender, args=(str(plan), amends,
                                                      str(folder / "amender.json")))
        amender.start()
        amender.join(timeout=300)
        stop.write_text("")
        for p in readers:
            p.join(timeout=120)
        assert amender.exitcode == 0 and all(p.exitcode == 0 for p in readers)
        assert json.loads((folder / "amender.json").read_text()) == []
        for i in range(4):
            report = json.loads((folder / f"reader{i}.json").read_text())
            assert report["rounds"] >= 1
            assert report["unexpected"] == [], report["unexpected"]
        check_end_state(plan, amends)


PRESPEC = [sys.executable, "-m", "prespec"]


def test_amend_racing_with_runs_through_the_command(tmp_path: Path) -> None:
    amends = 3  # each command starts a Python: a few, to keep the test short
    plan = locked_study(tmp_path / "study")
    folder = plan.parent
    loop = (
        "import subprocess, sys, pathlib, json\n"
        "stop, out, argv = sys.argv[1], sys.argv[2], sys.argv[3:]\n"
        "seen = []\n"
        "while not pathlib.Path(stop).exists():\n"
        "    p = subprocess.run(argv, capture_output=True, text=True, check=False)\n"
        "    fail = [l for l in p.stdout.splitlines() if l.startswith('FAIL  ')]\n"
        "    seen.append([p.returncode, p.stderr + ''.join(fail)])\n"
        "pathlib.Path(out).write_text(json.dumps(seen))\n"
    )
    stop = folder / "stop"
    run = [*PRESPEC, "run", "trial.yaml", "missing.csv", "--actor", "runner"]
    verify = [*PRESPEC, "verify", "trial.yaml"]
    readers = [subprocess.Popen([sys.executable, "-c", loop, str(stop), str(folder / f"r{i}"),
                                 *(verify if i == 1 else run)], cwd=folder)
               for i in range(2)]
    try:
        for step in range(1, amends + 1):
            write_plan(plan, step)
            done = subprocess.run([*PRESPEC, "amend", "trial.yaml", "--reason", f"step {step}",
                                   "--actor", "amender"], check=False, cwd=folder,
                                  capture_output=True,
                                  text=True, timeout=300)
            assert done.returncode == 0, done.stderr
            assert f"locked as version {step + 1}" in done.stdout
    finally:
        stop.write_text("")
        for p in readers:
            p.wait(timeout=300)
    for i in range(2):
        seen = json.loads((folder / f"r{i}").read_text())
        assert seen, "the reader never ran"
        # verify passes between two amends; a run never does. verify says why it failed on
        # its FAIL line (stdout), and stderr only points to it: both are read
        for status, err in seen:
            assert status in ((0, 3) if i == 1 else (2, 3)) and "Traceback" not in err, err
            assert status == 0 or not unexpected(err), err
    check_end_state(plan, amends)


@pytest.mark.parametrize("change", ["foreign", "duplicate", "out-of-order", "missing"])
def test_verify_fails_when_amend_entries_and_versions_disagree(tmp_path: Path,
                                                               change: str) -> None:
    """The end states the race left on the old code, rebuilt as valid chains: an amend entry
    whose fingerprint is in no version before the one that counts, a second entry for one
    version, versions logged out of order, a version without its entry."""
    plan = locked_study(tmp_path / "s")
    for step in (1, 2):
        write_plan(plan, step)
        api.amend(plan, reason=f"step {step}", actor="ana")
    log, head = audit.log_path(plan), audit.head_path(plan)
    v1, v2, v3 = audit.read_log(log)
    foreign = {**v2, "plan": "sha256:" + "f" * 64}
    chains = {
        "foreign": ([v1, foreign, v2, v3], "in no version of trial.lock.json"),
        "duplicate": ([v1, v2, foreign, v3], "a second entry for version 2"),
        "out-of-order": ([v1, v3, v2], "out of order"),
        "missing": ([v1, v2], "the log has no amend entry"),
    }
    chain, expected = chains[change]
    log.unlink()
    head.unlink()
    for e in chain:
        audit.append(log, head, actor=e["actor"], action=e["action"], plan=e["plan"],
                     data=None, details=e["details"], at=e["at"])
    with pytest.raises(PrespecError, match=expected):
        api.verify(plan)
