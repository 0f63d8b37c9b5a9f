"""The statistics of one run: each hypothesis of the plan computed on its count table.

This module knows the plan's vocabulary and dispatches to the pure functions of ``stats``;
it neither reads files nor writes anything. Multiplicity is applied over the non-exploratory
hypotheses; ``reject`` is ``p_adjusted <= alpha``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

from . import stats
from .data import Prepared
from .departures import Note


def _finite(value: float | None, what: str, notes: list[Note]) -> float | None:
    """A finite float, or None with a note (JSON has no NaN or infinity)."""
    if value is None:
        return None
    value = float(value)
    if math.isfinite(value):
        return value
    notes.append(Note("not-computable", f"{what} is {value} and is written as null"))
    return None


def interval_level(alpha: float, alternative: str, comparison: str) -> float:
    """1 − alpha for two-sided superiority; 1 − 2·alpha for one-sided and margin-based ones."""
    if alternative == "two-sided" and comparison == "superiority":
        return 1.0 - alpha
    return 1.0 - 2.0 * alpha


def _run_test(
    test: str, events: list[int], totals: list[int], hyp: Any
) -> stats.TestResult:
    alternative = hyp.alternative
    if test == "pearson-chi-square":
        return stats.pearson_chi_square(
            events, totals, continuity=bool(hyp.continuity), alternative=alternative
        )
    if test == "two-proportion-z":
        return stats.two_proportion_z(
            events[0], totals[0], events[1], totals[1], alternative=alternative
        )
    if test == "fisher-exact":
        return stats.fisher_exact(
            events[0], totals[0], events[1], totals[1], alternative=alternative
        )
    raise ValueError(f"test {test!r} is not available")  # the plan validator refuses it first


_INTERVALS: dict[str, Callable[[int, int, int, int, float], stats.Estimate]] = {
    "newcombe": stats.newcombe_difference,
    "wald": stats.wald_difference,
}


def _rule(hyp: Any, events: list[int], totals: list[int]) -> dict[str, Any] | None:
    sparse = hyp.sparse
    if sparse is None:
        return None
    smallest = stats.smallest_expected(events, totals)
    if smallest < sparse.min_expected and sparse.test != hyp.test:
        return {
            "switch": "sparse",
            "min_expected": sparse.min_expected,
            "smallest_expected": smallest,
            "from": hyp.test,
            "to": sparse.test,
        }
    return None


def compute_hypothesis(
    hyp: Any, plan: Any, prepared: Prepared, notes: list[Note]
) -> dict[str, Any]:
    """One hypothesis's entry of results.json, before the multiplicity adjustment."""
    groups = list(plan.data.groups) if hyp.kind in ("all", "trend") else list(hyp.compare)
    events, totals = prepared.outcomes[hyp.outcome].table(groups)
    entry: dict[str, Any] = {
        "id": hyp.id,
        "title": hyp.title,
        "role": hyp.role,
        "outcome": hyp.outcome,
        "compare": hyp.compare,
        "alternative": hyp.alternative,
        "comparison": hyp.comparison,
        "margin": hyp.margin,
        "planned_test": hyp.test,
        "test": hyp.test,
        "continuity": hyp.continuity,
        "statistic": None,
        "df": None,
        "p_value": None,
        "p_adjusted": None,
        "reject": None,
        "estimate": None,
        "table": {"groups": groups, "events": events, "totals": totals},
        "expected": None,
        "rule": None,
    }
    empty = [g for g, n in zip(groups, totals, strict=True) if n == 0]
    if empty:
        notes.append(
            Note(
                "not-computable",
                f"{hyp.id}: no analysed participants in {', '.join(empty)}; "
                "test and estimate not computable",
            )
        )
        return entry
    expected = stats.expected_counts(events, totals)
    entry["expected"] = [[float(a), float(b)] for a, b in expected]
    rule = _rule(hyp, events, totals)
    test = rule["to"] if rule else hyp.test
    if rule:
        entry["rule"] = rule
        notes.append(
            Note(
                "sparse-switch",
                f"{hyp.id}: smallest expected count {rule['smallest_expected']:.4g} is below "
                f"{rule['min_expected']:g}; the pre-specified switch from {rule['from']} to "
                f"{rule['to']} applied",
            )
        )
    result = _run_test(test, events, totals, hyp)
    entry["test"] = test
    entry["statistic"] = _finite(result.statistic, f"{hyp.id}: the statistic", notes)
    entry["df"] = result.df
    entry["p_value"] = _finite(result.p_value, f"{hyp.id}: the p-value", notes)
    if hyp.kind == "pair" and hyp.measure is not None:
        level = interval_level(plan.alpha, hyp.alternative, hyp.comparison)
        est = _INTERVALS[hyp.interval](events[0], totals[0], events[1], totals[1], level)
        entry["estimate"] = {
            "measure": est.measure,
            "value": _finite(est.value, f"{hyp.id}: the estimate", notes),
            "ci": [
                _finite(est.low, f"{hyp.id}: the lower limit", notes),
                _finite(est.high, f"{hyp.id}: the upper limit", notes),
            ],
            "ci_method": est.method,
            "level": level,
        }
    return entry


def adjust_family(entries: list[dict[str, Any]], method: str, alpha: float,
                  notes: list[Note]) -> None:
    """Fill ``p_adjusted`` and ``reject`` over the non-exploratory hypotheses, in plan order.

    A p-value that could not be computed enters the adjustment as 1 (it can never be
    rejected, and it does not make the others easier to reject); a note says so.
    """
    family = [e for e in entries if e["role"] != "exploratory"]
    raw = []
    for e in family:
        if e["p_value"] is None:
            notes.append(
                Note("not-computable", f"{e['id']}: no p-value; it enters {method} as 1")
            )
            raw.append(1.0)
        else:
            raw.append(e["p_value"])
    adjusted = stats.adjust(raw, method) if family else []
    for e, p_adj in zip(family, adjusted, strict=True):
        if e["p_value"] is None:
            continue
        e["p_adjusted"] = float(p_adj)
        e["reject"] = bool(p_adj <= alpha)


def analyse(plan: Any, prepared: Prepared) -> tuple[list[dict[str, Any]], list[Note]]:
    """Every hypothesis of the plan, adjusted for multiplicity; and the notes they raise."""
    notes: list[Note] = []
    entries = [compute_hypothesis(h, plan, prepared, notes) for h in plan.hypotheses]
    adjust_family(entries, plan.multiplicity, plan.alpha, notes)
    return entries, notes


def group_summaries(plan: Any, prepared: Prepared) -> dict[str, list[dict[str, Any]]]:
    """Per outcome and group: events, total, missing, proportion and its Wilson interval."""
    level = 1.0 - plan.alpha
    out: dict[str, list[dict[str, Any]]] = {}
    for name, counts in prepared.outcomes.items():
        rows = []
        for gc in counts.groups:
            row: dict[str, Any] = {
                "group": gc.group,
                "events": gc.events,
                "total": gc.total,
                "missing": gc.blank + gc.unmapped,
                "proportion": None,
                "ci": [None, None],
                "ci_method": "wilson",
                "level": level,
            }
            if gc.total > 0:
                est = stats.wilson(gc.events, gc.total, level)
                row["proportion"] = est.value
                row["ci"] = [est.low, est.high]
            rows.append(row)
        out[name] = rows
    return out
