"""``prespec history``: the locked versions of a plan and what changed in meaning between two.

Changes are computed on the resolved plans held in the lock (every default written in), so a
change of layout or comments never shows, and a default that a new version spells out shows
only if its value changed. Hypotheses are matched by ``id``, so that a reordering is one line
and a changed test reads ``hypotheses.H2.test: pearson-chi-square → fisher-exact``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from prespec import audit
from prespec.errors import BadInput

ARROW = "→"


@dataclass(frozen=True)
class Change:
    path: str
    before: Any
    after: Any
    kind: str  # "changed", "added" or "removed"

    def __str__(self) -> str:
        if self.kind == "added":
            return f"{self.path}: added ({show(self.after)})"
        if self.kind == "removed":
            return f"{self.path}: removed (was {show(self.before)})"
        return f"{self.path}: {show(self.before)} {ARROW} {show(self.after)}"


def show(value: Any) -> str:
    """A value as a reader expects it: text bare, null as ``null``, others as compact JSON."""
    if isinstance(value, str):
        return value if value and value.strip() == value and "\n" not in value \
            else json.dumps(value, ensure_ascii=False)
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    return json.dumps(_compact(value), ensure_ascii=False, separators=(", ", ": "))


def _compact(value: Any) -> Any:
    """Leave out keys whose value is null (unset options), for reading."""
    if isinstance(value, dict):
        return {k: _compact(v) for k, v in value.items() if v is not None}
    if isinstance(value, list):
        return [_compact(v) for v in value]
    return value


def _join(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def _ids(items: list[Any]) -> list[str] | None:
    """The ids of a list of mappings that each carry a unique text ``id``, else None."""
    ids = [item.get("id") for item in items if isinstance(item, dict)]
    if len(ids) != len(items) or not all(isinstance(i, str) for i in ids) \
            or len(set(ids)) != len(ids):
        return None
    return ids  # type: ignore[return-value]


def plan_changes(before: dict[str, Any], after: dict[str, Any]) -> list[Change]:
    """Every difference in meaning between two resolved plans, in the plan's key order."""
    out: list[Change] = []
    _diff("", before, after, out)
    return out


def _diff(path: str, a: Any, b: Any, out: list[Change]) -> None:
    if isinstance(a, dict) and isinstance(b, dict):
        for key in [*a, *(k for k in b if k not in a)]:
            where = _join(path, str(key))
            if key not in b:
                _whole(where, a[key], "removed", out)
            elif key not in a:
                _whole(where, b[key], "added", out)
            else:
                _diff(where, a[key], b[key], out)
        return
    if a is None and isinstance(b, dict):
        _whole(path, b, "added", out)
        return
    if b is None and isinstance(a, dict):
        _whole(path, a, "removed", out)
        return
    if isinstance(a, list) and isinstance(b, list):
        ids_a, ids_b = _ids(a), _ids(b)
        if ids_a is not None and ids_b is not None and (a or b):
            _diff_by_id(path, a, b, ids_a, ids_b, out)
            return
        if len(a) == len(b) and all(isinstance(x, dict) for x in [*a, *b]):
            for i, (x, y) in enumerate(zip(a, b, strict=True), start=1):  # 1-based, as in errors
                _diff(f"{path}[{i}]", x, y, out)
            return
    if a != b or type(a) is not type(b) and not _same_number(a, b):
        out.append(Change(path, a, b, "changed"))


def _whole(path: str, value: Any, kind: str, out: list[Change]) -> None:
    """A section added or removed as a whole (``design``, a ``sparse`` switch), one line per
    key (``design.assumed.gauze: added (0.2)``); unset options and empty mappings carry no
    meaning and are left out."""
    if value is None:
        return
    if isinstance(value, dict):
        for key, item in value.items():
            _whole(_join(path, str(key)), item, kind, out)
        return
    out.append(Change(path, value if kind == "removed" else None,
                      value if kind == "added" else None, kind))


def _same_number(a: Any, b: Any) -> bool:
    numbers = (int, float)
    return isinstance(a, numbers) and isinstance(b, numbers) and not isinstance(a, bool) \
        and not isinstance(b, bool) and a == b


def _diff_by_id(path: str, a: list[dict[str, Any]], b: list[dict[str, Any]], ids_a: list[str],
                ids_b: list[str], out: list[Change]) -> None:
    by_b = dict(zip(ids_b, b, strict=True))
    for ident, item in zip(ids_a, a, strict=True):
        where = _join(path, ident)
        if ident not in by_b:
            out.append(Change(where, item, None, "removed"))
        else:
            _diff(where, item, by_b[ident], out)
    for ident, item in zip(ids_b, b, strict=True):
        if ident not in ids_a:
            out.append(Change(_join(path, ident), None, item, "added"))
    common_a = [i for i in ids_a if i in by_b]
    common_b = [i for i in ids_b if i in ids_a]
    if common_a != common_b:  # the order matters (fixed-sequence testing)
        out.append(Change(f"{path} order", ", ".join(common_a), ", ".join(common_b), "changed"))


@dataclass(frozen=True)
class Version:
    version: int
    fingerprint: str
    at: str
    actor: str
    reason: str | None
    after_unblinding: bool  # the amend entry recorded amended-after-unblinding


@dataclass(frozen=True)
class History:
    versions: list[Version]
    from_version: int | None
    to_version: int | None
    changes: list[Change]  # between from_version and to_version (empty for one version)


def history(plan: str | Path, *, from_version: int | None = None,
            to_version: int | None = None) -> History:
    """The lock's versions, and the changes between two of them (default: the last two)."""
    plan = Path(plan)
    doc = audit.read_lock(audit.lock_path(plan))
    if doc is None:
        raise BadInput(f"{plan}: not locked; there is no history (prespec lock {plan})")
    entries = audit.read_log(audit.log_path(plan))
    flagged = {
        e.get("details", {}).get("version")
        for e in entries
        if e.get("action") == "amend" and any(
            isinstance(d, dict) and d.get("code") == "amended-after-unblinding"
            for d in e.get("deviations") or [])
    }
    versions = [Version(int(v["version"]), str(v["fingerprint"]), str(v["at"]), str(v["actor"]),
                        v.get("reason"), v["version"] in flagged) for v in doc["versions"]]
    count = len(versions)
    if count == 1 and from_version is None and to_version is None:
        return History(versions, None, None, [])
    low = from_version if from_version is not None else max(1, (to_version or count) - 1)
    high = to_version if to_version is not None else (count if from_version is None
                                                      else min(count, low + 1))
    for name, number in (("--from", low), ("--to", high)):
        if not 1 <= number <= count:
            raise BadInput(f"history: {name} {number}: the lock holds versions 1 to {count}")
    records = doc["versions"]
    return History(versions, low, high, plan_changes(records[low - 1]["plan"],
                                                     records[high - 1]["plan"]))
