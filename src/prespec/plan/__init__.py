"""The plan: loading a YAML plan file, validating it, resolving defaults, fingerprinting it.

Public interface: :class:`LoadedPlan`, :func:`load_plan`, :func:`plan_from_resolved`,
:func:`fingerprint`, :func:`json_schema`, :func:`summary`, and the model classes.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import rfc8785
from pydantic import ValidationError

from prespec.common.matching import value_key
from prespec.errors import PlanError
from prespec.plan.locate import Issue, Locator
from prespec.plan.messages import issue_from_pydantic
from prespec.plan.model import (
    Condition,
    DataSpec,
    GraphicalMultiplicity,
    Hypothesis,
    MonteCarlo,
    Outcome,
    Plan,
    Scalar,
    Sparse,
    Then,
)
from prespec.plan.rules import availability_issues, format_issues
from prespec.plan.summary import summary
from prespec.plan.yamlread import parse_plan_yaml, read_plan_bytes

__all__ = [
    "Condition",
    "DataSpec",
    "GraphicalMultiplicity",
    "Hypothesis",
    "LoadedPlan",
    "MonteCarlo",
    "Outcome",
    "Plan",
    "Scalar",
    "Sparse",
    "Then",
    "fingerprint",
    "json_schema",
    "load_plan",
    "plan_from_resolved",
    "resolve",
    "summary",
    "value_key",
]


@dataclass(frozen=True)
class LoadedPlan:
    """A plan file, loaded and validated, with its defaults resolved and its fingerprint."""

    path: Path
    file_sha256: str
    model: Plan
    resolved: dict[str, Any]
    fingerprint: str


def load_plan(path: str | Path, *, planned_n: dict[str, int] | None = None) -> LoadedPlan:
    """Read, validate and resolve a plan file; any problem is a one-line :class:`PlanError`.

    ``planned_n`` (for ``prespec design`` only) stands in for ``data.planned_n`` when the file
    gives none; the fingerprint is then that of the plan with these sizes written in."""
    file = str(path)
    plan_path = Path(path)
    data = read_plan_bytes(plan_path, file)
    doc = parse_plan_yaml(data, file)
    raw = doc.data
    if planned_n is not None and isinstance(raw.get("data"), dict) \
            and raw["data"].get("planned_n") is None:
        raw = {**raw, "data": {**raw["data"], "planned_n": dict(planned_n)}}
    plan = _validate(raw, Locator(file, raw, doc.lines, doc.key_lines))
    resolved = resolve(plan)
    return LoadedPlan(
        path=plan_path,
        file_sha256="sha256:" + hashlib.sha256(data).hexdigest(),
        model=plan,
        resolved=resolved,
        fingerprint=fingerprint(resolved),
    )


def plan_from_resolved(resolved: dict[str, Any], source: str = "lock") -> Plan:
    """Validate a stored resolved plan (e.g. from a lock) again; errors name ``source``."""
    if not isinstance(resolved, dict):
        raise PlanError(source, None, None, "a stored plan must be a mapping")
    return _validate(resolved, Locator(source, resolved))


def resolve(plan: Plan) -> dict[str, Any]:
    """The plan's canonical form: a JSON-able dict with YAML key names, every key of the first
    release written in (defaults included), a key added later only when it differs from its
    default (the declaration: :mod:`prespec.plan.canonical_form`). The lock stores it and the
    fingerprint is taken over it."""
    return plan.model_dump(mode="json", by_alias=True)


def fingerprint(resolved: dict[str, Any]) -> str:
    """``sha256:`` and the hex SHA-256 of the RFC 8785 canonical JSON of ``resolved``.

    Taken over the stored dict as it is, so a lock version's fingerprint is recomputed from the
    lock alone, whatever the models of this version declare.

    Reference: Rundgren, Jordan, Erdtman, RFC 8785, JSON Canonicalization Scheme (2020).
    """
    return "sha256:" + hashlib.sha256(rfc8785.dumps(resolved)).hexdigest()


def json_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of the plan format, generated from the models."""
    schema = Plan.model_json_schema(by_alias=True, mode="validation")
    return {"$schema": "https://json-schema.org/draft/2020-12/schema", **schema}


def _validate(raw: dict[str, Any], where: Locator) -> Plan:
    """Types first (pydantic), then the format's rules, then what this version can run."""
    try:
        plan = Plan.model_validate(raw)
    except ValidationError as exc:
        issues = [issue_from_pydantic(dict(e), raw) for e in exc.errors()]
        raise _first(_misspelt_first(issues), where) from None
    for phase in (format_issues, availability_issues):
        issues = list(phase(plan))
        if issues:
            raise _first(issues, where)
    return plan


def _misspelt_first(issues: list[Issue]) -> list[Issue]:
    """Drop "is required" where the same mapping has an unknown key: likely the misspelling."""
    unknown = {i.path for i in issues if i.at_key and i.message.endswith("?")}
    return [i for i in issues
            if not (i.message == "is required" and i.path[:-1] in unknown)] or issues


def _first(issues: list[Issue], where: Locator) -> PlanError:
    return where.error(min(issues, key=where.sort_key))
