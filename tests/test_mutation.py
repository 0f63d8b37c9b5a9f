"""Tamper evidence, measured: random mutations of a study folder, each of which verify catches.

A study is locked (signed), run, amended after the run, run on changed data and run with an
override. Each mutation is applied to a fresh copy of it: changed bytes in the log, the head,
the lock or a report file; deleted, reordered, duplicated or truncated log entries; edited,
removed or swapped lock versions; report files edited, added or deleted, whole reports
removed. Every mutated copy must make verify stop with an integrity failure. Most run in
process against ``verify``; a few go through the ``prespec verify`` command.

What no mutation here can be: a rewrite of everything after the registered fingerprint, done
with prespec itself or with equal care. The chain cannot show that; ``--expect`` and signed
entries can (tested in tests/test_signing.py and below).
"""

from __future__ import annotations

import json
import os
import random
import shutil
import subprocess
import sys
from collections import Counter
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

import prespec.report
from prespec import api, audit
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import IntegrityStop

PLAN = "trial.yaml"
COUNT = 600
SEED = 20270301


def _fake_figures(results: dict[str, Any], folder: Path) -> list[Path]:
    (folder / "figures").mkdir()
    path = folder / "figures" / "proportions-infection.png"
    path.write_bytes(b"\x89PNG\r\n" + json.dumps(results["groups"]).encode())
    return [path]


def _fake_render(folder: Path) -> None:
    text = (folder / "results.json").read_text()
    (folder / "report.ipynb").write_text(json.dumps({"cells": [], "results": text}))
    (folder / "report.html").write_text(f"<html><body><pre>{len(text)}</pre></body></html>")


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("mutation") / "study"
    root.mkdir()
    plan, data = root / PLAN, root / "data.csv"
    plan.write_text(PLAN_TEXT)
    data.write_text(demo_data())
    mp = pytest.MonkeyPatch()
    mp.setattr(prespec.report, "write_figures", _fake_figures)
    mp.setattr(prespec.report, "render_notebook", _fake_render)
    try:
        made = api.new_key(root.parent / "monitor")
        api.lock(plan, actor="ana", sign=made.private)
        api.run(plan, data, actor="ana")
        plan.write_text(PLAN_TEXT.replace("multiplicity: holm", "multiplicity: hochberg"))
        api.amend(plan, reason="steering committee: Hochberg", actor="ben", sign=made.private)
        data.write_text(data.read_text().replace(",Gauze,yes,0", ",Gauze,yes,1"))
        api.run(plan, data, actor="ana", out=root / "second")
        api.run(plan, data, actor="ana", overrides={"alpha": 0.025},
                accept_deviation="sensitivity analysis asked by the monitor")
    finally:
        mp.undo()
    res = api.verify(plan, key=made.public)
    assert not res.notes and len(res.passed) == 5
    return root


def _reports(root: Path) -> list[Path]:
    return sorted({p.parent for p in root.rglob("manifest.json")})


def _files(root: Path) -> list[Path]:
    return sorted(p for folder in _reports(root) for p in folder.rglob("*") if p.is_file())


def _flip_byte(path: Path, rng: random.Random) -> str:
    data = bytearray(path.read_bytes())
    i = rng.randrange(len(data))
    old = data[i]
    data[i] = rng.choice([b for b in b' "0123456789:,{}[]abcdefxyzABC\\\n\t' if b != old])
    path.write_bytes(bytes(data))
    return f"byte {i} of {path.name}"


def _lines(path: Path) -> list[bytes]:
    return path.read_bytes().splitlines(keepends=True)


def _log(root: Path) -> Path:
    return audit.log_path(root / PLAN)


def m_log_byte(root: Path, rng: random.Random) -> str:
    return _flip_byte(_log(root), rng)


def m_log_delete(root: Path, rng: random.Random) -> str:
    lines = _lines(_log(root))
    i = rng.randrange(len(lines))
    del lines[i]
    _log(root).write_bytes(b"".join(lines))
    return f"log entry {i + 1} deleted"


def m_log_reorder(root: Path, rng: random.Random) -> str:
    lines = _lines(_log(root))
    i, j = rng.sample(range(len(lines)), 2)
    lines[i], lines[j] = lines[j], lines[i]
    _log(root).write_bytes(b"".join(lines))
    return f"log entries {i + 1} and {j + 1} swapped"


def m_log_duplicate(root: Path, rng: random.Random) -> str:
    lines = _lines(_log(root))
    i = rng.randrange(len(lines))
    lines.insert(rng.randrange(len(lines) + 1), lines[i])
    _log(root).write_bytes(b"".join(lines))
    return f"log entry {i + 1} duplicated"


def m_log_truncate(root: Path, rng: random.Random) -> str:
    data = _log(root).read_bytes()
    cut = rng.randrange(len(data))
    _log(root).write_bytes(data[:cut])
    return f"log cut to {cut} bytes"


def m_head(root: Path, rng: random.Random) -> str:
    head = audit.head_path(root / PLAN)
    if rng.random() < 0.2:
        head.unlink()
        return "head deleted"
    return _flip_byte(head, rng)


def m_lock_byte(root: Path, rng: random.Random) -> str:
    return _flip_byte(audit.lock_path(root / PLAN), rng)


def _leaves(value: Any, path: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    if isinstance(value, dict):
        return [p for k, v in value.items() for p in _leaves(v, (*path, k))] or [path]
    if isinstance(value, list):
        return [p for i, v in enumerate(value) for p in _leaves(v, (*path, i))] or [path]
    return [path]


def _other(value: Any, rng: random.Random) -> Any:
    if isinstance(value, bool):
        return not value
    if isinstance(value, int | float):
        return value + rng.choice([1, -1, 0.5])
    if value is None:
        return "edited"
    if isinstance(value, str):
        return value + rng.choice(["x", " ", "0"]) if value else "x"
    return None


def m_lock_version(root: Path, rng: random.Random) -> str:
    """An edit written back in prespec's own form, so only the content differs."""
    path = audit.lock_path(root / PLAN)
    doc = json.loads(path.read_text())
    choice = rng.random()
    if choice < 0.1:
        doc["versions"].pop()
        what = "last version removed"
    elif choice < 0.15:
        doc["versions"].reverse()
        what = "versions swapped"
    else:
        v = rng.randrange(len(doc["versions"]))
        leaf = rng.choice(_leaves(doc["versions"][v]))
        target = doc["versions"][v]
        for key in leaf[:-1]:
            target = target[key]
        target[leaf[-1]] = _other(target[leaf[-1]], rng)
        if leaf[0] == "plan" and rng.random() < 0.5:  # a careful forger fixes the fingerprint
            from prespec.plan import fingerprint

            try:
                doc["versions"][v]["fingerprint"] = fingerprint(doc["versions"][v]["plan"])
            except (TypeError, ValueError):
                pass
        what = f"version {v + 1} {'.'.join(map(str, leaf))} edited"
    audit.write_lock(path, doc)
    return what


def m_report_byte(root: Path, rng: random.Random) -> str:
    return _flip_byte(rng.choice(_files(root)), rng)


def m_report_add(root: Path, rng: random.Random) -> str:
    folder = rng.choice(_reports(root))
    sub = rng.choice(["", "figures", "tables"])
    path = folder / sub / rng.choice(["extra.png", "notes.txt", ".hidden", "H9.csv"])
    path.write_bytes(b"added after the run")
    return f"{path.relative_to(root)} added"


def m_report_delete(root: Path, rng: random.Random) -> str:
    path = rng.choice(_files(root))
    path.unlink()
    return f"{path.relative_to(root)} deleted"


def m_report_folder(root: Path, rng: random.Random) -> str:
    folder = rng.choice(_reports(root))
    shutil.rmtree(folder)
    return f"{folder.relative_to(root)} removed"


def m_results_value(root: Path, rng: random.Random) -> str:
    """results.json edited as JSON, in its own layout (a p-value, a decision, a departure)."""
    path = rng.choice(_reports(root)) / "results.json"
    doc = json.loads(path.read_text())
    leaf = rng.choice(_leaves(doc))
    target = doc
    for key in leaf[:-1]:
        target = target[key]
    target[leaf[-1]] = _other(target[leaf[-1]], rng)
    path.write_text(json.dumps(doc, indent=2, ensure_ascii=False) + "\n")
    return f"{path.parent.name}/results.json {'.'.join(map(str, leaf))} edited"


MUTATIONS: dict[str, Callable[[Path, random.Random], str]] = {
    f.__name__[2:]: f for f in (m_log_byte, m_log_delete, m_log_reorder, m_log_duplicate,
                                m_log_truncate, m_head, m_lock_byte, m_lock_version,
                                m_report_byte, m_report_add, m_report_delete, m_report_folder,
                                m_results_value)
}


def _snapshot(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in root.rglob("*") if p.is_file()}


def _restore(root: Path, original: dict[str, bytes]) -> None:
    """Put the folder back as it was (cheaper here than a fresh copy per mutation)."""
    for path in [p for p in root.rglob("*") if p.is_file()]:
        if path.relative_to(root).as_posix() not in original:
            path.unlink()
    for name, data in original.items():
        path = root / name
        if not path.is_file() or path.read_bytes() != data:
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(data)


def test_verify_catches_every_random_mutation(study: Path, tmp_path: Path) -> None:
    rng = random.Random(SEED)
    original = _snapshot(study)
    work = tmp_path / "work" / "study"
    shutil.copytree(study, work)
    caught: Counter[str] = Counter()
    missed = []
    names = list(MUTATIONS)
    for n in range(COUNT):
        kind = names[n % len(names)]
        what = MUTATIONS[kind](work, rng)
        if _snapshot(work) == original:  # pragma: no cover - every mutation changes something
            raise AssertionError(f"mutation {n} ({what}) changed nothing")
        try:
            api.verify(work / PLAN)
        except IntegrityStop:
            caught[kind] += 1
        else:
            missed.append(f"{n}: {kind}: {what}")
        _restore(work, original)
        assert _snapshot(work) == original
    api.verify(work / PLAN)  # the restored folder is intact again
    assert not missed, missed
    assert sum(caught.values()) == COUNT >= 500
    assert set(caught) == set(MUTATIONS)
    print(f"\nmutations caught: {sum(caught.values())} of {COUNT}: {dict(caught)}")


def test_a_rewrite_after_the_fingerprint_is_caught_only_by_expect_and_keys(
        study: Path, tmp_path: Path) -> None:
    """The limit of the chain, shown: rebuild the whole trail from a different plan."""
    copy = tmp_path / "forged"
    copy.mkdir()
    registered = json.loads(audit.lock_path(study / PLAN).read_text())["versions"][0]
    (copy / PLAN).write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.10"))
    api.lock(copy / PLAN, actor="ana")  # a whole new, self-consistent trail
    api.verify(copy / PLAN)  # the chain alone cannot tell
    with pytest.raises(IntegrityStop, match="expected fingerprint"):
        api.verify(copy / PLAN, expect=registered["fingerprint"])
    with pytest.raises(IntegrityStop, match="not signed"):
        api.verify(copy / PLAN, key=study.parent / "monitor.pub")


def test_the_command_names_the_failure_for_each_kind(study: Path, tmp_path: Path) -> None:
    rng = random.Random(SEED + 1)
    env = {**os.environ, "PRESPEC_ACTOR": "monitor"}
    for kind in ("log_reorder", "lock_version", "report_add"):
        copy = tmp_path / kind
        shutil.copytree(study, copy)
        MUTATIONS[kind](copy, rng)
        done = subprocess.run([sys.executable, "-m", "prespec", "verify", PLAN], cwd=copy,
                              env=env, capture_output=True, text=True, timeout=120, check=False)
        assert done.returncode == 3, (kind, done.stdout, done.stderr)
        (fail,) = [line for line in done.stdout.splitlines() if line.startswith("FAIL  ")]
        assert fail[6:] not in done.stderr  # said once, on the checklist
        assert done.stderr == "prespec: not verified; the FAIL line says what does not match\n"
