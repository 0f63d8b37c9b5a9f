"""A hypothesis's sensitivity analyses, shown beside its primary result and never instead of it.

Two kinds come from results.json (computed by the statistics room, never here):

- the worst and the best case, single imputations of the missing outcomes (every missing
  outcome of a group set to the event or to no event, against or in favour of the first group;
  see Little and Rubin, *Statistical Analysis with Missing Data*, on bounding by extreme
  imputation), shown as rows of a small table;
- the tipping-point grid (:mod:`prespec.report.tipping`), shown as a sentence ("the
  conclusion changes in 812 of 40,401 combinations") and the figure
  ``figures/tipping-<id>.png``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from prespec.errors import PrespecError
from prespec.report.markup import ASIDE_STYLE, esc, plural, table
from prespec.report.tipping import TippingGrid, decision_words, drawn, read_grid, tipping_name
from prespec.report.values import (
    NULL,
    fmt_count,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_p,
    fmt_weight,
    items,
    mapping,
    measure_label,
    number,
    pair,
    text,
)

SENSITIVITY_STYLE = ASIDE_STYLE.format(c="#7a7a7a")
ANALYSES = {"worst-case": "worst case", "best-case": "best case", "tipping-point": "tipping point"}
#: Up to this many rows of a tipping-point grid, the boundary is also listed in words.
_LISTED_ROWS = 16

_BESIDE = (
    "Beside the primary result of {hid} above, which they do not replace: the decision of "
    "{hid} is the primary one. Each analysis completes the missing outcomes in its own way and "
    "tests the completed table; its p-value is nominal (not adjusted for multiplicity)."
)

#: A figure of the report: (relative path, alternative text).
Figure = tuple[str, str]


def _imputed(entry: Mapping[str, Any], where: str) -> str:
    imputed = mapping(entry.get("imputed") or {}, f"{where}.imputed")
    shown = {"event": "event", "no-event": "no event"}
    parts = [f"{g}: {shown.get(str(v), text(v, f'{where}.imputed.{g}'))}"
             for g, v in imputed.items()]
    return "; ".join(parts) or NULL


def _counts(entry: Mapping[str, Any], where: str) -> str:
    tab = mapping(entry.get("table") or {}, f"{where}.table")
    groups = items(tab.get("groups"), f"{where}.table.groups")
    events = items(tab.get("events"), f"{where}.table.events")
    totals = items(tab.get("totals"), f"{where}.table.totals")
    if not (len(groups) == len(events) == len(totals)):
        raise PrespecError(
            f"results.json: {where}.table: expected groups, events and totals of one length"
        )
    return "; ".join(
        f"{text(g, f'{where}.table.groups[{j}]')} "
        f"{fmt_count(number(events[j], f'{where}.table.events[{j}]'))}/"
        f"{fmt_count(number(totals[j], f'{where}.table.totals[{j}]'))}"
        for j, g in enumerate(groups)
    ) or NULL


def _estimate(entry: Mapping[str, Any], where: str) -> str:
    if entry.get("estimate") is None:
        return NULL
    at = f"{where}.estimate"
    est = mapping(entry["estimate"], at)
    value = fmt_estimate(number(est.get("value"), f"{at}.value"))
    low, high = pair(est.get("ci"), f"{at}.ci")
    level = number(est.get("level"), f"{at}.level")
    method = text(est.get("ci_method"), f"{at}.ci_method", default="")
    measure = text(est.get("measure"), f"{at}.measure", default="")
    label = " ".join(s for s in (fmt_level(level) if level is not None else "", method) if s)
    shown = f"{value} {fmt_interval(low, high)}"
    if label:
        shown += f", {label}"
    return f"{measure_label(measure)} {shown}" if measure else shown


def _nominal(entry: Mapping[str, Any], where: str) -> str:
    value = entry.get("reject_nominal")
    if value is None:
        return NULL
    if not isinstance(value, bool):
        raise PrespecError(
            f"results.json: {where}.reject_nominal: expected true, false or null, found {value!r}"
        )
    return "reject H0" if value else "do not reject H0"


def imputation_rows(entries: Sequence[tuple[Mapping[str, Any], str]]) -> list[list[str]]:
    """One row per worst- or best-case analysis."""
    rows = []
    for entry, at in entries:
        name = text(entry.get("analysis"), f"{at}.analysis")
        rows.append([
            ANALYSES.get(name, name),
            _imputed(entry, at),
            _counts(entry, at),
            text(entry.get("test"), f"{at}.test", default=NULL),
            fmt_p(number(entry.get("p_value"), f"{at}.p_value")),
            _estimate(entry, at),
            _nominal(entry, at),
        ])
    return rows


def tipping_sentence(grid: TippingGrid) -> str:
    """What the grid says, in one or two sentences."""
    a, b = grid.groups
    m1, m2 = grid.missing
    alpha = NULL if grid.alpha is None else fmt_weight(grid.alpha)
    lead = (
        f"Tipping point: every way of completing the missing outcomes, 0 to {m1:,} events among "
        f"the {m1:,} missing of {a} and 0 to {m2:,} among the {m2:,} missing of {b} "
        f"({plural(grid.cells, 'combination')}), each table tested with {grid.test} "
        f"at alpha {alpha}."
    )
    if grid.primary_rejects is None:
        return (f"{lead} The primary result carries no decision, so no combination is counted "
                "as changing it; the figure shows where the completed tables reject H0.")
    primary = decision_words(grid.primary_rejects)
    if grid.cells_changing is None:
        return f"{lead} The primary decision is {primary}; results.json does not count the changes."
    if grid.cells_changing == 0:
        return f"{lead} The conclusion ({primary}) holds in all {plural(grid.cells, 'combination')}."
    return (f"{lead} The conclusion ({primary}) changes in {grid.cells_changing:,} of "
            f"{plural(grid.cells, 'combination')}.")


def observed_sentence(grid: TippingGrid) -> str:
    """Where the complete-case rates lie on the grid, or ``""``."""
    i, j = grid.observed
    if i is None or j is None:
        return ""
    return (f"At the complete-case rates about {i:.1f} events would be expected among the "
            f"missing of {grid.groups[0]} and {j:.1f} among those of {grid.groups[1]} "
            "(the ring in the figure).")


def boundary_sentence(grid: TippingGrid) -> str:
    """For a small grid, where along each row the decision first changes, or ``""``."""
    if (not grid.boundary or grid.missing[0] + 1 > _LISTED_ROWS
            or all(j is None for _, j in grid.boundary)):
        return ""
    runs: list[tuple[int, int, int | None]] = []  # (first i, last i, j), rows run together
    for i, j in grid.boundary:
        if runs and runs[-1][2] == j and runs[-1][1] == i - 1:
            runs[-1] = (runs[-1][0], i, j)
        else:
            runs.append((i, i, j))
    shown = [
        (f"i = {lo}" if lo == hi else f"i = {lo} to {hi}")
        + (f": from j = {j}" if j is not None else ": nowhere")
        for lo, hi, j in runs
    ]
    return "Where the decision first changes along each row: " + "; ".join(shown) + "."


def _cell_notes(grid: TippingGrid) -> str:
    """How many cells had no p-value, or were tested by the sparse-data switch, or ``""``."""
    words = []
    if grid.cells_not_computable:
        words.append(f"{plural(grid.cells_not_computable, 'combination')} had no computable "
                     "p-value and decide nothing (white in the figure).")
    if grid.cells_switched:
        words.append(f"In {plural(grid.cells_switched, 'combination')} the pre-specified "
                     "sparse-data rule switched to its other test.")
    return " ".join(words)


def tipping_block(grid: TippingGrid) -> tuple[str, list[Figure]]:
    """The tipping-point sentences and, when any outcome is missing, its figure."""
    if not drawn(grid):
        line = (f"Tipping point: no outcome of {grid.groups[0]} or {grid.groups[1]} is "
                "missing, so there is nothing to complete and the conclusion cannot change.")
        return f'<p class="prespec-tipping">{esc(line)}</p>', []
    words = [tipping_sentence(grid), observed_sentence(grid), boundary_sentence(grid),
             _cell_notes(grid)]
    shown = " ".join(w for w in words if w)
    alt = (f"Tipping-point grid of {grid.hid}: the decision for each number of events among "
           f"the missing outcomes of {grid.groups[0]} and {grid.groups[1]}; primary decision: "
           f"{decision_words(grid.primary_rejects)}")
    return f'<p class="prespec-tipping">{esc(shown)}</p>', [(tipping_name(grid.hid), alt)]


def sensitivity_block(hyp: Mapping[str, Any], where: str) -> tuple[str, list[Figure]]:
    """The sensitivity analyses of one hypothesis (HTML and figures), or ``("", [])``."""
    at = f"{where}.sensitivity"
    entries = [(mapping(raw, f"{at}[{k}]"), f"{at}[{k}]")
               for k, raw in enumerate(items(hyp.get("sensitivity"), at))]
    if not entries:
        return "", []
    hid = text(hyp.get("id"), f"{where}.id", default=where)
    parts = [
        f'<div class="prespec-sensitivity" style="{SENSITIVITY_STYLE}">',
        "<h4>Sensitivity analyses</h4>",
        f"<p>{esc(_BESIDE.format(hid=hid))}</p>",
    ]
    figures: list[Figure] = []
    imputed = [(e, a) for e, a in entries if e.get("analysis") in ("worst-case", "best-case")]
    if imputed:
        parts.append(table(
            ["Analysis", "Missing outcomes set to", "Events/total", "Test", "p-value",
             "Estimate and interval", "Nominal decision"],
            imputation_rows(imputed), numeric=(4,), cls="prespec-imputed",
        ))
    for entry, entry_at in entries:
        name = entry.get("analysis")
        if name == "tipping-point":
            html, drawn_figures = tipping_block(read_grid(entry, entry_at, hid))
            parts.append(html)
            figures += drawn_figures
        elif name not in ("worst-case", "best-case"):
            shown = text(name, f"{entry_at}.analysis", default=NULL)
            parts.append(f"<p>{esc(f'A sensitivity analysis of a kind not known here: {shown}.')}</p>")
    parts.append("</div>")
    return "".join(parts), figures
