"""Crash safety and concurrency of ``prespec run``.

In process, every file-system step of a run (each write, fsync, rename, folder creation,
file opened for writing) is made, in turn, the moment of a crash: a copy of the study folder
is taken exactly then, which is what a SIGKILL at that step leaves, since the kernel keeps
what was written and nothing after it runs. Each copy must verify (or name a half-written
last entry, which append then refuses to write past), hold no report folder with files that
the log does not name, and accept the next run, which completes an interrupted one. A few
real ``prespec run`` processes are then killed with SIGKILL at moments chosen from a measured
run, and 8 are started at once on one plan.
"""

from __future__ import annotations

import builtins
import json
import os
import pathlib
import shutil
import signal
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

import prespec.report
import prespec.workflow.publish
import prespec.workflow.rehearse
import prespec.workflow.run
from prespec import api, audit
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import IntegrityStop

STEPS = ("write", "fsync", "replace", "rename", "mkdir", "ftruncate")


class Killed(BaseException):
    """Raised at the chosen step; BaseException, as nothing in prespec may catch a kill."""


def fake_figures(results: dict[str, Any], folder: Path) -> list[Path]:
    (folder / "figures").mkdir()
    path = folder / "figures" / "proportions.png"
    path.write_bytes(b"\x89PNG fake figure for " + results["plan"].encode())
    return [path]


def fake_render(folder: Path) -> None:
    """Stands for the notebook and its HTML: two files written under temporary names, then
    renamed, as the report room does."""
    for name in ("report.ipynb", "report.html"):
        tmp = folder / f".{name}.partial"
        tmp.write_text(f"{name} of {(folder / 'results.json').stat().st_size} bytes")
        os.replace(tmp, folder / name)


@pytest.fixture(autouse=True)
def quick_report(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", fake_render)
    monkeypatch.setattr(prespec.report, "write_figures", fake_figures)


@pytest.fixture(scope="module")
def locked_study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A locked study with one earlier run, to be copied for every crash."""
    root = tmp_path_factory.mktemp("crash") / "study"
    root.mkdir()
    (root / "trial.yaml").write_text(PLAN_TEXT)
    (root / "data.csv").write_text(demo_data())
    api.lock(root / "trial.yaml", actor="ana")
    mp = pytest.MonkeyPatch()
    mp.setattr(prespec.report, "render_notebook", fake_render)
    mp.setattr(prespec.report, "write_figures", fake_figures)
    try:
        api.run(root / "trial.yaml", root / "data.csv", actor="ana")
    finally:
        mp.undo()
    return root


class Crash:
    """Counts the file-system steps of a run; at step ``at`` copies the folder and raises."""

    def __init__(self, folder: Path, at: int | None, snapshot: Path | None,
                 torn: bool = False) -> None:
        self.folder, self.at, self.snapshot, self.torn = folder, at, snapshot, torn
        self.count = 0
        self.names: list[str] = []
        self.quiet = False

    def _hit(self, name: str) -> bool:
        if self.quiet:
            return False
        self.count += 1
        self.names.append(name)
        return self.count == self.at

    def _freeze(self) -> None:
        self.quiet = True  # the copy and everything after the kill are not counted
        assert self.snapshot is not None
        shutil.copytree(self.folder, self.snapshot, symlinks=True)

    def wrap(self, name: str, original: Callable[..., Any]) -> Callable[..., Any]:
        def step(*args: Any, **kwargs: Any) -> Any:
            if self._hit(name):
                if name == "write" and self.torn and len(args[1]) > 1:
                    original(args[0], args[1][: len(args[1]) // 2])  # a torn write
                self._freeze()
                raise Killed(f"{name} #{self.count}")
            return original(*args, **kwargs)

        return step


@contextmanager
def crashing(monkeypatch: pytest.MonkeyPatch, crash: Crash) -> Iterator[Crash]:
    with monkeypatch.context() as mp:
        for name in STEPS:
            mp.setattr(os, name, crash.wrap(name, getattr(os, name)))
        real_open = builtins.open

        def opening(file: Any, mode: str = "r", *args: Any, **kwargs: Any) -> Any:
            if any(c in mode for c in "wax+") and crash._hit("open-for-writing"):
                crash._freeze()
                raise Killed(f"open #{crash.count}")
            return real_open(file, mode, *args, **kwargs)

        mp.setattr(builtins, "open", opening)
        mp.setattr(pathlib.Path, "write_text", _write_text_via(opening))
        mp.setattr(pathlib.Path, "write_bytes", _write_bytes_via(opening))
        yield crash


def _write_text_via(opening: Callable[..., Any]) -> Callable[..., int]:
    def write_text(self: Path, data: str, encoding: str | None = None, errors: str | None = None,
                   newline: str | None = None) -> int:
        with opening(self, "w", encoding=encoding, errors=errors, newline=newline) as fh:
            return int(fh.write(data))

    return write_text


def _write_bytes_via(opening: Callable[..., Any]) -> Callable[..., int]:
    def write_bytes(self: Path, data: bytes) -> int:
        with opening(self, "wb") as fh:
            return int(fh.write(data))

    return write_bytes


def run_once(study: Path, out: str | None = None) -> Any:
    return api.run(study / "trial.yaml", study / "data.csv", actor="ana",
                   out=study / out if out else None)


def report_folders(study: Path) -> list[Path]:
    places = [study / "reports" / "trial", study / "chosen"]
    return sorted(p for place in places if place.is_dir() for p in place.iterdir()
                  if p.is_dir() and ".partial-" not in p.name)


def named(study: Path) -> set[str]:
    return {e["details"]["report"] for e in audit.read_log(audit.log_path(study / "trial.yaml"))
            if e["action"] == "run"}


def check_state_after_crash(study: Path) -> str:
    """The invariants of a folder left by a kill; returns what verify said."""
    plan = study / "trial.yaml"
    try:
        res = api.verify(plan)
        assert not res.warnings, res.warnings  # what a kill leaves is named as a leftover
        outcome = "passed" + (" with notes" if res.notes else "")
    except IntegrityStop as exc:
        assert "the last line is incomplete" in str(exc), str(exc)
        with pytest.raises(IntegrityStop, match="incomplete"):
            audit.append(audit.log_path(plan), audit.head_path(plan), actor="x", action="run",
                         plan="sha256:" + "0" * 64, data=None)
        return "half entry named"
    names = named(study)
    for folder in report_folders(study):
        rel = folder.relative_to(study).as_posix()
        if any(folder.iterdir()):
            assert rel in names, f"{rel} holds files but the log does not name it"
            assert (folder / "manifest.json").is_file() and (folder / "report.html").is_file()
    # the next run goes through, moves an interrupted report into place, and all verifies
    after = run_once(study)
    assert after.folder.is_dir()
    api.verify(plan)
    for rel in named(study):
        assert (study / rel / "manifest.json").is_file(), f"{rel} was not completed"
    return outcome


@pytest.mark.parametrize("out", [None, "chosen/report"], ids=["default-folder", "out-folder"])
def test_a_run_stopped_at_every_step_leaves_a_verifiable_folder(
        locked_study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
        out: str | None) -> None:
    fixed = Path("reports") / "trial" / "20270101T000000Z-run"  # the same steps every time
    for step in (prespec.workflow.run, prespec.workflow.rehearse):  # each names its folder
        monkeypatch.setattr(step, "default_folder", lambda plan, kind: plan.parent / fixed)
    probe = tmp_path / "probe"
    shutil.copytree(locked_study, probe)
    with crashing(monkeypatch, Crash(probe, None, None)) as counted:
        run_once(probe, out)
    steps = counted.count
    assert steps >= 25, counted.names  # enough places to be worth the name
    outcomes: dict[str, int] = {}
    for at in range(1, steps + 1):
        for torn in ((False, True) if counted.names[at - 1] == "write" else (False,)):
            study = tmp_path / f"s{at}{'t' if torn else ''}"
            shutil.copytree(locked_study, study)
            snapshot = tmp_path / f"k{at}{'t' if torn else ''}"
            with pytest.raises(Killed), crashing(monkeypatch, Crash(study, at, snapshot, torn)):
                run_once(study, out)
            outcome = check_state_after_crash(snapshot)
            outcomes[outcome] = outcomes.get(outcome, 0) + 1
            shutil.rmtree(study)
            shutil.rmtree(snapshot)
    # every kind of end state was reached: clean, with notes (leftovers, pending rename, head
    # behind), and the torn last entry
    assert outcomes.get("passed", 0) > 0 and outcomes.get("passed with notes", 0) > 0
    assert outcomes.get("half entry named", 0) >= 1
    print(f"\ncrash points: {steps} steps, {sum(outcomes.values())} kills: {outcomes}")


def test_a_kill_between_the_log_entry_and_the_rename_is_completed_by_the_next_run(
        locked_study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    study = tmp_path / "s"
    shutil.copytree(locked_study, study)
    real_move = prespec.workflow.publish.move_into_place

    def killed(*args: Any) -> None:
        raise Killed("after the log entry")

    monkeypatch.setattr(prespec.workflow.publish, "move_into_place", killed)
    with pytest.raises(Killed):
        run_once(study)
    monkeypatch.setattr(prespec.workflow.publish, "move_into_place", real_move)
    last = audit.read_log(audit.log_path(study / "trial.yaml"))[-1]
    folder = study / last["details"]["report"]
    assert folder.is_dir() and not any(folder.iterdir())  # named, reserved, still empty
    res = api.verify(study / "trial.yaml")
    assert any("stopped before moving it into place" in n for n in res.notes)
    # the report waiting there is checked like any other: an edit to it fails verify
    (partial,) = [p for p in folder.parent.iterdir() if p.name.startswith(f".{folder.name}.")]
    edited = tmp_path / "edited"
    shutil.copytree(study, edited)
    target = edited / partial.relative_to(study) / "results.json"
    target.write_text(target.read_text().replace('"ana"', '"eve"'))
    with pytest.raises(IntegrityStop, match="results.json does not match"):
        api.verify(edited / "trial.yaml")
    run_once(study)
    assert (folder / "manifest.json").is_file() and not partial.exists()
    assert not api.verify(study / "trial.yaml").notes


def test_verify_mentions_what_a_stopped_run_left(locked_study: Path, tmp_path: Path) -> None:
    study = tmp_path / "s"
    shutil.copytree(locked_study, study)
    reports = study / "reports" / "trial"
    (reports / "20270101T000000Z-run").mkdir()
    (reports / ".20270101T000000Z-run.partial-ab12").mkdir()
    (reports / ".20270101T000000Z-run.partial-ab12" / "results.json").write_text("{}")
    res = api.verify(study / "trial.yaml")
    assert any("an empty folder reserved by a run" in n for n in res.notes)
    assert any(".partial-ab12: a temporary folder" in n for n in res.notes)
    assert not res.warnings
    # a folder with files that the log does not name is not a leftover: it fails
    (reports / "20270101T000000Z-run" / "results.json").write_text("{}")
    with pytest.raises(IntegrityStop, match="a report folder that the log does not name"):
        api.verify(study / "trial.yaml")


def test_a_failed_write_cuts_the_log_back(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    log, head = tmp_path / "p.audit.jsonl", tmp_path / "p.audit.head"
    audit.append(log, head, actor="a", action="lock", plan="sha256:" + "a" * 64, data=None)
    before = log.read_bytes()
    real_write = os.write

    def short(fd: int, data: bytes) -> int:
        return real_write(fd, data[:10])  # e.g. a full disk

    monkeypatch.setattr(os, "write", short)
    with pytest.raises(OSError, match="short write"):
        audit.append(log, head, actor="a", action="run", plan="sha256:" + "a" * 64, data=None)
    monkeypatch.setattr(os, "write", real_write)
    assert log.read_bytes() == before
    entry = audit.append(log, head, actor="a", action="run", plan="sha256:" + "a" * 64, data=None)
    assert entry["seq"] == 2


def test_a_head_left_one_behind_is_brought_up_to_date(tmp_path: Path) -> None:
    log, head = tmp_path / "p.audit.jsonl", tmp_path / "p.audit.head"
    first = audit.append(log, head, actor="a", action="lock", plan="sha256:" + "a" * 64,
                         data=None)
    kept = head.read_bytes()
    audit.append(log, head, actor="a", action="run", plan="sha256:" + "a" * 64, data=None)
    head.write_bytes(kept)  # as if stopped between the log write and the head replacement
    entries = audit.read_log(log)
    assert audit.check_head(entries, head) == audit.log.HEAD_LAGS
    assert json.loads(kept) == {"seq": 1, "hash": first["hash"]}
    third = audit.append(log, head, actor="a", action="run", plan="sha256:" + "a" * 64,
                         data=None)
    assert json.loads(head.read_text()) == {"seq": 3, "hash": third["hash"]}
    head.write_bytes(kept)  # two behind is not a stopped append: it fails
    with pytest.raises(IntegrityStop, match="does not match the last entry"):
        audit.check_head(audit.read_log(log), head)


# --- real processes ---

PRESPEC = [sys.executable, "-m", "prespec"]


def _start(study: Path) -> subprocess.Popen[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "crash-test"}
    return subprocess.Popen([*PRESPEC, "run", "trial.yaml", "data.csv"], cwd=study, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


@pytest.fixture(scope="module")
def command_study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("kill") / "study"
    root.mkdir()
    (root / "trial.yaml").write_text(PLAN_TEXT)
    (root / "data.csv").write_text(demo_data())
    done = subprocess.run([*PRESPEC, "lock", "trial.yaml"], check=False, cwd=root,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return root


def test_sigkill_of_the_command_at_several_moments(command_study: Path, tmp_path: Path) -> None:
    baseline = tmp_path / "baseline"
    shutil.copytree(command_study, baseline)
    started = time.monotonic()
    proc = _start(baseline)
    _out, err = proc.communicate(timeout=300)
    took = time.monotonic() - started
    assert proc.returncode == 0, err
    states = []
    for fraction in (0.15, 0.4, 0.65, 0.9):
        study = tmp_path / f"k{int(fraction * 100)}"
        shutil.copytree(command_study, study)
        proc = _start(study)
        time.sleep(took * fraction)
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
        entries = audit.read_log(audit.log_path(study / "trial.yaml"))
        res = api.verify(study / "trial.yaml")  # never fails after a kill
        reports = study / "reports" / "trial"
        for folder in (reports.iterdir() if reports.exists() else []):
            if ".partial-" not in folder.name and any(folder.iterdir()):
                rel = folder.relative_to(study).as_posix()
                assert rel in {e["details"].get("report") for e in entries}
                assert (folder / "report.html").is_file()
        states.append((fraction, proc.returncode, len(entries), len(res.notes)))
    assert all(code == -signal.SIGKILL or code == 0 for _, code, _, _ in states)
    print(f"\nrun took {took:.1f} s; kills (fraction, status, entries, notes): {states}")


def test_eight_runs_at_once_each_get_their_entry(command_study: Path, tmp_path: Path) -> None:
    study = tmp_path / "s"
    shutil.copytree(command_study, study)
    procs = [_start(study) for _ in range(8)]
    outputs = [p.communicate(timeout=600) for p in procs]
    assert [p.returncode for p in procs] == [0] * 8, [e for _, e in outputs]
    folders = [out.strip().splitlines()[-1] for out, _ in outputs]
    assert len(set(folders)) == 8
    entries = audit.read_log(audit.log_path(study / "trial.yaml"))
    assert [e["action"] for e in entries] == ["lock"] + ["run"] * 8
    assert [e["seq"] for e in entries] == list(range(1, 10))
    logged = {e["details"]["report"] for e in entries[1:]}
    assert logged == {Path(f).as_posix() for f in folders}
    res = api.verify(study / "trial.yaml")
    assert "reports: 8 folder(s)" in " ".join(res.passed) and not res.notes


@pytest.mark.parametrize("command", ["lock", "amend"])
def test_a_lock_or_amend_stopped_at_every_step_is_completed_or_undone(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, command: str) -> None:
    """The lock document waits beside the lock until its log entry is written: a stop before
    the entry leaves the old lock; a stop after it is finished by the next command."""
    base = tmp_path / "base"
    base.mkdir()
    (base / "trial.yaml").write_text(PLAN_TEXT)
    if command == "amend":
        api.lock(base / "trial.yaml")
        (base / "trial.yaml").write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))

    def act(study: Path) -> Any:
        plan = study / "trial.yaml"
        return api.lock(plan) if command == "lock" else api.amend(plan, reason="alpha")

    probe = tmp_path / "probe"
    shutil.copytree(base, probe)
    with crashing(monkeypatch, Crash(probe, None, None)) as counted:
        act(probe)
    outcomes: dict[str, int] = {}
    for at in range(1, counted.count + 1):
        for torn in ((False, True) if counted.names[at - 1] == "write" else (False,)):
            study, snapshot = tmp_path / f"s{at}{torn:d}", tmp_path / f"k{at}{torn:d}"
            shutil.copytree(base, study)
            with pytest.raises(Killed), crashing(monkeypatch, Crash(study, at, snapshot, torn)):
                act(study)
            plan = snapshot / "trial.yaml"
            try:
                res = api.verify(plan)
                outcome = "passed with notes" if res.notes else "passed"
            except IntegrityStop as exc:
                if "nothing to verify" in str(exc) and command == "lock":
                    outcome = "nothing locked yet"
                elif "differs in meaning from lock version 1" in str(exc) and command == "amend":
                    outcome = "as before the amend"  # the edited plan, not yet amended
                else:
                    assert "the last line is incomplete" in str(exc), str(exc)
                    outcome = "half entry named"
            outcomes[outcome] = outcomes.get(outcome, 0) + 1
            if outcome != "half entry named":
                act(snapshot)  # completes the stopped write, or does it again
                doc = json.loads(audit.lock_path(plan).read_text())
                assert len(doc["versions"]) == (1 if command == "lock" else 2)
                assert not api.verify(plan).notes
            shutil.rmtree(study)
            shutil.rmtree(snapshot)
    assert outcomes.get("passed with notes", 0) > 0 and outcomes.get("half entry named") == 1
    print(f"\n{command}: {counted.count} steps: {outcomes}")
