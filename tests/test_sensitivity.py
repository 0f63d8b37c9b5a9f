"""Sensitivity analyses of missing outcomes: worst and best case against hand counts, the
tipping-point entry of results.json, the sparse switch cell by cell, the plan rules, and a run
through the Python interface.

The grid's p-values are checked cell by cell against scipy and statsmodels in
tests/reference/test_ref_sensitivity.py; here the tests follow the counts from the data to
the entries and check the decisions.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
import scipy.stats
from statsmodels.stats.proportion import confint_proportions_2indep

import prespec.report
from prespec import api, audit
from prespec.analysis.hypotheses import analyse
from prespec.analysis.sensitivity import extreme_imputation, impute, observed
from prespec.data import GroupCounts, prepare, read_data
from prespec.errors import PlanError
from prespec.plan import load_plan
from prespec.stats import proportions, tables


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


PLAN = """\
prespec: 1
title: Invented dressing study, sensitivity of missing outcomes
data: {id: pid, group: arm, groups: [foam, gauze]}
outcomes:
  infection: {column: inf, event: [1], no_event: [0], missing: MISSING, favourable: no-event}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    title: Foam vs gauze, infection
    outcome: infection
    compare: [foam, gauze]
    test: TEST
    sensitivity: [worst-case, best-case, tipping-point]
"""


def rows(group: str, events: int, no_events: int, blank: int, unmapped: int = 0,
         start: int = 0) -> list[str]:
    cells = ["1"] * events + ["0"] * no_events + [""] * blank + ["?"] * unmapped
    return [f"{start + k + 1},{group},{cell}" for k, cell in enumerate(cells)]


# foam: 3 infected, 17 not, 4 blank and 1 unmapped ("?"): 5 missing
# gauze: 9 infected, 12 not, 2 blank: 2 missing
CSV = "\n".join(["pid,arm,inf", *rows("foam", 3, 17, 4, 1),
                 *rows("gauze", 9, 12, 2, start=100)]) + "\n"


def run_plan(tmp_path: Path, test: str = "fisher-exact", missing: str = "exclude",
             csv: str = CSV, plan_text: str = PLAN):
    (tmp_path / "p.yaml").write_text(plan_text.replace("TEST", test).replace("MISSING", missing))
    (tmp_path / "d.csv").write_text(csv)
    plan = load_plan(tmp_path / "p.yaml").model
    prep = prepare(read_data(tmp_path / "d.csv"), plan, tmp_path / "d.csv")
    entries, notes = analyse(plan, prep)
    return plan, entries, notes


def by_name(entry: dict) -> dict[str, dict]:
    return {s["analysis"]: s for s in entry["sensitivity"]}


def test_complete_cases_undo_the_missing_rule() -> None:
    # 7 events of 10 observed, 2 blank and 1 unmapped: the rule added 3 to the primary counts
    assert observed(GroupCounts("a", 7, 10, 2, 1), "exclude") == observed(
        GroupCounts("a", 10, 13, 2, 1), "event") == observed(
        GroupCounts("a", 7, 13, 2, 1), "no-event")
    part = observed(GroupCounts("a", 7, 10, 2, 1), "exclude")
    assert (part.events, part.total, part.missing) == (7, 10, 3)
    assert impute(part, "event") == (10, 13) and impute(part, "no-event") == (7, 13)


def test_worst_case_is_bad_for_the_first_group() -> None:
    # an infection is unfavourable: the worst case for foam counts its missing as infected
    assert extreme_imputation("worst-case", "no-event", ["foam", "gauze"]) == \
        {"foam": "event", "gauze": "no-event"}
    assert extreme_imputation("best-case", "no-event", ["foam", "gauze"]) == \
        {"foam": "no-event", "gauze": "event"}
    # a healed wound is favourable: the worst case counts foam's missing as not healed
    assert extreme_imputation("worst-case", "event", ["foam", "gauze"]) == \
        {"foam": "no-event", "gauze": "event"}


@pytest.mark.parametrize("missing", ["exclude", "event", "no-event"])
def test_worst_and_best_case_against_hand_counts(tmp_path: Path, missing: str) -> None:
    _, (entry,), _ = run_plan(tmp_path, missing=missing)
    cases = by_name(entry)
    # worst case: foam 3 + 5 missing = 8 of 25, gauze 9 of 21 + 2 = 23; best case: foam 3 of
    # 25, gauze 9 + 2 = 11 of 23 -- whatever the missing rule did in the primary analysis
    worst, best = cases["worst-case"], cases["best-case"]
    assert worst["imputed"] == {"foam": "event", "gauze": "no-event"}
    assert worst["table"] == {"groups": ["foam", "gauze"], "events": [8, 9], "totals": [25, 23]}
    assert best["imputed"] == {"foam": "no-event", "gauze": "event"}
    assert best["table"] == {"groups": ["foam", "gauze"], "events": [3, 11], "totals": [25, 23]}
    for case, (x1, n1, x2, n2) in ((worst, (8, 25, 9, 23)), (best, (3, 25, 11, 23))):
        # scipy.stats.fisher_exact on the imputed table
        want = scipy.stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]]).pvalue
        assert case["test"] == "fisher-exact"
        assert case["p_value"] == pytest.approx(want, rel=1e-9)
        assert case["reject_nominal"] == (want <= 0.05)
        # statsmodels confint_proportions_2indep(method="newcomb"): Newcombe's hybrid score
        low, high = confint_proportions_2indep(x1, n1, x2, n2, method="newcomb",
                                               compare="diff", alpha=0.05)
        assert case["estimate"]["measure"] == "risk-difference"
        assert case["estimate"]["value"] == pytest.approx(x1 / n1 - x2 / n2, rel=1e-12)
        assert case["estimate"]["ci"] == pytest.approx([low, high], rel=1e-9)
    assert best["reject_nominal"] is True and worst["reject_nominal"] is False
    # the primary result is untouched: the complete cases (or the rule's imputation)
    primary = {"exclude": ([3, 9], [20, 21]), "event": ([8, 11], [25, 23]),
               "no-event": ([3, 9], [25, 23])}[missing]
    assert (entry["table"]["events"], entry["table"]["totals"]) == primary
    x1, x2 = primary[0]
    n1, n2 = primary[1]
    assert entry["p_value"] == pytest.approx(
        scipy.stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]]).pvalue, rel=1e-9)


def test_tipping_point_entry(tmp_path: Path) -> None:
    _, (entry,), _ = run_plan(tmp_path)
    tp = by_name(entry)["tipping-point"]
    assert tp["groups"] == ["foam", "gauze"] and tp["missing"] == [5, 2]
    assert tp["complete"] == {"events": [3, 9], "totals": [20, 21]}
    assert tp["alpha"] == 0.05 and tp["test"] == "fisher-exact"
    assert len(tp["p_values"]) == 6 and {len(r) for r in tp["p_values"]} == {3}
    # each cell is Fisher's test on foam 3 + i of 25 against gauze 9 + j of 23
    for i in range(6):
        for j in range(3):
            want = scipy.stats.fisher_exact([[3 + i, 22 - i], [9 + j, 14 - j]]).pvalue
            assert tp["p_values"][i][j] == pytest.approx(want, rel=1e-9)  # scipy
    # expected events among the missing at the complete-case rates: 5·3/20 and 2·9/21
    assert tp["observed_point"] == pytest.approx([0.75, 6 / 7], rel=1e-12)
    assert tp["primary_rejects"] == (entry["p_value"] <= 0.05)
    decisions = [[p <= 0.05 for p in row] for row in tp["p_values"]]
    assert tp["cells_changing"] == sum(d != tp["primary_rejects"] for row in decisions
                                       for d in row)
    for i, j in tp["boundary"]:
        flips = [k for k, d in enumerate(decisions[i]) if d != tp["primary_rejects"]]
        assert j == (flips[0] if flips else None)
    assert [i for i, _ in tp["boundary"]] == list(range(6))
    json.dumps(entry, allow_nan=False)  # nothing non-finite reaches results.json


def test_tipping_point_applies_the_sparse_switch_cell_by_cell(tmp_path: Path) -> None:
    plan_text = PLAN.replace("    test: TEST\n", "    test: TEST\n    sparse: {min_expected: 5, "
                             "test: fisher-exact}\n")
    # foam 0 of 6 observed and 6 missing, gauze 2 of 8 and 3 missing: small expected counts
    # in some cells only
    csv = "\n".join(["pid,arm,inf", *rows("foam", 0, 6, 6), *rows("gauze", 2, 6, 3,
                                                                    start=100)]) + "\n"
    _, (entry,), _ = run_plan(tmp_path, "pearson-chi-square", csv=csv, plan_text=plan_text)
    tp = by_name(entry)["tipping-point"]
    switched = 0
    for i in range(7):
        for j in range(4):
            x1, x2 = i, 2 + j
            events, totals = [x1, x2], [12, 11]
            if tables.smallest_expected(events, totals) < 5:
                switched += 1
                want = proportions.fisher_exact(x1, 12, x2, 11).p_value
            else:
                want = proportions.pearson_chi_square(events, totals).p_value
            assert tp["p_values"][i][j] == pytest.approx(want, rel=1e-9), (i, j)
    assert 0 < switched < 28 and tp["cells_switched"] == switched


def test_cells_without_a_p_value_are_null(tmp_path: Path) -> None:
    # no events observed at all; the cell with no events among the missing has a zero column
    # margin, where the chi-square test is not defined
    csv = "\n".join(["pid,arm,inf", *rows("foam", 0, 5, 1), *rows("gauze", 0, 4, 1,
                                                                    start=100)]) + "\n"
    _, (entry,), notes = run_plan(tmp_path, "pearson-chi-square", csv=csv)
    tp = by_name(entry)["tipping-point"]
    assert tp["p_values"][0][0] is None and tp["cells_not_computable"] == 1
    assert tp["p_values"][1][1] == pytest.approx(
        scipy.stats.chi2_contingency([[1, 5], [1, 4]], correction=False).pvalue, rel=1e-9)
    assert entry["p_value"] is None and tp["primary_rejects"] is None
    assert tp["cells_changing"] == 0  # compared with "not rejected": nothing rejects here
    assert any("tipping-point: 1 of 4 cells" in n.detail for n in notes)
    assert any("the primary p-value is not computable" in n.detail for n in notes)
    # worst case foam 1 of 6, gauze 0 of 5: computable again
    worst = by_name(entry)["worst-case"]
    assert worst["table"]["events"] == [1, 0] and worst["p_value"] is not None


STRATIFIED = """\
prespec: 1
title: Invented two-site study
data: {id: pid, group: arm, groups: [foam, gauze]}
outcomes:
  infection: {column: inf, event: [1], no_event: [0], missing: exclude, favourable: no-event}
alpha: 0.05
multiplicity: none
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: cochran-mantel-haenszel,
     strata: [site], sensitivity: [worst-case]}
"""


def test_worst_case_of_a_stratified_test_imputes_within_each_stratum(tmp_path: Path) -> None:
    lines = ["pid,arm,site,inf"]
    # north: foam 1/5 + 2 blank, gauze 3/6 + 0; south: foam 2/8 + 1 blank, gauze 4/7 + 1
    spec = [("north", "foam", 1, 4, 2), ("north", "gauze", 3, 3, 0),
            ("south", "foam", 2, 6, 1), ("south", "gauze", 4, 3, 1)]
    pid = 0
    for site, arm, ev, no, blank in spec:
        for cell in ["1"] * ev + ["0"] * no + [""] * blank:
            pid += 1
            lines.append(f"{pid},{arm},{site},{cell}")
    _, (entry,), _ = run_plan(tmp_path, csv="\n".join(lines) + "\n", plan_text=STRATIFIED)
    (worst,) = entry["sensitivity"]
    # foam's blanks infected, gauze's not: north foam 3/7, gauze 3/6; south foam 3/9, gauze
    # 4/8; pooled foam 6 of 16, gauze 7 of 14
    assert worst["table"] == {"groups": ["foam", "gauze"], "events": [6, 7], "totals": [16, 14]}
    from statsmodels.stats.contingency_tables import StratifiedTable

    strata = StratifiedTable([[[3, 4], [3, 3]], [[3, 6], [4, 4]]])
    # statsmodels StratifiedTable.test_null_odds(correction=False) and oddsratio_pooled
    assert worst["p_value"] == pytest.approx(strata.test_null_odds(correction=False).pvalue,
                                             rel=1e-9)
    assert worst["estimate"]["measure"] == "odds-ratio"
    assert worst["estimate"]["value"] == pytest.approx(strata.oddsratio_pooled, rel=1e-9)


@pytest.mark.parametrize("test,sparse", [("barnard-exact", None), ("boschloo-exact", None),
                                         ("pearson-chi-square", "boschloo-exact")])
def test_tipping_point_is_refused_where_no_grid_exists(tmp_path: Path, test: str,
                                                       sparse: str | None) -> None:
    text = PLAN.replace("TEST", test).replace("MISSING", "exclude")
    if sparse:
        text = text.replace("    sensitivity:", f"    sparse: {{min_expected: 5, test: {sparse}}}"
                            "\n    sensitivity:")
    (tmp_path / "p.yaml").write_text(text)
    with pytest.raises(PlanError) as err:
        load_plan(tmp_path / "p.yaml")
    shown = sparse or test
    assert str(err.value).endswith(
        f"hypotheses.H1.sensitivity[3]: tipping-point is not available with '{shown}': an "
        "unconditional exact test searches a supremum over the nuisance parameter for every "
        "table, too slow to repeat over a whole grid")
    assert err.value.exit_status == 2


def test_tipping_point_is_refused_under_a_stratified_test(tmp_path: Path) -> None:
    (tmp_path / "p.yaml").write_text(STRATIFIED.replace("[worst-case]",
                                                        "[worst-case, tipping-point]"))
    with pytest.raises(PlanError, match=r"sensitivity\[2\]: tipping-point is not available "
                                        r"with 'cochran-mantel-haenszel': the number of events "
                                        r"among a group's missing does not say in which strata"):
        load_plan(tmp_path / "p.yaml")
    (tmp_path / "p.yaml").write_text(STRATIFIED)
    load_plan(tmp_path / "p.yaml")  # the worst case alone is accepted


def test_run_writes_sensitivity_beside_the_primary_result(tmp_path: Path) -> None:
    text = PLAN.replace("TEST", "pearson-chi-square").replace("MISSING", "exclude")
    text += ("    estimand:\n      variable: surgical-site infection by day 30\n"
             "      intercurrent: []\n")
    plan, data = tmp_path / "trial.yaml", tmp_path / "data.csv"
    plan.write_text(text)
    data.write_text(CSV)
    api.lock(plan, actor="ana")
    outcome = api.run(plan, data, out=tmp_path / "report", actor="ana")
    doc = json.loads((outcome.folder / "results.json").read_text())
    (hyp,) = doc["hypotheses"]
    # the primary result is that of the complete cases, and the sensitivity list is beside it
    chi = scipy.stats.chi2_contingency([[3, 17], [9, 12]], correction=False)
    assert hyp["p_value"] == pytest.approx(chi.pvalue, rel=1e-9)
    assert [s["analysis"] for s in hyp["sensitivity"]] == ["worst-case", "best-case",
                                                           "tipping-point"]
    assert hyp["estimand"]["text"] == (
        "Population: the analysed participants of foam and gauze; variable: surgical-site "
        "infection by day 30 (inf); no intercurrent events named; population-level summary: "
        "the risk difference (foam minus gauze).")
    tp = hyp["sensitivity"][2]
    assert tp["p_values"][0][0] == pytest.approx(
        scipy.stats.chi2_contingency([[3, 22], [9, 14]], correction=False).pvalue, rel=1e-9)
    assert not any(isinstance(v, float) and not math.isfinite(v)
                   for row in tp["p_values"] for v in row)
    (entry,) = [e for e in audit.read_log(audit.log_path(plan)) if e["action"] == "run"]
    assert entry["details"]["report"] == "report"
