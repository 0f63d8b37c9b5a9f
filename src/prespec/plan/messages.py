"""Pydantic's validation errors, put as prespec's one-line messages."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel

from prespec.plan import model as m
from prespec.plan import vocabulary as v
from prespec.plan.locate import Issue
from prespec.plan.looks import Futility, Looks
from prespec.plan.model import suggest
from prespec.plan.yamlread import KeyPath, describe, show

# What a literal field names, and its known values, by the field's key.
_LITERALS: dict[str, tuple[str, tuple[str, ...]]] = {
    "test": ("test", tuple(sorted(v.KNOWN_TESTS))),
    "alternative": ("alternative", v.ALTERNATIVES),
    "comparison": ("comparison", v.KNOWN_COMPARISONS),
    "role": ("role", v.ROLES),
    "measure": ("measure", tuple(sorted(v.KNOWN_MEASURES))),
    "interval": ("interval", tuple(sorted(v.KNOWN_INTERVALS))),
    "missing": ("missing rule", v.MISSING_RULES),
    "pairwise": ("pairwise choice", v.PAIRWISE),
    "multiplicity": ("multiplicity", v.MULTIPLICITY_NAMES),
    "method": ("multiplicity method for a mapping", ("graphical",)),
    "flag_method": ("flag method", v.FLAG_METHODS),
}

_EXPECTED: dict[str, str] = {
    "string_type": "text",
    "int_type": "a whole number",
    "float_type": "a number",
    "bool_type": "true or false",
    "list_type": "a list",
    "dict_type": "a mapping",
    "model_type": "a mapping",
    "model_attributes_type": "a mapping",
}

_RANGES: dict[str, str] = {
    "alpha": "between 0 and 1, exclusive",
    "null_rate": "between 0 and 1, exclusive",
}


def _model_at(path: KeyPath) -> type[BaseModel] | None:
    shape = tuple("#" if isinstance(step, int) else step for step in path)
    if len(shape) == 2 and shape[0] == "outcomes":
        return m.Outcome
    return {
        (): m.Plan,
        ("data",): m.DataSpec,
        ("data", "include", "#"): m.Condition,
        ("multiplicity",): m.GraphicalMultiplicity,
        ("hypotheses", "#"): m.Hypothesis,
        ("hypotheses", "#", "sparse"): m.Sparse,
        ("hypotheses", "#", "then"): m.Then,
        ("hypotheses", "#", "monte_carlo"): m.MonteCarlo,
        ("hypotheses", "#", "estimand"): m.Estimand,
        ("hypotheses", "#", "estimand", "intercurrent", "#"): m.Intercurrent,
        ("design",): m.Design,
        ("hypotheses", "#", "looks"): Looks,
        ("hypotheses", "#", "looks", "futility"): Futility,
    }.get(shape)


def _later_keys(model: type[BaseModel] | None) -> frozenset[str]:
    name = {m.Plan: "plan", m.DataSpec: "data", m.Hypothesis: "hypothesis"}.get(model, "")
    return v.LATER_KEYS.get(name, frozenset())


def known_keys(model: type[BaseModel]) -> list[str]:
    """The YAML keys a model takes, in declaration order."""
    return [f.alias or name for name, f in model.model_fields.items()]


def _strip_tags(loc: tuple[Any, ...], raw: Any) -> KeyPath:
    """The error's location as a path in the plan, without pydantic's union tags."""
    out: list[str | int] = []
    node = raw
    for i, step in enumerate(loc):
        last = i == len(loc) - 1
        if isinstance(node, dict) and isinstance(step, str) and (step in node or last):
            out.append(step)
            node = node.get(step)
        elif isinstance(node, list) and isinstance(step, int) and 0 <= step < len(node):
            out.append(step)
            node = node[step]
    return tuple(out)


def issue_from_pydantic(error: dict[str, Any], raw: Any) -> Issue:
    """One pydantic error (from ``ValidationError.errors()``) as an :class:`Issue`."""
    path = _strip_tags(tuple(error["loc"]), raw)
    kind, found = error["type"], error.get("input")
    name = path[-1] if path and isinstance(path[-1], str) else ""
    ctx = error.get("ctx") or {}
    if kind == "prespec":
        return Issue(path, str(ctx.get("message", error["msg"])))
    if kind == "missing":
        return Issue(path, "is required", line_path=path[:-1])
    if kind == "extra_forbidden":
        model = _model_at(path[:-1])
        if name in _later_keys(model):
            message = f"'{name}' is known but not available in this version of prespec"
        else:
            known = known_keys(model) if model is not None else []
            message = f"{show(name)} is not a known key"
            if known:
                message += f" (known: {', '.join(known)})" + suggest(name, known)
        return Issue(path[:-1], message, line_path=path, at_key=True)
    if kind == "literal_error":
        thing, known = _LITERALS.get(name, ("value", ()))
        listed = ", ".join(known) if known else str(ctx.get("expected", ""))
        what = show(found) if isinstance(found, str) else describe(found)
        return Issue(path, f"{what} is not a known {thing} (known: {listed})"
                     + suggest(found, known))
    if kind in _EXPECTED:
        message = f"expected {_EXPECTED[kind]}, found {describe(found)}"
        if kind == "bool_type" and isinstance(found, str):
            message += "; only true and false are booleans in a plan"
        if kind == "string_type" and isinstance(found, (int, float)) and not isinstance(found,
                                                                                     bool):
            message += f"; quote it ('{show(found)}') if it is text"
        return Issue(path, message)
    if kind == "finite_number":
        return Issue(path, f"expected a finite number, found {describe(found)}")
    if kind in ("greater_than", "less_than", "greater_than_equal", "less_than_equal"):
        if name in _RANGES:
            return Issue(path, f"must be {_RANGES[name]}, found {show(found)}")
        bound = {"greater_than": ("gt", "greater than"), "less_than": ("lt", "less than"),
                 "greater_than_equal": ("ge", "at least"),
                 "less_than_equal": ("le", "at most")}[kind]
        limit = ctx.get(bound[0])
        if isinstance(limit, float) and limit.is_integer():
            limit = int(limit)
        if kind == "less_than_equal" and name in v.LIMIT_REASONS:
            return Issue(path, f"must be at most {limit:,}, found {found:,}: "
                         f"{v.LIMIT_REASONS[name]}")
        return Issue(path, f"must be {bound[1]} {limit}, found {show(found)}")
    if kind == "too_long" and name in v.LIMIT_REASONS:
        return Issue(path, f"lists {ctx.get('actual_length')} looks, and a plan may have at "
                     f"most {ctx.get('max_length')}: {v.LIMIT_REASONS[name]}")
    return Issue(path, " ".join(str(error["msg"]).split()))
