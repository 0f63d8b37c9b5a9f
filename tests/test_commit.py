"""The commit point of lock, amend, run and rehearse, on a full disk and under Ctrl-C.

Every file-system step a command takes inside the study folder (a file opened for writing,
each write, fsync, rename, folder made, log cut back) is made, in turn, to fail with
``ENOSPC`` or to raise ``KeyboardInterrupt``; unlike a kill (``test_crash.py``) the command's
own clean-up then runs, and it must not remove anything the log names. After each failure:
a full disk is the one-line ``no space left on …`` error (exit status 2), a step before the
log entry leaves the folder exactly as it was, a step after it leaves a folder that verifies,
and the next command completes what was left (the head, the lock, the report's rename) and
runs again.
"""

from __future__ import annotations

import builtins
import errno
import hashlib
import os
import pathlib
import shutil
import stat
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

import prespec.workflow.rehearse
import prespec.workflow.run
from prespec import api, audit, cli
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import BadInput, IntegrityStop
from tests.test_crash import (  # noqa: F401 - quick_report: the fixture, for every test here
    _write_bytes_via,
    _write_text_via,
    quick_report,
)

FD_STEPS = ("write", "fsync", "ftruncate")
PATH_STEPS = ("replace", "rename", "mkdir")
WRITING = os.O_WRONLY | os.O_RDWR | os.O_CREAT


class Fault:
    """Counts the file-system steps taken inside ``folder``; step ``at`` fails with ``error``
    (``"full"``: ``OSError(ENOSPC)``; ``"interrupt"``: ``KeyboardInterrupt``)."""

    def __init__(self, folder: Path, at: int | None = None, error: str = "full") -> None:
        self.folder = str(folder.resolve())
        self.at, self.error = at, error
        self.count = 0
        self.names: list[str] = []
        self.fired: str | None = None

    def _inside(self, path: Any) -> bool:
        try:
            return os.path.abspath(os.fspath(path)).startswith(self.folder + os.sep)
        except TypeError:
            return False

    def _fd_inside(self, fd: int) -> bool:
        try:
            return self._inside(os.readlink(f"/proc/self/fd/{fd}"))
        except OSError:
            return False

    def hit(self, name: str, path: Any) -> None:
        self.count += 1
        label = f"{name} {os.path.relpath(os.fspath(path), self.folder)}"
        self.names.append(label)
        if self.count == self.at:
            self.fired = label
            if self.error == "interrupt":
                raise KeyboardInterrupt(label)
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), os.fspath(path))


def _fd_step(fault: Fault, name: str, real: Callable[..., Any]) -> Callable[..., Any]:
    def step(fd: int, *args: Any) -> Any:
        # an fsync of a folder is best effort (its failure is ignored), so not a step that
        # can meet a full disk; it is one where a stop can come
        folder = stat.S_ISDIR(os.fstat(fd).st_mode)
        if fault._fd_inside(fd) and not (folder and fault.error == "full"):
            fault.hit(name, os.readlink(f"/proc/self/fd/{fd}"))
        return real(fd, *args)

    return step


def _path_step(fault: Fault, name: str, real: Callable[..., Any]) -> Callable[..., Any]:
    def step(*args: Any, **kwargs: Any) -> Any:
        target = args[1] if name in ("replace", "rename") else args[0]
        exists = name == "mkdir" and os.path.lexists(target)  # EEXIST comes first
        if fault._inside(target) and not exists:
            fault.hit(name, target)
        return real(*args, **kwargs)

    return step


@contextmanager
def failing(monkeypatch: pytest.MonkeyPatch, fault: Fault) -> Iterator[Fault]:
    with monkeypatch.context() as mp:
        for name in FD_STEPS:
            mp.setattr(os, name, _fd_step(fault, name, getattr(os, name)))
        for name in PATH_STEPS:
            mp.setattr(os, name, _path_step(fault, name, getattr(os, name)))
        real_os_open = os.open

        def os_open(path: Any, flags: int, *args: Any, **kwargs: Any) -> int:
            if flags & WRITING and fault._inside(path):
                fault.hit("open", path)
            return real_os_open(path, flags, *args, **kwargs)

        mp.setattr(os, "open", os_open)
        real_open = builtins.open

        def opening(file: Any, mode: str = "r", *args: Any, **kwargs: Any) -> Any:
            if any(c in mode for c in "wax+") and fault._inside(file):
                fault.hit("open", file)
            return real_open(file, mode, *args, **kwargs)

        mp.setattr(builtins, "open", opening)

        mp.setattr(pathlib.Path, "write_text", _write_text_via(opening))
        mp.setattr(pathlib.Path, "write_bytes", _write_bytes_via(opening))
        yield fault


def contents(folder: Path) -> dict[str, str]:
    """Every file and folder under ``folder`` with a hash of its bytes and its mode."""
    out = {}
    for path in sorted(folder.rglob("*")):
        rel = path.relative_to(folder).as_posix()
        if path.is_dir():
            out[rel + "/"] = "folder"
        else:
            out[rel] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


AMENDED = PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025")


def make_base(root: Path, command: str) -> Path:
    root.mkdir()
    (root / "trial.yaml").write_text(PLAN_TEXT)
    (root / "data.csv").write_text(demo_data())
    if command != "lock":
        api.lock(root / "trial.yaml", actor="ana")
    if command == "amend":
        (root / "trial.yaml").write_text(AMENDED)
    if command in ("run", "rehearse"):
        api.run(root / "trial.yaml", root / "data.csv", actor="ana")
    return root


def act(study: Path, command: str) -> Any:
    plan = study / "trial.yaml"
    if command == "lock":
        return api.lock(plan, actor="ana")
    if command == "amend":
        return api.amend(plan, reason="a stricter alpha", actor="ana")
    if command == "run":
        return api.run(plan, study / "data.csv", actor="ana")
    return api.rehearse(plan, study / "data.csv", actor="ana")


def chosen_steps(names: list[str]) -> list[int]:
    """Every step outside the report's temporary folder, and the first and last inside it
    (the steps in between fail the same way: before the entry, inside the same folder)."""
    inside = [i for i, n in enumerate(names, start=1) if ".partial-" in n]
    return [i for i, n in enumerate(names, start=1)
            if ".partial-" not in n or i in (inside[0], inside[1], inside[-1])]


def entries_of(study: Path) -> list[dict[str, Any]]:
    return audit.read_log(audit.log_path(study / "trial.yaml"))


def check_after(study: Path, base: Path, command: str, before: dict[str, str],
                logged_before: int, error: BaseException) -> str:
    """The invariants after a failed command; returns 'undone' or 'recorded'."""
    plan = study / "trial.yaml"
    entries = entries_of(study)
    if len(entries) == logged_before:
        # before the entry: the folder is exactly as it was
        assert contents(study) == before, f"{command}: left behind after {error!r}"
        return "undone"
    assert len(entries) == logged_before + 1
    entry = entries[-1]
    # after the entry: nothing it names is gone, and the folder verifies
    if command in ("run", "rehearse"):
        folder = study / entry["details"]["report"]
        assert folder.is_dir()
        held = (folder / "manifest.json").is_file() or any(
            (p / "manifest.json").is_file() for p in folder.parent.iterdir()
            if p.name.startswith(f".{folder.name}.partial-"))
        assert held, f"the report of entry {entry['seq']} was removed"
    else:
        lock = audit.lock_path(plan)
        pending = lock.with_name(f".{lock.name}.pending")
        assert pending.is_file() or len(audit.read_lock(lock)["versions"]) == \
            entry["details"]["version"]
    api.verify(plan)
    return "recorded"


def again(study: Path, command: str, logged_before: int) -> None:
    """The next command completes what was left and runs; then all verifies, without notes."""
    plan = study / "trial.yaml"
    act(study, command)
    entries = entries_of(study)
    assert len(entries) in (logged_before + 1, logged_before + 2)
    if command in ("lock", "amend"):
        doc = audit.read_lock(audit.lock_path(plan))
        assert doc is not None and len(doc["versions"]) == (1 if command == "lock" else 2)
        assert [e["action"] for e in entries if e["action"] in ("lock", "amend")] == \
            (["lock"] if command == "lock" else ["lock", "amend"])
    res = api.verify(plan)
    assert not res.notes, res.notes
    for e in entries:
        if e["action"] in ("run", "rehearse"):
            assert (study / e["details"]["report"] / "manifest.json").is_file()


@pytest.mark.parametrize("error", ["full", "interrupt"])
@pytest.mark.parametrize("command", ["lock", "amend", "run", "rehearse"])
def test_every_step_fails_cleanly(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                  command: str, error: str) -> None:
    fixed = Path("reports") / "trial" / "20270101T000000Z-step"  # the same steps every time
    for step in (prespec.workflow.run, prespec.workflow.rehearse):  # each names its folder
        monkeypatch.setattr(step, "default_folder", lambda plan, kind: plan.parent / fixed)
    base = make_base(tmp_path / "base", command)
    probe = tmp_path / "probe"
    shutil.copytree(base, probe)
    with failing(monkeypatch, Fault(probe, None, error)) as counted:
        act(probe, command)
    steps = chosen_steps(counted.names) if command in ("run", "rehearse") else \
        list(range(1, counted.count + 1))
    assert len(steps) >= 10, counted.names
    outcomes: dict[str, int] = {}
    for at in steps:
        study = tmp_path / f"s{at}"
        shutil.copytree(base, study)
        before, logged = contents(study), len(entries_of(study))
        expected = KeyboardInterrupt if error == "interrupt" else BadInput
        with pytest.raises(expected) as caught, \
                failing(monkeypatch, Fault(study, at, error)) as fault:
            act(study, command)
        assert fault.fired is not None
        if error == "full":
            message = str(caught.value)
            assert message.startswith("no space left on "), message
            assert "\n" not in message
        outcome = check_after(study, base, command, before, logged, caught.value)
        outcomes[outcome] = outcomes.get(outcome, 0) + 1
        again(study, command, logged)
        shutil.rmtree(study)
    # both sides of the entry were reached
    assert outcomes.get("undone", 0) > 0 and outcomes.get("recorded", 0) > 0, outcomes
    print(f"\n{command}/{error}: {len(steps)} of {counted.count} steps: {outcomes}")
    print("\n".join(counted.names[i - 1] for i in steps))


def head_full(monkeypatch: pytest.MonkeyPatch, head: Path) -> Callable[[Path, bytes], None]:
    """Make the disk full for the head file only; returns the real writer."""
    real: Callable[[Path, bytes], None] = audit.log.replace_atomically

    def full(path: Path, data: bytes) -> None:
        if path == head:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        real(path, data)

    monkeypatch.setattr(audit.log, "replace_atomically", full)
    return real


def test_a_full_disk_at_the_head_keeps_the_report_and_is_repaired(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    """The issue's scenario through the command: the entry is written, the head write finds
    the disk full. Exit 2, one line; the report stays, verify passes, the next run repairs."""
    study = make_base(tmp_path / "s", "run")
    plan = study / "trial.yaml"
    head = audit.head_path(plan)
    real = head_full(monkeypatch, head)
    status = cli.main(["run", str(plan), str(study / "data.csv"), "--actor", "ana"])
    err = capsys.readouterr().err
    assert status == 2
    assert err.startswith(f"prespec: no space left on {head}; the run was recorded")
    assert err.count("\n") == 1 and "Traceback" not in err
    monkeypatch.setattr(audit.log, "replace_atomically", real)
    entries = entries_of(study)
    assert [e["action"] for e in entries] == ["lock", "run", "run"]
    assert (study / entries[-1]["details"]["report"] / "report.html").is_file()
    res = api.verify(plan)  # the head lags one entry: accepted, with a note
    assert any("the head names the entry before the last" in n for n in res.notes)
    assert cli.main(["run", str(plan), str(study / "data.csv"), "--actor", "ana"]) == 0
    assert len(entries_of(study)) == 4
    assert not api.verify(plan).notes


def test_a_full_disk_at_the_head_of_an_amend_keeps_the_version(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    study = make_base(tmp_path / "s", "amend")
    plan = study / "trial.yaml"
    head = audit.head_path(plan)
    real = head_full(monkeypatch, head)
    with pytest.raises(BadInput, match=r"^no space left on .*version 2 was locked"):
        api.amend(plan, reason="stricter", actor="ana")
    monkeypatch.setattr(audit.log, "replace_atomically", real)
    assert len(audit.read_lock(audit.lock_path(plan))["versions"]) == 2
    api.verify(plan)
    # amending again: nothing to amend, the head is repaired; never a second version 2
    res = api.amend(plan, reason="stricter", actor="ana")
    assert not res.created and res.version == 2
    assert [e["action"] for e in entries_of(study)] == ["lock", "amend"]
    assert not api.verify(plan).notes


def test_a_run_that_outlives_an_amend_is_not_recorded(tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    """A run reads the lock at its start; if an amend is recorded while it computes, its
    report would name a version no longer in force: it stops, records nothing, leaves
    nothing."""
    study = make_base(tmp_path / "s", "run")
    plan = study / "trial.yaml"
    before = contents(study)
    import prespec.workflow.publish

    real = prespec.workflow.publish.build_report

    def build_then_amend(folder: Path, results: dict[str, Any], **kw: Any) -> Any:
        built = real(folder, results, **kw)
        plan.write_text(AMENDED)
        api.amend(plan, reason="while a run computed", actor="bo")
        return built

    monkeypatch.setattr(prespec.workflow.publish, "build_report", build_then_amend)
    with pytest.raises(IntegrityStop, match="the lock changed while this ran"):
        api.run(plan, study / "data.csv", actor="ana")
    monkeypatch.setattr(prespec.workflow.publish, "build_report", real)
    assert [e["action"] for e in entries_of(study)] == ["lock", "run", "amend"]
    changed = contents(study)
    assert {k for k in changed if k not in before} == set()  # no report folder left
    api.verify(plan)


@pytest.mark.parametrize("umask", [0o022, 0o027])
def test_the_lock_and_the_head_follow_the_umask(tmp_path: Path, umask: int) -> None:
    """A monitor given read access (group or others) can read the lock and the head: they
    are written like every other file, mode 0666 less the umask, not 0600."""
    old = os.umask(umask)
    try:
        study = make_base(tmp_path / "s", "amend")  # a lock, then an amend rewrites it
        api.amend(study / "trial.yaml", reason="stricter", actor="ana")
    finally:
        os.umask(old)
    plan = study / "trial.yaml"
    for path in (audit.lock_path(plan), audit.head_path(plan), audit.log_path(plan)):
        assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask, path.name


def test_a_file_verify_cannot_read_is_exit_2_with_its_path(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    study = make_base(tmp_path / "s", "run")
    plan = study / "trial.yaml"
    for unreadable in (audit.head_path(plan), audit.lock_path(plan), audit.log_path(plan)):
        real = pathlib.Path.read_bytes

        def denied(self: Path, _target: Path = unreadable,
                   _real: Callable[[Path], bytes] = real) -> bytes:
            if self == _target:
                raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(self))
            return _real(self)

        monkeypatch.setattr(pathlib.Path, "read_bytes", denied)
        status = cli.main(["verify", str(plan)])
        err = capsys.readouterr().err
        monkeypatch.setattr(pathlib.Path, "read_bytes", real)
        assert status == 2
        assert err == f"prespec: {unreadable}: permission denied\n"


def test_ctrl_c_in_the_command_is_one_line(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    study = make_base(tmp_path / "s", "run")
    before = contents(study)
    import prespec.workflow.publish

    def interrupted(*args: Any, **kwargs: Any) -> Any:
        raise KeyboardInterrupt

    monkeypatch.setattr(prespec.workflow.publish, "build_report", interrupted)
    status = cli.main(["run", str(study / "trial.yaml"), str(study / "data.csv")])
    assert status == 130
    assert capsys.readouterr().err == ("prespec: interrupted; prespec verify shows the state "
                                       "of the study\n")
    assert contents(study) == before
