"""Hostile input: plan text that looks like code, markup or shell never acts as any of them.

Labels with quotes, newlines, HTML, template and notebook-escape sequences go through a real
run (the notebook executed, the HTML exported): they appear literally in results.json and in
the notebook's shown text, escaped in the HTML, and the HTML carries no script element or
event attribute. No plan text reaches ``eval``/``exec``, a shell, or the notebook's code.
Oversized, deeply nested and alias-bomb plans are refused with one clear line; ``--out``
cannot be turned into a way out of the folder.
"""

from __future__ import annotations

import builtins
import html
import json
import os
import re
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest

from prespec import api, cli

MARK = "pwned-7f3a"  # in every hostile label, so any place it reaches can be found
TITLE = f"Dressings \"{MARK}\" <script>alert('{MARK}')</script> $(touch {MARK}-shell)"
HOSTILE = {
    "a": f"<img src=x onerror=alert(1)>{MARK}",
    "b": f"it's \"{MARK}\" {{{{7*7}}}} %%bash !rm -rf ~ `id` ${{HOME}}",
    "c": f"</td></table><a href=\"javascript:alert(1)\" onclick=\"x()\">{MARK}</a> $x^2$",
}
H_TITLE = f"line one\\nline two \\\\ \\\" {MARK} <style>*{{display:none}}</style>"


def _plan_text() -> str:
    a, b, c = (json.dumps(v) for v in HOSTILE.values())
    return f"""\
prespec: 1
title: {json.dumps(TITLE)}
protocol: "{MARK}'; DROP TABLE plans; --"
data:
  id: participant
  group: arm
  groups: [{a}, {b}, {c}]
outcomes:
  "healed <b>{MARK}</b>":
    column: healed
    event: ["yes"]
    no_event: ["no"]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    title: "{H_TITLE}"
    outcome: "healed <b>{MARK}</b>"
    compare: [{b}, {a}]
    test: pearson-chi-square
  - id: H2
    title: "{MARK} all groups"
    outcome: "healed <b>{MARK}</b>"
    compare: all
    test: pearson-chi-square
    role: exploratory
"""


def _data_text() -> str:
    import csv
    import io

    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(["participant", "arm", "healed"])
    n = 0
    for label, rate in zip(HOSTILE.values(), (9, 14, 11), strict=True):
        for i in range(40):
            n += 1
            w.writerow([f"P{n:03d}", label, "yes" if i % 20 < rate else "no"])
    return out.getvalue()


class _Tags(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.events: list[tuple[str, str]] = []
        self.links: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        for name, value in attrs:
            if name.lower().startswith("on"):
                self.events.append((tag, name))
            if value and value.strip().lower().startswith("javascript:"):
                self.links.append(value)


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One real run (notebook executed) of the hostile plan; no eval/exec or shell sees it."""
    root = tmp_path_factory.mktemp("hostile")
    plan = root / "plan.yaml"
    plan.write_text(_plan_text(), encoding="utf-8")
    (root / "data.csv").write_text(_data_text(), encoding="utf-8")
    seen: list[str] = []
    mp = pytest.MonkeyPatch()

    def watch(name: str, original: Any) -> Any:
        def call(*args: Any, **kwargs: Any) -> Any:
            if MARK in repr(args) or MARK in repr(kwargs):
                seen.append(f"{name}{args!r:.200}")
            if name in ("eval", "exec") and len(args) == 1 and not kwargs:
                # without namespaces eval and exec use their caller's: give them the caller's,
                # not this wrapper's (numpy's f2py, imported by scipy, evals a lambda so)
                frame = sys._getframe(1)
                return original(args[0], frame.f_globals, frame.f_locals)
            return original(*args, **kwargs)
        return call

    for name in ("eval", "exec", "compile"):
        mp.setattr(builtins, name, watch(name, getattr(builtins, name)))
    mp.setattr(os, "system", watch("os.system", os.system))
    popen_init = subprocess.Popen.__init__

    def popen(self: subprocess.Popen[Any], *args: Any, **kwargs: Any) -> None:
        if MARK in repr(args) or MARK in repr(kwargs.get("env")):
            seen.append(f"Popen{args!r:.200}")
        popen_init(self, *args, **kwargs)

    mp.setattr(subprocess.Popen, "__init__", popen)
    old = Path.cwd()
    os.chdir(root)  # a shell substitution would create a file here
    try:
        api.lock(plan, actor="ana")
        api.run(plan, root / "data.csv", out=root / "report", actor="ana")
    finally:
        os.chdir(old)
        mp.undo()
    assert seen == []
    assert not list(root.rglob(f"{MARK}-shell*"))
    api.verify(plan)
    return root


def test_labels_are_literal_in_results_and_never_code_in_the_notebook(hostile_run: Path) -> None:
    results = json.loads((hostile_run / "report" / "results.json").read_text())
    assert results["title"] == TITLE
    assert results["hypotheses"][0]["table"]["groups"] == [HOSTILE["b"], HOSTILE["a"]]
    assert results["hypotheses"][0]["title"].startswith("line one\nline two \\ \" ")
    nb = json.loads((hostile_run / "report" / "report.ipynb").read_text())
    code = [c for c in nb["cells"] if c["cell_type"] == "code"]
    assert all(MARK not in "".join(c["source"]) for c in code)  # only a path and a hash go in
    params = [c for c in code if "injected-parameters" in c.get("metadata", {}).get("tags", [])]
    assert len(params) == 1 and "results_sha256" in "".join(params[0]["source"])
    shown = "".join(
        "".join(out.get("data", {}).get("text/html", ""))
        for c in code for out in c.get("outputs", []))
    # the notebook shows the labels as text: escaped markup that reads back as the label
    assert html.escape(TITLE, quote=False) in shown or html.escape(TITLE) in shown
    assert "<script>" not in shown
    # the only images are prespec's own figures, embedded as PNG data (the participant flow)
    images = re.findall(r"<img\b[^>]*>", shown)
    assert all(re.fullmatch(r'<img src="data:image/png;base64,[A-Za-z0-9+/=]+" '
                            r'style="[^"]*" alt="Participant flow by group[^"<>]*">', tag)
               for tag in images), [tag[:120] for tag in images]


def test_the_html_escapes_labels_and_has_no_script_or_event_attribute(hostile_run: Path) -> None:
    page = (hostile_run / "report" / "report.html").read_text()
    tags = _Tags()
    tags.feed(page)
    assert "script" not in tags.tags
    assert tags.events == [] and tags.links == []
    assert "img" not in tags.tags or all(MARK not in t for t in tags.tags)
    for label in (TITLE, *HOSTILE.values()):
        assert html.escape(label, quote=False) in page or html.escape(label) in page
    assert "<style>*{display:none}</style>" not in page


def _refused(tmp_path: Path, content: bytes, expected: str) -> str:
    path = tmp_path / "plan.yaml"
    path.write_bytes(content)
    done = subprocess.run([sys.executable, "-m", "prespec", "check", "plan.yaml"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 2, done.stderr
    assert done.stderr.count("\n") == 1 and expected in done.stderr, done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.yaml"]
    return done.stderr


def test_an_alias_bomb_is_refused_through_the_command(tmp_path: Path) -> None:
    lines = ['prespec: 1', 'a0: &a0 ["lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol"]']
    for i in range(1, 10):
        lines.append(f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 8) + "]")
    _refused(tmp_path, ("\n".join(lines) + "\n").encode(), "more than 10000 values once aliases")


@pytest.mark.parametrize("case", ["too-large", "deep-lists", "deep-maps", "many-aliases"])
def test_oversized_and_nested_plans_are_refused(tmp_path: Path, case: str,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    if case == "too-large":
        content = b"prespec: 1\ntitle: x\n" + b"# padding\n" * 110_000
        expected = "a plan file may be at most 1 MiB"
    elif case == "deep-lists":
        content = b"prespec: 1\ntitle: " + b"[" * 5000 + b"]" * 5000 + b"\n"
        expected = "nested deeper than 50 levels"
    elif case == "deep-maps":
        content = b"prespec: 1\nx: " + b"{a: " * 3000 + b"1" + b"}" * 3000 + b"\n"
        expected = "nested deeper than 50 levels"
    else:
        content = b"prespec: 1\nv: &v 1\nl: [" + b", ".join([b"*v"] * 500) + b"]\n"
        expected = "more than 100 alias uses"
    path = tmp_path / "plan.yaml"
    path.write_bytes(content)
    for command in ("check", "lock"):
        assert cli.main([command, str(path)]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and expected in err, err
    assert [p.name for p in tmp_path.iterdir()] == ["plan.yaml"]


def test_out_cannot_lead_out_of_the_folder_unless_plainly_writable(
        hostile_run: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str],
        monkeypatch: pytest.MonkeyPatch) -> None:
    import prespec.report

    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    plan, data = hostile_run / "plan.yaml", hostile_run / "data.csv"
    nowhere = f"../../{tmp_path.name}-nowhere/x"
    assert cli.main(["run", str(plan), str(data), "--out", str(hostile_run / nowhere)]) == 2
    assert "must go into an existing plain folder" in capsys.readouterr().err
    target = tmp_path / "file-not-folder"
    target.write_text("keep")
    assert cli.main(["run", str(plan), str(data), "--out", str(target)]) == 2
    assert target.read_text() == "keep"
    # a plain folder the user can write, outside the plan's folder, is allowed
    assert cli.main(["run", str(plan), str(data), "--out", str(tmp_path / "fine")]) == 0
    assert (tmp_path / "fine" / "results.json").is_file()
    api.verify(plan)
