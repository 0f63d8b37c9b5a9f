"""The report's sections as HTML, built from ``results.json`` and nothing else.

Each function takes the loaded results (or one part of them) and returns an HTML fragment that
the report notebook displays. Every string that comes from results.json is escaped with
:func:`html.escape`: titles, group names and details come from user plans and data.
"""

from __future__ import annotations

import html
import json
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from prespec.report.figures import DIFFERENCES, has_estimates, proportions_name
from prespec.report.values import (
    DEFAULT_CAUTION,
    NULL,
    fmt_count,
    fmt_estimate,
    fmt_expected,
    fmt_interval,
    fmt_level,
    fmt_p,
    fmt_statistic,
    items,
    mapping,
    number,
    pair,
    text,
)

KINDS = {"run": "Analysis run", "rehearsal": "Blinded rehearsal"}
ENVIRONMENT_ORDER = ("python", "numpy", "scipy", "statsmodels", "pandas", "prespec")
_BOX = "border:2px solid {c};background:{b};padding:0.6em 0.9em;margin:0.8em 0;"
_CAUTION_STYLE = _BOX.format(c="#7a4b00", b="#fff6e0")
_DEPARTURE_STYLE = _BOX.format(c="#8b1a1a", b="#fdecec")
_QUIET_STYLE = _BOX.format(c="#4d6b4d", b="#f0f6f0")


def esc(value: object) -> str:
    """HTML-escape any value shown in the report."""
    return html.escape(str(value), quote=True)


def table(
    header: Sequence[str],
    rows: Iterable[Sequence[str]],
    *,
    numeric: Iterable[int] = (),
    cls: str = "",
) -> str:
    """A plain HTML table; cells are escaped here, so pass them as plain text.

    Columns whose index is in ``numeric`` are right-aligned.
    """
    nums = set(numeric)
    head = "".join(f"<th>{esc(h)}</th>" for h in header)

    def cell(j: int, value: str) -> str:
        return f'<td class="num">{esc(value)}</td>' if j in nums else f"<td>{esc(value)}</td>"

    body = "".join(
        "<tr>" + "".join(cell(j, c) for j, c in enumerate(row)) + "</tr>" for row in rows
    )
    klass = f"prespec {cls}".strip()
    return f'<table class="{esc(klass)}"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def fields(rows: Iterable[tuple[str, str]]) -> str:
    """A two-column table of labelled values."""
    body = "".join(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in rows)
    return f'<table class="prespec prespec-fields"><tbody>{body}</tbody></table>'


def _optional(results: Mapping[str, Any], key: str) -> str:
    value = results.get(key)
    if value is None:
        return NULL
    if isinstance(value, int | float | str) and not isinstance(value, bool):
        return str(value)
    return json.dumps(value, sort_keys=True)


def kind_label(results: Mapping[str, Any]) -> str:
    """``Analysis run`` or ``Blinded rehearsal`` (another kind is shown as written)."""
    kind = text(results.get("kind"), "kind", default="")
    return KINDS.get(kind, kind or "kind not given")


def header(results: Mapping[str, Any]) -> str:
    """Title, kind, plan fingerprint and version, data hash and file, time and actor."""
    title = text(results.get("title"), "title", default="Untitled plan")
    rows = [("Kind", kind_label(results))]
    if results.get("protocol") is not None:
        rows.append(("Protocol", _optional(results, "protocol")))
    rows += [
        ("Plan fingerprint", _optional(results, "plan")),
        ("Plan version", _optional(results, "plan_version")),
        ("Data hash", _optional(results, "data")),
        ("Data file", _optional(results, "data_file")),
        ("Time (UTC)", _optional(results, "created")),
        ("Actor", _optional(results, "actor")),
        ("Alpha", _optional(results, "alpha")),
        ("Multiplicity", multiplicity_name(results)),
    ]
    return f'<h1 class="prespec-title">{esc(title)}</h1>' + fields(rows)


def caution(results: Mapping[str, Any]) -> str:
    """The caution from results.json, in a box (a default one if results.json has none)."""
    words = text(results.get("caution"), "caution", default=DEFAULT_CAUTION).strip()
    return (
        f'<div class="prespec-caution" style="{_CAUTION_STYLE}">'
        f"<strong>Caution.</strong> {esc(words or DEFAULT_CAUTION)}</div>"
    )


def departures(results: Mapping[str, Any]) -> str:
    """The departures from the plan, prominently, then the notes."""
    rows = []
    for i, raw in enumerate(items(results.get("deviations"), "deviations")):
        dev = mapping(raw, f"deviations[{i}]")
        rows.append(
            [text(dev.get(k), f"deviations[{i}].{k}", default=NULL)
             for k in ("code", "detail", "expected", "found")]
        )
    out = ["<h2>Departures from the plan</h2>"]
    if rows:
        count = f"{len(rows)} departure{'s' if len(rows) != 1 else ''} from the plan recorded"
        out.append(
            f'<div class="prespec-departures" style="{_DEPARTURE_STYLE}">'
            f"<strong>{esc(count)}.</strong>"
            + table(["Code", "Detail", "Expected", "Found"], rows)
            + "</div>"
        )
    else:
        out.append(
            f'<div class="prespec-departures" style="{_QUIET_STYLE}">'
            "No departures from the plan were recorded.</div>"
        )
    notes = []
    for i, raw in enumerate(items(results.get("notes"), "notes")):
        note = mapping(raw, f"notes[{i}]")
        notes.append([text(note.get(k), f"notes[{i}].{k}", default=NULL) for k in ("code", "detail")])
    out.append("<h3>Notes</h3>")
    out.append(table(["Code", "Detail"], notes) if notes else "<p>No notes were recorded.</p>")
    return "".join(out)


def population(results: Mapping[str, Any]) -> str:
    """Rows read, left out by the population filter, left out for the group, analysed."""
    out = "<h2>Population</h2>"
    if results.get("population") is None:
        return out + "<p>results.json gives no population counts.</p>"
    pop = mapping(results["population"], "population")
    labels = [
        ("rows_read", "Rows read"),
        ("excluded_by_filter", "Left out by the population filter"),
        ("excluded_group", "Left out for a blank or unknown group"),
        ("analysed", "Analysed"),
    ]
    return out + fields(
        (label, fmt_count(number(pop.get(key), f"population.{key}"))) for key, label in labels
    )


def outcomes(results: Mapping[str, Any]) -> list[tuple[str, str, str]]:
    """Per outcome: (name, HTML of its counts per group, relative path of its figure)."""
    groups = results.get("groups")
    if groups is None:
        return []
    out = []
    for name, rows in mapping(groups, "groups").items():
        out.append((str(name), outcome_table(str(name), rows), proportions_name(str(name))))
    return out


def outcome_table(name: str, rows: object) -> str:
    """One outcome's events, total, missing, proportion and interval per group."""
    base = f"groups.{name}"
    body = []
    for i, raw in enumerate(items(rows, base)):
        where = f"{base}[{i}]"
        row = mapping(raw, where)
        low, high = pair(row.get("ci"), f"{where}.ci")
        level = number(row.get("level"), f"{where}.level")
        method = text(row.get("ci_method"), f"{where}.ci_method", default="")
        body.append([
            text(row.get("group"), f"{where}.group"),
            fmt_count(number(row.get("events"), f"{where}.events")),
            fmt_count(number(row.get("total"), f"{where}.total")),
            fmt_count(number(row.get("missing"), f"{where}.missing")),
            fmt_estimate(number(row.get("proportion"), f"{where}.proportion")),
            fmt_interval(low, high),
            f"{fmt_level(level)} {method}".strip() if level is not None or method else NULL,
        ])
    head = ["Group", "Events", "Total", "Missing", "Proportion", "Interval", "Level, method"]
    return f"<h3>Outcome: {esc(name)}</h3>" + table(head, body, numeric=range(1, 6))


def _compare_label(compare: object, where: str) -> str:
    if isinstance(compare, str):
        return {"all": "all groups", "trend": "trend across groups"}.get(compare, compare)
    groups = [text(g, f"{where}.compare") for g in items(compare, f"{where}.compare")]
    if len(groups) == 2:
        return f"{groups[0]} vs {groups[1]}"
    if len(groups) == 1:
        return f"{groups[0]} against a fixed rate"
    return ", ".join(groups) or NULL


def _margin_label(margin: object, where: str) -> str:
    if margin is None:
        return NULL
    if isinstance(margin, list):
        low, high = pair(margin, f"{where}.margin")
        return f"{fmt_estimate(low)} to {fmt_estimate(high)}"
    return fmt_estimate(number(margin, f"{where}.margin"))


def _rule_label(rule: object, where: str) -> str:
    r = mapping(rule, f"{where}.rule")
    switch = text(r.get("switch"), f"{where}.rule.switch", default="")
    frm = text(r.get("from"), f"{where}.rule.from", default=NULL)
    to = text(r.get("to"), f"{where}.rule.to", default=NULL)
    if switch == "sparse":
        smallest = number(r.get("smallest_expected"), f"{where}.rule.smallest_expected")
        minimum = number(r.get("min_expected"), f"{where}.rule.min_expected")
        return (
            f"pre-specified sparse-data rule: the smallest expected count "
            f"{fmt_expected(smallest)} is below {fmt_count(minimum)}, so {frm} was replaced "
            f"by {to}"
        )
    return f"pre-specified rule {switch or NULL}: {frm} was replaced by {to}"


def is_exploratory(hyp: Mapping[str, Any]) -> bool:
    """Whether a hypothesis has the exploratory role."""
    return hyp.get("role") == "exploratory"


def decision(hyp: Mapping[str, Any], where: str) -> str:
    """``reject H0``, ``do not reject H0``, or ``—`` when results.json gives none."""
    reject = hyp.get("reject")
    if reject is None:
        return NULL
    if not isinstance(reject, bool):
        raise_type(f"{where}.reject", "true, false or null", reject)
    return "reject H0" if reject else "do not reject H0"


def raise_type(path: str, expected: str, found: object) -> None:
    """Raise the report's one-line error for a value of the wrong type."""
    from prespec.errors import PrespecError

    raise PrespecError(f"results.json: {path}: expected {expected}, found {found!r}")


def hypotheses(results: Mapping[str, Any]) -> list[str]:
    """Each hypothesis as an HTML fragment, in results.json order."""
    out = []
    for i, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{i}]")
        out.append(hypothesis(hyp, f"hypotheses[{i}]"))
    return out


def hypotheses_heading(results: Mapping[str, Any]) -> str:
    """The heading of the hypotheses section, or a line saying there are none."""
    if items(results.get("hypotheses"), "hypotheses"):
        return "<h2>Hypotheses</h2>"
    return "<h2>Hypotheses</h2><p>results.json holds no tested hypotheses.</p>"


def hypothesis(hyp: Mapping[str, Any], position: str) -> str:
    """One hypothesis: its definition, its count table, its estimate and its test."""
    hid = text(hyp.get("id"), f"{position}.id")
    where = f"hypotheses.{hid}"
    title = text(hyp.get("title"), f"{where}.title", default="")
    role = text(hyp.get("role"), f"{where}.role", default=NULL)
    used = text(hyp.get("test"), f"{where}.test", default=NULL)
    planned = text(hyp.get("planned_test"), f"{where}.planned_test", default=used)
    rows = [
        ("Role", role),
        ("Outcome", text(hyp.get("outcome"), f"{where}.outcome", default=NULL)),
        ("Comparison", _compare_label(hyp.get("compare"), where)),
        ("Alternative", text(hyp.get("alternative"), f"{where}.alternative", default=NULL)),
    ]
    kind = text(hyp.get("comparison"), f"{where}.comparison", default="")
    if (kind and kind != "superiority") or hyp.get("margin") is not None:
        rows.append(("Type", kind or NULL))
        rows.append(("Margin", _margin_label(hyp.get("margin"), where)))
    rows.append(("Test used", used))
    if hyp.get("rule") is not None or planned != used:
        rows.append(("Planned test", planned))
    if hyp.get("rule") is not None:
        rows.append(("Switch", _rule_label(hyp["rule"], where)))
    if hyp.get("continuity") is True:
        rows.append(("Continuity correction", "yes"))
    heading = f"{hid} — {title}" if title else hid
    badge = ' <span class="prespec-exploratory">(exploratory)</span>' if is_exploratory(hyp) else ""
    parts = [f'<h3 class="prespec-hypothesis">{esc(heading)}{badge}</h3>', fields(rows)]
    if hyp.get("table") is not None:
        parts.append(count_table(hyp["table"], hyp.get("expected"), where))
    parts.append(fields(result_rows(hyp, where)))
    if is_exploratory(hyp):
        parts.append(
            "<p><em>Exploratory: the p-value is nominal, not adjusted for multiplicity, and "
            "no decision is drawn from it.</em></p>"
        )
    return '<div class="prespec-hyp">' + "".join(parts) + "</div>"


def count_table(raw: object, expected: object, where: str) -> str:
    """Events, non-events and total per group, with the expected counts beside them."""
    tab = mapping(raw, f"{where}.table")
    groups = items(tab.get("groups"), f"{where}.table.groups")
    events = items(tab.get("events"), f"{where}.table.events")
    totals = items(tab.get("totals"), f"{where}.table.totals")
    if not (len(groups) == len(events) == len(totals)):
        raise_type(f"{where}.table", "groups, events and totals of one length", dict(tab))
    exp = items(expected, f"{where}.expected")
    if exp and len(exp) != len(groups):
        raise_type(f"{where}.expected", f"{len(groups)} rows", expected)
    body = []
    for j, group in enumerate(groups):
        ev = number(events[j], f"{where}.table.events[{j}]")
        tot = number(totals[j], f"{where}.table.totals[{j}]")
        non = tot - ev if ev is not None and tot is not None else None
        e_ev, e_non = pair(exp[j], f"{where}.expected[{j}]") if exp else (None, None)
        body.append([
            text(group, f"{where}.table.groups[{j}]"),
            fmt_count(ev), fmt_count(non), fmt_count(tot),
            fmt_expected(e_ev), fmt_expected(e_non),
        ])
    head = ["Group", "Events", "Non-events", "Total", "Expected events", "Expected non-events"]
    return table(head, body, numeric=range(1, 6), cls="prespec-counts")


def result_rows(hyp: Mapping[str, Any], where: str) -> list[tuple[str, str]]:
    """The estimate with its interval, the statistic and df, the p-values and the decision."""
    rows: list[tuple[str, str]] = []
    if hyp.get("estimate") is not None:
        est = mapping(hyp["estimate"], f"{where}.estimate")
        measure = text(est.get("measure"), f"{where}.estimate.measure", default="estimate")
        low, high = pair(est.get("ci"), f"{where}.estimate.ci")
        level = number(est.get("level"), f"{where}.estimate.level")
        method = text(est.get("ci_method"), f"{where}.estimate.ci_method", default="")
        rows.append((f"Estimate ({measure})",
                     fmt_estimate(number(est.get("value"), f"{where}.estimate.value"))))
        label = " ".join(s for s in (fmt_level(level) if level is not None else "", method) if s)
        rows.append((f"Interval ({label})" if label else "Interval", fmt_interval(low, high)))
    statistic = fmt_statistic(number(hyp.get("statistic"), f"{where}.statistic"))
    df = number(hyp.get("df"), f"{where}.df")
    if df is not None:
        statistic += f" (df {fmt_count(df)})"
    rows.append(("Statistic", statistic))
    p = fmt_p(number(hyp.get("p_value"), f"{where}.p_value"))
    if is_exploratory(hyp):
        rows.append(("Nominal p-value (exploratory)", p))
    else:
        rows.append(("p-value", p))
        rows.append(("Adjusted p-value", fmt_p(number(hyp.get("p_adjusted"), f"{where}.p_adjusted"))))
        rows.append(("Decision", decision(hyp, where)))
    return rows


def forest_figure(results: Mapping[str, Any]) -> str | None:
    """The relative path of the forest plot, or None when no hypothesis has an estimate."""
    return DIFFERENCES if has_estimates(results) else None


def multiplicity_name(results: Mapping[str, Any]) -> str:
    """The multiplicity method's name (a mapping for ``graphical`` gives its ``method``)."""
    value = results.get("multiplicity")
    if isinstance(value, Mapping):
        return text(value.get("method"), "multiplicity.method", default=NULL)
    return text(value, "multiplicity", default=NULL)


def multiplicity(results: Mapping[str, Any]) -> str:
    """The multiplicity method and the raw against adjusted p-values."""
    out = ["<h2>Multiplicity</h2>"]
    rows = [("Method", multiplicity_name(results)), ("Alpha", _optional(results, "alpha"))]
    value = results.get("multiplicity")
    if isinstance(value, Mapping):
        rest = {k: v for k, v in value.items() if k != "method"}
        if rest:
            rows.append(("Settings", json.dumps(rest, sort_keys=True)))
    out.append(fields(rows))
    body = []
    for i, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{i}]")
        hid = text(hyp.get("id"), f"hypotheses[{i}].id")
        where = f"hypotheses.{hid}"
        p = fmt_p(number(hyp.get("p_value"), f"{where}.p_value"))
        if is_exploratory(hyp):
            body.append([hid, "exploratory", p, "not adjusted", "no decision"])
        else:
            body.append([
                hid,
                text(hyp.get("role"), f"{where}.role", default=NULL),
                p,
                fmt_p(number(hyp.get("p_adjusted"), f"{where}.p_adjusted")),
                decision(hyp, where),
            ])
    if body:
        head = ["Hypothesis", "Role", "p-value", "Adjusted p-value", "Decision"]
        out.append(table(head, body, numeric=(2, 3)))
    else:
        out.append("<p>No hypotheses were tested.</p>")
    return "".join(out)


def environment(results: Mapping[str, Any]) -> str:
    """The versions of Python and of the libraries the results were computed with."""
    out = "<h2>Environment</h2>"
    if results.get("environment") is None:
        return out + "<p>results.json gives no environment.</p>"
    env = mapping(results["environment"], "environment")
    keys = [k for k in ENVIRONMENT_ORDER if k in env] + sorted(
        k for k in env if k not in ENVIRONMENT_ORDER
    )
    return out + fields((k, text(env[k], f"environment.{k}", default=NULL)) for k in keys)
