"""The report's first screen: what ran, when the plan was locked, and every result in one table.

:func:`result_rows` gives, per hypothesis, follow-up comparison and family member, the figures
of the results table as plain values read from ``results.json`` (numbers stay numbers), so that
the page and any machine-readable table show the same rows. :func:`summary` is the first
screen of the page: the title, the plan's version and fingerprint, when it was locked and
every amendment (time and reason, as the log gave them to the run), the data hash, the engine,
the departures with a link to their section, and the results table. :func:`contents` is the
table of contents that follows it.

Nothing is computed here: every value is one results.json holds.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from prespec.report import bayes, blinded
from prespec.report.looks import interim_look, interim_words
from prespec.report.markup import DEPARTURE_STYLE, OVERRIDE_STYLE, QUIET_STYLE, esc, plural, td
from prespec.report.sections import (
    _compare_label,
    _engine,
    _files_read,
    _ordered,
    decision,
    gate,
    is_exploratory,
    is_prespecified,
    kind_label,
    multiplicity_name,
    override_rows,
    unlocked_words,
)
from prespec.report.values import (
    NULL,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_p,
    items,
    mapping,
    measure_label,
    number,
    pair,
    text,
)

#: The keys of every row :func:`result_rows` gives, in this order.
ROW_KEYS = ("id", "level", "parent", "title", "role", "comparison", "test", "planned_test",
            "measure",
            "estimate", "ci_low", "ci_high", "ci_level", "ci_method", "p_value", "p_adjusted",
            "decision", "pre_specified")


def _estimate(entry: Mapping[str, Any], where: str) -> dict[str, Any]:
    if entry.get("estimate") is None:
        return {"measure": None, "estimate": None, "ci_low": None, "ci_high": None,
                "ci_level": None, "ci_method": None}
    est = mapping(entry["estimate"], f"{where}.estimate")
    low, high = pair(est.get("ci"), f"{where}.estimate.ci")
    return {
        "measure": text(est.get("measure"), f"{where}.estimate.measure", default="") or None,
        "estimate": number(est.get("value"), f"{where}.estimate.value"),
        "ci_low": low,
        "ci_high": high,
        "ci_level": number(est.get("level"), f"{where}.estimate.level"),
        "ci_method": text(est.get("ci_method"), f"{where}.estimate.ci_method", default="")
        or None,
    }


def _hypothesis_row(hyp: Mapping[str, Any], position: str,
                    look: tuple[int, int] | None = None) -> dict[str, Any]:
    hid = text(hyp.get("id"), f"{position}.id")
    where = f"hypotheses.{hid}"
    closed = gate(hyp, where) == "closed"
    words = decision(hyp, where)
    if look is not None:  # an interim look: the look decides, or nothing is tested yet
        words = interim_words(hyp, look) or words
    p_adjusted = number(hyp.get("p_adjusted"), f"{where}.p_adjusted")
    if bayes.is_bayesian(hyp):
        p_adjusted = None  # a rule on a posterior probability, outside the adjustment
        if is_exploratory(hyp):
            words = f"no decision ({words}, exploratory)"
    elif is_exploratory(hyp):
        p_adjusted, words = None, "no decision (exploratory)"
    elif closed:
        p_adjusted = None  # not tested: its p-value is nominal, for information only
    parent = hyp.get("parent")
    return {
        "id": hid,
        "level": "follow-up" if parent is not None else "hypothesis",
        "parent": None if parent is None else text(parent, f"{where}.parent"),
        "title": text(hyp.get("title"), f"{where}.title", default="") or None,
        "role": text(hyp.get("role"), f"{where}.role", default=NULL),
        "comparison": _compare_label(hyp, where),
        "test": text(hyp.get("test"), f"{where}.test", default="") or None,
        "planned_test": text(hyp.get("planned_test"), f"{where}.planned_test", default="")
        or text(hyp.get("test"), f"{where}.test", default="") or None,
        **_estimate(hyp, where),
        "p_value": None if bayes.is_bayesian(hyp) else number(hyp.get("p_value"),
                                                              f"{where}.p_value"),
        "p_adjusted": p_adjusted,
        "decision": words,
        "pre_specified": is_prespecified(hyp, where),
    }


def _member_rows(results: Mapping[str, Any]) -> list[dict[str, Any]]:
    from prespec.report.families import families

    rows = []
    for i, fam in enumerate(families(results)):
        at = f"families[{i}]"
        fid = text(fam.get("id"), f"{at}.id")
        groups = [text(g, f"{at}.compare") for g in items(fam.get("compare"), f"{at}.compare")]
        prespecified = fam.get("pre_specified") is not False
        for j, raw in enumerate(items(fam.get("members"), f"{at}.members")):
            where = f"{at}.members[{j}]"
            member = mapping(raw, where)
            flagged = member.get("flagged")
            rows.append({
                "id": text(member.get("id"), f"{where}.id"),
                "level": "member",
                "parent": fid,
                "title": None,
                "role": "family member",
                "comparison": " vs ".join(groups) or NULL,
                "test": text(member.get("test"), f"{where}.test", default="") or None,
                "planned_test": text(fam.get("planned_test"), f"{at}.planned_test",
                                     default="") or None,
                **_estimate(member, where),
                "p_value": number(member.get("p_value"), f"{where}.p_value"),
                "p_adjusted": number(member.get("p_adjusted"), f"{where}.p_adjusted"),
                "decision": "flagged" if flagged is True else "not flagged",
                "pre_specified": prespecified,
            })
    return rows


def result_rows(results: Mapping[str, Any], *, members: bool = True) -> list[dict[str, Any]]:
    """One dict per hypothesis, follow-up comparison and (with ``members``) family member.

    Keys (``ROW_KEYS``): ``id``; ``level`` (``hypothesis``, ``follow-up`` or ``member``);
    ``parent`` (a follow-up's hypothesis, a member's family, else None); ``title``; ``role``;
    ``comparison`` (in words, ``alginate vs gauze``); ``test`` (the test used) and
    ``planned_test`` (the plan's, before a pre-specified switch; the same when none fired); ``measure``,
    ``estimate``, ``ci_low``, ``ci_high``, ``ci_level``, ``ci_method`` (None without an
    estimate); ``p_value`` (nominal; None for a Bayesian rule); ``p_adjusted`` (None where no
    adjustment applies: exploratory, gate closed, Bayesian rule); ``decision`` in words
    (``reject H0``, ``do not reject H0``, ``not tested (gate closed)``, ``no decision
    (exploratory)``, ``rule met``, ``flagged``, …); ``pre_specified`` (False when a
    command-line override reached it). Follow-ups follow their parent. A rehearsal has no
    results: ``[]``.
    """
    if blinded.is_rehearsal(results):
        return []
    rows = []
    look = interim_look(results)
    for hyp, position, kids in _ordered(results):
        if not hyp.get("_missing"):
            rows.append(_hypothesis_row(hyp, position, look))
        rows += [_hypothesis_row(kid, pos, look) for kid, pos in kids]
    if members:
        rows += _member_rows(results)
    return rows


# --- the first screen ---------------------------------------------------------------------


def _when(value: object, where: str) -> str:
    """A time as results.json and the log write it (RFC 3339 UTC)."""
    return text(value, where, default=NULL)


def locked_lines(results: Mapping[str, Any]) -> list[tuple[str, str]]:
    """(label, words) for the lock and each amendment, from results.json's ``locked``."""
    if results.get("locked") is None:
        if results.get("plan_version") is None:
            return [("Locked", f"no. {unlocked_words(results)}.")]
        version = text(str(results["plan_version"]), "plan_version")
        return [("Locked", f"version {version}; the time is not recorded in this report")]
    locked = mapping(results["locked"], "locked")
    out = []
    for i, raw in enumerate(items(locked.get("versions"), "locked.versions")):
        at = f"locked.versions[{i}]"
        entry = mapping(raw, at)
        version = text(str(entry.get("version")), f"{at}.version")
        when = _when(entry.get("at"), f"{at}.at")
        actor = text(entry.get("actor"), f"{at}.actor", default=NULL)
        if entry.get("action") == "amend":
            reason = text(entry.get("reason"), f"{at}.reason", default=NULL)
            out.append((f"Amended (version {version})", f"{when} by {actor}: {reason}"))
        else:
            out.append((f"Locked (version {version})", f"{when} by {actor}"))
    return out or [("Locked", NULL)]


def _departures_line(results: Mapping[str, Any]) -> tuple[str, str]:
    count = len(items(results.get("deviations"), "deviations"))
    overrides = len(override_rows(results))
    words = (plural(count, "departure") + " from the plan recorded") if count else (
        "none recorded")
    if overrides:
        words += f", of which {plural(overrides, 'command-line override')}"
    style = DEPARTURE_STYLE if count else QUIET_STYLE
    return words, style


def _fact(label: str, value: str, cls: str = "") -> str:
    klass = f' class="{esc(cls)}"' if cls else ""
    return f"<tr{klass}><th>{esc(label)}</th>{td(value)}</tr>"


def facts(results: Mapping[str, Any]) -> str:
    """The provenance of the first screen as a two-column table (hashes wrap anywhere)."""
    kind = kind_label(results)
    look = interim_look(results)
    if look is not None:
        kind += f": interim look {look[0]} of {look[1]}"
    rows = [_fact("Kind", kind)]
    if results.get("protocol") is not None:
        rows.append(_fact("Protocol", text(results.get("protocol"), "protocol")))
    version = results.get("plan_version")
    rows.append(_fact("Plan version", NULL if version is None else str(version)))
    rows.append(_fact("Plan fingerprint", text(results.get("plan"), "plan", default=NULL),
                      "prespec-hash"))
    rows += [_fact(label, words) for label, words in locked_lines(results)]
    rows.append(_fact("Data hash", text(results.get("data"), "data", default=NULL),
                      "prespec-hash"))
    rows.append(_fact("Data file", text(results.get("data_file"), "data_file", default=NULL)))
    if "data_files" in results:
        rows.append(_fact("Files read", _files_read(results), "prespec-hash"))
    if "engine" in results:
        rows.append(_fact("Engine", _engine(dict(results))))
    rows.append(_fact("Run at (UTC)", f"{_when(results.get('created'), 'created')} by "
                      f"{text(results.get('actor'), 'actor', default=NULL)}"))
    alpha = number(results.get("alpha"), "alpha")
    rows.append(_fact("Alpha, multiplicity",
                      f"{NULL if alpha is None else f'{alpha:g}'}, {multiplicity_name(results)}"))
    return f'<table class="prespec prespec-fields prespec-facts"><tbody>{"".join(rows)}</tbody></table>'


def _estimate_cell(row: Mapping[str, Any]) -> str:
    """The estimate and its interval as HTML, each kept on one line; the measure, the level
    and the interval's method beneath them."""
    if row["estimate"] is None and row["ci_low"] is None and row["ci_high"] is None:
        return esc(NULL)
    parts = [fmt_estimate(row["estimate"])]
    interval = fmt_interval(row["ci_low"], row["ci_high"])
    if interval != NULL:
        parts.append(interval)
    shown = " ".join(f'<span class="prespec-nowrap">{esc(p)}</span>' for p in parts)
    under = []
    if row["measure"] is not None:
        under.append(measure_label(row["measure"]))
    method = " ".join(s for s in (fmt_level(row["ci_level"]) if row["ci_level"] is not None
                                  else "", row["ci_method"] or "") if s)
    if method:
        under.append(method)
    if under:
        shown += f'<br><span class="prespec-measure">{esc(", ".join(under))}</span>'
    return shown


def _comparison_cell(row: Mapping[str, Any]) -> str:
    """The comparison; beneath it, the test used where a pre-specified switch replaced the
    planned one (the hypothesis's section says why)."""
    shown = esc(row["comparison"])
    if row["test"] and row["planned_test"] and row["test"] != row["planned_test"]:
        words = f"{row['test']}, switched from {row['planned_test']}"
        shown += f'<br><span class="prespec-measure">{esc(words)}</span>'
    return f"<td>{shown}</td>"


def results_table(results: Mapping[str, Any]) -> str:
    """The results table: one row per hypothesis and follow-up, and one per family."""
    rows = result_rows(results, members=False)
    body = []
    for row in rows:
        name = row["id"] if row["level"] == "hypothesis" else ARROW + row["id"]
        role = row["role"] + ("" if row["pre_specified"] else ", not pre-specified")
        cls = ' class="prespec-followup-row"' if row["level"] == "follow-up" else ""
        body.append(
            f"<tr{cls}>{td(name)}{td(role)}{_comparison_cell(row)}"
            f'<td class="num prespec-estimate">{_estimate_cell(row)}</td>'
            f'<td class="num">{esc(fmt_p(row["p_value"]))}</td>'
            f'<td class="num">{esc(fmt_p(row["p_adjusted"]))}</td>'
            f"{td(row['decision'])}</tr>"
        )
    body += _family_rows(results)
    if not body:
        return ""
    head = "".join(f"<th>{esc(h)}</th>" for h in (
        "Hypothesis", "Role", "Comparison", "Estimate (interval)", "p-value",
        "Adjusted p-value", "Decision"))
    return (
        '<table class="prespec prespec-summary-results"><thead><tr>'
        f"{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"
    )


#: Marks a follow-up or a member under its hypothesis or family (kept with the id).
ARROW = "↳\u00a0"
#: The flagged members of a family listed in the summary; the rest are counted.
FLAGGED_SHOWN = 10


def _member_line(row: Mapping[str, Any]) -> str:
    return (f'<tr class="prespec-followup-row">{td(ARROW + row["id"])}{td(row["role"])}'
            f"{td(row['comparison'])}"
            f'<td class="num prespec-estimate">{_estimate_cell(row)}</td>'
            f'<td class="num">{esc(fmt_p(row["p_value"]))}</td>'
            f'<td class="num">{esc(fmt_p(row["p_adjusted"]))}</td>{td(row["decision"])}</tr>')


def _family_rows(results: Mapping[str, Any]) -> list[str]:
    """One row per family, then its flagged members (at most ``FLAGGED_SHOWN``)."""
    from prespec.report.families import families

    flagged_by: dict[str, list[dict[str, Any]]] = {}
    for row in _member_rows(results):
        if row["decision"] == "flagged":
            flagged_by.setdefault(row["parent"], []).append(row)
    out = []
    for i, fam in enumerate(families(results)):
        at = f"families[{i}]"
        fid = text(fam.get("id"), f"{at}.id")
        groups = [text(g, f"{at}.compare") for g in items(fam.get("compare"), f"{at}.compare")]
        over = text(fam.get("over"), f"{at}.over", default=NULL)
        total = number(fam.get("members_total"), f"{at}.members_total")
        flagged = number(fam.get("members_flagged"), f"{at}.members_flagged")
        method = text(fam.get("method"), f"{at}.method", default=NULL)
        level = number(fam.get("level"), f"{at}.level")
        role = "family" if fam.get("pre_specified") is not False else (
            "family, not pre-specified")
        words = (f"{NULL if flagged is None else int(flagged)} of "
                 f"{NULL if total is None else int(total)} members flagged ({method} at "
                 f"{NULL if level is None else f'{level:g}'})")
        out.append(
            f"<tr>{td(fid)}{td(role)}"
            f"<td>{esc(' vs '.join(groups) or NULL)}, over {esc(over)}</td>"
            f'<td class="num">{NULL}</td><td class="num">{NULL}</td><td class="num">{NULL}</td>'
            f"<td>{esc(words)}</td></tr>"
        )
        listed = flagged_by.get(fid, [])
        out += [_member_line(row) for row in listed[:FLAGGED_SHOWN]]
        if len(listed) > FLAGGED_SHOWN:
            more = f"and {len(listed) - FLAGGED_SHOWN} more flagged members: see Families"
            out.append(f'<tr class="prespec-followup-row"><td colspan="7">{esc(more)}</td></tr>')
    return out


def summary(results: Mapping[str, Any]) -> str:
    """The first screen: title, provenance with the lock history, departures, results."""
    title = text(results.get("title"), "title", default="Untitled plan")
    words, style = _departures_line(results)
    parts = [
        f'<h1 class="prespec-title">{esc(title)}</h1>',
        '<div class="prespec-summary" id="summary">',
        facts(results),
        (f'<div class="prespec-summary-departures" style="{style}">'
         f"<strong>Departures:</strong> {esc(words)}. "
         '<a href="#departures">See the departures and notes</a>.</div>'),
    ]
    table = results_table(results)
    if table:
        parts.append('<h2 class="prespec-summary-heading">Results</h2>')
        parts.append(table)
        parts.append(
            "<p class=\"prespec-summary-note\">Estimates with their intervals; p-values "
            "nominal, adjusted p-values within each hypothesis's multiplicity family. Each row is "
            "explained in its section below.</p>")
    elif blinded.is_rehearsal(results):
        parts.append("<p>A blinded rehearsal computes no statistic, p-value or estimate: no "
                     "results to summarise.</p>")
    else:
        parts.append("<p>results.json holds no tested hypotheses.</p>")
    parts.append("</div>")
    if any(not r["pre_specified"] for r in result_rows(results, members=False)):
        parts.append(f'<div style="{OVERRIDE_STYLE}">Rows marked “not pre-specified” were '
                     "changed by a command-line override: they are not the locked "
                     "analysis.</div>")
    return "".join(parts)


# --- the table of contents ----------------------------------------------------------------

#: The anchor of each section, in page order (the template puts each before its section).
ANCHORS = {
    "departures": "Departures from the plan and notes",
    "population": "Population",
    "flow": "Participant flow by group",
    "design": "Planned versus achieved",
    "pooled": "Pooled outcomes",
    "dictionary": "Data dictionary",
    "outcomes": "Outcomes by group",
    "hypotheses": "Hypotheses",
    "estimates": "Figure of the estimates",
    "multiplicity": "Multiplicity",
    "families": "Families",
    "environment": "Environment against the lock",
}


def anchor(name: str) -> str:
    """The empty element a link of the contents leads to (``name`` is one of ``ANCHORS``)."""
    if name not in ANCHORS:
        raise ValueError(f"no report section {name!r}")
    return f'<span class="prespec-anchor" id="{name}"></span>'


def hypothesis_anchor(index: int) -> str:
    """The id of the hypothesis at ``hypotheses[index]`` (ids are user text; positions are not)."""
    return f"hypothesis-{index}"


def _present(results: Mapping[str, Any]) -> list[str]:
    from prespec.report import design as design_report
    from prespec.report import families as family_report
    from prespec.report.flow import flow_section
    from prespec.report.sections import forest_figure, outcomes

    rehearsal = blinded.is_rehearsal(results)
    shown = {
        "departures": True,
        "population": True,
        "flow": bool(flow_section(results)),  # its heading carries the id
        "design": bool(design_report.planned_versus_achieved(results)),
        "pooled": rehearsal,
        "dictionary": bool(blinded.data_dictionary(results)),
        "outcomes": bool(outcomes(results)),
        "hypotheses": True,
        "estimates": forest_figure(results) is not None,
        "multiplicity": True,
        "families": bool(family_report.families_heading(results)),
        "environment": True,
    }
    return [name for name in ANCHORS if shown[name]]


def contents(results: Mapping[str, Any]) -> str:
    """The table of contents: a link to each section the page has, and to each hypothesis."""
    entries = []
    for name in _present(results):
        link = f'<a href="#{name}">{esc(ANCHORS[name])}</a>'
        if name == "hypotheses" and not blinded.is_rehearsal(results):
            subs = []
            for i, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
                hyp = mapping(raw, f"hypotheses[{i}]")
                if hyp.get("parent") is not None:
                    continue  # shown with its parent
                hid = text(hyp.get("id"), f"hypotheses[{i}].id")
                title = text(hyp.get("title"), f"hypotheses.{hid}.title", default="")
                label = f"{hid}: {title}" if title else hid
                subs.append(f'<li><a href="#{hypothesis_anchor(i)}">{esc(label)}</a></li>')
            if subs:
                link += f"<ol>{''.join(subs)}</ol>"
        entries.append(f"<li>{link}</li>")
    return (
        '<nav class="prespec-contents" id="contents"><p class="prespec-contents-title"><strong>Contents'
        f"</strong></p><ol>{''.join(entries)}</ol></nav>"
    )
