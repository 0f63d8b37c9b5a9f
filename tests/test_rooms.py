"""The layout of src/prespec: one room per step, imports flowing one way (DEVELOPERS.md, Layout).

A reading of every import statement of the package (those inside functions too): no module
takes part in an import cycle, no room imports a room above it, at most six modules sit at the
top level, and only ``audit/`` holds the primitives that write the log, its head and the lock
file (everyone else records through ``audit.record``)."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parent.parent / "src" / "prespec"

#: The rooms from the bottom up: each may import the rooms before it, never one after it.
#: ``errors`` and the package's ``__init__`` (the version) are leaves every room may use.
ORDER = ["__init__", "errors", "common", "stats", "plan", "audit", "data", "analysis",
         "design", "report", "workflow", "demo", "api", "cli", "__main__"]

#: The primitives that write the log, its head or the lock file; only audit/ names them.
WRITERS = {"append", "write_lock", "write_pending", "complete_pending", "repair_head",
           "replace_atomically", "_write_entry"}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(SRC.parent).with_suffix("").parts)
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join(parts)


def modules() -> dict[str, Path]:
    return {module_name(p): p for p in SRC.rglob("*.py")}


def imports(known: dict[str, Path], with_types: bool = False) -> dict[str, set[str]]:
    """Each module → the package modules it imports. ``from X import a`` names the module
    ``X.a`` when that is one (``from . import guard``), else ``X`` itself. The imports under
    ``if TYPE_CHECKING:`` (annotations only, never run) count with ``with_types``."""
    graph: dict[str, set[str]] = {}
    for name, path in known.items():
        package = name if path.name == "__init__.py" else name.rpartition(".")[0]
        found: set[str] = set()
        tree = ast.parse(path.read_text("utf-8"))
        typing_only = {id(n) for block in ast.walk(tree) if isinstance(block, ast.If)
                       and ast.unparse(block.test) in ("TYPE_CHECKING", "typing.TYPE_CHECKING")
                       for stmt in block.body for n in ast.walk(stmt)}
        for node in ast.walk(tree):
            if id(node) in typing_only and not with_types:
                continue
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    base = package.split(".")[:len(package.split(".")) - node.level + 1]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module or ""
                if not target.startswith("prespec"):
                    continue
                subs = [f"{target}.{a.name}" for a in node.names if f"{target}.{a.name}" in known]
                found.update(subs if len(subs) == len(node.names) else [target, *subs])
            elif isinstance(node, ast.Import):
                found.update(a.name for a in node.names if a.name in known)
        graph[name] = {t for t in found if t in known and t != name}
    return graph


def room(name: str) -> str:
    parts = name.split(".")
    return "__init__" if len(parts) == 1 else parts[1]


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                found.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


@pytest.fixture(scope="module")
def graph() -> dict[str, set[str]]:
    return imports(modules())


@pytest.fixture(scope="module")
def typed_graph() -> dict[str, set[str]]:
    return imports(modules(), with_types=True)


def test_every_module_is_in_a_known_room(graph: dict[str, set[str]]) -> None:
    assert sorted({room(m) for m in graph} - set(ORDER)) == []


def test_no_import_cycle(graph: dict[str, set[str]]) -> None:
    assert cycles(graph) == []


def upward(graph: dict[str, set[str]]) -> list[str]:
    """Every import of a module in a later room than the importer's."""
    return sorted(f"{a} → {b}" for a, targets in graph.items() for b in targets
                  if ORDER.index(room(b)) > ORDER.index(room(a)))


def test_no_room_imports_a_room_above_it(typed_graph: dict[str, set[str]]) -> None:
    """Annotations count too: a type from a later room would be a dependency on it."""
    assert upward(typed_graph) == []


def test_the_plan_room_loads_nothing_of_the_later_steps(graph: dict[str, set[str]]) -> None:
    """``prespec check`` reads the plan; the plan room must not pull in design, analysis,
    data or the workflow (the issue's example of an upward import)."""
    reach, todo = set(), ["prespec.plan"]
    while todo:
        for nxt in graph[todo.pop()] - reach:
            reach.add(nxt)
            todo.append(nxt)
    assert sorted({room(m) for m in reach}) == ["common", "errors", "plan", "stats"]


def test_at_most_six_modules_at_the_top_level() -> None:
    top = sorted(p.name for p in SRC.glob("*.py"))
    assert top == ["__init__.py", "__main__.py", "api.py", "cli.py", "errors.py"]


def test_only_audit_names_the_writers_of_the_log_and_the_lock() -> None:
    named = []
    for name, path in modules().items():
        if room(name) == "audit":
            continue
        for node in ast.walk(ast.parse(path.read_text("utf-8"))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("prespec.audit"):
                named += [f"{name} imports {a.name}" for a in node.names if a.name in WRITERS]
            elif (isinstance(node, ast.Attribute) and node.attr in WRITERS
                  and ast.unparse(node.value).split(".")[0] == "audit"):
                named.append(f"{name} calls {ast.unparse(node)}")
    assert named == []


def test_the_walk_sees_a_cycle_and_an_upward_import() -> None:
    """The checks above can fail: a made-up graph with both faults is caught."""
    made_up = {"prespec.plan.a": {"prespec.design.b"}, "prespec.design.b": {"prespec.plan.a"}}
    assert cycles(made_up) == [["prespec.design.b", "prespec.plan.a"]]
    assert upward(made_up) == ["prespec.plan.a → prespec.design.b"]


def test_check_loads_neither_analysis_nor_design_nor_report() -> None:
    """``prespec check`` of a plan without a design section reads the plan: the facade loads
    each step on first use, so the analysis, design and report rooms stay unloaded."""
    import subprocess
    import sys

    plan = SRC.parent.parent / "plans" / "methods-tour.yaml"
    code = ("import contextlib, io, sys\n"
            "from prespec import cli\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            f"    assert cli.main(['check', {str(plan)!r}]) == 0\n"
            "print(' '.join(sorted({m.split('.')[1] for m in sys.modules "
            "if m.startswith('prespec.')})))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    loaded = set(out.stdout.split())
    assert "plan" in loaded and "workflow" in loaded
    assert loaded.isdisjoint({"analysis", "design", "report"}), sorted(loaded)
