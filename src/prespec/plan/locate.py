"""Where a problem is: its key path as a user reads it, and its line in the plan file."""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

from prespec.errors import PlanError
from prespec.plan.yamlread import KeyPath, one_line

_PLAIN_ID = re.compile(r"[^\s:\[\].]+")  # an id that reads clearly inside a key path


@dataclass(frozen=True)
class Issue:
    """One problem in a plan: the key path shown, the message, and where its line is found.

    ``line_path`` defaults to ``path``; ``at_key`` takes the key's line instead of the value's.
    """

    path: KeyPath
    message: str
    line_path: KeyPath | None = None
    at_key: bool = False


@dataclass(frozen=True)
class Locator:
    """Turns an :class:`Issue` into a one-line :class:`PlanError` for one plan source."""

    file: str
    raw: Any
    lines: dict[KeyPath, int] = field(default_factory=dict)
    key_lines: dict[KeyPath, int] = field(default_factory=dict)

    def line(self, path: KeyPath, at_key: bool = False) -> int | None:
        """The line of the value at ``path`` (or of its key), else of the nearest parent."""
        if at_key and path in self.key_lines:
            return self.key_lines[path]
        while True:
            if path in self.lines:
                return self.lines[path]
            if not path:
                return None
            path = path[:-1]

    def display(self, path: KeyPath) -> str | None:
        """``hypotheses.H2.test``, ``data.include[1].in``; None for the top level."""
        text = ""
        node: Any = self.raw
        for i, step in enumerate(path):
            if isinstance(step, int):
                hyp_id = self._hypothesis_id(path[:i], step)
                text += f".{hyp_id}" if hyp_id is not None else f"[{step + 1}]"
            else:
                text += f".{step}" if text else step
            node = _child(node, step)
        return text or None

    def _hypothesis_id(self, parent: KeyPath, index: int) -> str | None:
        if parent != ("hypotheses",) or not isinstance(self.raw, dict):
            return None
        hyps = self.raw.get("hypotheses")
        if not isinstance(hyps, list) or not 0 <= index < len(hyps):
            return None
        ids = [h.get("id") if isinstance(h, dict) else None for h in hyps]
        hyp_id = ids[index]
        if isinstance(hyp_id, str) and _PLAIN_ID.fullmatch(hyp_id) and ids.count(hyp_id) == 1:
            return hyp_id
        return None

    def error(self, issue: Issue) -> PlanError:
        """The one-line error for ``issue``."""
        where = issue.path if issue.line_path is None else issue.line_path
        path = self.display(issue.path)
        return PlanError(self.file, self.line(where, issue.at_key),
                         one_line(path) if path else None, one_line(issue.message))

    def sort_key(self, issue: Issue) -> int:
        """Document order: the issue's line (issues without one go last)."""
        where = issue.path if issue.line_path is None else issue.line_path
        line = self.line(where, issue.at_key)
        return line if line is not None else 1 << 30


def _child(node: Any, step: str | int) -> Any:
    if isinstance(node, dict) and isinstance(step, str):
        return node.get(step)
    if isinstance(node, list) and isinstance(step, int) and 0 <= step < len(node):
        return node[step]
    return None
