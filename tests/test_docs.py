"""The contract in docs/ against the code: the plan's key tables, the departure and note codes,
the verify checklist, and the citations that point to it.

Each test fails when docs/ and the code drift apart, and says how to bring them together.
"""

from __future__ import annotations

import ast
import re
import shutil
from pathlib import Path

import pytest

# The one place the codes are imported from (the module moves to prespec.common.departures).
from prespec.common.departures import DEPARTURE_CODES, STOPPING
from prespec.plan import keytables
from prespec.plan.vocabulary import MISSING_RULES

ROOT = Path(__file__).resolve().parent.parent
DOCS = ROOT / "docs"
SRC = ROOT / "src" / "prespec"


def _section(path: Path, heading: str) -> str:
    """The text of a ``## heading`` section of a docs file, up to the next ``## ``."""
    text = path.read_text("utf-8")
    start = text.index(f"\n## {heading}\n")
    end = text.find("\n## ", start + 1)
    return text[start:end if end != -1 else len(text)]


def _table_codes(section: str) -> dict[str, list[str]]:
    """The codes in the first column of a section's table (a cell may list several), each with
    the cells of its row."""
    out: dict[str, list[str]] = {}
    for line in section.splitlines():
        if not line.startswith("| `"):
            continue
        cells = [c.strip() for c in line.strip().strip("|").split(" | ")]
        for code in re.findall(r"`([^`]+)`", cells[0]):
            out[code] = cells
    return out


# --- the plan format ---------------------------------------------------------------------

def test_the_key_tables_in_docs_are_those_the_plan_model_gives() -> None:
    path = DOCS / "plan-format.md"
    text = path.read_text("utf-8")
    assert keytables.replaced(text, keytables.key_tables()) == text, (
        f"the key tables in {path.relative_to(ROOT)} differ from the plan model; regenerate "
        f"them with: PYTHONPATH=src python -m prespec.plan.keytables docs/plan-format.md")


def test_every_key_of_the_model_has_a_row_with_its_default() -> None:
    tables = keytables.key_tables()
    # keys of each level, with the default the model gives
    assert "| `alternative` | one of `two-sided`, `greater`, `less` | `two-sided` |" in tables
    assert "| `test` | one of `barnard-exact`," in tables
    assert "| `prespec` | `1` | required | format version |" in tables
    assert "| `alpha` | number in (0, 1) | required |" in tables
    assert "| `dropout` | number in [0, 1) | `0.0` |" in tables
    assert "| `tables` | whole number in (0, 10,000,000] | required |" in tables
    assert "| `fractions` | list (at most 20) of number in (0, 1] | — |" in tables
    assert "| `in` | list of text or number | — |" in tables
    for heading in ("### the plan (top level)", "### `data`", "### `data.include[]`",
                    "### `outcomes.<name>`", "### `hypotheses[]`", "### `hypotheses[].sparse`",
                    "### `hypotheses[].looks.futility`",
                    "### `hypotheses[].estimand.intercurrent[]`", "### `design`"):
        assert f"\n{heading}\n" in f"\n{tables}"
    # a link to a nested table names the heading's anchor
    assert "[`hypotheses[].looks`](#hypotheseslooks)" in tables
    assert "[`outcomes.<name>`](#outcomesname)" in tables


def test_a_key_without_a_description_is_refused() -> None:
    schema = {"type": "object", "required": ["a"], "properties": {
        "a": {"type": "string", "description": "said"},
        "b": {"type": "integer", "minimum": 0, "default": 3}}}
    with pytest.raises(ValueError, match="keys without a description in the plan model: b"):
        keytables.key_tables(schema)


def test_the_generator_rewrites_only_between_its_markers(tmp_path: Path) -> None:
    path = tmp_path / "plan-format.md"
    path.write_text(f"# head\n\n{keytables.BEGIN}\nstale\n{keytables.END}\n\ntail\n", "utf-8")
    assert keytables.main([str(path)]) == 0
    text = path.read_text("utf-8")
    assert text.startswith(f"# head\n\n{keytables.BEGIN}\n\n### What each kind of `compare`")
    assert text.endswith(f"\n{keytables.END}\n\ntail\n")
    assert "stale" not in text
    assert keytables.write(path) is False  # current: unchanged
    path.write_text("# no markers\n", "utf-8")
    assert keytables.main([str(path)]) == 2


# --- departures and notes -----------------------------------------------------------------

def test_the_departure_codes_in_docs_are_those_of_the_code() -> None:
    rows = _table_codes(_section(DOCS / "departures.md", "Departure codes"))
    codes = set(DEPARTURE_CODES)
    assert set(rows) == codes, (
        "docs/departures.md lists other departure codes than DEPARTURE_CODES: missing "
        f"{sorted(codes - set(rows))}, extra {sorted(set(rows) - codes)}")
    stopping = {code for code, cells in rows.items() if cells[1] == "yes"}
    assert stopping == set(STOPPING)
    assert {cells[1] for cells in rows.values()} == {"yes", "no"}


def _note_codes() -> tuple[set[str], list[str]]:
    """Every note code made in src/prespec: the text of ``Note("code", …)``, a module-level
    ``NOTE_… = "code"`` passed to it, and ``f"missing-{rule}"`` over the missing rules. A
    code passed on in a variable (families merge the notes of their levels) adds none."""
    trees = {path: ast.parse(path.read_text("utf-8")) for path in SRC.rglob("*.py")}
    constants = {node.targets[0].id: node.value.value for tree in trees.values()
                 for node in tree.body
                 if isinstance(node, ast.Assign) and len(node.targets) == 1
                 and isinstance(node.targets[0], ast.Name)
                 and node.targets[0].id.startswith("NOTE_")
                 and isinstance(node.value, ast.Constant)}
    codes: set[str] = set()
    unknown: list[str] = []
    for path, tree in trees.items():
        for node in ast.walk(tree):
            if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Name)
                    and node.func.id == "Note"):
                continue
            given = [k.value for k in node.keywords if k.arg == "code"]
            arg = node.args[0] if node.args else given[0] if given else None
            if arg is None:
                unknown.append(f"{path.relative_to(ROOT)}:{node.lineno}: Note without a code")
                continue
            text = ast.unparse(arg)
            if isinstance(arg, ast.Constant) and isinstance(arg.value, str):
                codes.add(arg.value)
            elif isinstance(arg, ast.Name) and arg.id in constants:
                codes.add(constants[arg.id])
            elif isinstance(arg, ast.JoinedStr) and text.startswith("f'missing-{"):
                codes.update(f"missing-{rule}" for rule in MISSING_RULES)
            elif not (isinstance(arg, ast.Name) and arg.id == "code"):
                unknown.append(f"{path.relative_to(ROOT)}:{node.lineno}: Note({text}, …)")
    return codes, unknown


def test_the_note_codes_in_docs_are_those_of_the_code() -> None:
    codes, unknown = _note_codes()
    assert not unknown, f"note codes this test cannot read; list them in docs: {unknown}"
    assert len(codes) > 20  # the scan finds the notes
    rows = _table_codes(_section(DOCS / "departures.md", "Note codes"))
    assert set(rows) == codes, (
        f"docs/departures.md, 'Note codes': missing {sorted(codes - set(rows))}, extra "
        f"{sorted(set(rows) - codes)}")


# --- verify -------------------------------------------------------------------------------

FIXTURE = ROOT / "tests" / "fixtures" / "studies" / "before-issue-15" / "demo"


def test_the_verify_checklist_names_each_ok_line_in_the_order_verify_prints_them(
        tmp_path: Path) -> None:
    from prespec import api

    study = tmp_path / "study"
    shutil.copytree(FIXTURE, study, symlinks=True)  # the fixture stays untouched
    plans = sorted(study.glob("*.yaml"))
    assert len(plans) == 1
    result = api.verify(plans[0])
    prefixes = [line.split(":", 1)[0] for line in result.passed]
    assert prefixes == ["audit log", "lock", "plan file", "reports"]
    checklist = _section(DOCS / "verify.md", "The checks, in order")
    named = re.findall(r"^\d+\. \*\*`([a-z ]+):", checklist, flags=re.MULTILINE)
    order = list(named)
    assert [p for p in order if p in prefixes] == prefixes
    assert set(order) >= {"audit log", "signatures", "lock", "plan file", "reports",
                          "interim looks", "expected fingerprint", "rerun"}


# --- citations ----------------------------------------------------------------------------

def _texts() -> list[Path]:
    """The code, the tests (but this one, which names what it looks for) and the READMEs."""
    tests = [p for p in (ROOT / "tests").rglob("*.py") if p.resolve() != Path(__file__).resolve()]
    return [*SRC.rglob("*.py"), *tests, ROOT / "README.md", ROOT / "DEVELOPERS.md"]


def test_code_and_readme_cite_the_contract_in_docs_only() -> None:
    outside = "SPEC" + ".md"  # the first contract, kept outside the repository
    citing = [str(p.relative_to(ROOT)) for p in _texts()
              if re.search(rf"\b{re.escape(outside)}|\bSPEC\b|/work/", p.read_text("utf-8"))]
    assert citing == []
    cited = {m for p in _texts() for m in re.findall(r"docs/[\w-]+\.md", p.read_text("utf-8"))}
    assert cited, "nothing cites docs/"
    assert all((ROOT / c).is_file() for c in cited), sorted(c for c in cited
                                                           if not (ROOT / c).is_file())


def test_the_readme_links_the_docs() -> None:
    readme = (ROOT / "README.md").read_text("utf-8")
    for name in ("plan-format.md", "files.md", "departures.md", "verify.md"):
        assert f"(docs/{name})" in readme
        assert (DOCS / name).is_file()


def test_the_source_files_docs_name_exist() -> None:
    named = {m for page in DOCS.glob("*.md")
             for m in re.findall(r"`(src/prespec/[\w/]+\.py)`", page.read_text("utf-8"))}
    assert named, "docs/ names no source file"
    assert [n for n in sorted(named) if not (ROOT / n).is_file()] == []
