"""A hypothesis's estimand, in words and as a small table, shown before its result.

The estimand follows the attributes of the ICH E9(R1) addendum (2019): the population, the
variable, the intercurrent events with the strategy that handles each, and the population-level
summary (the plan's measure). results.json gives each attribute and a paragraph that states
the estimand in words (``estimand.text``); the report shows them and computes nothing. The
rows affected by an intercurrent event are pooled over the compared groups.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from prespec.report.markup import ASIDE_STYLE, esc, fields, table
from prespec.report.values import (
    NULL,
    fmt_thousands,
    items,
    mapping,
    measure_label,
    number,
    text,
)

#: The strategies of ICH E9(R1), as the report names them.
STRATEGIES = {
    "treatment-policy": "treatment policy",
    "composite": "composite",
    "while-on-treatment": "while on treatment",
}

ESTIMAND_STYLE = ASIDE_STYLE.format(c="#1f4e79")


def handling(entry: Mapping[str, Any], where: str) -> str:
    """What the strategy does with the outcome, in words."""
    strategy = text(entry.get("strategy"), f"{where}.strategy", default="")
    if strategy == "treatment-policy":
        return "the outcome is used as observed, whether or not the event happened"
    if strategy == "composite":
        counts = text(entry.get("counts_as"), f"{where}.counts_as", default="")
        shown = {"event": "an event", "no-event": "no event"}.get(counts, counts or NULL)
        return f"the intercurrent event counts as {shown}"
    if strategy == "while-on-treatment":
        column = text(entry.get("outcome_column"), f"{where}.outcome_column", default=NULL)
        return f"the outcome observed before the event is used (column {column})"
    return NULL


def intercurrent_rows(est: Mapping[str, Any], where: str) -> list[list[str]]:
    """(event, column, strategy, handling, rows affected) for each intercurrent event."""
    rows = []
    for k, raw in enumerate(items(est.get("intercurrent"), f"{where}.intercurrent")):
        at = f"{where}.intercurrent[{k}]"
        entry = mapping(raw, at)
        strategy = text(entry.get("strategy"), f"{at}.strategy", default=NULL)
        rows.append([
            text(entry.get("event"), f"{at}.event", default=NULL),
            text(entry.get("column"), f"{at}.column", default=NULL),
            STRATEGIES.get(strategy, strategy),
            handling(entry, at),
            fmt_thousands(number(entry.get("affected"), f"{at}.affected")),
        ])
    return rows


def estimand_block(hyp: Mapping[str, Any], where: str) -> str:
    """The estimand of one hypothesis, or ``""`` when results.json states none."""
    if hyp.get("estimand") is None:
        return ""
    at = f"{where}.estimand"
    est = mapping(hyp["estimand"], at)
    words = text(est.get("text"), f"{at}.text", default="").strip()
    summary = est.get("summary")
    attributes = [
        ("Population", text(est.get("population"), f"{at}.population", default=NULL)),
        ("Variable", text(est.get("variable"), f"{at}.variable", default=NULL)),
        ("Summary measure", NULL if summary is None
         else measure_label(text(summary, f"{at}.summary"))),
    ]
    parts = [
        f'<div class="prespec-estimand" style="{ESTIMAND_STYLE}">',
        "<p><strong>Estimand.</strong> "
        + (esc(words) if words else "results.json gives no statement of the estimand.")
        + "</p>",
    ]
    if not words:  # the statement names the attributes; without it, list them
        parts.append(fields(attributes))
    rows = intercurrent_rows(est, at)
    if rows:
        parts.append(table(
            ["Intercurrent event", "Column", "Strategy", "How it is handled",
             "Rows affected (groups together)"],
            rows, numeric=(4,), cls="prespec-intercurrent",
        ))
    else:
        parts.append("<p>No intercurrent events are named.</p>")
    parts.append("</div>")
    return "".join(parts)
