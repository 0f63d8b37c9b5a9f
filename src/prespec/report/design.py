"""The "Planned versus achieved" section: the sample size the design asked for, and what came.

results.json's ``design`` (written when the plan has a ``design:`` section) gives, per
hypothesis, the share of alpha it was sized at under the rule of the plan's multiplicity
method, the size per group before dropout (analysable) and after it (to enrol), the size
achieved (analysed), and the power at the achieved size. The sizes and powers are computed by
the design room (its docstrings name the methods); the report only shows them and marks a
group whose achieved size falls short of the size planned before dropout.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from prespec.report.markup import SHORT_ROW_STYLE, esc, fields, table
from prespec.report.values import (
    NULL,
    fmt_rate,
    fmt_thousands,
    fmt_weight,
    items,
    mapping,
    number,
    text,
)


def _percent(value: float | None) -> str:
    return NULL if value is None else f"{value * 100:.10g}%"


def _sizes(entry: Mapping[str, Any], key: str, where: str) -> dict[str, float | None]:
    raw = entry.get(key)
    if raw is None:
        return {}
    sizes = mapping(raw, f"{where}.{key}")
    return {str(g): number(n, f"{where}.{key}.{g}") for g, n in sizes.items()}


def _against(planned: float | None, achieved: float | None) -> tuple[str, bool]:
    """``met`` or ``12 short`` against the size planned before dropout; whether short."""
    if planned is None or achieved is None:
        return NULL, False
    if achieved >= planned:
        return "met", False
    return f"{fmt_thousands(planned - achieved)} short", True


def design_rows(design: Mapping[str, Any]) -> tuple[list[list[str]], dict[int, str]]:
    """One row per hypothesis and group, and the rows to mark (achieved below planned)."""
    rows: list[list[str]] = []
    marks: dict[int, str] = {}
    assumed = {str(g): number(r, f"design.assumed.{g}")
               for g, r in mapping(design.get("assumed") or {}, "design.assumed").items()}
    for k, raw in enumerate(items(design.get("hypotheses"), "design.hypotheses")):
        at = f"design.hypotheses[{k}]"
        entry = mapping(raw, at)
        hid = text(entry.get("id"), f"{at}.id")
        at = f"design.hypotheses.{hid}"
        alpha = fmt_weight(number(entry.get("alpha"), f"{at}.alpha"))
        power = number(entry.get("power_at_achieved"), f"{at}.power_at_achieved")
        planned = _sizes(entry, "n_per_group", at)
        enrol = _sizes(entry, "n_enrol_per_group", at)
        achieved = _sizes(entry, "achieved_per_group", at)
        groups = list(dict.fromkeys([*planned, *enrol, *achieved]))
        for n, group in enumerate(groups or ["not sized"]):
            against, short = _against(planned.get(group), achieved.get(group))
            if short:
                marks[len(rows)] = SHORT_ROW_STYLE
            rows.append([
                hid if n == 0 else "",
                alpha if n == 0 else "",
                group,
                fmt_rate(assumed.get(group)),
                fmt_thousands(planned.get(group)),
                fmt_thousands(enrol.get(group)),
                fmt_thousands(achieved.get(group)),
                against,
                (NULL if power is None else f"{power:.3f}") if n == 0 else "",
            ])
    return rows, marks


_INTRO = (
    "The sample size the design fixed for each hypothesis, at the share of alpha it was sized "
    "at: per group before dropout (to analyse) and after it (to enrol), beside the size "
    "analysed, and the power of the planned test at the sizes analysed under the rates the "
    "design assumed."
)
_SHADED = "Shaded rows: a group analysed with fewer than the planned n (before dropout)."


def planned_versus_achieved(results: Mapping[str, Any]) -> str:
    """The section, or ``""`` without a design (and always in a blinded rehearsal)."""
    if results.get("design") is None or results.get("kind") == "rehearsal":
        return ""
    design = mapping(results["design"], "design")
    settings = [
        ("How alpha is shared out", text(design.get("rule"), "design.rule", default=NULL)),
        ("Target power", _percent(number(design.get("power"), "design.power"))),
        ("Dropout allowed for", _percent(number(design.get("dropout"), "design.dropout"))),
    ]
    rows, marks = design_rows(design)
    methods = method_rows(design)
    out = [
        "<h2>Planned versus achieved</h2>",
        f"<p>{esc(_INTRO)}</p>",
        fields(settings),
    ]
    if rows:
        out.append(table(
            ["Hypothesis", "Alpha sized at", "Group", "Assumed rate",
             "Planned n (before dropout)", "To enrol (after dropout)", "Achieved (analysed)",
             "Against the plan", "Power at the achieved n"],
            rows, numeric=(1, 3, 4, 5, 6, 8), cls="prespec-design", row_styles=marks,
        ))
        if marks:
            out.append(f"<p>{esc(_SHADED)}</p>")
    else:
        out.append("<p>results.json gives no sizes for the hypotheses.</p>")
    if methods:
        out.append(table(["Hypothesis", "Sized by"], methods, cls="prespec-sized-by"))
    return "".join(out)


def method_rows(design: Mapping[str, Any]) -> list[list[str]]:
    """(hypothesis, the sizing method in words) for each hypothesis that names one."""
    rows = []
    for k, raw in enumerate(items(design.get("hypotheses"), "design.hypotheses")):
        entry = mapping(raw, f"design.hypotheses[{k}]")
        hid = text(entry.get("id"), f"design.hypotheses[{k}].id")
        method = text(entry.get("method"), f"design.hypotheses.{hid}.method", default="")
        if entry.get("n_per_group") is None:
            method = f"not sized{': ' + method if method else ''}"
        if method:
            rows.append([hid, method])
    return rows
