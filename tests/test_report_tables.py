"""The machine-readable results of a report (src/prespec/report/tables.py): tables/results.csv,
one row per hypothesis, follow-up and family member, and tables/statistics.csv, one row per
statistic. Every value is checked against the results.json it was written from: the report
computes nothing, so a number in a table is the number in results.json, to the last bit."""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

import pytest

from prespec.analysis.families import analyse_family, prepare_run
from prespec.audit.manifest import build_manifest
from prespec.demo.safety import PLAN_TEXT as SAFETY_PLAN
from prespec.demo.safety import safety_frame
from prespec.plan import load_plan
from prespec.report.tablenames import FLOW_TABLE, RESULTS_TABLE, STATISTICS_TABLE
from prespec.report.tables import (
    RESULTS_HEADER,
    STATISTICS_HEADER,
    decision,
    statistic_name,
    write_tables,
)

try:
    from test_report_figures import HOSTILE_SCRIPT, full_results, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_figures import HOSTILE_SCRIPT, full_results, sample_results


def _read(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _value(cell: str) -> Any:
    """A CSV cell back as the JSON value it was written from."""
    if cell == "":
        return None
    if cell in ("True", "False"):
        return cell == "True"
    try:
        return int(cell)
    except ValueError:
        pass
    try:
        return float(cell)
    except ValueError:
        return cell


def _family() -> dict[str, Any]:
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "plan.yaml"
        path.write_text(SAFETY_PLAN)
        plan = load_plan(path).model
    _, data = prepare_run(safety_frame(per_group=120, seed=2), plan, "data.csv")
    return analyse_family(plan, plan.hypotheses[0], data[0], [])


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Any]]:
    results = full_results()
    results["families"] = [_family()]
    folder = tmp_path_factory.mktemp("tables")
    write_tables(folder, results)
    return folder, results


def test_results_csv_has_one_row_per_hypothesis_follow_up_and_member(
        written: tuple[Path, dict[str, Any]]) -> None:
    folder, results = written
    rows = _read(folder / RESULTS_TABLE)
    assert list(rows[0]) == RESULTS_HEADER
    members = results["families"][0]["members"]
    assert [r["hypothesis"] for r in rows] == (
        [h["id"] for h in results["hypotheses"]] + [m["id"] for m in members])
    for row, hyp in zip(rows, results["hypotheses"], strict=False):
        est = hyp.get("estimate") or {}
        ci = est.get("ci") or [None, None]
        expect = {"p_value": hyp["p_value"], "p_adjusted": hyp["p_adjusted"],
                  "statistic": hyp["statistic"], "df": hyp["df"], "test": hyp["test"],
                  "reject": hyp["reject"], "estimate": est.get("value"), "ci_low": ci[0],
                  "ci_high": ci[1], "ci_level": est.get("level"), "role": hyp["role"],
                  "parent": hyp.get("parent"), "outcome": hyp["outcome"]}
        for key, value in expect.items():
            got = _value(row[key])
            if key in ("outcome", "hypothesis") and isinstance(value, str):
                continue  # user text: checked below, after the formula guard
            assert got == value, (hyp["id"], key)
    by_id = {r["hypothesis"]: r for r in rows}
    assert by_id["H1"]["statistic_name"] == "chi-square" and by_id["H1"]["result_kind"] == \
        "confirmatory"
    assert by_id["H2"]["statistic_name"] == "z" and by_id["H2"]["decision"] == "reject H0"
    assert by_id["H2"]["comparison"] == "non-inferiority"
    assert by_id["H5"]["statistic_name"] == "" and by_id["H5"]["adjustment"] == \
        "graphical (main family)"
    assert by_id["H5:alginate-vs-gauze"]["result_kind"] == "follow-up"
    assert by_id["H5:alginate-vs-gauze"]["adjustment"] == "within family H5 pairwise"
    closed = by_id["H7:gauze-vs-negative-pressure"]
    assert (closed["result_kind"], closed["decision"]) == ("not-tested",
                                                          "not tested (gate closed)")
    assert by_id["H3"]["margin"] == "0.8 to 1.25"
    assert by_id["H9"]["decision"] == "no decision (exploratory)"
    assert by_id["H8"]["groups"] == f"{HOSTILE_SCRIPT} vs gauze"  # shown, never a formula
    for row, member in zip(rows[len(results["hypotheses"]):], members, strict=True):
        assert row["member_of"] == "AE" and row["result_kind"] == "family-member"
        assert _value(row["p_value"]) == member["p_value"]
        assert _value(row["p_adjusted"]) == member["p_adjusted"]
        assert row["decision"] == ("flagged" if member["flagged"] else "not flagged")
        assert row["member_level"] == str(member["level"])


def test_statistics_csv_is_long_and_every_value_is_in_results_json(
        written: tuple[Path, dict[str, Any]]) -> None:
    folder, results = written
    rows = _read(folder / STATISTICS_TABLE)
    assert list(rows[0]) == STATISTICS_HEADER
    entries = {h["id"]: h for h in results["hypotheses"]}
    entries.update({m["id"]: m for m in results["families"][0]["members"]})
    seen: set[tuple[str, str]] = set()
    for row in rows:
        hyp = entries[row["hypothesis"]]
        value = _value(row["value"])
        name = row["statistic"]
        est = hyp.get("estimate") or {}
        if name in ("events", "analysed"):
            t = hyp["table"]
            at = t["groups"].index(row["groups"])
            assert value == (t["events"] if name == "events" else t["totals"])[at]
            assert row["method"] == "count"
        elif name in ("z", "chi-square"):
            assert value == hyp["statistic"] and row["method"] == hyp["test"]
            assert name == statistic_name(hyp)
        else:
            lookup = {"df": hyp.get("df"), "p-value": hyp.get("p_value"),
                      "adjusted p-value": hyp.get("p_adjusted"),
                      "posterior probability": hyp.get("posterior_probability"),
                      "threshold": hyp.get("threshold")}
            if est:
                measure = est["measure"]
                lookup[measure] = est["value"]
                lookup[f"{measure} lower limit"] = (est["ci"] or [None, None])[0]
                lookup[f"{measure} upper limit"] = (est["ci"] or [None, None])[1]
            assert value == lookup[name], (row["hypothesis"], name)
        seen.add((row["hypothesis"], row["groups"], name))
    assert len(seen) == len(rows)  # one row per statistic: none twice
    named = {(h, n) for h, _, n in seen}
    # every number of results.json's results table is there
    assert ("H1", "chi-square") in named and ("H1", "p-value") in named
    assert ("H1", "adjusted p-value") in named and ("H1", "odds-ratio lower limit") in named
    assert ("H5", "z") not in named and ("H5", "chi-square") not in named  # exact: none
    assert ("H9", "odds-ratio") not in named and ("H9", "odds-ratio lower limit") in named
    assert ("H1", "negative-pressure", "events") in seen and ("H1", "gauze", "analysed") in seen
    h2 = [r for r in rows if r["hypothesis"] == "H2" and r["statistic"] == "risk-difference"]
    assert h2[0]["groups"] == "alginate vs gauze" and h2[0]["method"] == "newcombe, 0.9 level"


def test_the_tables_are_in_the_manifest_and_flow_only_with_a_flow_block(tmp_path: Path) -> None:
    res = sample_results()
    (tmp_path / "a").mkdir()
    write_tables(tmp_path / "a", res)
    listed = build_manifest(tmp_path / "a")["files"]
    assert RESULTS_TABLE in listed and STATISTICS_TABLE in listed
    assert FLOW_TABLE not in listed  # results.json without a flow block (an earlier run)
    res["flow"] = {"read": {"groups": {"gauze": 200, "alginate": 200, "negative-pressure": 200},
                            "other": 0},
                   "conditions": [], "outside_groups": 0,
                   "analysed": {"gauze": 200, "alginate": 200, "negative-pressure": 200},
                   "outcomes": {}}
    (tmp_path / "b").mkdir()
    write_tables(tmp_path / "b", res)
    assert FLOW_TABLE in build_manifest(tmp_path / "b")["files"]


@pytest.mark.parametrize(("fields", "words"), [
    ({"reject": True, "comparison": "superiority"}, "reject H0"),
    ({"reject": False, "comparison": "superiority"}, "do not reject H0"),
    ({"reject": True, "comparison": "equivalence"}, "reject H0"),
    ({"reject": None, "p_value": 0.2}, "no decision (exploratory)"),
    ({"reject": None, "p_value": None}, "not computable"),
    ({"reject": True, "gate": "closed"}, "not tested (gate closed)"),
    ({"reject": True, "test": "posterior-probability"}, "rule met"),
    ({"reject": False, "test": "posterior-probability"}, "rule not met"),
])
def test_decision_in_words(fields: dict[str, Any], words: str) -> None:
    assert decision(fields) == words


def test_a_demo_run_writes_tables_equal_to_its_results(tmp_path: Path) -> None:
    """End to end through the run: the demo's results.csv against its results.json."""
    from prespec import api

    api.demo(tmp_path / "demo", actor="tester")
    (report,) = (tmp_path / "demo").glob("reports/*/*-run")
    results = json.loads((report / "results.json").read_text("utf-8"))
    rows = _read(report / RESULTS_TABLE)
    assert [r["hypothesis"] for r in rows] == [h["id"] for h in results["hypotheses"]]
    for row, hyp in zip(rows, results["hypotheses"], strict=True):
        assert _value(row["p_value"]) == hyp["p_value"]
        assert _value(row["p_adjusted"]) == hyp["p_adjusted"]
        assert _value(row["estimate"]) == (hyp["estimate"] or {}).get("value")
    listed = json.loads((report / "manifest.json").read_text("utf-8"))["files"]
    assert {RESULTS_TABLE, STATISTICS_TABLE, FLOW_TABLE, "figures/flow.png",
            "figures/flow.svg", "figures/differences.svg"} <= set(listed)
    flow = _read(report / FLOW_TABLE)
    assert flow[0]["step"] == "rows read" and _value(flow[0]["total"]) == \
        results["population"]["rows_read"]


def test_the_adjustment_names_the_procedure_or_the_looks() -> None:
    from prespec.report.tables import _adjustment

    res = {"multiplicity": "holm"}
    assert _adjustment(res, {"p_adjusted": 0.01, "family": "main"}) == "holm (main family)"
    assert _adjustment(res, {"p_adjusted": 0.01, "family": "H5 pairwise"}) == \
        "within family H5 pairwise"
    assert _adjustment(res, {"p_adjusted": 0.01, "looks": {"looks": []}}) == \
        "stage-wise, at the boundaries of the interim looks"
    assert _adjustment(res, {"p_adjusted": None, "family": "main"}) == ""
