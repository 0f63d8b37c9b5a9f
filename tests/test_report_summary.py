"""Tests of the report's first screen (src/prespec/report/summary.py), the environment against
the lock and the hypothesis layout (sections.py, markup.py), and of the ``locked`` block a run
writes into results.json from its log (workflow/base.py).

Fragments are checked without a kernel; the page itself is checked in test_report_render.py.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest

import prespec.report
from prespec import api, audit
from prespec.common import environment
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import PrespecError
from prespec.report import markup, sections, summary
from prespec.report.markup import FLAG_ROW_STYLE, SOFT_ROW_STYLE

try:
    from test_report_blinded import blinded_results
    from test_report_figures import HOSTILE_SCRIPT, full_results, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_blinded import blinded_results
    from tests.test_report_figures import HOSTILE_SCRIPT, full_results, sample_results

LOCKED = {
    "versions": [
        {"version": 1, "action": "lock", "at": "2027-03-01T09:00:00Z", "actor": "ana",
         "reason": None},
        {"version": 2, "action": "amend", "at": "2027-04-02T10:30:00Z", "actor": "ben",
         "reason": "the steering committee chose Hochberg"},
    ],
    "environment": {"python": "3.11.7", "numpy": "2.4.6", "scipy": "1.16.0",
                    "statsmodels": "0.15.0", "pandas": "3.1.1", "prespec": "0.1.0"},
}


def _rows(results: dict[str, Any], **kw: Any) -> dict[str, dict[str, Any]]:
    return {r["id"]: r for r in summary.result_rows(results, **kw)}


# --- result_rows ------------------------------------------------------------------------------


def test_result_rows_give_the_values_of_results_json_in_its_order() -> None:
    res = full_results()
    rows = summary.result_rows(res)
    assert all(tuple(r) == summary.ROW_KEYS for r in rows)
    # follow-ups directly after their parent
    assert [r["id"] for r in rows] == [
        "H1", "H2", "H3", "H4", "H5", "H5:alginate-vs-gauze", "H5:negative-pressure-vs-gauze",
        "H6", "H7", "H7:gauze-vs-negative-pressure", "H8", "H9"]
    by_id = {r["id"]: r for r in rows}
    h2 = next(h for h in res["hypotheses"] if h["id"] == "H2")
    assert by_id["H2"] | {} == {
        "id": "H2", "level": "hypothesis", "parent": None, "title": h2["title"],
        "role": "secondary", "comparison": " vs ".join(h2["compare"]),
        "test": "two-proportion-z", "planned_test": "two-proportion-z",
        "measure": h2["estimate"]["measure"],
        "estimate": -0.0592, "ci_low": h2["estimate"]["ci"][0], "ci_high": h2["estimate"]["ci"][1],
        "ci_level": h2["estimate"]["level"], "ci_method": h2["estimate"]["ci_method"],
        "p_value": 0.0212, "p_adjusted": 0.0424, "decision": "reject H0",
        "pre_specified": False}  # an override reached it
    follow = by_id["H5:negative-pressure-vs-gauze"]
    assert (follow["level"], follow["parent"], follow["p_value"], follow["p_adjusted"],
            follow["decision"]) == ("follow-up", "H5", 0.0143, 0.0286, "reject H0")


def test_result_rows_closed_gate_exploratory_and_no_estimate() -> None:
    rows = _rows(full_results())
    closed = rows["H7:gauze-vs-negative-pressure"]
    assert closed["p_value"] == 0.1224  # nominal, for information
    assert closed["p_adjusted"] is None and closed["decision"] == "not tested (gate closed)"
    assert rows["H8"]["p_adjusted"] is None
    assert rows["H8"]["decision"] == "no decision (exploratory)"
    assert rows["H6"]["estimate"] is None and rows["H6"]["measure"] is None
    assert rows["H6"]["comparison"] == "trend across groups"
    assert rows["H7"]["decision"] == "do not reject H0"


def test_result_rows_family_members_and_rehearsal() -> None:
    res = sample_results()
    res["families"] = [{
        "id": "AE", "compare": ["new", "standard"], "over": "term", "method": "double-fdr",
        "level": 0.1, "members_total": 2, "members_flagged": 1, "members": [
            {"id": "AE[rash]", "test": "fisher-exact", "p_value": 0.001, "p_adjusted": 0.002,
             "flagged": True, "estimate": {"measure": "risk-difference", "value": 0.2,
                                            "ci": [0.1, 0.3], "ci_method": "newcombe",
                                            "level": 0.95}},
            {"id": "AE[itch]", "test": "fisher-exact", "p_value": 0.5, "p_adjusted": 0.5,
             "flagged": False, "estimate": None}]}]
    rows = _rows(res)
    assert rows["AE[rash]"] | {} == {
        "id": "AE[rash]", "level": "member", "parent": "AE", "title": None,
        "role": "family member", "comparison": "new vs standard", "test": "fisher-exact",
        "planned_test": None, "measure": "risk-difference", "estimate": 0.2, "ci_low": 0.1, "ci_high": 0.3,
        "ci_level": 0.95, "ci_method": "newcombe", "p_value": 0.001, "p_adjusted": 0.002,
        "decision": "flagged", "pre_specified": True}
    assert rows["AE[itch]"]["decision"] == "not flagged"
    assert "AE[rash]" not in _rows(res, members=False)
    # the summary shows the family in one row, its members in their section
    table = summary.results_table(res)
    assert "1 of 2 members flagged (double-fdr at 0.1)" in table
    # under it the flagged members, each with its figures; the others in their section
    assert ('<tr class="prespec-followup-row"><td>↳\u00a0AE[rash]</td><td>family member</td>'
            '<td>new vs standard</td>') in table
    assert '<td class="num">0.001000</td><td class="num">0.002000</td><td>flagged</td>' in table
    assert "AE[itch]" not in table
    assert summary.result_rows(blinded_results()) == []


def test_result_rows_name_the_key_of_a_malformed_value() -> None:
    res = sample_results()
    res["hypotheses"][0]["p_value"] = "small"
    with pytest.raises(PrespecError, match=r"^results.json: hypotheses.H1.p_value: expected a "):
        summary.result_rows(res)


# --- the first screen -----------------------------------------------------------------------


def test_summary_shows_the_lock_and_every_amendment_with_time_and_reason() -> None:
    res = sample_results() | {"locked": LOCKED}
    page = summary.summary(res)
    assert "<tr><th>Locked (version 1)</th><td>2027-03-01T09:00:00Z by ana</td></tr>" in page
    assert ("<tr><th>Amended (version 2)</th><td>2027-04-02T10:30:00Z by ben: the steering "
            "committee chose Hochberg</td></tr>") in page
    assert "<tr><th>Plan version</th><td>2</td></tr>" in page
    assert res["plan"] in page and res["data"] in page
    # the departures: their count, and a link to their section
    assert "2 departures from the plan recorded." in page
    assert '<a href="#departures">' in page


def test_summary_without_a_lock_says_so() -> None:
    res = sample_results() | {"plan_version": None}
    assert "<th>Locked</th><td>no. The plan ran without a lock (see the departures).</td>" in \
        summary.summary(res)
    rehearsed = blinded_results() | {"plan_version": None}
    assert ("<th>Locked</th><td>no. The plan file was rehearsed, not a locked version of the "
            "plan (see the notes).</td>") in summary.summary(rehearsed)
    assert "The plan file was rehearsed, not a locked version" in sections.environment(rehearsed)
    # an older report: a version, but no lock history in results.json
    assert "<td>version 2; the time is not recorded in this report</td>" in \
        summary.summary(sample_results())


def test_summary_results_table_has_one_row_per_result() -> None:
    res = sample_results()
    page = summary.summary(res)
    table = page[page.index('<table class="prespec prespec-summary-results">'):]
    table = table[:table.index("</table>")]
    heads = re.findall(r"<th>(.*?)</th>", table)
    assert heads == ["Hypothesis", "Role", "Comparison", "Estimate (interval)", "p-value",
                     "Adjusted p-value", "Decision"]
    assert table.count("<tr>") == 1 + len(res["hypotheses"])
    h1 = res["hypotheses"][0]
    low, high = h1["estimate"]["ci"]
    assert (f'<span class="prespec-nowrap">{h1["estimate"]["value"]:.4f}</span> '
            f'<span class="prespec-nowrap">({low:.4f}, {high:.4f})</span>') in table
    assert '<td class="num">0.01340</td><td class="num">0.02680</td><td>reject H0</td>' in table


def test_summary_names_a_test_that_a_pre_specified_switch_replaced() -> None:
    res = sample_results()
    switched = res["hypotheses"][1]  # the sparse-data rule replaced the chi-square test
    row = _rows(res)[switched["id"]]
    assert (row["test"], row["planned_test"]) == ("fisher-exact", "pearson-chi-square")
    table = summary.results_table(res)
    assert ('<span class="prespec-measure">fisher-exact, switched from pearson-chi-square'
            '</span>') in table
    assert table.count("switched from") == 1


def test_summary_of_a_rehearsal_shows_no_result() -> None:
    page = summary.summary(blinded_results())
    assert "prespec-summary-results" not in page
    assert "A blinded rehearsal computes no statistic" in page


def test_summary_escapes_hostile_values() -> None:
    res = sample_results() | {"locked": json.loads(json.dumps(LOCKED))}
    res["locked"]["versions"][1]["reason"] = HOSTILE_SCRIPT
    res["hypotheses"][0]["title"] = HOSTILE_SCRIPT
    page = summary.summary(res) + summary.contents(res)
    assert "<script" not in page and markup.esc(HOSTILE_SCRIPT) in page


# --- the table of contents ------------------------------------------------------------------


def test_contents_link_each_section_present_and_each_hypothesis() -> None:
    res = full_results()
    page = summary.contents(res)
    links = re.findall(r'href="#([^"]+)"', page)
    assert links[:2] == ["departures", "population"]
    assert "multiplicity" in links and links[-1] == "environment"
    assert "families" not in links  # no family in these results
    parents = [i for i, h in enumerate(res["hypotheses"]) if h.get("parent") is None]
    assert [x for x in links if x.startswith("hypothesis-")] == [
        f"hypothesis-{i}" for i in parents]
    # each hypothesis section carries the id its link names
    for i in parents:
        html = sections.hypothesis(res["hypotheses"][i], f"hypotheses[{i}]", results=res)
        assert html.startswith(f'<div class="prespec-hyp" id="hypothesis-{i}">')
    with pytest.raises(ValueError, match="no report section"):
        summary.anchor("nowhere")


# --- the hypothesis section -------------------------------------------------------------------


@pytest.mark.parametrize(("test", "statistic", "df", "label", "shown"), [
    ("two-proportion-z", -2.5, None, "Statistic (z)", "-2.500"),
    ("pearson-chi-square", 6.25, 1, "Statistic (chi-square)", "6.250 (df 1)"),
    ("likelihood-ratio", 23.0, 2, "Statistic (G², likelihood-ratio chi-square)", "23.000 (df 2)"),
    ("cochran-mantel-haenszel", 19.87, 1, "Statistic (Cochran–Mantel–Haenszel chi-square)",
     "19.870 (df 1)"),
    ("fisher-exact", None, None, "Statistic",
     "none: an exact test sums the probabilities of the tables"),
    ("binomial-exact", None, None, "Statistic",
     "none: an exact test sums the probabilities of the counts"),
    ("barnard-exact", -1.35, None, "Statistic (Wald z that orders the tables)", "-1.350"),
])
def test_the_statistic_says_what_it_is(test: str, statistic: float | None, df: int | None,
                                       label: str, shown: str) -> None:
    hyp = {"id": "H1", "test": test, "statistic": statistic, "df": df}
    assert sections.statistic_row(hyp, "hypotheses.H1") == (label, shown)


def test_hypothesis_body_places_definition_and_result_side_by_side() -> None:
    page = sections.hypothesis(sample_results()["hypotheses"][0], "hypotheses[0]")
    body = page[page.index('<div class="prespec-hyp-body">'):]
    kinds = re.findall(r'<div class="prespec-part-(\w+)">', body)
    assert kinds == ["definition", "wide", "result"]  # no estimand in this entry
    assert body.index("<th>Test used</th>") < body.index("prespec-counts") < \
        body.index("<th>Decision</th>")


def test_long_unbroken_values_may_break_anywhere_and_words_do_not() -> None:
    digest = "sha256:" + "ab" * 32
    assert markup.td(digest) == f'<td class="prespec-long">{digest}</td>'
    assert markup.td("negative-pressure-versus-standard-gauze") == \
        "<td>negative-pressure-versus-standard-gauze</td>"  # breaks after its hyphens
    assert markup.td("0.01340", "num") == '<td class="num">0.01340</td>'
    page = sections.departures({"deviations": [
        {"code": "data-changed-since-last-run", "detail": "the data changed",
         "expected": digest, "found": digest}], "notes": []})
    assert page.count(f'<td class="prespec-long">{digest}</td>') == 2


# --- the environment against the lock ---------------------------------------------------------


def test_environment_beside_the_lock_highlights_differences() -> None:
    res = sample_results() | {"locked": LOCKED, "engine": "duckdb",
                              "engine_library": "duckdb 1.1.3"}
    res["environment"] = {**res["environment"], "os": "Linux 6.8.0 (x86_64)",
                          "duckdb": "1.1.3", "pyspark": "not installed"}
    rows = sections.environment_rows(res)
    by_name = {r[0]: r[1:] for r in rows}
    assert by_name["scipy"] == ("1.16.0", res["environment"]["scipy"], "differs")
    assert by_name["numpy"] == ("2.4.6", "2.4.6", "same")
    # an older lock did not record the operating system or the engine's library
    assert by_name["Operating system"] == ("not recorded at lock", "Linux 6.8.0 (x86_64)",
                                           "not recorded at lock")
    assert by_name["duckdb (counted the data)"] == ("not recorded at lock", "1.1.3",
                                                    "not recorded at lock")
    assert "pyspark" not in by_name  # absent then and now
    assert [r[0] for r in rows][:2] == ["Python", "Operating system"]
    page = sections.environment(res)
    assert "1 version differs from the lock: scipy (highlighted)" in page
    scipy_row = next(i for i, r in enumerate(rows) if r[0] == "scipy")
    trs = re.findall(r"<tr( style=\"[^\"]*\")?>", page.split("<tbody>")[1])
    assert trs[scipy_row] == f' style="{markup.esc(FLAG_ROW_STYLE)}"'
    os_row = [r[0] for r in rows].index("Operating system")
    assert trs[os_row] == f' style="{markup.esc(SOFT_ROW_STYLE)}"'
    assert "<th>At lock</th><th>This run</th><th>Compared with the lock</th>" in page


def test_environment_of_an_unlocked_run() -> None:
    page = sections.environment(sample_results() | {"plan_version": None})
    assert ("The plan ran without a lock (see the departures): there are no versions at lock "
            "time to compare.") in page
    assert "<th>At lock</th>" not in page


def test_environment_records_the_os_and_every_engine_library() -> None:
    env = environment.environment()
    assert tuple(env) == environment.KEYS
    assert env["os"] == environment.operating_system() and env["os"].strip()
    assert env["pandas"] == __import__("pandas").__version__
    # only Python and the packages that compute make a departure; the OS does not
    other = {**env, "os": "elsewhere 1.0", "duckdb": "0.0.1"}
    assert environment.differences(env, other) == []
    assert environment.differences(env, {**env, "scipy": "0.1"}) == [
        ("scipy", env["scipy"], "0.1")]


# --- the locked block a run writes --------------------------------------------------------------


@pytest.fixture
def study(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> tuple[Path, Path]:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    data = tmp_path / "data.csv"
    data.write_text(demo_data())
    return plan, data


def test_a_run_carries_its_lock_history_from_the_log(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    plan.write_text(PLAN_TEXT.replace("multiplicity: holm", "multiplicity: hochberg"))
    api.amend(plan, reason="the steering committee chose Hochberg", actor="ben")
    out = api.run(plan, data, out=plan.parent / "r1")
    entries = [e for e in audit.read_log(audit.log_path(plan))
               if e["action"] in ("lock", "amend")]
    doc = json.loads(audit.lock_path(plan).read_text())
    stored = json.loads((out.folder / "results.json").read_text())
    assert stored["locked"] == {
        "versions": [
            {"version": 1, "action": "lock", "at": entries[0]["at"], "actor": "ana",
             "reason": None},
            {"version": 2, "action": "amend", "at": entries[1]["at"], "actor": "ben",
             "reason": "the steering committee chose Hochberg"}],
        "environment": doc["versions"][1]["environment"]}
    assert list(stored).index("locked") == list(stored).index("environment") + 1
    # verified, and recomputed identically (the lock history is of the moment, like the time)
    assert api.verify(plan).passed  # a failure raises
    rerun = api.verify(plan, rerun=data).passed
    assert any(line.startswith("rerun: 1 report(s) recomputed") for line in rerun), rerun
    page = summary.summary(stored)
    assert f"<th>Amended (version 2)</th><td>{entries[1]['at']} by ben: the steering" in page


def test_an_unlocked_run_has_no_lock_history(study: tuple[Path, Path]) -> None:
    plan, data = study
    out = api.run(plan, data, out=plan.parent / "r1", accept_deviation="a dry run")
    assert "locked" not in json.loads((out.folder / "results.json").read_text())


def test_a_rehearsal_of_the_locked_plan_carries_its_lock_history(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    out = api.rehearse(plan, data, out=plan.parent / "rehearsal")
    stored = json.loads((out.folder / "results.json").read_text())
    assert [v["action"] for v in stored["locked"]["versions"]] == ["lock"]
    assert api.verify(plan).passed  # a failure raises


def test_verify_holds_the_lock_history_to_the_log() -> None:
    from prespec.workflow.base import lock_history_problem

    entries = [
        {"seq": 1, "action": "lock", "at": "2027-03-01T09:00:00Z", "actor": "ana",
         "details": {"version": 1, "reason": None}},
        {"seq": 2, "action": "run", "at": "2027-03-05T09:00:00Z", "actor": "ana", "details": {}},
        {"seq": 3, "action": "amend", "at": "2027-04-02T10:30:00Z", "actor": "ben",
         "details": {"version": 2, "reason": "the steering committee chose Hochberg"}},
        {"seq": 4, "action": "run", "at": "2027-04-05T09:00:00Z", "actor": "ana", "details": {}},
    ]
    first, later = entries[1], entries[3]
    assert lock_history_problem(entries, later, {"locked": LOCKED}) is None
    assert lock_history_problem(entries, first, {"locked": {
        "versions": LOCKED["versions"][:1], "environment": {}}}) is None
    # the first run cannot name an amendment written after it; a changed time is caught
    assert "differs from the lock and amend entries" in lock_history_problem(
        entries, first, {"locked": LOCKED})
    moved = json.loads(json.dumps(LOCKED))
    moved["versions"][0]["at"] = "2027-02-28T09:00:00Z"
    assert lock_history_problem(entries, later, {"locked": moved}) is not None
    assert lock_history_problem(entries, later, {}) is None  # an older report: nothing to hold
