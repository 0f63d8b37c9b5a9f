"""verify's report checks made cheaper (issue 15 item 7) say what they said before: one walk
per report folder, each file read once, the verdicts in one pass. Each check here compares
with the slower form it replaced, written out as the reference."""

from __future__ import annotations

import builtins
import io
import itertools
import json
import os
from pathlib import Path, PurePosixPath
from typing import Any

import pytest

from prespec.audit.manifest import _plain_name, check_folder, write_manifest
from prespec.workflow.verify import _contents_warnings, _kind_of, run_verdicts


def _walk_warnings(rel: str, folder: Path) -> list[str]:
    """The warnings as verify found them before, from os.walk and an lstat per name."""
    out = []
    for root, dirs, files in os.walk(folder):
        dirs.sort()
        for name in sorted(dirs + files):
            path = Path(root) / name
            mode = path.lstat().st_mode
            inner = path.relative_to(folder).as_posix()
            if os.path.isdir(path) and not path.is_symlink():
                if not any(path.iterdir()):
                    out.append(f"report {rel}: {inner}: an empty folder inside the report (not "
                               "in its manifest)")
            elif not path.is_file() and not path.is_symlink():
                out.append(f"report {rel}: {inner}: {_kind_of(mode)} inside the report (not in "
                           "its manifest)")
    return out


def test_the_contents_warnings_come_from_the_one_walk_in_walk_order(tmp_path: Path) -> None:
    folder = tmp_path / "r1"
    for sub in ("figures/b/deep/deeper", "figures/a", "tables/empty", "z-empty", "a/b"):
        (folder / sub).mkdir(parents=True)
    (folder / "results.json").write_text("{}")
    (folder / "figures" / "a" / "plot.png").write_bytes(b"png")
    (folder / "a" / "b" / "x.csv").write_text("x\n")
    os.mkfifo(folder / "figures" / "pipe")
    os.mkfifo(folder / "figures" / "b" / "pipe")
    os.mkfifo(folder / "0-pipe")
    write_manifest(folder)
    warnings = _contents_warnings("r1", check_folder(folder))
    expected = _walk_warnings("r1", folder)
    assert warnings == expected
    assert [w.split(": ")[1] for w in expected] == [
        "0-pipe", "z-empty", "figures/pipe", "figures/b/pipe", "figures/b/deep/deeper",
        "tables/empty"]


def test_a_report_file_is_read_once_and_the_bytes_read_are_the_bytes_hashed(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    folder = tmp_path / "r1"
    (folder / "tables").mkdir(parents=True)
    (folder / "results.json").write_text('{"kind": "run"}')
    (folder / "tables" / "t.csv").write_text("a,b\n")
    digest = write_manifest(folder)
    opened: list[str] = []
    real, real_os = builtins.open, os.open

    def counting(file: Any, *args: Any, **kwargs: Any) -> Any:
        opened.append(Path(file).name)
        return real(file, *args, **kwargs)

    def counting_os(file: Any, *args: Any, **kwargs: Any) -> Any:
        opened.append(Path(file).name)
        return real_os(file, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", counting)
    monkeypatch.setattr(io, "open", counting)  # pathlib's
    monkeypatch.setattr(os, "open", counting_os)
    checked = check_folder(folder, keep=("results.json",))
    monkeypatch.undo()
    assert checked.problem is None and checked.manifest == digest
    assert checked.kept == {"results.json": b'{"kind": "run"}'}
    assert sorted(opened) == ["manifest.json", "results.json", "t.csv"]
    assert sorted(rel for rel, _ in checked.entries) == [
        "manifest.json", "results.json", "tables", "tables/t.csv"]


def test_a_changed_kept_file_is_a_problem_and_is_not_handed_on(tmp_path: Path) -> None:
    folder = tmp_path / "r1"
    folder.mkdir()
    (folder / "results.json").write_text('{"kind": "run"}')
    write_manifest(folder)
    (folder / "results.json").write_text('{"kind": "rehearsal"}')
    checked = check_folder(folder, keep=("results.json",))
    assert checked.problem == "results.json does not match its manifest hash (changed)"
    assert checked.kept == {} and checked.manifest is None


def _old_plain_name(name: str) -> bool:
    """The earlier form, through PurePosixPath."""
    parts = PurePosixPath(name).parts
    return bool(parts) and not name.startswith("/") and "\\" not in name \
        and all(p not in ("", ".", "..") for p in parts) \
        and PurePosixPath(*parts).as_posix() == name


def test_plain_names_are_judged_as_through_purepath() -> None:
    names = ["".join(t) for k in range(6) for t in itertools.product("a/.\\", repeat=k)]
    assert len(names) == 1365
    assert [n for n in names if _plain_name(n)] == [n for n in names if _old_plain_name(n)]
    assert _plain_name("figures/a.png") and not _plain_name("figures//a.png")


def _verdicts_as_before(entries: list[dict[str, Any]]) -> list[tuple[Any, ...]]:
    """The verdicts' inputs as the quadratic form computed them, per run: the lock and amend
    entries before it, the first run before it, the first lock after it."""
    out = []
    for entry in (e for e in entries if e["action"] in ("run", "look")):
        before = [e for e in entries if e["seq"] < entry["seq"]]
        out.append((entry["seq"],
                    [e["seq"] for e in before if e["action"] in ("lock", "amend")],
                    next((e["seq"] for e in before if e["action"] in ("run", "look")), None),
                    next((e["seq"] for e in entries if e["action"] == "lock"
                          and e["seq"] > entry["seq"]), None)))
    return out


def test_the_verdicts_in_one_pass_see_what_the_quadratic_form_saw(
        monkeypatch: pytest.MonkeyPatch) -> None:
    actions = ["run", "rehearse", "lock", "run", "look", "amend", "design", "run", "amend",
               "look", "run"]
    entries = [{"seq": i, "action": a, "plan": "sha256:a", "deviations": [],
                "details": {"report": f"r{i}", "version": 1, "look": 1}}
               for i, a in enumerate(actions, start=1)]
    seen: list[tuple[Any, ...]] = []
    from prespec.workflow import verify

    real = verify._run_verdict

    def spy(number: int, entry: dict[str, Any], locks: list[dict[str, Any]],
            first_run: int | None, later: dict[str, Any] | None) -> Any:
        seen.append((entry["seq"], [e["seq"] for e in locks], first_run,
                     later["seq"] if later else None))
        return real(number, entry, locks, first_run, later)

    monkeypatch.setattr(verify, "_run_verdict", spy)
    verdicts = run_verdicts(entries)
    assert seen == _verdicts_as_before(entries)
    assert [v.number for v in verdicts] == [1, 2, 3, 4, 5, 6]
    assert seen[0] == (1, [], None, 3)  # before the lock: the lock after it is named
    assert json.dumps(seen[-1]) == "[11, [3, 6, 9], 1, null]"
