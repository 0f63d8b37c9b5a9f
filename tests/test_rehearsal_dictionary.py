"""The data dictionary of a rehearsal: columns used, value counts and meanings, worked by hand.

The data are invented; every expected count is counted by hand from the rows written here.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from prespec.data import dictionary
from prespec.errors import DataError
from prespec.plan import load_plan
from prespec.report import tables

PLAN = """\
prespec: 1
title: Dictionary checks (invented)
data:
  id: pid
  group: arm
  groups: [a, b]
  include:
    - {column: age, between: [18, 80]}
    - {column: withdrawn, is_missing: true}
outcomes:
  healed: {column: healed, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    outcome: healed
    compare: [a, b]
    test: cochran-mantel-haenszel
    strata: [site]
    estimand:
      population: adults with a chronic wound
      variable: healed at 12 weeks
      intercurrent:
        - {event: rescue surgery, column: rescue, happened: ["yes"], strategy: composite,
           counts_as: no-event}
        - {event: stopped dressing, column: stopped, happened: [1],
           strategy: while-on-treatment, outcome_column: healed_on_dressing}
  - id: H2
    outcome: healed
    compare: [a, b]
    test: cochran-mantel-haenszel
    strata: [site]
"""


def plan_model(tmp_path: Path, text: str = PLAN) -> Any:
    path = tmp_path / "plan.yaml"
    path.write_text(text)
    return load_plan(path).model


def frame() -> pd.DataFrame:
    """Eight rows, as a CSV would be read (text cells)."""
    return pd.DataFrame({
        "pid": ["p1", "p2", "p3", "p4", "p5", "p6", "p7", "p8"],
        "age": ["17", "18", "45", "80", "81", "", "60", "x"],
        "withdrawn": ["", "", "", "yes", "", "", " ", ""],
        "healed": ["1", "1.0", "0", " 1", "", "2", "0", "1"],
        "site": ["north", "north", "south", "south", "south", "", "east", "north"],
        "rescue": ["no", "yes", "no", "no", "yes", "", "no", "no"],
        "stopped": ["0", "0", "1", "0", "0", "1", "0", "0"],
        "healed_on_dressing": ["1", "1", "0", "1", "", "0", "0", "1"],
    })


def by_role(doc: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {c["role"]: c for c in doc["columns"]}


def listed(col: dict[str, Any]) -> list[tuple[Any, int, Any]]:
    return [(v["value"], v["count"], v["meaning"]) for v in col["values"]]


def test_every_column_the_plan_reads_with_its_role(tmp_path: Path) -> None:
    doc = dictionary.data_dictionary(frame(), plan_model(tmp_path), "data.csv")
    assert doc["rows"] == 8 and doc["counted_over"] == "all rows read"
    assert doc["group_column"] == {"column": "arm", "read": False}
    assert [(c["column"], c["role"]) for c in doc["columns"]] == [
        ("pid", "data.id"),
        ("age", "data.include[1]"),
        ("withdrawn", "data.include[2]"),
        ("healed", "outcomes.healed.column"),
        ("site", "hypotheses.H1.strata, hypotheses.H2.strata"),
        ("rescue", "hypotheses.H1.estimand.intercurrent[1].column"),
        ("stopped", "hypotheses.H1.estimand.intercurrent[2].column"),
        ("healed_on_dressing", "hypotheses.H1.estimand.intercurrent[2].outcome_column"),
    ]


def test_values_counts_and_meanings_by_hand(tmp_path: Path) -> None:
    cols = by_role(dictionary.data_dictionary(frame(), plan_model(tmp_path), "data.csv"))
    # between [18, 80] is inclusive; blank and text fail it
    age = cols["data.include[1]"]
    assert listed(age) == [("18", 1, "passes filter"), ("45", 1, "passes filter"),
                           ("60", 1, "passes filter"), ("80", 1, "passes filter"),
                           ("17", 1, "fails filter"), ("81", 1, "fails filter"),
                           ("x", 1, "fails filter"), (None, 1, "fails filter")]
    assert (age["distinct"], age["blank"]) == (7, 1)
    # is_missing: true passes the blank cells (" " is blank too)
    assert listed(cols["data.include[2]"]) == [(None, 7, "passes filter"),
                                               ("yes", 1, "fails filter")]
    # "1", "1.0" and " 1" all match the event value 1, but are shown as written (trimmed)
    assert listed(cols["outcomes.healed.column"]) == [
        ("1", 3, "event"), ("1.0", 1, "event"), ("0", 2, "no-event"), ("2", 1, "unmapped"),
        (None, 1, "blank")]
    assert listed(cols["hypotheses.H1.strata, hypotheses.H2.strata"]) == [
        ("north", 3, None), ("south", 3, None), ("east", 1, None), (None, 1, "blank")]
    assert listed(cols["hypotheses.H1.estimand.intercurrent[1].column"]) == [
        ("yes", 2, "intercurrent event"), ("no", 5, None), (None, 1, "blank")]
    assert listed(cols["hypotheses.H1.estimand.intercurrent[2].column"]) == [
        ("1", 2, "intercurrent event"), ("0", 6, None)]
    assert listed(cols["hypotheses.H1.estimand.intercurrent[2].outcome_column"]) == [
        ("1", 4, "event"), ("0", 3, "no-event"), (None, 1, "blank")]


def test_the_id_column_shows_counts_never_ids(tmp_path: Path) -> None:
    data = frame()
    data["pid"] = ["K-7781", "K-7781", "K-7782", "", "K-7783", "K-7783", "K-7783", "K-7784"]
    doc = dictionary.data_dictionary(data, plan_model(tmp_path), "data.csv")
    pid = by_role(doc)["data.id"]
    assert pid == {"column": "pid", "role": "data.id", "distinct": 4, "blank": 1, "values": [],
                   "more": 0, "more_count": 0, "duplicates": 2}
    assert "K-778" not in repr(doc)


def test_values_beyond_fifty_are_counted_not_listed(tmp_path: Path) -> None:
    rows = 130
    data = pd.DataFrame({c: ["0"] * rows for c in frame().columns})
    data["pid"] = [f"p{i}" for i in range(rows)]
    data["site"] = [f"site-{i:03d}" for i in range(60)] * 2 + [""] * 10
    cols = by_role(dictionary.data_dictionary(data, plan_model(tmp_path), "data.csv"))
    site = cols["hypotheses.H1.strata, hypotheses.H2.strata"]
    assert site["distinct"] == 60 and site["blank"] == 10
    assert len(site["values"]) == dictionary.MAX_VALUES == 50
    # each site value holds 2 rows, listed by value; the blank (10 rows) comes last, so
    # the 10 last sites and the blank cells are not listed
    assert site["values"][0] == {"value": "site-000", "count": 2, "meaning": None}
    assert site["values"][-1]["value"] == "site-049"
    assert (site["more"], site["more_count"]) == (11, 10 * 2 + 10)


def test_a_missing_column_names_its_role(tmp_path: Path) -> None:
    with pytest.raises(DataError, match=r"column 'rescue' \(hypotheses.H1.estimand."
                                        r"intercurrent\[1\].column\) is not in the data"):
        dictionary.data_dictionary(frame().drop(columns=["rescue"]), plan_model(tmp_path),
                                   "data.csv")


def test_the_group_column_must_be_gone(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="without the group column"):
        dictionary.data_dictionary(frame().assign(arm="a"), plan_model(tmp_path), "data.csv")


def test_parquet_nulls_are_blank(tmp_path: Path) -> None:
    from prespec.data import read_data

    data = frame()
    data["healed"] = [1.0, 1.0, 0.0, 1.0, None, 2.0, 0.0, 1.0]
    path = tmp_path / "data.parquet"
    data.to_parquet(path)
    cols = by_role(dictionary.data_dictionary(read_data(path), plan_model(tmp_path), path))
    assert listed(cols["outcomes.healed.column"]) == [
        ("1", 4, "event"), ("0", 2, "no-event"), ("2", 1, "unmapped"), (None, 1, "blank")]


def test_csv_layout(tmp_path: Path) -> None:
    doc = dictionary.data_dictionary(frame(), plan_model(tmp_path), "data.csv")
    out = tmp_path / "dd.csv"
    tables.write_dictionary_csv(out, doc)
    rows = list(csv.reader(out.open()))
    assert rows[0] == tables.DICTIONARY_HEADER
    assert rows[1] == ["pid", "data.id", "8", "0", "0", "", "", ""]
    assert ["withdrawn", "data.include[2]", "1", "7", "", "(blank)", "7", "passes filter"] in rows
    assert ["healed", "outcomes.healed.column", "4", "1", "", "2", "1", "unmapped"] in rows
    assert len(rows) == 1 + 1 + 8 + 2 + 5 + 4 + 3 + 2 + 3

    many = {"columns": [{"column": "c", "role": "r", "distinct": 60, "blank": 0,
                         "values": [{"value": "v", "count": 3, "meaning": None}],
                         "more": 59, "more_count": 77}]}
    tables.write_dictionary_csv(out, many)
    assert list(csv.reader(out.open()))[-1] == ["c", "r", "60", "0", "", "(59 more values)",
                                                "77", ""]
