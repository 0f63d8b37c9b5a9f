"""A small, safe YAML reader for plan files, built on PyYAML's node composer.

It gives values their YAML 1.2 core-schema meaning (only true/false are booleans; yes, no, on,
off stay text), accepts text keys only, rejects duplicate keys, refuses every tag outside the
core schema, caps aliases, expanded size and nesting, and records the line of every value and
key by its path, e.g. ``("hypotheses", 1, "test")``. Nothing is constructed as code: the
composer only builds nodes, and this module turns nodes into dicts, lists and scalars itself.

References: YAML Ain't Markup Language 1.2.2 (2021), section 10.3 "Core Schema".
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml
from yaml.composer import Composer
from yaml.events import AliasEvent
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode
from yaml.parser import Parser
from yaml.reader import Reader, ReaderError
from yaml.resolver import BaseResolver
from yaml.scanner import Scanner

from prespec.errors import PlanError

MAX_BYTES = 1024 * 1024
MAX_ALIASES = 100
MAX_NODES = 10_000
MAX_DEPTH = 50
MAX_INT = 2**53 - 1  # the integers JSON (and so the fingerprint) carries exactly

KeyPath = tuple[str | int, ...]

_CORE = "tag:yaml.org,2002:"
_PLAIN = "prespec:plain"  # a plain scalar, resolved by the core schema below
_STR, _SEQ, _MAP = _CORE + "str", _CORE + "seq", _CORE + "map"
_SCALAR_TAGS = {_CORE + t for t in ("str", "null", "bool", "int", "float")}

_NULL = re.compile(r"(?:~|null|Null|NULL)?")
_TRUE = re.compile(r"true|True|TRUE")
_FALSE = re.compile(r"false|False|FALSE")
_INT10 = re.compile(r"[-+]?[0-9]+")
_INT8 = re.compile(r"0o[0-7]+")
_INT16 = re.compile(r"0x[0-9a-fA-F]+")
_FLOAT = re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?")
_INF = re.compile(r"[-+]?(?:\.inf|\.Inf|\.INF)")
_NAN = re.compile(r"\.nan|\.NaN|\.NAN")


@dataclass(frozen=True)
class YamlDoc:
    """A read plan: its top-level mapping and the 1-based line of every value and key."""

    data: dict[str, Any]
    lines: dict[KeyPath, int] = field(default_factory=dict)
    key_lines: dict[KeyPath, int] = field(default_factory=dict)


class _Problem(Exception):
    def __init__(self, line: int | None, message: str) -> None:
        super().__init__(message)
        self.line = line
        self.message = message


class _CoreResolver(BaseResolver):
    """Marks plain scalars for core-schema resolution; quoted and block scalars are text."""

    def resolve(self, kind: type, value: Any, implicit: Any) -> str:
        if kind is ScalarNode:
            return _PLAIN if implicit[0] else _STR
        return _SEQ if kind is SequenceNode else _MAP


class _Loader(Reader, Scanner, Parser, Composer, _CoreResolver):
    """PyYAML's reader, scanner, parser and composer, with alias and depth caps."""

    def __init__(self, text: str) -> None:
        Reader.__init__(self, text)
        Scanner.__init__(self)
        Parser.__init__(self)
        Composer.__init__(self)
        _CoreResolver.__init__(self)
        self.alias_uses = 0
        self.depth = 0
        self.sizes: dict[int, int] = {}  # id(node) -> number of nodes once aliases expand

    def compose_node(self, parent: Node | None, index: Any) -> Node:
        event = self.peek_event()
        line = event.start_mark.line + 1
        if isinstance(event, AliasEvent):
            self.alias_uses += 1
            if self.alias_uses > MAX_ALIASES:
                raise _Problem(line, f"more than {MAX_ALIASES} alias uses (*name); "
                               "write the values out")
            target = self.anchors.get(event.anchor)
            if target is not None and id(target) not in self.sizes:
                raise _Problem(line, "an alias refers to a value that contains it")
        self.depth += 1
        try:
            if self.depth > MAX_DEPTH:
                raise _Problem(line, f"nested deeper than {MAX_DEPTH} levels")
            node = super().compose_node(parent, index)
        finally:
            self.depth -= 1
        if id(node) not in self.sizes:
            self.sizes[id(node)] = self._size(node)
            if self.sizes[id(node)] > MAX_NODES:
                raise _Problem(_line(node), f"more than {MAX_NODES} values once aliases are "
                               "expanded; write the plan out plainly")
        return node

    def _size(self, node: Node) -> int:
        if isinstance(node, SequenceNode):
            return 1 + sum(self.sizes.get(id(c), 1) for c in node.value)
        if isinstance(node, MappingNode):
            return 1 + sum(self.sizes.get(id(k), 1) + self.sizes.get(id(v), 1)
                           for k, v in node.value)
        return 1


def read_plan_bytes(path: Path, file: str) -> bytes:
    """The plan file's bytes; a file over 1 MiB is refused before it is read whole."""
    try:
        size = path.stat().st_size
        if size > MAX_BYTES:
            raise PlanError(file, 1, None, _too_large(size))
        with path.open("rb") as handle:
            data = handle.read(MAX_BYTES + 1)
    except FileNotFoundError:
        raise PlanError(file, None, None, "no such plan file") from None
    except IsADirectoryError:
        raise PlanError(file, None, None, "is a folder, not a plan file") from None
    except OSError as exc:
        raise PlanError(file, None, None, f"cannot read the plan file ({exc.strerror})") from None
    if len(data) > MAX_BYTES:
        raise PlanError(file, 1, None, _too_large(len(data)))
    return data


def _too_large(size: int) -> str:
    return f"the plan file is {size} bytes; a plan file may be at most 1 MiB ({MAX_BYTES} bytes)"


def parse_plan_yaml(data: bytes, file: str) -> YamlDoc:
    """Parse plan bytes to a :class:`YamlDoc`; every problem is a one-line :class:`PlanError`."""
    if len(data) > MAX_BYTES:
        raise PlanError(file, 1, None, _too_large(len(data)))
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise PlanError(
            file, line, None, f"not UTF-8 text (byte 0x{data[exc.start]:02x} cannot be read)"
        ) from None
    text = text.removeprefix("\ufeff")
    try:
        return _parse_text(text)
    except _Problem as problem:
        raise PlanError(file, problem.line, None, one_line(problem.message)) from None


def _parse_text(text: str) -> YamlDoc:
    loader: _Loader | None = None
    try:
        loader = _Loader(text)
        root = loader.get_single_node()
    except ReaderError as exc:
        line = text.count("\n", 0, exc.position) + 1
        char = exc.character if isinstance(exc.character, int) else ord(str(exc.character))
        raise _Problem(line, f"the control character U+{char:04X} is not allowed in a plan "
                       "file") from None
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else None
        what = " ".join(str(exc.problem or exc.context or "unreadable").split())
        if what == "but found another document":
            what = "a plan file holds one document, and a second one starts here"
        raise _Problem(line, f"not valid YAML: {what}{_tab_hint(text, mark)}") from None
    except yaml.YAMLError as exc:
        raise _Problem(None, f"not valid YAML: {' '.join(str(exc).split())}") from None
    finally:
        if loader is not None:
            loader.dispose()
    if root is None:
        raise _Problem(1, "the plan file is empty")
    builder = _Builder()
    data = builder.build(root, ())
    if not isinstance(data, dict):
        raise _Problem(
            _line(root), f"the plan must be a mapping of keys (prespec, title, data, ...), "
            f"found {describe(data)}"
        )
    return YamlDoc(data, builder.lines, builder.key_lines)


def _tab_hint(text: str, mark: Any) -> str:
    """``; the line holds a tab …`` when the line where the YAML error was found has a tab
    (YAML indents with spaces only), else ``""``."""
    if mark is None:
        return ""
    lines = text.splitlines()
    where = lines[mark.line] if 0 <= mark.line < len(lines) else ""
    if "\t" not in where:
        return ""
    column = where.index("\t") + 1
    leading = where[: column - 1].strip(" -") == ""  # in the indentation, or after a "- "
    use = "indent with spaces" if leading else "separate with spaces"
    return f"; the line holds a tab (column {column}): {use}, not tabs"


def _line(node: Node) -> int:
    return int(node.start_mark.line) + 1


def _show_tag(tag: str) -> str:
    return "!!" + tag[len(_CORE):] if tag.startswith(_CORE) else tag


class _Builder:
    """Turns composed nodes into plain Python values, counting expanded nodes."""

    def __init__(self) -> None:
        self.lines: dict[KeyPath, int] = {}
        self.key_lines: dict[KeyPath, int] = {}
        self.nodes = 0
        self.open: set[int] = set()

    def build(self, node: Node, path: KeyPath) -> Any:
        self.nodes += 1
        if self.nodes > MAX_NODES:
            raise _Problem(_line(node), f"more than {MAX_NODES} values once aliases are "
                           "expanded; write the plan out plainly")
        if len(path) >= MAX_DEPTH:
            raise _Problem(_line(node), f"nested deeper than {MAX_DEPTH} levels")
        if id(node) in self.open:
            raise _Problem(_line(node), "an alias refers to a value that contains it")
        self.lines.setdefault(path, _line(node))
        if isinstance(node, ScalarNode):
            return _scalar(node)
        self.open.add(id(node))
        try:
            if isinstance(node, SequenceNode):
                self._check_tag(node, _SEQ)
                return [self.build(child, (*path, i)) for i, child in enumerate(node.value)]
            self._check_tag(node, _MAP)
            return self._mapping(node, path)
        finally:
            self.open.discard(id(node))

    def _check_tag(self, node: Node, wanted: str) -> None:
        if node.tag != wanted:
            raise _Problem(_line(node), _tag_refused(node.tag))

    def _mapping(self, node: MappingNode, path: KeyPath) -> dict[str, Any]:
        out: dict[str, Any] = {}
        first: dict[str, int] = {}
        for key_node, value_node in node.value:
            line = _line(key_node)
            if not isinstance(key_node, ScalarNode):
                raise _Problem(line, "a key must be text, not a list or a mapping")
            key = _scalar(key_node)
            if not isinstance(key, str):
                raise _Problem(line, f"keys are text: {describe(key)} is not; quote it "
                               f"({show(key_node.value)}) to use it as a key")
            if key in first:
                raise _Problem(line, f"duplicate key {show(key)} (first at line {first[key]})")
            first[key] = line
            self.key_lines[(*path, key)] = line
            out[key] = self.build(value_node, (*path, key))
        return out


def _tag_refused(tag: str) -> str:
    return (f"tag '{_show_tag(tag)}' is not allowed; a plan holds plain YAML values only "
            "(text, numbers, true/false, null, lists and mappings)")


def _scalar(node: ScalarNode) -> Any:
    tag, text = node.tag, node.value
    if tag == _STR:
        return text
    if tag == _PLAIN:
        value = core_value(text)
    elif tag in _SCALAR_TAGS:
        value = core_value(text)
        wanted = {"null": type(None), "bool": bool, "int": int, "float": (float, int)}
        kind = tag[len(_CORE):]
        if not isinstance(value, wanted[kind]) or (kind == "int" and isinstance(value, bool)):
            raise _Problem(_line(node), f"{show(text)} is not a valid {_show_tag(tag)} value")
        if kind == "float":
            value = float(value)
    else:
        raise _Problem(_line(node), _tag_refused(tag))
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > MAX_INT:
        raise _Problem(_line(node), f"the number {text} is too large; whole numbers in a plan "
                       f"must lie within ±{MAX_INT}")
    return value


def core_value(text: str) -> Any:
    """The YAML 1.2 core-schema value of a plain scalar."""
    if _NULL.fullmatch(text):
        return None
    if _TRUE.fullmatch(text):
        return True
    if _FALSE.fullmatch(text):
        return False
    if _INT10.fullmatch(text):
        return int(text)
    if _INT8.fullmatch(text):
        return int(text, 0)
    if _INT16.fullmatch(text):
        return int(text, 0)
    if _FLOAT.fullmatch(text):
        return float(text)
    if _INF.fullmatch(text):
        return -math.inf if text.startswith("-") else math.inf
    if _NAN.fullmatch(text):
        return math.nan
    return text


def one_line(text: str) -> str:
    """``text`` with any line break written as an escape, so an error stays one line."""
    return text.replace("\r", "\\r").replace("\n", "\\n")


def describe(value: Any) -> str:
    """A short account of a value for messages: ``'abc' (text)``, ``3 (a number)``."""
    if value is None:
        return "nothing (null)"
    if isinstance(value, bool):
        return f"{'true' if value else 'false'} (a boolean)"
    if isinstance(value, (int, float)):
        return f"{show(value)} (a number)"
    if isinstance(value, str):
        return f"{show(value)} (text)"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "a mapping"
    return type(value).__name__


def show(value: Any) -> str:
    """A value as a message shows it: text quoted and shortened, numbers as YAML writes them."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return ".nan"
        if math.isinf(value):
            return ".inf" if value > 0 else "-.inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        text = value if len(value) <= 40 else value[:37] + "..."
        return repr(text)
    return describe(value)
