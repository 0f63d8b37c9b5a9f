"""The CSV tables of a report folder (``tables/``), written from results.json alone: the
groups per outcome, each hypothesis's counts and expected counts, the working model and the
marginal risks of each covariate-adjusted hypothesis, the priors, posteriors and prior
sensitivity of each Bayesian hypothesis, the families' members; for a rehearsal,
the pooled figures and the data dictionary only. Every cell goes through
``common.shown.csv_writer`` (never a formula)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prespec.common.shown import csv_writer
from prespec.report.bayes import write_bayes_csv
from prespec.report.tablenames import (
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
