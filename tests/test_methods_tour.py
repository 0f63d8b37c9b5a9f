"""plans/methods-tour.yaml through the whole pipeline: every method the plan names runs, and the
pieces the analysis assembles (strata, margins, gatekeeping, graphical family) are consistent.

The values of each method are checked against their sources in tests/reference/; here the
numbers are re-derived from scipy/statsmodels on the tables the pipeline itself reports, to
show the right table reached the right method.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import scipy.stats
from statsmodels.stats.contingency_tables import StratifiedTable

import prespec.report
from prespec import api
from prespec.demo.wound import demo_data
from prespec.stats.graphical import graphical_adjust

TOUR = Path(__file__).parent.parent / "plans" / "methods-tour.yaml"


@pytest.fixture(scope="module")
def results(tmp_path_factory: pytest.TempPathFactory) -> dict:
    folder = tmp_path_factory.mktemp("tour")
    plan = folder / "tour.yaml"
    shutil.copy(TOUR, plan)
    (folder / "data.csv").write_text(demo_data())
    patch = pytest.MonkeyPatch()
    patch.setattr(prespec.report, "render_notebook", lambda f: None)
    try:
        api.lock(plan, actor="tour")
        out = api.run(plan, folder / "data.csv", out=folder / "report")
    finally:
        patch.undo()
    return json.loads((out.folder / "results.json").read_text())


def by_id(results: dict) -> dict[str, dict]:
    return {h["id"]: h for h in results["hypotheses"]}


def test_every_hypothesis_has_a_p_value(results: dict) -> None:
    follow = ["H5:alginate-vs-gauze", "H5:negative-pressure-vs-gauze",
              "H5:negative-pressure-vs-alginate"]
    assert list(by_id(results)) == ["H1", "H2", "H3", "H4", "H5", *follow, "H6", "H7", "H8",
                                    "H9", "H10"]
    for h in results["hypotheses"]:
        assert h["p_value"] is not None and 0 <= h["p_value"] <= 1, h["id"]
    assert {h["test"] for h in results["hypotheses"]} >= {
        "cochran-mantel-haenszel", "farrington-manning", "binomial-exact",
        "cochran-armitage-trend", "fisher-exact", "boschloo-exact", "two-proportion-z",
        "barnard-exact", "likelihood-ratio"}


def test_stratified_hypothesis_matches_statsmodels(results: dict) -> None:
    h1 = by_id(results)["H1"]
    assert [s["stratum"] for s in h1["strata_tables"]] == [{"site": "north"}, {"site": "south"}]
    tables = [[[s["events"][0], s["totals"][0] - s["events"][0]],
               [s["events"][1], s["totals"][1] - s["events"][1]]] for s in h1["strata_tables"]]
    st = StratifiedTable([np.array(t) for t in tables])
    # statsmodels.stats.contingency_tables.StratifiedTable.test_null_odds (uncorrected)
    assert h1["statistic"] == pytest.approx(st.test_null_odds(correction=False).statistic,
                                            rel=1e-9)
    assert h1["estimate"]["measure"] == "risk-ratio"
    assert h1["estimate"]["ci_method"] == "greenland-robins"
    assert h1["estimate"]["value"] == pytest.approx(st.riskratio_pooled, rel=1e-9)
    assert h1["homogeneity"]["test"] == "breslow-day-tarone"


def test_graphical_family(results: dict) -> None:
    hyps = by_id(results)
    main = [hyps[i] for i in ("H1", "H2", "H3")]
    assert all(h["family"] == "main" for h in main)
    assert all(h["p_adjusted"] >= h["p_value"] for h in main)
    assert all(h["reject"] == (h["p_adjusted"] <= 0.05) for h in main)
    # the plan's weights and transitions, as the matrix the procedure takes (plan order)
    expected = graphical_adjust([h["p_value"] for h in main], [0.5, 0.25, 0.25],
                                [[0, 0.5, 0.5], [0, 0, 1], [0, 1, 0]])
    assert [h["p_adjusted"] for h in main] == pytest.approx(expected, rel=1e-12)
    assert results["multiplicity"]["method"] == "graphical"


def test_margins_and_single_group(results: dict) -> None:
    hyps = by_id(results)
    h2 = hyps["H2"]
    assert h2["comparison"] == "non-inferiority" and h2["margin"] == 0.05
    assert h2["estimate"]["level"] == pytest.approx(0.90)
    assert h2["margin_check"]["interval_excludes_margin"] == (h2["estimate"]["ci"][1] < 0.05)
    h3 = hyps["H3"]
    x, n = h3["table"]["events"][0], h3["table"]["totals"][0]
    # scipy.stats.binomtest, one-sided "less"
    assert h3["p_value"] == pytest.approx(
        scipy.stats.binomtest(x, n, 0.15, alternative="less").pvalue, rel=1e-12)
    assert h3["estimate"]["measure"] == "proportion"
    assert h3["estimate"]["ci_method"] == "clopper-pearson"
    h7 = hyps["H7"]
    assert h7["comparison"] == "equivalence" and h7["margin"] == [0.8, 1.25]
    assert h7["margin_check"] is not None


def test_follow_ups_of_the_k_group_test(results: dict) -> None:
    hyps = by_id(results)
    follow = [h for h in results["hypotheses"] if h["parent"] == "H5"]
    assert [h["id"] for h in follow] == ["H5:alginate-vs-gauze",
                                         "H5:negative-pressure-vs-gauze",
                                         "H5:negative-pressure-vs-alginate"]
    assert all(h["role"] == "exploratory" and h["p_adjusted"] is None for h in follow)
    t = follow[0]["table"]
    # scipy.stats.fisher_exact on the pair's own 2x2 table
    assert follow[0]["p_value"] == pytest.approx(scipy.stats.fisher_exact(
        [[t["events"][0], t["totals"][0] - t["events"][0]],
         [t["events"][1], t["totals"][1] - t["events"][1]]]).pvalue, rel=1e-12)
    assert hyps["H5"]["df"] is None and hyps["H9"]["df"] == 2


def test_trend_scores_and_direction(results: dict) -> None:
    h4 = by_id(results)["H4"]
    assert h4["scores"] == [0, 1, 2]
    rates = [e / n for e, n in zip(h4["table"]["events"], h4["table"]["totals"], strict=True)]
    assert (h4["statistic"] < 0) == (rates[2] < rates[0])  # signed: falling with the score
