"""The CSV tables of a report folder (``tables/``), written from results.json alone: the
groups per outcome, each hypothesis's counts and expected counts, the working model and the
marginal risks of each covariate-adjusted hypothesis, the priors, posteriors and prior
sensitivity of each Bayesian hypothesis, the families' members; the results of every
hypothesis, follow-up and family member (``results.csv``, one row each) and the same in long
form (``statistics.csv``, one row per statistic); the participant flow (``flow.csv``, when
results.json holds it); for a rehearsal, the pooled figures and the data dictionary only.
Every cell goes through ``common.shown.csv_writer`` (never a formula); a number is written as
results.json holds it (``repr`` of the float: it reads back to the same value)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prespec.common.shown import csv_writer
from prespec.report.bayes import write_bayes_csv
from prespec.report.tablenames import (
    RESULTS_TABLE,
    STATISTICS_TABLE,
    TABLES,
    bayes_table,
    groups_table,
    hypothesis_table,
    model_table,
)

#: The name of the rehearsal's pooled table in ``tables/``.
POOLED_TABLE = "pooled.csv"
#: The name of the data dictionary in ``tables/``.
DICTIONARY_TABLE = "data-dictionary.csv"

DICTIONARY_HEADER = ["column", "role", "distinct", "blank", "duplicates", "value", "count",
                     "meaning"]


#: Added after DICTIONARY_HEADER when the data file declares labels (a dataset file's).
DICTIONARY_LABEL_HEADER = ["column_label", "value_label"]


def write_dictionary_csv(path: Path, dictionary: dict[str, Any]) -> None:
    """One row per listed value; ``(blank)`` for blank cells, ``(N more values)`` for the rest.
    The label columns are there only when the dictionary holds a label."""
    labelled = any("label" in col or any("label" in v for v in col["values"])
                   for col in dictionary["columns"])
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv_writer(fh)
        w.writerow(DICTIONARY_HEADER + (DICTIONARY_LABEL_HEADER if labelled else []))
        for col in dictionary["columns"]:
            head = [col["column"], col["role"], col["distinct"], col["blank"],
                    col.get("duplicates", "")]
            tail = [col.get("label") or ""] if labelled else []

            def labels(value: dict[str, Any] | None, tail: list[Any] = tail) -> list[Any]:
                return [*tail, (value or {}).get("label") or ""] if labelled else []

            if not col["values"] and not col["more"]:
                w.writerow([*head, "", "", "", *labels(None)])
            for v in col["values"]:
                shown = "(blank)" if v["value"] is None else v["value"]
                w.writerow([*head, shown, v["count"], v["meaning"] or "", *labels(v)])
            if col["more"]:
                w.writerow([*head, f"({col['more']} more values)", col["more_count"], "",
                            *labels(None)])


POOLED_HEADER = ["outcome", "events", "no_events", "total", "missing", "rate", "ci_low",
                 "ci_high", "ci_method", "level"]


def write_rehearsal_tables(tables: Path, results: dict[str, Any]) -> None:
    """The rehearsal's only tables: the pooled figures and the data dictionary."""
    with open(tables / POOLED_TABLE, "w", newline="", encoding="utf-8") as fh:
        w = csv_writer(fh)
        w.writerow(POOLED_HEADER)
        for outcome, p in results["pooled"].items():
            w.writerow([outcome, p["events"], p["total"] - p["events"], p["total"],
                        p["missing"], p["rate"], p["ci"][0], p["ci"][1], p["ci_method"],
                        p["level"]])
    write_dictionary_csv(tables / DICTIONARY_TABLE, results["data_dictionary"])


MODEL_HEADER = ["part", "name", "value", "standard_error", "ci_low", "ci_high", "level"]


def write_model_csv(path: Path, adjusted: dict[str, Any]) -> None:
    """An adjusted hypothesis's working model and marginal risks, one row each: ``term`` rows
    (coefficient and its standard error on the log-odds scale), the ``conditional-odds-ratio``
    of the group given the covariates (with its interval), then the ``marginal-risk`` rows."""
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv_writer(fh)
        w.writerow(MODEL_HEADER)
        model = adjusted.get("model")
        if model is not None:
            for t in model["terms"]:
                w.writerow(["term", t["term"], t["coefficient"], t["standard_error"], "", "",
                            ""])
            cor = model["conditional_odds_ratio"]
            w.writerow(["conditional-odds-ratio", "group", cor["value"], "", cor["ci"][0],
                        cor["ci"][1], cor["level"]])
        for r in adjusted.get("risks") or []:
            w.writerow(["marginal-risk", r["group"], r["risk"], r["standard_error"], "", "", ""])


RESULTS_HEADER = [
    "hypothesis", "parent", "family", "role", "result_kind", "outcome", "groups", "comparison",
    "alternative", "margin", "null_rate", "planned_test", "test", "statistic_name", "statistic",
    "df", "p_value", "p_adjusted", "adjustment", "reject", "decision", "measure", "estimate",
    "ci_low", "ci_high", "ci_method", "ci_level", "posterior_probability", "threshold",
    "member_of", "member_level", "member_group", "pre_specified",
]
STATISTICS_HEADER = ["hypothesis", "groups", "statistic", "value", "method"]


def statistic_name(result: dict[str, Any]) -> str:
    """The name of a test's statistic: ``chi-square`` when it has degrees of freedom, ``z``
    when it has none, empty for an exact test (no statistic). # common practice"""
    if result.get("statistic") is None:
        return ""
    return "chi-square" if result.get("df") is not None else "z"


def _compared(compare: Any) -> str:
    return " vs ".join(str(c) for c in compare) if isinstance(compare, list) else str(compare)


def decision(hyp: dict[str, Any]) -> str:
    """The decision in words, as results.json records it (the words of the report's page:
    ``reject H0``, ``do not reject H0``, ``not tested (gate closed)``, ``rule met``, …)."""
    if hyp.get("gate") == "closed":
        return "not tested (gate closed)"
    reject = hyp.get("reject")
    if hyp.get("test") == "posterior-probability":
        return {True: "rule met", False: "rule not met"}.get(reject, "not computable")
    if reject is None:
        return "no decision (exploratory)" if hyp.get("p_value") is not None else (
            "not computable")
    return "reject H0" if reject else "do not reject H0"


def _margin(value: Any) -> Any:
    if isinstance(value, list):
        return " to ".join(repr(v) if isinstance(v, float) else str(v) for v in value)
    return value


def _adjustment(results: dict[str, Any], hyp: dict[str, Any]) -> str:
    """How ``p_adjusted`` was made: stage-wise under interim looks, the plan's procedure for
    the main family, else the follow-up family's name; empty where there is no adjusted p."""
    if hyp.get("p_adjusted") is None:
        return ""
    if hyp.get("looks") is not None:
        return "stage-wise, at the boundaries of the interim looks"
    family = hyp.get("family")
    if family in (None, "main"):
        procedure = results.get("multiplicity")
        if isinstance(procedure, dict):
            procedure = procedure.get("method", "")
        return f"{procedure} (main family)"
    return f"within family {family}"


def result_rows(results: dict[str, Any]) -> list[list[Any]]:
    """``results.csv``'s rows: each hypothesis and follow-up in results.json's order, then
    each family's members (flagged or not by the family's procedure)."""
    from prespec.report.figures import result_kind

    rows: list[list[Any]] = []
    for h in results.get("hypotheses") or []:
        est = h.get("estimate") or {}
        ci = est.get("ci") or [None, None]
        rows.append([
            h["id"], h.get("parent"), h.get("family"), h.get("role"), result_kind(h),
            h.get("outcome"), _compared(h.get("compare")), h.get("comparison"),
            h.get("alternative"), _margin(h.get("margin")), h.get("null_rate"),
            h.get("planned_test"), h.get("test"), statistic_name(h), h.get("statistic"),
            h.get("df"), h.get("p_value"), h.get("p_adjusted"), _adjustment(results, h),
            h.get("reject"), decision(h), est.get("measure"), est.get("value"), ci[0], ci[1],
            est.get("ci_method"), est.get("level"), h.get("posterior_probability"),
            h.get("threshold"), None, None, None, h.get("pre_specified"),
        ])
    for fam in results.get("families") or []:
        for m in fam.get("members") or []:
            est = m.get("estimate") or {}
            ci = est.get("ci") or [None, None]
            p_adj = m.get("p_adjusted")
            rows.append([
                m["id"], None, fam["id"], "exploratory", "family-member", fam.get("outcome"),
                _compared(fam.get("compare")), None, fam.get("alternative"), None, None,
                fam.get("planned_test"), m.get("test"), statistic_name(m), m.get("statistic"),
                m.get("df"), m.get("p_value"), p_adj,
                f"{fam.get('method')} within family {fam['id']}" if p_adj is not None else "",
                None, "flagged" if m.get("flagged") else "not flagged",
                est.get("measure"), est.get("value"), ci[0], ci[1], est.get("ci_method"),
                est.get("level"), None, None, fam["id"], m.get("level"), m.get("group"),
                fam.get("pre_specified"),
            ])
    return rows


def statistic_rows(results: dict[str, Any]) -> list[list[Any]]:
    """``statistics.csv``'s rows, one per statistic: for each hypothesis, follow-up and family
    member the events and the analysed total of each group, then (where results.json has
    them) the test statistic, its df, the p-value, the adjusted p-value, the estimate and its
    limits, the posterior probability and the threshold."""
    out: list[list[Any]] = []

    def add(hid: str, groups: str, name: str, value: Any, method: str) -> None:
        if value is not None:
            out.append([hid, groups, name, value, method])

    entries = [(h, h.get("compare"), "") for h in results.get("hypotheses") or []]
    for fam in results.get("families") or []:
        entries += [(m, fam.get("compare"), f"{fam.get('method')} within family {fam['id']}")
                    for m in fam.get("members") or []]
    for h, compare, member_method in entries:
        hid = h["id"]
        table = h.get("table") or {}
        for g, e, n in zip(table.get("groups") or [], table.get("events") or [],
                           table.get("totals") or [], strict=True):
            add(hid, g, "events", e, "count")
            add(hid, g, "analysed", n, "count")
        groups = _compared(table.get("groups") if compare in ("all", "trend") or compare is None
                           else compare)
        test = str(h.get("test") or "")
        name = statistic_name(h)
        if name:
            add(hid, groups, name, h.get("statistic"), test)
        add(hid, groups, "df", h.get("df"), test)
        add(hid, groups, "p-value", h.get("p_value"), test)
        add(hid, groups, "adjusted p-value", h.get("p_adjusted"),
            member_method or _adjustment(results, h))
        est = h.get("estimate") or {}
        if est:
            method = f"{est.get('ci_method')}, {est.get('level')} level"
            add(hid, groups, str(est.get("measure")), est.get("value"), method)
            low, high = est.get("ci") or [None, None]
            add(hid, groups, f"{est.get('measure')} lower limit", low, method)
            add(hid, groups, f"{est.get('measure')} upper limit", high, method)
        add(hid, groups, "posterior probability", h.get("posterior_probability"), test)
        add(hid, groups, "threshold", h.get("threshold"), test)
    return out


def write_result_tables(folder: Path, results: dict[str, Any]) -> None:
    """``tables/results.csv`` and ``tables/statistics.csv``."""
    for name, header, rows in ((RESULTS_TABLE, RESULTS_HEADER, result_rows(results)),
                               (STATISTICS_TABLE, STATISTICS_HEADER, statistic_rows(results))):
        with open(folder / name, "w", newline="", encoding="utf-8") as fh:
            w = csv_writer(fh)
            w.writerow(header)
            w.writerows(rows)


def write_tables(folder: Path, results: dict[str, Any]) -> None:
    tables = folder / TABLES
    tables.mkdir()
    if results.get("kind") == "rehearsal":  # pooled figures and the data dictionary only
        write_rehearsal_tables(tables, results)
        return
    for outcome, rows in results["groups"].items():
        with open(folder / groups_table(outcome), "w", newline="", encoding="utf-8") as fh:
            w = csv_writer(fh)
            w.writerow(["group", "events", "no_events", "total", "missing", "proportion",
                        "ci_low", "ci_high", "ci_method", "level"])
            for r in rows:
                w.writerow([r["group"], r["events"], r["total"] - r["events"], r["total"],
                            r["missing"], r["proportion"], r["ci"][0], r["ci"][1],
                            r["ci_method"], r["level"]])
    if results.get("families"):
        from prespec.report.families import write_family_tables

        write_family_tables(folder, results)
    for h in results["hypotheses"]:
        t = h["table"]
        expected = h["expected"] or [[None, None]] * len(t["groups"])
        with open(folder / hypothesis_table(h["id"]), "w", newline="", encoding="utf-8") as fh:
            w = csv_writer(fh)
            w.writerow(["group", "events", "no_events", "total", "expected_events",
                        "expected_no_events"])
            for g, e, n, (ee, en) in zip(t["groups"], t["events"], t["totals"], expected,
                                         strict=True):
                w.writerow([g, e, n - e, n, ee, en])
        adjusted = h.get("adjusted")
        if adjusted is not None and (adjusted.get("model") or adjusted.get("risks")):
            write_model_csv(folder / model_table(h["id"]), adjusted)  # none after a fallback
        if h.get("bayesian") is not None:
            write_bayes_csv(folder / bayes_table(h["id"]), h)
    write_result_tables(folder, results)
    if results.get("flow") is not None:
        from prespec.report.flow import write_flow_csv

        write_flow_csv(folder, results)
