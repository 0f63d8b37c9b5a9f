"""The key tables of ``docs/plan-format.md``, generated from the plan model.

The plan format is declared once, as the pydantic models of :mod:`prespec.plan.model`; their
JSON Schema (what ``prespec schema`` prints) carries every key's type, default and meaning.
This module renders it as Markdown: one table per mapping of the plan (the top level, ``data``,
``hypotheses[]``, ``hypotheses[].looks`` …), and a table of what each kind of ``compare``
takes, from :mod:`prespec.plan.vocabulary`. :func:`write` puts them between the two marker
lines of the docs file; ``tests/test_docs.py`` fails when the file holds anything else there,
so the docs cannot drift from the models. To regenerate::

    python -m prespec.plan.keytables docs/plan-format.md
"""

from __future__ import annotations

import json
import re
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from prespec.plan import json_schema
from prespec.plan import vocabulary as v

COMMAND = "python -m prespec.plan.keytables docs/plan-format.md"
BEGIN = f"<!-- generated from the plan model by `{COMMAND}`; do not edit by hand -->"
END = "<!-- end of the generated tables -->"


def anchor(heading: str) -> str:
    """The link target a Markdown renderer gives a heading (lower case, punctuation dropped,
    spaces as hyphens)."""
    return re.sub(r"[^\w\- ]", "", heading.lower()).replace(" ", "-")


def _cell(text: str) -> str:
    """Text made safe for a table cell: no pipe, no line break, and no ``<`` outside a code
    span (where a renderer would take ``<name>`` for an HTML tag)."""
    parts = " ".join(text.split()).replace("|", "\\|").split("`")
    for i in range(0, len(parts), 2):  # outside the code spans
        parts[i] = parts[i].replace("<", "&lt;")
    return "`".join(parts)


def _number(value: float) -> str:
    return f"{value:,}" if isinstance(value, int) and abs(value) >= 10_000 else f"{value:g}"


def _bounds(node: dict[str, Any]) -> str:
    """`` in (0, 1)``, `` > 0``, `` ≤ 10,000,000``: the range a number schema allows."""
    low = ("(", node["exclusiveMinimum"]) if "exclusiveMinimum" in node else \
        ("[", node["minimum"]) if "minimum" in node else None
    high = (")", node["exclusiveMaximum"]) if "exclusiveMaximum" in node else \
        ("]", node["maximum"]) if "maximum" in node else None
    if low and high:
        return f" in {low[0]}{_number(low[1])}, {_number(high[1])}{high[0]}"
    if low:
        return f" {'>' if low[0] == '(' else '≥'} {_number(low[1])}"
    if high:
        return f" {'<' if high[0] == ')' else '≤'} {_number(high[1])}"
    return ""


class _Walk:
    """Renders the schema's mappings as sections, depth first in the models' key order."""

    def __init__(self, schema: dict[str, Any]) -> None:
        self.defs: dict[str, Any] = schema.get("$defs", {})
        self.sections: list[str] = []
        self.undescribed: list[str] = []

    def ref(self, node: dict[str, Any]) -> dict[str, Any]:
        return self.defs[node["$ref"].rsplit("/", 1)[-1]]

    def kind(self, node: dict[str, Any], path: str, subs: list[tuple[str, dict[str, Any]]]
             ) -> str:
        """The type of a value in words; the mappings it holds are added to ``subs``."""
        if "$ref" in node:
            subs.append((path, self.ref(node)))
            return f"mapping: [`{path}`](#{anchor(path)})"
        for key in ("anyOf", "oneOf"):
            if key in node:
                words = [self.kind(o, path, subs) for o in node[key]
                         if o.get("type") != "null"]
                if "number" in words and "whole number" in words:  # an int or a float
                    words.remove("whole number")
                return " or ".join(words)
        if "const" in node:
            return f"`{json.dumps(node['const'])}`"
        if "enum" in node:
            return "one of " + ", ".join(f"`{e}`" for e in node["enum"])
        kind = node.get("type")
        if kind == "array":
            most = f" (at most {node['maxItems']})" if "maxItems" in node else ""
            if "maxItems" in node and node.get("minItems") == node["maxItems"]:
                most = f" (exactly {node['maxItems']})"
            return f"list{most} of {self.kind(node.get('items', {}), path + '[]', subs)}"
        if kind == "object":
            inner = node.get("additionalProperties")
            if isinstance(inner, dict):
                return f"mapping of names to {self.kind(inner, path + '.<name>', subs)}"
            return "mapping"
        words = {"string": "text", "integer": "whole number", "number": "number",
                 "boolean": "`true` or `false`"}
        if kind in words:
            return words[kind] + _bounds(node)
        return "any value"

    def section(self, path: str, node: dict[str, Any]) -> None:
        title = f"`{path}`" if path else "the plan (top level)"
        lines = [f"### {title}", ""]
        if node.get("description"):
            lines += [_cell(node["description"]), ""]
        lines += ["| key | type | default | meaning |", "| --- | --- | --- | --- |"]
        required = set(node.get("required", []))
        subs: list[tuple[str, dict[str, Any]]] = []
        for key, prop in node.get("properties", {}).items():
            where = f"{path}.{key}" if path else key
            kind = self.kind(prop, where, subs)
            meaning = prop.get("description") or (
                self.ref(prop).get("description", "") if "$ref" in prop else "")
            if not meaning:
                self.undescribed.append(where)
            lines.append(f"| `{key}` | {_cell(kind)} | {_default(key in required, prop)} | "
                         f"{_cell(meaning)} |")
        self.sections.append("\n".join(lines))
        for sub_path, sub in subs:
            self.section(sub_path, sub)


def _default(required: bool, prop: dict[str, Any]) -> str:
    if required:
        return "required"
    if "default" not in prop or prop["default"] is None:
        return "—"
    value = prop["default"]
    if isinstance(value, bool):
        return f"`{'true' if value else 'false'}`"
    if isinstance(value, str):
        return f"`{value}`"
    return f"`{json.dumps(value)}`"


def _names(names: Sequence[str]) -> str:
    return ", ".join(f"`{n}`" for n in names)


def compare_table() -> str:
    """What each kind of ``compare`` takes: tests, measures and intervals (the first listed
    is the default), from the vocabulary the plan model checks against."""
    own = "; ".join(
        f"`{test}`: " + ", ".join(f"`{m}` → {_names(ints)}" for m, ints in by.items())
        for test, by in v.OWN_INTERVALS.items())
    lines = ["### What each kind of `compare` takes", "",
             ("The first measure and the first interval listed are the defaults. These tests "
             "bring their own measures and intervals (again the first listed is the "
             f"default): {own}."), "",
             "| `compare` | tests | two-sided only | `continuity` | measure → intervals |",
             "| --- | --- | --- | --- | --- |"]
    for kind in v.KINDS:
        tests = sorted(v.KNOWN_TESTS_BY_KIND[kind])
        measures = v.MEASURES_BY_KIND[kind]
        estimate = "; ".join(f"`{m}` → {_names(v.INTERVALS_BY_MEASURE[m])}"
                             for m in measures) or "none (no estimate)"
        lines.append(f"| `{v.KIND_LABELS[kind]}` | {_names(tests)} | "
                     f"{_names(sorted(v.TWO_SIDED_ONLY_BY_KIND[kind])) or '—'} | "
                     f"{_names(sorted(v.CONTINUITY_TESTS_BY_KIND[kind])) or '—'} | "
                     f"{estimate} |")
    lines += ["", "`multiplicity` names: " + _names(v.MULTIPLICITY_NAMES)
              + "; `graphical` is written as a mapping (below). Tests with a margin "
              "(non-inferiority, equivalence): " + _names(sorted(v.MARGIN_TESTS))
              + "; used only there: " + _names(sorted(v.MARGIN_ONLY_TESTS)) + "."]
    return "\n".join(lines)


def key_tables(schema: dict[str, Any] | None = None) -> str:
    """The generated Markdown: the compare table, then one key table per mapping of the plan.

    Raises ValueError when a key has no description in the models: every key is documented.
    """
    schema = schema if schema is not None else json_schema()
    walk = _Walk(schema)
    walk.section("", schema)
    if walk.undescribed:
        raise ValueError("keys without a description in the plan model: "
                         + ", ".join(walk.undescribed))
    return "\n\n".join([compare_table(), *walk.sections]) + "\n"


def replaced(text: str, tables: str) -> str:
    """``text`` with what lies between the marker lines replaced by ``tables``."""
    try:
        start = text.index(BEGIN) + len(BEGIN)
        end = text.index(END, start)
    except ValueError:
        raise ValueError(f"the marker lines are missing; the file must hold {BEGIN!r} and "
                         f"{END!r}, each on its own line") from None
    return text[:start] + "\n\n" + tables + "\n" + text[end:]


def write(path: Path) -> bool:
    """Regenerate the tables in ``path``; True when the file changed."""
    text = path.read_text("utf-8")
    new = replaced(text, key_tables())
    if new != text:
        path.write_text(new, "utf-8")
    return new != text


def main(argv: Sequence[str] | None = None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    if len(args) != 1:
        print(f"usage: {COMMAND}", file=sys.stderr)
        return 2
    try:
        changed = write(Path(args[0]))
    except (OSError, ValueError) as exc:
        print(f"prespec.plan.keytables: {args[0]}: {exc}", file=sys.stderr)
        return 2
    print(f"{args[0]}: {'tables regenerated' if changed else 'tables already current'}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
