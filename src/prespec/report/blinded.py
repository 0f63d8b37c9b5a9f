"""The parts of a blinded rehearsal report, and the data dictionary.

A rehearsal (``kind: "rehearsal"``) runs the plan without reading the group column: it checks
that the data conform to the plan and that every step executes, and its results.json holds
pooled figures only. Its report says so at the top, shows the pooled figures per outcome and
the data dictionary (the columns the plan reads, with their role and the values found), and
shows no number per group: group-level fields, should results.json carry any, are named in a
warning and never shown.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

from prespec.errors import PrespecError
from prespec.report.markup import (
    BLINDED_STYLE,
    DEPARTURE_STYLE,
    FLAG_ROW_STYLE,
    SOFT_ROW_STYLE,
    esc,
    plural,
    table,
)
from prespec.report.values import (
    NULL,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_thousands,
    items,
    mapping,
    number,
    pair,
    text,
)

#: What a rehearsal's hypotheses must not carry: any of these not null is group-level.
HYPOTHESIS_LEAKS = ("statistic", "p_value", "p_adjusted", "reject", "estimate", "table",
                    "expected", "strata_tables", "sensitivity", "homogeneity", "adjusted",
                    "stratified")
#: Top-level fields a rehearsal must not carry.
TOP_LEAKS = ("groups",)
#: What a rehearsal's design entries must not carry (their planned sizes are the plan's).
DESIGN_LEAKS = ("achieved_per_group", "power_at_achieved")

BANNER_TITLE = "Blinded rehearsal — no group-level results"
BANNER_TEXT = (
    "This report was made without reading the group column. It checks that the data conform "
    "to the plan and that every step of the analysis executes, and shows pooled figures only: "
    "no count, rate, test, p-value or estimate for any group. The results of the plan come "
    "from the run on the unblinded data."
)

#: How the meaning of a value is shown in the data dictionary.
MEANINGS = {
    "event": "event",
    "no-event": "no event",
    "blank": "blank",
    "unmapped": "UNMAPPED: neither event nor no event",
    "passes filter": "passes the population filter",
    "fails filter": "fails the population filter",
    "intercurrent event": "the intercurrent event happened",
}


def is_rehearsal(results: Mapping[str, Any]) -> bool:
    """Whether results.json is a blinded rehearsal."""
    return results.get("kind") == "rehearsal"


def leaks(results: Mapping[str, Any]) -> list[str]:
    """The key paths of group-level fields in a rehearsal's results.json (none should exist)."""
    if not is_rehearsal(results):
        return []
    found = [key for key in TOP_LEAKS if results.get(key) is not None]
    if results.get("design") is not None:
        design = mapping(results["design"], "design")
        for n, raw in enumerate(items(design.get("hypotheses"), "design.hypotheses")):
            entry = mapping(raw, f"design.hypotheses[{n}]")
            hid = text(entry.get("id"), f"design.hypotheses[{n}].id", default=f"[{n}]")
            found += [f"design.hypotheses.{hid}.{key}" for key in DESIGN_LEAKS
                      if entry.get(key) is not None]
    for n, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{n}]")
        hid = text(hyp.get("id"), f"hypotheses[{n}].id", default=f"[{n}]")
        found += [f"hypotheses.{hid}.{key}" for key in HYPOTHESIS_LEAKS
                  if hyp.get(key) is not None and hyp.get(key) != []]
    return found


def banner(results: Mapping[str, Any]) -> str:
    """The rehearsal's label at the top of the report, or ``""`` for a run."""
    if not is_rehearsal(results):
        return ""
    out = [
        (f'<div class="prespec-blinded" style="{BLINDED_STYLE}">'
        '<p style="font-size:1.4em;font-weight:700;margin:0.1em 0 0.3em">'
        f'{esc(BANNER_TITLE)}</p><p style="margin:0">{esc(BANNER_TEXT)}</p></div>')
    ]
    found = leaks(results)
    if found:
        listed = ", ".join(found[:12]) + (f" and {len(found) - 12} more" if len(found) > 12 else "")
        words = (f"results.json carries group-level fields that a rehearsal must not have: "
                 f"{listed}. They are not shown.")
        out.append(f'<div class="prespec-leak" style="{DEPARTURE_STYLE}">'
                   f"<strong>Not blinded.</strong> {esc(words)}</div>")
    return "".join(out)


def pooled(results: Mapping[str, Any]) -> str:
    """The pooled events, total, missing, rate and interval per outcome (all groups together)."""
    if not is_rehearsal(results) and results.get("pooled") is None:
        return ""
    out = ["<h2>Pooled outcomes, all groups together</h2>"]
    if results.get("pooled") is None:
        return out[0] + "<p>results.json gives no pooled figures.</p>"
    if not results["pooled"] and results.get("event_table") is not None:
        return ""  # only families over the event table: no outcome of the unit table
    body = []
    for name, raw in mapping(results["pooled"], "pooled").items():
        at = f"pooled.{name}"
        row = mapping(raw, at)
        low, high = pair(row.get("ci"), f"{at}.ci")
        level = number(row.get("level"), f"{at}.level")
        method = text(row.get("ci_method"), f"{at}.ci_method", default="")
        body.append([
            str(name),
            fmt_thousands(number(row.get("events"), f"{at}.events")),
            fmt_thousands(number(row.get("total"), f"{at}.total")),
            fmt_thousands(number(row.get("missing"), f"{at}.missing")),
            fmt_estimate(number(row.get("rate"), f"{at}.rate")),
            fmt_interval(low, high),
            f"{fmt_level(level)} {method}".strip() if level is not None or method else NULL,
        ])
    out.append(table(["Outcome", "Events", "Total", "Missing", "Pooled rate", "Interval",
                      "Level, method"], body, numeric=range(1, 5), cls="prespec-pooled"))
    out.append("<p>Every figure here pools all groups: a rehearsal reads no group column.</p>")
    return "".join(out)


# --- the covariates of adjusted hypotheses and their working models -------------------------

def _summary_number(value: float | None) -> str:
    """A covariate's mean, SD or quantile: up to 6 significant digits, 61.2 -> ``61.2``."""
    return NULL if value is None else f"{value:.6g}"


def _covariate_rows(results: Mapping[str, Any]) -> tuple[list[list[str]], list[list[str]]]:
    """(numeric rows, categorical rows) of the rehearsal's ``covariates``."""
    numeric: list[list[str]] = []
    categorical: list[list[str]] = []
    for k, raw in enumerate(items(results.get("covariates"), "covariates")):
        at = f"covariates[{k}]"
        cov = mapping(raw, at)
        head = [text(cov.get("hypothesis"), f"{at}.hypothesis"),
                text(cov.get("column"), f"{at}.column")]
        counts = [fmt_thousands(number(cov.get("analysed"), f"{at}.analysed")),
                  fmt_thousands(number(cov.get("missing"), f"{at}.missing"))]
        if cov.get("summary") is not None:
            summary = mapping(cov["summary"], f"{at}.summary")
            numeric.append([*head, *counts, *(
                _summary_number(number(summary.get(key), f"{at}.summary.{key}"))
                for key in ("mean", "sd", "min", "median", "max"))])
        levels = items(cov.get("levels"), f"{at}.levels")
        for j, raw_level in enumerate(levels):
            l_at = f"{at}.levels[{j}]"
            level = mapping(raw_level, l_at)
            categorical.append([*head, *(counts if j == 0 else ["", ""]),
                                shown_value(level.get("level"), f"{l_at}.level"),
                                fmt_thousands(number(level.get("count"), f"{l_at}.count"))])
        if cov.get("summary") is None and not levels:
            kind = text(cov.get("kind"), f"{at}.kind", default="")
            target = categorical if kind == "categorical" else numeric
            target.append([*head, *counts, *([NULL] * (2 if target is categorical else 5))])
    return numeric, categorical


def _model_check_rows(results: Mapping[str, Any]) -> tuple[list[list[str]], dict[int, str],
                                                           list[str]]:
    rows: list[list[str]] = []
    marks: dict[int, str] = {}
    failed: list[str] = []
    for k, raw in enumerate(items(results.get("model_checks"), "model_checks")):
        at = f"model_checks[{k}]"
        check = mapping(raw, at)
        hid = text(check.get("hypothesis"), f"{at}.hypothesis")
        fits = check.get("fits")
        if not isinstance(fits, bool):
            raise PrespecError(f"results.json: {at}.fits: expected true or false, found "
                               f"{fits!r}")
        if not fits:
            marks[len(rows)] = FLAG_ROW_STYLE
            failed.append(hid)
        rows.append([hid, "yes" if fits else "no",
                     text(check.get("reason"), f"{at}.reason", default=NULL)])
    return rows, marks, failed


def covariates(results: Mapping[str, Any]) -> str:
    """A rehearsal's covariates of adjusted hypotheses (missingness and distribution, all
    groups together) and whether each working model fitted on the dummy allocation, or ``""``
    when results.json holds neither."""
    if not is_rehearsal(results):
        return ""
    if results.get("covariates") is None and results.get("model_checks") is None:
        return ""
    out = ["<h2>Covariates of the adjusted analyses, all groups together</h2>",
           ("<p>The baseline covariates the working models use, over all analysed units: how "
            "many have a value, how many miss one, and how the values are spread. A unit with "
            "a missing covariate is left out of the adjusted analysis, or stops the run, as "
            "the plan says. None of these figures belongs to a group.</p>")]
    numeric, categorical = _covariate_rows(results)
    if numeric:
        out.append(table(["Hypothesis", "Covariate", "Analysed", "Missing", "Mean", "SD",
                          "Minimum", "Median", "Maximum"], numeric, numeric=range(2, 9),
                         cls="prespec-covariates-numeric", caption="Numeric covariates"))
    if categorical:
        out.append(table(["Hypothesis", "Covariate", "Analysed", "Missing", "Level", "Units"],
                         categorical, numeric=(2, 3, 5), cls="prespec-covariates-categorical",
                         caption="Categorical covariates"))
    if not numeric and not categorical:
        out.append("<p>results.json lists no covariates.</p>")
    rows, marks, failed = _model_check_rows(results)
    if rows:
        out.append("<h3>Working models on the dummy allocation</h3>")
        if failed:
            words = (f"The working model did not fit for {', '.join(failed)} on the dummy "
                     "allocation (the reason is in the table). If it fails so on the real "
                     "allocation, the run uses the plan's pre-specified fallback test instead.")
            out.append(f'<div class="prespec-model-failed" style="{DEPARTURE_STYLE}">'
                       f"{esc(words)}</div>")
        out.append(table(["Hypothesis", "Working model fitted", "Reason"], rows,
                         cls="prespec-model-checks", row_styles=marks))
    return "".join(out)


# --- the event table of a family over it ----------------------------------------------------

def event_table(results: Mapping[str, Any]) -> str:
    """A rehearsal's event table (``data.events``): its rows, the rows left out (an id not in
    the unit table, a blank level), the rows of units outside the population, and the event
    rows per level, all groups together; ``""`` without one."""
    if not is_rehearsal(results) or results.get("event_table") is None:
        return ""
    ev = mapping(results["event_table"], "event_table")
    count = {k: number(ev.get(k), f"event_table.{k}") for k in (
        "rows", "unmatched_rows", "unmatched_ids", "blank_level_rows", "outside_rows")}
    name = esc(text(ev.get("data_file"), "event_table.data_file", default=NULL))
    digest = esc(text(ev.get("data"), "event_table.data", default=NULL))
    out = ["<h2>The event table, all groups together</h2>", f"<p>{name} ({digest}).</p>"]
    out.append(table(["Event rows", "Id not in the unit table", "Distinct such ids",
                      "Blank level", "Rows of units outside the population"],
                     [[fmt_thousands(count[k]) for k in count]], numeric=range(5),
                     cls="prespec-event-table"))
    columns = [mapping(c, f"event_table.columns[{i}]")
               for i, c in enumerate(items(ev.get("columns") or [], "event_table.columns"))]
    if columns:
        out.append(table(["Column", "Read as", "Label in the file"], [
            [text(c.get("column"), "event_table.columns.column"),
             text(c.get("role"), "event_table.columns.role"),
             text(c.get("label"), "event_table.columns.label", default=NULL)] for c in columns],
            cls="prespec-event-columns", caption="The columns of the event table read"))
    rows = []
    levels = [mapping(raw, f"event_table.levels[{i}]")
              for i, raw in enumerate(items(ev.get("levels") or [], "event_table.levels"))]
    labelled = any(level.get("label") is not None for level in levels)
    for i, level in enumerate(levels):
        row = [text(level.get("level"), f"event_table.levels[{i}].level", default=NULL)]
        if labelled:
            row.append(text(level.get("label"), f"event_table.levels[{i}].label",
                            default=NULL))
        rows.append(row + [fmt_thousands(number(level.get("rows"),
                                                f"event_table.levels[{i}].rows"))])
    if rows:
        head = ["Level", *(["Label in the file"] if labelled else []),
                "Event rows of known units"]
        out.append(table(head, rows, numeric=(len(head) - 1,),
                         cls="prespec-event-levels", caption="Event rows per level"))
    out.append("<p>Rows whose id is not in the unit table, or whose level is blank, are left "
               "out of every family and recorded as departures. A family counts each unit of "
               "the population once per level, however many rows it has.</p>")
    return "".join(out)


# --- the data dictionary -------------------------------------------------------------------

_ROLE_PATTERNS: list[tuple[re.Pattern[str], str]] = [
    (re.compile(r"data\.id"), "unit id"),
    (re.compile(r"data\.group"), "group"),
    (re.compile(r"data\.include\[(\d+)\]"), "population filter {0}"),
    (re.compile(r"outcomes\.(.+)\.column"), "outcome “{0}”"),
    (re.compile(r"hypotheses\.(.+?)\.strata"), "strata of {0}"),
    (re.compile(r"hypotheses\.(.+?)\.randomisation_strata"), "randomisation strata of {0}"),
    (re.compile(r"hypotheses\.(.+?)\.covariates\.(.+)"), "covariate {1} of {0}"),
    (re.compile(r"hypotheses\.(.+?)\.estimand\.intercurrent\[(\d+)\]\.column"),
     "intercurrent event {1} of {0}"),
    (re.compile(r"hypotheses\.(.+?)\.estimand\.intercurrent\[(\d+)\]\.outcome_column"),
     "outcome while on treatment, event {1} of {0}"),
]


def role_words(role: str) -> str:
    """A role path in words: ``outcomes.infection.column`` -> ``outcome “infection”``."""
    for pattern, words in _ROLE_PATTERNS:
        match = pattern.fullmatch(role)
        if match:
            return words.format(*match.groups())
    return role


def role_label(role: str) -> str:
    """A role path in words, then the path: ``outcome “infection” (outcomes.infection.column)``."""
    words = role_words(role)
    return role if words == role else f"{words} ({role})"


def _role_list(column: Mapping[str, Any], where: str) -> list[str]:
    """The roles of a column: a list, or one text of roles joined by ``, ``."""
    raw = column.get("role")
    if isinstance(raw, list):
        return [text(r, f"{where}.role[{k}]") for k, r in enumerate(raw)]
    return [r.strip() for r in text(raw, f"{where}.role", default=NULL).split(", ") if r.strip()]


def _roles(column: Mapping[str, Any], where: str) -> str:
    return "; ".join(role_label(r) for r in _role_list(column, where))


def shown_value(value: object, where: str) -> str:
    """A data value as the dictionary shows it: ``(blank)`` for an empty one, padding quoted."""
    if value is None:
        return "(blank)"
    shown = text(value, where)
    if shown == "":
        return "(blank)"
    if shown != shown.strip():
        return f"“{shown}”"
    return shown


def _value_rows(
    column: Mapping[str, Any], where: str
) -> tuple[list[list[str]], dict[int, str], int]:
    rows: list[list[str]] = []
    marks: dict[int, str] = {}
    unmapped = 0
    labelled = _has_value_labels(column, where)
    for k, raw in enumerate(items(column.get("values"), f"{where}.values")):
        at = f"{where}.values[{k}]"
        entry = mapping(raw, at)
        meaning = text(entry.get("meaning"), f"{at}.meaning", default="")
        count = number(entry.get("count"), f"{at}.count")
        if meaning == "unmapped":
            marks[k] = FLAG_ROW_STYLE
            unmapped += int(count or 0)
        elif meaning == "blank":
            marks[k] = SOFT_ROW_STYLE
        rows.append([shown_value(entry.get("value"), f"{at}.value"), fmt_thousands(count),
                     MEANINGS.get(meaning, meaning or NULL)])
        if labelled:  # the value label a dataset file declares, beside the stored value
            rows[-1].insert(1, text(entry.get("label"), f"{at}.label", default=""))
    return rows, marks, unmapped


def _has_value_labels(column: Mapping[str, Any], where: str) -> bool:
    return any(isinstance(raw, Mapping) and raw.get("label") is not None
               for raw in items(column.get("values"), f"{where}.values"))


def _column_name(column: Mapping[str, Any], where: str) -> str:
    return text(column.get("column"), f"{where}.column")


def data_dictionary(results: Mapping[str, Any]) -> str:
    """The data dictionary as its own section, or ``""`` when results.json has none.

    An overview (column, role, distinct values, blanks, rows with unmapped values, flagged),
    then each column's values with their counts and meaning, then lines to sign.
    """
    if results.get("data_dictionary") is None:
        return ""
    dictionary = mapping(results["data_dictionary"], "data_dictionary")
    columns = [(mapping(raw, f"data_dictionary.columns[{k}]"), f"data_dictionary.columns[{k}]")
               for k, raw in enumerate(items(dictionary.get("columns"),
                                             "data_dictionary.columns"))]
    out = [
        "<h2>Data dictionary</h2>",
        ("<p>The columns the plan reads, what the plan uses each for, and the values found in "
        "them, for the data manager to check against the data specification and sign off. "
        "Values the plan does not map are flagged in red; blanks are shaded.</p>"),
    ]
    out.append(_scope(dictionary))
    if not columns:
        return "".join(out) + "<p>results.json lists no columns.</p>"
    overview: list[list[str]] = []
    overview_marks: dict[int, str] = {}
    details: list[str] = []
    for column, where in columns:
        name = _column_name(column, where)
        at = f"data_dictionary.{name}"
        roles = _roles(column, at)
        distinct = number(column.get("distinct"), f"{at}.distinct")
        blank = number(column.get("blank"), f"{at}.blank")
        rows, marks, unmapped = _value_rows(column, at)
        if unmapped:
            overview_marks[len(overview)] = FLAG_ROW_STYLE
        overview.append([name, "; ".join(role_words(r) for r in _role_list(column, at)),
                         fmt_thousands(distinct), fmt_thousands(blank),
                         fmt_thousands(unmapped) if rows else NULL])
        details.append(_column_detail(column, at, name, roles, rows, marks))
    out.append(table(["Column", "Used for", "Distinct values", "Blank", "Unmapped (rows)"],
                     overview, numeric=(2, 3, 4), cls="prespec-dictionary",
                     row_styles=overview_marks))
    flagged = sum(1 for m in overview_marks.values() if m == FLAG_ROW_STYLE)
    if flagged:
        out.append(f'<div class="prespec-unmapped" style="{DEPARTURE_STYLE}">'
                   f"{esc(plural(flagged, 'column'))} {'holds' if flagged == 1 else 'hold'} "
                   "values that the plan does not map; they are listed in red below.</div>")
    out.append('<div class="prespec-columns">' + "".join(details) + "</div>")
    out.append("<h3>Checked against the data specification</h3>")
    out.append(_SIGN_OFF)
    return "".join(out)


_CARD_STYLE = "display:inline-block;vertical-align:top;margin:0 2.2em 0.8em 0;max-width:30em;"
_SIGN_OFF = (
    '<table class="prespec prespec-fields prespec-sign-off"><tbody>'
    + "".join(f'<tr><th>{label}</th><td style="min-width:24em;height:1.8em"></td></tr>'
              for label in ("Name", "Role", "Date", "Signature"))
    + "</tbody></table>"
)


def _scope(dictionary: Mapping[str, Any]) -> str:
    """What the counts are over, and the group column that a rehearsal does not read."""
    words = []
    rows = number(dictionary.get("rows"), "data_dictionary.rows")
    over = text(dictionary.get("counted_over"), "data_dictionary.counted_over", default="")
    if over or rows is not None:
        shown = f" ({fmt_thousands(rows)} rows)" if rows is not None else ""
        words.append(f"Counted over {over or 'the rows read'}{shown}.")
    if dictionary.get("group_column") is not None:
        group = mapping(dictionary["group_column"], "data_dictionary.group_column")
        name = text(group.get("column"), "data_dictionary.group_column.column", default=NULL)
        read = group.get("read")
        if read is False:
            words.append(f"The group column {name} is not read, so it is not counted.")
        else:
            words.append(f"The group column is {name}.")
    return f"<p>{esc(' '.join(words))}</p>" if words else ""


def _column_detail(column: Mapping[str, Any], at: str, name: str, roles: str,
                   rows: list[list[str]], marks: dict[int, str]) -> str:
    distinct = number(column.get("distinct"), f"{at}.distinct")
    blank = number(column.get("blank"), f"{at}.blank")
    facts = [f"used for {roles}", f"{fmt_thousands(distinct)} distinct values",
             f"{fmt_thousands(blank)} blank"]
    if column.get("duplicates") is not None:
        facts.append(f"{fmt_thousands(number(column.get('duplicates'), f'{at}.duplicates'))} "
                     "duplicated")
    line = "; ".join(facts)
    parts = [f'<div class="prespec-column-card" style="{_CARD_STYLE}">',
             f'<h4 class="prespec-column">Column {esc(name)}</h4>']
    if column.get("label") is not None:  # the column label a dataset file declares
        label = text(column.get("label"), f"{at}.label")
        parts.append(f'<p class="prespec-column-label" style="margin:0.2em 0">Label: '
                     f"{esc(label)}</p>")
    parts.append(f'<p style="margin:0.2em 0 0.4em">{esc(line[:1].upper() + line[1:])}.</p>')
    if rows:
        labelled = _has_value_labels(column, at)
        head = ["Value", "Label", "Rows", "Meaning"] if labelled else ["Value", "Rows", "Meaning"]
        parts.append(table(head, rows, numeric=(2,) if labelled else (1,),
                           cls="prespec-values", row_styles=marks))
        more = number(column.get("more"), f"{at}.more")
        if more:
            rows_more = number(column.get("more_count"), f"{at}.more_count")
            held = f" in {fmt_thousands(rows_more)} rows" if rows_more is not None else ""
            words = (f"… and {fmt_thousands(more)} more values{held}, not listed "
                     "(a list stops at 50).")
            parts.append(f"<p>{esc(words)}</p>")
    elif column.get("duplicates") is not None or "(data.id)" in roles:
        parts.append("<p>The ids themselves are not listed.</p>")
    else:
        parts.append("<p>No values are listed.</p>")
    parts.append("</div>")
    return "".join(parts)
