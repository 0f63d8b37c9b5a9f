"""The report's sections as HTML, built from ``results.json`` and nothing else.

Each function takes the loaded results (or one part of them) and returns an HTML fragment that
the report notebook displays. Every string that comes from results.json passes through
:func:`esc`: titles, group names and details come from user plans and data, so they are shown
as text and never become markup. Every fragment starts with a tag, never with user text.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from typing import Any

from prespec.common.environment import KEYS
from prespec.report import adjusted, bayes, blinded, design
from prespec.report.estimand import estimand_block
from prespec.report.figures import (
    DIFFERENCES,
    MULTIPLICITY_GRAPH,
    has_estimates,
    has_graph,
    proportions_name,
)
from prespec.report.looks import looks_block
from prespec.report.markup import (
    BADGE_STYLE,
    CAUTION_STYLE,
    DEPARTURE_STYLE,
    DISAGREE_STYLE,
    FLAG_ROW_STYLE,
    FOLLOWUP_STYLE,
    OVERRIDE_STYLE,
    QUIET_STYLE,
    SOFT_ROW_STYLE,
    esc,
    fields,
    plural,
    table,
)
from prespec.report.sensitivity import Figure, sensitivity_block
from prespec.report.values import (
    DEFAULT_CAUTION,
    NULL,
    fmt_count,
    fmt_estimate,
    fmt_expected,
    fmt_interval,
    fmt_level,
    fmt_p,
    fmt_rate,
    fmt_statistic,
    fmt_thousands,
    fmt_weight,
    items,
    mapping,
    measure_label,
    number,
    pair,
    plain,
    text,
)

KINDS = {"run": "Analysis run", "rehearsal": "Blinded rehearsal"}
ENVIRONMENT_ORDER = KEYS  # Python, the operating system, the packages, the engines' libraries


def _engine(results: dict[str, Any]) -> str:
    """The engine's name, with the versions it counted with when the results name them."""
    name = _optional(results, "engine")
    library = results.get("engine_library")
    return f"{name} ({library})" if library else name


def _optional(results: Mapping[str, Any], key: str) -> str:
    value = results.get(key)
    if value is None:
        return NULL
    if isinstance(value, int | float | str) and not isinstance(value, bool):
        return str(value)
    return json.dumps(value, sort_keys=True)


def _files_read(results: Mapping[str, Any]) -> str:
    """The files a glob read, each with its SHA-256: ``a.csv (sha256:…); b.csv (…)``."""
    shown = []
    for i, raw in enumerate(items(results.get("data_files"), "data_files")):
        entry = mapping(raw, f"data_files[{i}]")
        shown.append(f"{text(entry.get('path'), f'data_files[{i}].path')} "
                     f"({text(entry.get('sha256'), f'data_files[{i}].sha256')})")
    return "; ".join(shown) or NULL


def kind_label(results: Mapping[str, Any]) -> str:
    """``Analysis run`` or ``Blinded rehearsal`` (another kind is shown as written)."""
    kind = text(results.get("kind"), "kind", default="")
    return KINDS.get(kind, kind or "kind not given")


def caution(results: Mapping[str, Any]) -> str:
    """The caution from results.json, in a box (a default one if results.json has none)."""
    words = text(results.get("caution"), "caution", default=DEFAULT_CAUTION).strip()
    return (
        f'<div class="prespec-caution" style="{CAUTION_STYLE}">'
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
            f'<div class="prespec-departures" style="{DEPARTURE_STYLE}">'
            f"<strong>{esc(count)}.</strong>"
            + table(["Code", "Detail", "Expected", "Found"], rows)
            + "</div>"
        )
    else:
        out.append(
            f'<div class="prespec-departures" style="{QUIET_STYLE}">'
            "No departures from the plan were recorded.</div>"
        )
    out.append(overrides(results))
    notes = []
    for i, raw in enumerate(items(results.get("notes"), "notes")):
        note = mapping(raw, f"notes[{i}]")
        notes.append([text(note.get(k), f"notes[{i}].{k}", default=NULL) for k in ("code", "detail")])
    out.append("<h3>Notes</h3>")
    out.append(table(["Code", "Detail"], notes) if notes else "<p>No notes were recorded.</p>")
    return "".join(out)


def override_rows(results: Mapping[str, Any], hid: str | None = None) -> list[list[str]]:
    """The command-line overrides as (setting, locked value, value used) rows.

    With ``hid``, only those that concern that hypothesis: its own keys
    (``hypotheses.<hid>.…``) and the keys that are not about one hypothesis (``alpha``).
    """
    rows = []
    for i, raw in enumerate(items(results.get("overrides"), "overrides")):
        over = mapping(raw, f"overrides[{i}]")
        key = text(over.get("key"), f"overrides[{i}].key", default=NULL)
        if hid is not None and key.startswith("hypotheses.") and not key.startswith(
            f"hypotheses.{hid}."
        ):
            continue
        rows.append([key, plain(over.get("locked")), plain(over.get("used"))])
    return rows


def overrides(results: Mapping[str, Any]) -> str:
    """The command-line overrides of the locked analysis in a highlighted box, or nothing."""
    rows = override_rows(results)
    if not rows:
        return ""
    count = f"{len(rows)} command-line override{'s' if len(rows) != 1 else ''}"
    return (
        f'<div class="prespec-overrides" style="{OVERRIDE_STYLE}">'
        f"<strong>{esc(count)} of the locked analysis.</strong> The command line replaced "
        "what the locked plan fixed in advance. The hypotheses these settings touch are marked "
        "“not pre-specified”: their results are not those of the pre-specified analysis."
        + table(["Setting", "Locked value", "Value used"], rows)
        + "</div>"
    )


def population(results: Mapping[str, Any]) -> str:
    """Rows read, left out by the population filter, left out for the group, analysed."""
    out = "<h2>Population</h2>"
    if results.get("population") is None:
        return out + "<p>results.json gives no population counts.</p>"
    pop = mapping(results["population"], "population")
    rehearsal = blinded.is_rehearsal(results)
    group_label = ("Left out for the group (the group column is not read in a rehearsal)"
                   if rehearsal else "Left out for a blank or unknown group")
    labels = [
        ("rows_read", "Rows read"),
        ("excluded_by_filter", "Left out by the population filter"),
        ("excluded_group", group_label),
        ("analysed", "Analysed"),
    ]
    rows = [(label, fmt_count(number(pop.get(key), f"population.{key}")))
            for key, label in labels]
    if rehearsal or results.get("planned_total") is not None:
        planned = number(results.get("planned_total"), "planned_total")
        rows.append(("Planned in total (sum of planned_n)",
                     "not planned" if planned is None else fmt_thousands(planned)))
        analysed = results.get("analysed_total")
        if analysed is not None:
            rows.append(("Analysed in total",
                         fmt_thousands(number(analysed, "analysed_total"))))
    from prespec.report.flow import flow_html

    return out + fields(rows) + data_labels(results) + flow_html(results)


def data_labels(results: Mapping[str, Any]) -> str:
    """The labels the data file declares for the columns read and the plan's values (a
    transport or dataset file's), or ``""``: matching used the stored values beside them."""
    if results.get("data_labels") is None:
        return ""
    rows = []
    for k, raw in enumerate(items(results["data_labels"], "data_labels")):
        at = f"data_labels[{k}]"
        entry = mapping(raw, at)
        values = [mapping(v, f"{at}.values[{j}]")
                  for j, v in enumerate(items(entry.get("values"), f"{at}.values"))]
        shown = "; ".join(f"{text(v.get('value'), f'{at}.value')} = "
                          f"{text(v.get('label'), f'{at}.label')}" for v in values)
        rows.append([text(entry.get("column"), f"{at}.column"),
                     blinded.role_words(text(entry.get("role"), f"{at}.role").split(", ")[0]),
                     text(entry.get("label"), f"{at}.label", default=NULL), shown or NULL])
    return ("<h3>Labels in the data file</h3><p>The plan matches the stored values; the labels "
            "the file declares for them are shown beside them.</p>"
            + table(["Column", "Used for", "Column label", "Plan values and their labels"],
                    rows, cls="prespec-data-labels"))


def outcomes(results: Mapping[str, Any]) -> list[tuple[str, str, str]]:
    """Per outcome: (name, HTML of its counts per group, relative path of its figure)."""
    groups = results.get("groups")
    if groups is None or blinded.is_rehearsal(results):  # a rehearsal shows no group
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


#: How a homogeneity test is named in its note line.
HOMOGENEITY_TESTS = {
    "breslow-day-tarone": "Breslow–Day test with Tarone's correction",
    "breslow-day": "Breslow–Day test",
}

GRAPHICAL_REFERENCE = (
    "Bretz et al. (Statistics in Medicine 2009), “A graphical approach to sequentially "
    "rejective multiple test procedures”"
)


def _compare_label(hyp: Mapping[str, Any], where: str) -> str:
    compare = hyp.get("compare")
    kind = text(hyp.get("kind"), f"{where}.kind", default="")
    if compare is None and kind:
        compare = kind
    if isinstance(compare, str):
        return {"all": "all groups", "trend": "trend across groups"}.get(compare, compare)
    groups = [text(g, f"{where}.compare") for g in items(compare, f"{where}.compare")]
    if len(groups) == 2:
        return f"{groups[0]} vs {groups[1]}"
    if len(groups) == 1:
        rate = number(hyp.get("null_rate"), f"{where}.null_rate")
        if rate is not None:
            return f"{groups[0]} against the fixed rate {fmt_rate(rate)}"
        return f"{groups[0]} against a fixed rate"
    return ", ".join(groups) or NULL


def _measure_of(hyp: Mapping[str, Any], where: str) -> str:
    if hyp.get("estimate") is None:
        return ""
    est = mapping(hyp["estimate"], f"{where}.estimate")
    return text(est.get("measure"), f"{where}.estimate.measure", default="")


def _margin_label(hyp: Mapping[str, Any], where: str) -> str:
    margin = hyp.get("margin")
    if margin is None:
        return NULL
    if isinstance(margin, list):
        low, high = pair(margin, f"{where}.margin")
        shown = f"{fmt_estimate(low)} to {fmt_estimate(high)}"
    else:
        shown = fmt_estimate(number(margin, f"{where}.margin"))
    measure = _measure_of(hyp, where)
    return f"{shown} ({measure_label(measure)})" if measure else shown


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


def is_prespecified(hyp: Mapping[str, Any], where: str) -> bool:
    """False only when results.json says ``pre_specified: false`` (an override)."""
    value = hyp.get("pre_specified")
    if value is None:
        return True
    if not isinstance(value, bool):
        raise_type(f"{where}.pre_specified", "true, false or null", value)
    return bool(value)


def gate(hyp: Mapping[str, Any], where: str) -> str:
    """A follow-up comparison's gate, ``open`` or ``closed``; ``""`` for any other hypothesis."""
    return text(hyp.get("gate"), f"{where}.gate", default="")


def decision(hyp: Mapping[str, Any], where: str) -> str:
    """``reject H0``, ``do not reject H0``, or ``—`` when results.json gives none.

    A follow-up comparison behind a closed gate was not tested, and says so; a Bayesian
    hypothesis shows ``rule met`` or ``rule not met``.
    """
    reject = hyp.get("reject")
    if reject is not None and not isinstance(reject, bool):
        raise_type(f"{where}.reject", "true, false or null", reject)
    if gate(hyp, where) == "closed":
        return "not tested (gate closed)"
    if bayes.is_bayesian(hyp):  # the plan's rule on a posterior probability, not a test
        return bayes.decision_words(hyp, where)
    if reject is None:
        return NULL
    return "reject H0" if reject else "do not reject H0"


def raise_type(path: str, expected: str, found: object) -> None:
    """Raise the report's one-line error for a value of the wrong type."""
    from prespec.errors import PrespecError

    raise PrespecError(f"results.json: {path}: expected {expected}, found {found!r}")


def _ordered(results: Mapping[str, Any]) -> list[tuple[Mapping[str, Any], str, list[Any]]]:
    """The hypotheses in results.json order, each follow-up comparison moved under its parent.

    Returns (hypothesis, position, follow-ups) for each hypothesis without a parent, and one
    entry for each group of follow-ups whose parent is not in results.json (as a parent-less
    group at the end). A follow-up is a (hypothesis, position) pair.
    """
    raws = items(results.get("hypotheses"), "hypotheses")
    hyps = [(mapping(raw, f"hypotheses[{i}]"), f"hypotheses[{i}]") for i, raw in enumerate(raws)]
    ids = {text(h.get("id"), f"{pos}.id") for h, pos in hyps}
    children: dict[str, list[Any]] = {}
    for h, pos in hyps:
        parent = h.get("parent")
        if parent is not None:
            children.setdefault(text(parent, f"{pos}.parent"), []).append((h, pos))
    out: list[tuple[Mapping[str, Any], str, list[Any]]] = []
    for h, pos in hyps:
        if h.get("parent") is None:
            out.append((h, pos, children.get(text(h.get("id"), f"{pos}.id"), [])))
    for parent, kids in children.items():
        if parent not in ids:
            out.append(({"id": parent, "_missing": True}, "", kids))
    return out


def hypotheses(results: Mapping[str, Any]) -> list[str]:
    """Each hypothesis as an HTML fragment, its follow-up comparisons grouped after it."""
    return [html for html, _ in hypothesis_blocks(results)]


def hypothesis_blocks(results: Mapping[str, Any]) -> list[tuple[str, list[Figure]]]:
    """Each hypothesis (or group of follow-ups) as HTML, with the figures to show after it.

    A blinded rehearsal gives one block: the table of the hypotheses it rehearsed.
    """
    if blinded.is_rehearsal(results):
        rehearsed = rehearsal_hypotheses(results)
        return [(rehearsed, [])] if rehearsed else []
    out: list[tuple[str, list[Figure]]] = []
    for hyp, position, kids in _ordered(results):
        if not hyp.get("_missing"):
            out.append(hypothesis_parts(hyp, position, results=results))
        if kids:
            out.append(followup_parts(hyp, kids, results))
    return out


def hypotheses_heading(results: Mapping[str, Any]) -> str:
    """The heading of the hypotheses section, or a line saying there are none."""
    if blinded.is_rehearsal(results):
        if items(results.get("hypotheses"), "hypotheses"):
            return "<h2>Hypotheses rehearsed</h2>"
        return "<h2>Hypotheses rehearsed</h2><p>results.json holds no tested hypotheses.</p>"
    if items(results.get("hypotheses"), "hypotheses"):
        return "<h2>Hypotheses</h2>"
    if results.get("families"):
        return ("<h2>Hypotheses</h2><p>The plan has no hypotheses besides its families "
                "(reported in their own section).</p>")
    return "<h2>Hypotheses</h2><p>results.json holds no tested hypotheses.</p>"


def _executed(hyp: Mapping[str, Any], where: str) -> bool | None:
    value = hyp.get("executed")
    if value is not None and not isinstance(value, bool):
        raise_type(f"{where}.executed", "true, false or null", value)
    return value


def rehearsal_hypotheses(results: Mapping[str, Any]) -> str:
    """A rehearsal's hypotheses: what each compares and whether its steps executed.

    No statistic, p-value or estimate is shown, whatever results.json holds.
    """
    body: list[list[str]] = []
    marks: dict[int, str] = {}
    failed: list[str] = []
    for n, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{n}]")
        hid = text(hyp.get("id"), f"hypotheses[{n}].id")
        where = f"hypotheses.{hid}"
        executed = _executed(hyp, where)
        problem = text(hyp.get("problem"), f"{where}.problem", default="")
        if executed is False:
            marks[len(body)] = FLAG_ROW_STYLE
            failed.append(hid)
        title = text(hyp.get("title"), f"{where}.title", default=NULL)
        if hyp.get("parent") is not None:
            title += f" (follow-up of {text(hyp['parent'], f'{where}.parent')})"
        body.append([
            hid,
            title,
            text(hyp.get("role"), f"{where}.role", default=NULL),
            text(hyp.get("outcome"), f"{where}.outcome", default=NULL),
            _compare_label(hyp, where),
            text(hyp.get("test"), f"{where}.test", default=NULL),
            NULL if executed is None else ("yes" if executed else "no"),
            problem or NULL,
        ])
    if not body:
        return ""
    done = len(body) - len(failed)
    summary = (f"{done} of {plural(len(body), 'hypothesis', 'hypotheses')} executed every step "
               "on the pooled data. A rehearsal computes no statistic, p-value or estimate.")
    out = [f"<p>{esc(summary)}</p>"]
    if failed:
        words = (f"Did not execute: {', '.join(failed)}. Each problem is named in the table; "
                 "it would stop or change the run in the same way.")
        out.append(f'<div class="prespec-not-executed" style="{DEPARTURE_STYLE}">'
                   f"{esc(words)}</div>")
    out.append(table(["Hypothesis", "Title", "Role", "Outcome", "Comparison", "Test",
                      "Executed", "Problem"], body, cls="prespec-rehearsed", row_styles=marks))
    return "".join(out)


def _families(kids: Sequence[tuple[Mapping[str, Any], str]]) -> str:
    names = list(dict.fromkeys(
        text(h.get("family"), f"{pos}.family", default="") for h, pos in kids
    ))
    names = [n for n in names if n]
    if not names:
        return "their own family"
    quoted = ", ".join(f"“{n}”" for n in names)
    return f"the family {quoted}" if len(names) == 1 else f"the families {quoted}"


def gate_sentence(parent: str, kids: Sequence[tuple[Mapping[str, Any], str]]) -> str:
    """The sentence that explains the gatekeeping of one parent's follow-up comparisons."""
    gates = {gate(h, f"{pos}.gate") for h, pos in kids}
    rule = (
        "This is gatekeeping, fixed in the plan: the follow-up comparisons are tested only "
        f"when the test of {parent} is rejected after its own multiplicity adjustment, so that "
        "the chance of any false rejection stays within alpha."
    )
    if gates == {"open"}:
        return (
            f"{parent} was rejected, so its follow-up comparisons below were tested. {rule} "
            f"Their p-values are adjusted within {_families(kids)}."
        )
    if gates == {"closed"}:
        return (
            f"{parent} was not rejected, so its follow-up comparisons below were not tested. "
            f"{rule} Their p-values are shown for information only: nominal, with no adjusted "
            "p-value, and none of them is rejected."
        )
    return f"{rule} Each follow-up comparison below shows its own gate."


def followups(
    parent: Mapping[str, Any],
    kids: Sequence[tuple[Mapping[str, Any], str]],
    results: Mapping[str, Any] | None = None,
) -> str:
    """One parent's follow-up comparisons, with the sentence that explains their gate."""
    return followup_parts(parent, kids, results)[0]


def followup_parts(
    parent: Mapping[str, Any],
    kids: Sequence[tuple[Mapping[str, Any], str]],
    results: Mapping[str, Any] | None = None,
) -> tuple[str, list[Figure]]:
    """:func:`followups`, with the figures of the follow-ups' sensitivity analyses."""
    pid = text(parent.get("id"), "hypotheses.parent", default=NULL)
    missing = " (not in results.json)" if parent.get("_missing") else ""
    parts = [
        (f'<h3 class="prespec-followups-title">Follow-up comparisons of {esc(pid)}'
         f"{esc(missing)}</h3>"),
        f'<p class="prespec-gate">{esc(gate_sentence(pid, kids))}</p>',
    ]
    figures: list[Figure] = []
    for h, pos in kids:
        html, drawn = hypothesis_parts(h, pos, results=results, level=4)
        parts.append(html)
        figures += drawn
    html = f'<div class="prespec-followups" style="{FOLLOWUP_STYLE}">' + "".join(parts) + "</div>"
    return html, figures


def _definition_rows(
    hyp: Mapping[str, Any], where: str, method: str = NULL
) -> list[tuple[str, str]]:
    used = text(hyp.get("test"), f"{where}.test", default=NULL)
    planned = text(hyp.get("planned_test"), f"{where}.planned_test", default=used)
    rows = [
        ("Role", text(hyp.get("role"), f"{where}.role", default=NULL)),
        ("Outcome", text(hyp.get("outcome"), f"{where}.outcome", default=NULL)),
        ("Comparison", _compare_label(hyp, where)),
    ]
    rate = number(hyp.get("null_rate"), f"{where}.null_rate")
    if rate is not None and bayes.is_bayesian(hyp):  # a rule on a posterior, not a test of H0
        rows.append(("Rate compared with", fmt_rate(rate)))
    elif rate is not None:
        rows.append(("Null hypothesis", f"H0: p = {fmt_rate(rate)}"))
    rows.append(("Alternative", text(hyp.get("alternative"), f"{where}.alternative", default=NULL)))
    kind = text(hyp.get("comparison"), f"{where}.comparison", default="")
    if (kind and kind != "superiority") or hyp.get("margin") is not None:
        rows.append(("Type", kind or NULL))
        rows.append(("Margin", _margin_label(hyp, where)))
    strata = items(hyp.get("strata"), f"{where}.strata")
    if strata:
        rows.append(("Strata", ", ".join(text(s, f"{where}.strata") for s in strata)))
    rows.append(("Test used", used))
    if hyp.get("rule") is not None or planned != used:
        rows.append(("Planned test", planned))
    if hyp.get("rule") is not None:
        rows.append(("Switch", _rule_label(hyp["rule"], where)))
    if hyp.get("continuity") is True:
        rows.append(("Continuity correction", "yes"))
    if hyp.get("parent") is not None:
        parent = text(hyp.get("parent"), f"{where}.parent")
        rows.append(("Follow-up of", parent))
        shown = {
            "open": f"open: tested because {parent} was rejected",
            "closed": f"closed: not tested because {parent} was not rejected",
        }
        g = gate(hyp, where)
        rows.append(("Gate", shown.get(g, g or NULL)))
    if hyp.get("family") is not None:
        rows.append(("Multiplicity family", _family_label(hyp, where, method)))
    if not is_prespecified(hyp, where):
        rows.append(("Pre-specified", "no: overridden on the command line"))
    return rows


def hypothesis(
    hyp: Mapping[str, Any],
    position: str,
    *,
    results: Mapping[str, Any] | None = None,
    level: int = 3,
) -> str:
    """One hypothesis: its definition, its estimand, its count tables, its estimate and its
    test, then its sensitivity analyses.

    ``results`` (the whole file) supplies the overrides that concern the hypothesis.
    """
    return hypothesis_parts(hyp, position, results=results, level=level)[0]


def hypothesis_parts(
    hyp: Mapping[str, Any],
    position: str,
    *,
    results: Mapping[str, Any] | None = None,
    level: int = 3,
) -> tuple[str, list[Figure]]:
    """:func:`hypothesis`, with the figures its sensitivity analyses show after it."""
    hid = text(hyp.get("id"), f"{position}.id")
    where = f"hypotheses.{hid}"
    title = text(hyp.get("title"), f"{where}.title", default="")
    heading = f"{hid} — {title}" if title else hid
    badges = ""
    if not is_prespecified(hyp, where):
        badges += (f' <span class="prespec-badge-override" style="{BADGE_STYLE}">'
                   "not pre-specified</span>")
    if is_exploratory(hyp):
        badges += ' <span class="prespec-exploratory">(exploratory)</span>'
    h = f"h{level}"
    parts = [f'<{h} class="prespec-hypothesis">{esc(heading)}{badges}</{h}>']
    if not is_prespecified(hyp, where):
        parts.append(_not_prespecified_box(hyp, hid, results or {}))
    method = multiplicity_name(results) if results is not None else NULL
    parts.append(adjusted.fallback_box(hyp, where))  # a failed working model: said first
    # The body is a grid on the page (the stylesheet of render.py): the definition and the
    # estimand on the left, the result beside them on the right, the rest across the width;
    # in the notebook, and on a narrow page, the parts follow each other in this order.
    body = [_part("definition", fields(_definition_rows(hyp, where, method))),
            _part("estimand", estimand_block(hyp, where))]  # in words, before the result
    if hyp.get("table") is not None:
        body.append(_part("wide", count_table(hyp["table"], hyp.get("expected"), where,
                                              hyp.get("scores"))))
    if hyp.get("strata_tables") is not None:
        body.append(_part("wide", strata_tables(hyp, where)))
    body.append(_part("wide", adjusted.inputs_block(hyp, where)))  # covariates, units, risks
    body.append(_part("wide", bayes.inputs_block(hyp, where)))  # priors and posteriors
    body.append(_part("result", fields(result_rows(hyp, where))))
    parts.append('<div class="prespec-hyp-body">' + "".join(body) + "</div>")
    bayes_html, bayes_figures = bayes.after_block(hyp, where)
    parts.append(bayes_html)
    parts += [p for p in (adjusted.variance_line(hyp, where), adjusted.model_block(hyp, where),
                          _disagreement(hyp, where), monte_carlo_line(hyp, where),
                          homogeneity_line(hyp, where)) if p]
    if is_exploratory(hyp) and bayes.is_bayesian(hyp):
        parts.append("<p><em>Exploratory: the rule's outcome is shown, and no decision is "
                     "drawn from it.</em></p>")
    elif is_exploratory(hyp):
        parts.append(
            "<p><em>Exploratory: the p-value is nominal, not adjusted for multiplicity, and "
            "no decision is drawn from it.</em></p>"
        )
    extra, figures = sensitivity_block(hyp, where)  # beside the primary result, after it
    parts.append(extra)
    looks_html, looks_figures = looks_block(hyp, where)
    parts.append(looks_html)
    figures = [*bayes_figures, *looks_figures, *figures]
    anchor = _position_anchor(position)
    ident = f' id="{esc(anchor)}"' if anchor else ""
    return f'<div class="prespec-hyp"{ident}>' + "".join(parts) + "</div>", figures


def _part(kind: str, html: str) -> str:
    """One part of a hypothesis's body, placed by the stylesheet (``definition``,
    ``estimand``, ``result`` or ``wide``); nothing for an empty part."""
    return f'<div class="prespec-part-{kind}">{html}</div>' if html else ""


def _position_anchor(position: str) -> str:
    """``hypothesis-3`` for ``hypotheses[3]``: the contents link to it; ``""`` otherwise."""
    import re

    found = re.fullmatch(r"hypotheses\[(\d+)\]", position)
    return f"hypothesis-{found.group(1)}" if found else ""


def _not_prespecified_box(hyp: Mapping[str, Any], hid: str, results: Mapping[str, Any]) -> str:
    rows = override_rows(results, hid)
    listing = table(["Setting", "Locked value", "Value used"], rows) if rows else ""
    return (
        f'<div class="prespec-not-prespecified" style="{OVERRIDE_STYLE}">'
        "<strong>Not pre-specified.</strong> The command line overrode the locked analysis "
        "for this hypothesis, so this result is not the one the plan fixed in advance."
        f"{listing}</div>"
    )


def count_table(raw: object, expected: object, where: str, scores: object = None) -> str:
    """Events, non-events and total per group, with the expected counts beside them if given.

    With ``scores`` (a trend test), each group's score stands beside its name.
    """
    tab = mapping(raw, f"{where}.table")
    groups = items(tab.get("groups"), f"{where}.table.groups")
    events = items(tab.get("events"), f"{where}.table.events")
    totals = items(tab.get("totals"), f"{where}.table.totals")
    if not (len(groups) == len(events) == len(totals)):
        raise_type(f"{where}.table", "groups, events and totals of one length", dict(tab))
    exp = items(expected, f"{where}.expected")
    if exp and len(exp) != len(groups):
        raise_type(f"{where}.expected", f"{len(groups)} rows", expected)
    score_list = items(scores, f"{where}.scores")
    if score_list and len(score_list) != len(groups):
        raise_type(f"{where}.scores", f"{len(groups)} numbers", scores)
    body = []
    for j, group in enumerate(groups):
        ev = number(events[j], f"{where}.table.events[{j}]")
        tot = number(totals[j], f"{where}.table.totals[{j}]")
        non = tot - ev if ev is not None and tot is not None else None
        row = [text(group, f"{where}.table.groups[{j}]")]
        if score_list:
            row.append(fmt_weight(number(score_list[j], f"{where}.scores[{j}]")))
        row += [fmt_count(ev), fmt_count(non), fmt_count(tot)]
        if exp:
            e_ev, e_non = pair(exp[j], f"{where}.expected[{j}]")
            row += [fmt_expected(e_ev), fmt_expected(e_non)]
        body.append(row)
    head = ["Group", "Events", "Non-events", "Total"]
    if exp:  # expected counts under H0, when results.json gives them
        head += ["Expected events", "Expected non-events"]
    if score_list:
        head.insert(1, "Score")
    return table(head, body, numeric=range(1, len(head)), cls="prespec-counts")


def _stratum_label(raw: object, where: str) -> str:
    stratum = mapping(raw, where)
    return ", ".join(f"{k} = {plain(v)}" for k, v in stratum.items()) or NULL


def strata_tables(hyp: Mapping[str, Any], where: str) -> str:
    """One small table of events, non-events and total per group for each stratum; for a
    stratified-score test, each with its weight and the weighting named in words."""
    groups = items(mapping(hyp.get("table") or {}, f"{where}.table").get("groups"),
                   f"{where}.table.groups")
    weights = adjusted.stratum_weights(hyp, where)  # a stratified-score test's weights
    out = ['<div class="prespec-strata">']
    if weights is not None:
        out.append(adjusted.weighting_line(hyp, where))
    out.append("<p>Counts in each stratum:</p>")
    for i, raw in enumerate(items(hyp.get("strata_tables"), f"{where}.strata_tables")):
        at = f"{where}.strata_tables[{i}]"
        entry = mapping(raw, at)
        events = items(entry.get("events"), f"{at}.events")
        totals = items(entry.get("totals"), f"{at}.totals")
        if not (len(groups) == len(events) == len(totals)):
            raise_type(at, f"events and totals for the {len(groups)} groups of the table",
                       dict(entry))
        body = []
        for j, group in enumerate(groups):
            ev = number(events[j], f"{at}.events[{j}]")
            tot = number(totals[j], f"{at}.totals[{j}]")
            non = tot - ev if ev is not None and tot is not None else None
            body.append([text(group, f"{where}.table.groups[{j}]"),
                         fmt_count(ev), fmt_count(non), fmt_count(tot)])
        label = _stratum_label(entry.get("stratum") or {}, f"{at}.stratum")
        if weights is not None:
            label += adjusted.weight_caption(weights[i])
        out.append(table(["Group", "Events", "Non-events", "Total"], body, numeric=(1, 2, 3),
                         cls="prespec-stratum", caption=f"Stratum: {label}"))
    out.append("</div>")
    return "".join(out)


def homogeneity_line(hyp: Mapping[str, Any], where: str) -> str:
    """The note line of a homogeneity test across strata, or ``""``.

    The test itself (Breslow and Day 1980, with the correction of Tarone 1985) is computed by
    the statistics room; the report shows its statistic, df and p-value.
    """
    if hyp.get("homogeneity") is None:
        return ""
    at = f"{where}.homogeneity"
    hom = mapping(hyp["homogeneity"], at)
    name = text(hom.get("test"), f"{at}.test", default="homogeneity test")
    statistic = fmt_statistic(number(hom.get("statistic"), f"{at}.statistic"))
    df = number(hom.get("df"), f"{at}.df")
    if df is not None:
        statistic += f" (df {fmt_count(df)})"
    p = fmt_p(number(hom.get("p_value"), f"{at}.p_value"))
    line = (
        f"{HOMOGENEITY_TESTS.get(name, name)}: statistic {statistic}, p-value {p}. "
        "It asks whether the odds ratio is the same in every stratum; it is a note and does "
        "not enter the decision."
    )
    return f'<p class="prespec-homogeneity">{esc(line)}</p>'


def monte_carlo_line(hyp: Mapping[str, Any], where: str) -> str:
    """``Monte Carlo p-value from 100,000 tables (seed 1), standard error 0.0012.``, or ``""``."""
    if hyp.get("monte_carlo") is None:
        return ""
    at = f"{where}.monte_carlo"
    mc = mapping(hyp["monte_carlo"], at)
    tables = fmt_thousands(number(mc.get("tables"), f"{at}.tables"))
    seed = plain(mc.get("seed"))
    se = number(mc.get("standard_error"), f"{at}.standard_error")
    line = (
        f"Monte Carlo p-value from {tables} tables (seed {seed}), standard error "
        f"{NULL if se is None else f'{se:.2g}'}."
    )
    return f'<p class="prespec-monte-carlo">{esc(line)}</p>'


def _margin_check(hyp: Mapping[str, Any], where: str) -> tuple[bool | None, bool | None]:
    if hyp.get("margin_check") is None:
        return (None, None)
    at = f"{where}.margin_check"
    check = mapping(hyp["margin_check"], at)
    out: list[bool | None] = []
    for key in ("interval_excludes_margin", "agrees_with_test"):
        value = check.get(key)
        if value is not None and not isinstance(value, bool):
            raise_type(f"{at}.{key}", "true, false or null", value)
        out.append(value)
    return (out[0], out[1])


def _interval_words(hyp: Mapping[str, Any], where: str) -> str:
    if hyp.get("estimate") is None:
        return "the interval"
    est = mapping(hyp["estimate"], f"{where}.estimate")
    level = number(est.get("level"), f"{where}.estimate.level")
    low, high = pair(est.get("ci"), f"{where}.estimate.ci")
    lead = f"the {fmt_level(level)} interval" if level is not None else "the interval"
    return f"{lead} {fmt_interval(low, high)}"


def margin_sentence(hyp: Mapping[str, Any], where: str) -> str:
    """Where the interval lies against the margin, as results.json's margin check says."""
    excludes, _ = _margin_check(hyp, where)
    if excludes is None:
        return NULL
    interval = _interval_words(hyp, where)
    margin = _margin_label(hyp, where)
    if isinstance(hyp.get("margin"), list):
        side = "lies inside" if excludes else "does not lie inside"
        return f"{interval} {side} the margins {margin}"
    side = "excludes" if excludes else "does not exclude"
    return f"{interval} {side} the margin {margin}"


def _disagreement(hyp: Mapping[str, Any], where: str) -> str:
    excludes, agrees = _margin_check(hyp, where)
    if agrees is not False:
        return ""
    if excludes is None:
        sides = "the interval and the test point to different conclusions"
    elif excludes:
        sides = "the interval excludes the margin, but the test does not reject H0"
    else:
        sides = "the interval does not exclude the margin, but the test rejects H0"
    words = (
        f"Here the interval and the test disagree: {sides}. This can happen "
        "because the two are built from different statistics: the interval's method and the "
        "test's statistic estimate the variance differently (a score test, for one, takes it "
        "under the margin), and the p-value may be adjusted for multiplicity while the interval "
        "never is. Close to the margin they can then fall on different sides. The decision "
        "shown is the test's."
    )
    return (
        f'<div class="prespec-disagree" style="{DISAGREE_STYLE}">'
        f"<strong>The test decides.</strong> {esc(words)}</div>"
    )


def _no_estimate(hyp: Mapping[str, Any], where: str) -> str | None:
    kind = text(hyp.get("kind"), f"{where}.kind", default="")
    compare = hyp.get("compare")
    kind = kind or (compare if isinstance(compare, str) else "")
    if kind == "all":
        return "none: a test across all groups has no single estimate"
    if kind == "trend":
        return "none: a trend test has no single estimate"
    return None


def result_rows(hyp: Mapping[str, Any], where: str) -> list[tuple[str, str]]:
    """The estimate with its interval, the statistic and df, the p-values and the decision
    (for a Bayesian hypothesis: the posterior probability, the threshold and the rule)."""
    if bayes.is_bayesian(hyp):
        return bayes.result_rows(hyp, where)
    rows: list[tuple[str, str]] = []
    if hyp.get("estimate") is not None:
        est = mapping(hyp["estimate"], f"{where}.estimate")
        measure = text(est.get("measure"), f"{where}.estimate.measure", default="estimate")
        low, high = pair(est.get("ci"), f"{where}.estimate.ci")
        level = number(est.get("level"), f"{where}.estimate.level")
        method = text(est.get("ci_method"), f"{where}.estimate.ci_method", default="")
        rows.append((f"Estimate ({measure_label(measure)})",
                     fmt_estimate(number(est.get("value"), f"{where}.estimate.value"))))
        label = " ".join(s for s in (fmt_level(level) if level is not None else "", method) if s)
        rows.append((f"Interval ({label})" if label else "Interval", fmt_interval(low, high)))
        if est.get("note") is not None:
            rows.append(("Estimate note", text(est.get("note"), f"{where}.estimate.note")))
    elif (none := _no_estimate(hyp, where)) is not None:
        rows.append(("Estimate", none))
    if hyp.get("margin_check") is not None:
        rows.append(("Interval against the margin", margin_sentence(hyp, where)))
        _, agrees = _margin_check(hyp, where)
        if agrees is not None:
            rows.append(("Interval and test", "agree" if agrees else "disagree: the test decides"))
    rows.append(statistic_row(hyp, where))
    p = fmt_p(number(hyp.get("p_value"), f"{where}.p_value"))
    if is_exploratory(hyp):
        rows.append(("Nominal p-value (exploratory)", p))
    elif gate(hyp, where) == "closed":
        rows.append(("Nominal p-value (not tested)", p))
        rows.append(("Adjusted p-value", NULL))
        rows.append(("Decision", decision(hyp, where)))
    else:
        rows.append(("p-value", p))
        rows.append(("Adjusted p-value", fmt_p(number(hyp.get("p_adjusted"), f"{where}.p_adjusted"))))
        rows.append(("Decision", decision(hyp, where)))
    return rows


#: What each test's statistic is, as the row's label names it (docs/files.md, ``statistic``).
STATISTIC_NAMES = {
    "two-proportion-z": "z",
    "one-proportion-z": "z",
    "farrington-manning": "z, score test under the margin",
    "cochran-armitage-trend": "z, trend",
    "stratified-score": "z",
    "g-computation": "z",
    "pearson-chi-square": "chi-square",
    "likelihood-ratio": "G², likelihood-ratio chi-square",
    "cochran-mantel-haenszel": "Cochran–Mantel–Haenszel chi-square",
    "barnard-exact": "Wald z that orders the tables",
    "boschloo-exact": "Fisher's exact p-value that orders the tables",
}
#: Exact tests that have no statistic of their own: the p-value sums table probabilities.
NO_STATISTIC = {"fisher-exact": "none: an exact test sums the probabilities of the tables",
                "binomial-exact": "none: an exact test sums the probabilities of the counts"}


def statistic_row(hyp: Mapping[str, Any], where: str) -> tuple[str, str]:
    """The statistic with what it is in the label: ``Statistic (z)``, ``Statistic
    (chi-square)`` with its df beside the value, ``Statistic`` = ``none: …`` for an exact
    test that has none."""
    test = text(hyp.get("test"), f"{where}.test", default="")
    value = number(hyp.get("statistic"), f"{where}.statistic")
    df = number(hyp.get("df"), f"{where}.df")
    if value is None and test in NO_STATISTIC:
        return ("Statistic", NO_STATISTIC[test])
    shown = fmt_statistic(value)
    if df is not None:
        shown += f" (df {fmt_count(df)})"
    name = STATISTIC_NAMES.get(test)
    if name is None:
        return (adjusted.statistic_label(hyp, where), shown)
    return (f"Statistic ({name})", shown)


def forest_figure(results: Mapping[str, Any]) -> str | None:
    """The relative path of the forest plot, or None when no hypothesis has an estimate."""
    if blinded.is_rehearsal(results):
        return None
    return DIFFERENCES if has_estimates(results) else None


def multiplicity_figure(results: Mapping[str, Any]) -> str | None:
    """The relative path of the graph of the graphical procedure, or None without one."""
    return MULTIPLICITY_GRAPH if has_graph(results) else None


def multiplicity_name(results: Mapping[str, Any]) -> str:
    """The multiplicity method's name (a mapping for ``graphical`` gives its ``method``)."""
    value = results.get("multiplicity")
    if isinstance(value, Mapping):
        return text(value.get("method"), "multiplicity.method", default=NULL)
    return text(value, "multiplicity", default=NULL)


def _graph_parts(value: Mapping[str, Any]) -> list[str]:
    weights = mapping(value.get("weights") or {}, "multiplicity.weights")
    out = [
        f'<p class="prespec-graphical">{esc(_GRAPH_SENTENCE)}</p>',
    ]
    if weights:
        rows = [[text(k, "multiplicity.weights"),
                 fmt_weight(number(w, f"multiplicity.weights.{k}"))] for k, w in weights.items()]
        out.append(table(["Hypothesis", "Initial weight"], rows, numeric=(1,),
                         cls="prespec-weights", caption="Initial weights"))
    transitions = mapping(value.get("transitions") or {}, "multiplicity.transitions")
    rows = []
    for source, targets in transitions.items():
        at = f"multiplicity.transitions.{source}"
        for target, w in mapping(targets, at).items():
            rows.append([str(source), str(target), fmt_weight(number(w, f"{at}.{target}"))])
    if rows:
        out.append(table(["From", "To", "Transition weight"], rows, numeric=(2,),
                         cls="prespec-transitions", caption="Transitions"))
    else:
        out.append("<p>No transitions: the alpha of a rejected hypothesis is not passed on.</p>")
    return out


_GRAPH_SENTENCE = (
    f"The graphical procedure of {GRAPHICAL_REFERENCE}: each hypothesis starts with its initial "
    "weight times alpha; when a hypothesis is rejected, its share of alpha passes to the others "
    "along the arrows, in proportion to the transition weights, and the graph is updated. The "
    "figure at the end of this section draws the graph as the plan fixed it."
)


def _family_label(hyp: Mapping[str, Any], where: str, method: str) -> str:
    """The family a hypothesis is adjusted within; the main family names the plan's method."""
    if hyp.get("family") is not None:
        family = text(hyp.get("family"), f"{where}.family")
        return f"main ({method})" if family == "main" else family
    if bayes.is_bayesian(hyp):
        return "none (Bayesian rule)"
    if is_exploratory(hyp):
        return "none (exploratory)"
    return f"main ({method})"


def multiplicity(results: Mapping[str, Any]) -> str:
    """The multiplicity method and the raw against adjusted p-values, by family."""
    out = ["<h2>Multiplicity</h2>"]
    method = multiplicity_name(results)
    rows = [("Method", method), ("Alpha", _optional(results, "alpha"))]
    value = results.get("multiplicity")
    graph: list[str] = []
    if isinstance(value, Mapping):
        known = {"method", "weights", "transitions"} if method == "graphical" else {"method"}
        rest = {k: v for k, v in value.items() if k not in known}
        if rest:
            rows.append(("Settings", json.dumps(rest, sort_keys=True, ensure_ascii=False)))
        if method == "graphical":
            graph = _graph_parts(value)
    out.append(fields(rows))
    out += graph
    if blinded.is_rehearsal(results):
        out.append("<p>A rehearsal tests nothing: the procedure is applied to the p-values of "
                   "the run.</p>")
        return "".join(out)
    flat = [(h, pos) for h, pos, kids in _ordered(results) if not h.get("_missing")
            for h, pos in [(h, pos), *kids]]
    flat += [k for h, _, kids in _ordered(results) if h.get("_missing") for k in kids]
    with_family = any(h.get("family") is not None for h, _ in flat)
    body = []
    rules: list[str] = []
    for hyp, pos in flat:
        hid = text(hyp.get("id"), f"{pos}.id")
        where = f"hypotheses.{hid}"
        p = fmt_p(number(hyp.get("p_value"), f"{where}.p_value"))
        role = text(hyp.get("role"), f"{where}.role", default=NULL)
        if not is_prespecified(hyp, where):
            role += ", not pre-specified"
        family = [_family_label(hyp, where, method)] if with_family else []
        if bayes.is_bayesian(hyp):
            shown = decision(hyp, where)
            if is_exploratory(hyp):
                shown = f"no decision ({shown}, exploratory)"
            body.append([hid, role, *family, NULL, "not adjusted (Bayesian rule)", shown])
            rules.append(hid)
        elif is_exploratory(hyp):
            body.append([hid, role, *family, p, "not adjusted", "no decision"])
        else:
            adjusted = NULL if gate(hyp, where) == "closed" else fmt_p(
                number(hyp.get("p_adjusted"), f"{where}.p_adjusted"))
            body.append([hid, role, *family, p, adjusted, decision(hyp, where)])
    if body:
        head = ["Hypothesis", "Role", *(["Family"] if with_family else []), "p-value",
                "Adjusted p-value", "Decision"]
        first = 3 if with_family else 2
        out.append(table(head, body, numeric=(first, first + 1)))
        if with_family:
            out.append(
                "<p>Adjusted p-values are adjusted within their family: the main family by the "
                "plan's method, each family of follow-up comparisons by its own.</p>"
            )
        if rules:
            words = (f"{', '.join(rules)}: decided by a pre-specified Bayesian rule on a "
                     "posterior probability, outside the frequentist multiplicity adjustment; "
                     "the operating characteristics of each rule are shown with it where the "
                     "plan gives a design and planned sizes.")
            out.append(f'<p class="prespec-bayes-outside">{esc(words)}</p>')
    else:
        out.append("<p>No hypotheses were tested.</p>")
    return "".join(out)


def unlocked_words(results: Mapping[str, Any]) -> str:
    """Why a report has no lock version: a run without a lock (a departure), or a rehearsal
    of a plan file that is not (or no longer) the locked one (a note)."""
    if blinded.is_rehearsal(results):
        return "The plan file was rehearsed, not a locked version of the plan (see the notes)"
    return "The plan ran without a lock (see the departures)"


ENVIRONMENT_LABELS = {"python": "Python", "os": "Operating system"}
NOT_RECORDED = "not recorded at lock"
NOT_INSTALLED = "not installed"


def _engine_libraries(results: Mapping[str, Any]) -> list[str]:
    """The distributions the run's engine counted with, from ``engine_library``
    (``SQLAlchemy 2.0.36, psycopg 3.2.3`` -> ``["SQLAlchemy", "psycopg"]``)."""
    library = results.get("engine_library")
    if not isinstance(library, str):
        return []
    return [part.strip().split(" ")[0] for part in library.split(",") if part.strip()]


def environment_rows(results: Mapping[str, Any]) -> list[tuple[str, str, str, str]]:
    """(component, at lock, this run, compared) for every version the run or its lock
    recorded: Python, the operating system, the packages that compute, the engine libraries
    installed at either time. ``compared``: ``same``, ``differs``, ``not recorded at lock``
    (a lock written before that version was recorded), or ``""`` without a lock to compare."""
    env = mapping(results.get("environment") or {}, "environment")
    locked = None
    if results.get("locked") is not None:
        block = mapping(results["locked"], "locked")
        locked = mapping(block.get("environment") or {}, "locked.environment")
    keys = list(dict.fromkeys([*(k for k in ENVIRONMENT_ORDER if k in env or k in (locked or {})),
                               *env, *(locked or {})]))
    used = _engine_libraries(results)
    rows = []
    for key in keys:
        now = text(env[key], f"environment.{key}") if key in env else NULL
        then = (text(locked[key], f"locked.environment.{key}") if key in locked
                else NOT_RECORDED) if locked is not None else ""
        if now == NOT_INSTALLED and then in (NOT_INSTALLED, NOT_RECORDED, "") \
                and key not in used:
            continue  # an engine's library absent then and now: nothing to say
        compared = ("" if locked is None else NOT_RECORDED if then == NOT_RECORDED
                    else "same" if then == now else "differs")
        label = ENVIRONMENT_LABELS.get(key, key)
        if key in used:
            label += " (counted the data)"
        rows.append((label, then, now, compared))
    return rows


def environment(results: Mapping[str, Any]) -> str:
    """The versions this run computed with, each beside the one recorded at lock time, the
    differences highlighted."""
    out = '<h2>Environment</h2>'
    if results.get("environment") is None:
        return out + "<p>results.json gives no environment.</p>"
    rows = environment_rows(results)
    if results.get("locked") is None:
        words = (unlocked_words(results) + ": there are no versions at lock time to compare."
                 if results.get("plan_version") is None else
                 "This report does not carry the versions recorded at lock time (it was written "
                 "before they were copied into results.json); the lock file still holds them.")
        return (out + f'<p class="prespec-environment-note">{esc(words)}</p>'
                + table(["Component", "This run"], [[c, n] for c, _, n, _ in rows],
                        cls="prespec-environment"))
    versions = items(mapping(results["locked"], "locked").get("versions"), "locked.versions")
    version = results.get("plan_version")
    differs = [c for c, _, _, k in rows if k == "differs"]
    lead = (f"Each version this run computed with, beside the one recorded when version "
            f"{NULL if version is None else version} of the plan was locked"
            f"{' or amended' if len(versions) > 1 else ''}. ")
    if differs:
        lead += (f"{plural(len(differs), 'version')} differ{'s' if len(differs) == 1 else ''} "
                 f"from the lock: {', '.join(differs)} (highlighted). A difference in Python or "
                 "a package that computes is also listed among the departures.")
    else:
        lead += "No recorded version differs from the lock."
    styles = {i: (FLAG_ROW_STYLE if k == "differs" else SOFT_ROW_STYLE)
              for i, (_, _, _, k) in enumerate(rows) if k in ("differs", NOT_RECORDED)}
    return (out + f'<p class="prespec-environment-note">{esc(lead)}</p>'
            + table(["Component", "At lock", "This run", "Compared with the lock"],
                    [list(r) for r in rows], cls="prespec-environment", row_styles=styles))


def blinded_banner(results: Mapping[str, Any]) -> str:
    """The label of a blinded rehearsal (and any group-level field it must not carry), or ``""``."""
    return blinded.banner(results)


def pooled(results: Mapping[str, Any]) -> str:
    """The pooled figures per outcome of a rehearsal, then the covariates of its adjusted
    hypotheses and their working models on the dummy allocation, then its event table, or
    ``""``."""
    return blinded.pooled(results) + blinded.covariates(results) + blinded.event_table(results)


def data_dictionary(results: Mapping[str, Any]) -> str:
    """The data dictionary section, or ``""`` when results.json has none."""
    return blinded.data_dictionary(results)


def planned_versus_achieved(results: Mapping[str, Any]) -> str:
    """The "Planned versus achieved" section of a run with a design, or ``""``."""
    return design.planned_versus_achieved(results)
