"""The report of a covariate-adjusted (g-computation) and of a stratified-score hypothesis, and a
rehearsal's covariates (src/prespec/report/adjusted.py, the hypothesis and strata parts of
sections.py, the covariates of blinded.py, the model table of tables.py), and the results
models that declare them (analysis/results.py).

The results below are invented, in the shape of the results.json contract of issue 16 (the
wound-dressing scenario: negative-pressure against gauze, adjusted for age and site). The report
computes nothing: the tests check that it shows each number results.json holds, labelled, and
that the group's odds ratio is labelled as conditional on the covariates.
"""

from __future__ import annotations

import copy
import csv
import html
import json
import re
from pathlib import Path
from typing import Any

import pytest
from pydantic import ValidationError

from prespec.analysis.results import Hypothesis, RehearsalResults, RunResults, finish, read_results
from prespec.errors import PrespecError
from prespec.report import adjusted as report_adjusted
from prespec.report import blinded, sections
from prespec.report.tablenames import hypothesis_table, model_table
from prespec.report.tables import MODEL_HEADER, write_tables

try:
    from test_report_blinded import blinded_results
    from test_report_figures import HOSTILE_ATTR, HOSTILE_SCRIPT, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_blinded import blinded_results
    from tests.test_report_figures import HOSTILE_ATTR, HOSTILE_SCRIPT, sample_results

YE = "Ye et al. (2023), stratified randomisation by site"


def adjusted_entry() -> dict[str, Any]:
    """An invented g-computation hypothesis (risk difference, Ye's variance, age and site)."""
    return {
        "id": "H1", "title": "Negative-pressure vs gauze, adjusted", "role": "primary",
        "kind": "pair", "outcome": "infection", "compare": ["negative-pressure", "gauze"],
        "alternative": "two-sided", "comparison": "superiority", "margin": None,
        "null_rate": None, "scores": None, "strata": None,
        "planned_test": "g-computation", "test": "g-computation", "continuity": None,
        "statistic": -2.7431, "df": None, "p_value": 0.006087, "p_adjusted": 0.01217,
        "reject": True,
        "estimate": {"measure": "risk-difference", "value": -0.0963,
                     "ci": [-0.1651, -0.0275], "ci_method": "g-computation", "level": 0.95},
        "table": {"groups": ["negative-pressure", "gauze"], "events": [20, 39],
                  "totals": [196, 198]},
        "expected": None, "strata_tables": None, "homogeneity": None, "monte_carlo": None,
        "margin_check": None, "rule": None, "parent": None, "gate": None, "family": None,
        "adjusted": {
            "covariates": [
                {"column": "age", "kind": "numeric", "levels": None, "reference": None},
                {"column": "site", "kind": "categorical", "levels": ["north", "south"],
                 "reference": "north"},
            ],
            "variance": "ye",
            "randomisation_strata": ["site"],
            "missing_covariate": {"negative-pressure": 2, "gauze": 1},
            "risks": [
                {"group": "negative-pressure", "risk": 0.10132, "standard_error": 0.02107},
                {"group": "gauze", "risk": 0.19766, "standard_error": 0.02811},
            ],
            "model": {
                "terms": [
                    {"term": "intercept", "coefficient": -1.4021, "standard_error": 0.3113},
                    {"term": "group", "coefficient": -0.7987, "standard_error": 0.2905},
                    {"term": "age", "coefficient": 0.02034, "standard_error": 0.01021},
                    {"term": "site=south", "coefficient": 0.3046, "standard_error": 0.2017},
                ],
                "conditional_odds_ratio": {"value": 0.44993, "ci": [0.25461, 0.79508],
                                           "level": 0.95},
                "iterations": 5,
            },
            "fallback": None,
        },
    }


def fallback_entry() -> dict[str, Any]:
    """The same hypothesis after the working model failed: the fallback z test ran."""
    hyp = adjusted_entry()
    hyp.update(test="two-proportion-z", statistic=-2.6518, p_value=0.008006,
               estimate={"measure": "risk-difference", "value": -0.09493,
                         "ci": [-0.1643, -0.0243], "ci_method": "newcombe", "level": 0.95})
    hyp["adjusted"].update(
        risks=None, model=None,
        fallback={"test": "two-proportion-z",
                  "reason": "separation: site=south predicts the outcome perfectly"})
    return hyp


def stratified_entry() -> dict[str, Any]:
    """An invented stratified-score hypothesis over two sites, Miettinen–Nurminen weights."""
    hyp = adjusted_entry()
    del hyp["adjusted"]
    hyp.update(
        id="H2", title="Common risk difference over the sites", role="secondary",
        planned_test="stratified-score", test="stratified-score", statistic=-2.5102,
        p_value=0.01207, p_adjusted=0.01217, strata=["site"],
        estimate={"measure": "risk-difference", "value": -0.0952, "ci": [-0.1688, -0.0213],
                  "ci_method": "stratified-miettinen-nurminen", "level": 0.95},
        table={"groups": ["negative-pressure", "gauze"], "events": [21, 40],
               "totals": [198, 199]},
        strata_tables=[
            {"stratum": {"site": "north"}, "events": [11, 23], "totals": [110, 109]},
            {"stratum": {"site": "south"}, "events": [10, 17], "totals": [88, 90]},
        ],
        stratified={"weights": "miettinen-nurminen", "stratum_weights": [0.5527, 0.4473]},
    )
    return hyp


def run_results(*hyps: dict[str, Any]) -> dict[str, Any]:
    res = sample_results()
    res["hypotheses"] = list(hyps)
    return res


def _page(hyp: dict[str, Any]) -> str:
    return sections.hypothesis(hyp, "hypotheses[0]", results=run_results(hyp))


def _text(fragment: str) -> str:
    """The fragment as a reader sees it: tags dropped, entities decoded, spaces collapsed."""
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", fragment)).split())


def _cells(fragment: str, cls: str) -> list[list[str]]:
    """The body rows of the table of class ``cls``, as text."""
    found = re.search(rf'<table class="prespec {cls}">(.*?)</table>', fragment, re.DOTALL)
    assert found, f"no table {cls}"
    body = found.group(1).split("<tbody>")[1]
    return [[_text(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row, re.DOTALL)]
            for row in re.findall(r"<tr[^>]*>(.*?)</tr>", body, re.DOTALL)]


def _fields(fragment: str) -> dict[str, str]:
    pairs = re.findall(r"<tr><th>([^<]*)</th><td>([^<]*)</td></tr>", fragment)
    return {_text(k): _text(v) for k, v in pairs}


# --- g-computation ----------------------------------------------------------------------------


def test_the_working_model_is_a_table_of_terms_coefficients_and_errors() -> None:
    page = _page(adjusted_entry())
    assert _cells(page, "prespec-model-terms") == [
        ["intercept", "-1.4021", "0.3113"],
        ["group", "-0.7987", "0.2905"],
        ["age", "0.0203", "0.0102"],
        ["site=south", "0.3046", "0.2017"],
    ]
    shown = _text(page)
    assert ("Working model: logistic regression of infection on the group indicator and the "
            "covariates (maximum likelihood, 5 iterations); coefficients on the log-odds scale."
            in shown)


def test_the_group_odds_ratio_is_labelled_conditional_and_not_the_effect_tested() -> None:
    page = _page(adjusted_entry())
    rows = _fields(page)
    label = ("Odds ratio of the group, negative-pressure against gauze, conditional on the "
             "covariates")
    assert rows[label] == "0.4499"
    assert rows["95% interval (conditional odds ratio)"] == "(0.2546, 0.7951)"
    shown = _text(page)
    assert ("This odds ratio is conditional on the covariates: it compares units with the same "
            "covariate values, from the working model. It is not the effect tested above, which "
            "is marginal (averaged over the analysed population).") in shown
    # every odds ratio the page names is labelled conditional; the effect is the marginal one
    assert rows["Estimate (risk difference)"] == "-0.0963"
    assert [k for k in rows if "odds ratio" in k.lower()] == [
        label, "95% interval (conditional odds ratio)"]
    # and the page never names an odds ratio without saying, right there, it is conditional
    found = list(re.finditer("odds ratio", shown, re.IGNORECASE))
    assert len(found) == 3
    assert all("conditional" in shown[m.start() - 15:m.end() + 60] for m in found)


def test_the_marginal_risks_effect_interval_and_z_are_shown() -> None:
    page = _page(adjusted_entry())
    assert _cells(page, "prespec-marginal-risks") == [
        ["negative-pressure", "0.1013", "0.0211"], ["gauze", "0.1977", "0.0281"]]
    assert ("Marginal (standardised) risks: each analysed unit's risk predicted by the working "
            "model under the group, averaged over all analysed units.") in _text(page)
    rows = _fields(page)
    assert rows["Estimate (risk difference)"] == "-0.0963"
    assert rows["Interval (95% g-computation)"] == "(-0.1651, -0.0275)"
    assert rows["Statistic (z)"] == "-2.743"
    assert "Statistic" not in rows  # labelled as z, not as a bare statistic
    assert rows["p-value"] == "0.006087"
    assert rows["Test used"] == "g-computation" and "Planned test" not in rows


def test_the_covariates_with_their_reference_level_and_the_units_left_out() -> None:
    page = _page(adjusted_entry())
    assert _cells(page, "prespec-covariates") == [
        ["age", "numeric", "—", "—"], ["site", "categorical", "north, south", "north"]]
    shown = _text(page)
    assert ("A categorical covariate enters the model by one indicator per level but the "
            "reference. Randomisation stratified by site. Left out for a missing covariate: "
            "negative-pressure 2, gauze 1 (3 units in all). The counts above are of the units "
            "analysed.") in shown
    hyp = adjusted_entry()
    hyp["adjusted"]["missing_covariate"] = {"negative-pressure": 0, "gauze": 0}
    hyp["adjusted"]["randomisation_strata"] = None
    shown = _text(_page(hyp))
    assert ("Simple randomisation (not stratified). No unit was left out for a missing "
            "covariate.") in shown


def test_one_line_names_the_variance_and_why_it_is_valid() -> None:
    page = _page(adjusted_entry())
    lines = re.findall(r'<p class="prespec-variance">(.*?)</p>', page, re.DOTALL)
    assert [_text(x) for x in lines] == [
        f"Variance (ye): {YE}. {report_adjusted.VARIANCE_WORDS['ye'][1]}"]
    hyp = adjusted_entry()
    hyp["adjusted"].update(variance="ge", randomisation_strata=None)
    line = _text(re.findall(r'<p class="prespec-variance">(.*?)</p>', _page(hyp), re.DOTALL)[0])
    assert line == ("Variance (ge): Ge et al. (2011), the delta method over the HC0 sandwich "
                    "covariance. The sandwich covariance of the coefficients does not rely on "
                    "the working model being true, but the delta method holds the observed "
                    "covariates fixed: it leaves out their sampling variation and can understate "
                    "the variance of the population-level effect when the effect differs between "
                    "covariate patterns (variance ye does not).")
    hyp["adjusted"].update(variance="ye")
    line = _text(re.findall(r'<p class="prespec-variance">(.*?)</p>', _page(hyp), re.DOTALL)[0])
    assert line.startswith("Variance (ye): Ye et al. (2023), simple randomisation. It is built")


def test_the_parts_come_in_the_reading_order() -> None:
    page = _page(adjusted_entry())
    order = ["prespec-counts", "prespec-covariates", "prespec-marginal-risks",
             "Estimate (risk difference)", "prespec-variance", "prespec-model-terms",
             "prespec-conditional-note"]
    at = [page.index(x) for x in order]
    assert at == sorted(at)


def test_after_a_fallback_a_box_says_the_model_failed_why_and_what_ran() -> None:
    page = _page(fallback_entry())
    box = re.search(r'<div class="prespec-fallback"[^>]*>(.*?)</div>', page, re.DOTALL)
    assert box is not None
    assert _text(box.group(1)) == (
        "The covariate-adjusted analysis did not run. The working model could not be used: "
        "separation: site=south predicts the outcome perfectly. As the plan pre-specified, the "
        "fallback test two-proportion-z ran instead, without covariate adjustment; the "
        "estimate, interval and p-value below are that test's, not an adjusted effect.")
    rows = _fields(page)
    assert rows["Test used"] == "two-proportion-z" and rows["Planned test"] == "g-computation"
    assert rows["Interval (95% newcombe)"] == "(-0.1643, -0.0243)"
    assert rows["Statistic (z)"] == "-2.652"
    # no model, no marginal risks, no variance line: nothing adjusted is claimed
    for absent in ("prespec-model-terms", "prespec-marginal-risks", "prespec-variance",
                   "conditional on the covariates"):
        assert absent not in page
    # the covariates and the units left out are still shown
    assert _cells(page, "prespec-covariates")[1] == ["site", "categorical", "north, south",
                                                      "north"]
    assert page.index("prespec-fallback") < page.index("prespec-counts")
    assert "prespec-fallback" not in _page(adjusted_entry())


def test_a_fallback_to_a_chi_square_test_is_not_labelled_z() -> None:
    hyp = fallback_entry()
    hyp.update(test="pearson-chi-square", statistic=7.032, df=1)
    hyp["adjusted"]["fallback"]["test"] = "pearson-chi-square"
    rows = _fields(_page(hyp))
    assert rows["Statistic (chi-square)"] == "7.032 (df 1)"
    assert "Statistic (z)" not in rows


def test_adjusted_labels_are_escaped() -> None:
    hyp = adjusted_entry()
    hyp["adjusted"]["covariates"][1]["levels"] = [HOSTILE_SCRIPT, "south"]
    hyp["adjusted"]["covariates"][1]["reference"] = HOSTILE_SCRIPT
    hyp["adjusted"]["model"]["terms"][3]["term"] = f"site={HOSTILE_ATTR}"
    hyp["adjusted"]["randomisation_strata"] = [HOSTILE_SCRIPT]
    page = _page(hyp)
    assert "<script>" not in page and "<img" not in page
    assert html.escape(HOSTILE_SCRIPT, quote=True) in page


@pytest.mark.parametrize(("path", "value", "message"), [
    (("adjusted", "risks", 0, "risk"), "0.1",
     "hypotheses.H1.adjusted.risks[0].risk: expected a number or null"),
    (("adjusted", "model", "terms"), {"term": "x"},
     "hypotheses.H1.adjusted.model.terms: expected a list"),
    (("adjusted", "missing_covariate"), [2, 1],
     "hypotheses.H1.adjusted.missing_covariate: expected an object"),
    (("adjusted", "model", "conditional_odds_ratio", "ci"), [0.2],
     "hypotheses.H1.adjusted.model.conditional_odds_ratio.ci: expected [low, high]"),
])
def test_a_malformed_adjusted_part_names_its_key(path: tuple[Any, ...], value: object,
                                                  message: str) -> None:
    hyp = adjusted_entry()
    target: Any = hyp
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    with pytest.raises(PrespecError, match=re.escape(f"results.json: {message}")):
        _page(hyp)


def test_a_hypothesis_without_the_new_keys_shows_none_of_their_parts() -> None:
    for hyp in sample_results()["hypotheses"]:
        page = sections.hypothesis(hyp, "hypotheses[0]", results=sample_results())
        for part in ("prespec-adjusted", "prespec-fallback", "prespec-variance",
                     "prespec-working-model", "prespec-weighting", "weight"):
            assert part not in page
        # every z test's statistic is labelled z (the plain two-proportion z test too)
        assert ("Statistic (z)" in page) == (hyp["test"] == "two-proportion-z"), hyp["id"]


# --- stratified-score -------------------------------------------------------------------------


def test_each_stratum_shows_its_weight_and_the_weighting_is_named() -> None:
    page = _page(stratified_entry())
    captions = [_text(c) for c in re.findall(r"<caption[^>]*>(.*?)</caption>", page, re.DOTALL)]
    assert captions == ["Stratum: site = north — weight 0.5527",
                        "Stratum: site = south — weight 0.4473"]
    line = _text(re.search(r'<p class="prespec-weighting">(.*?)</p>', page, re.DOTALL).group(1))
    assert line == ("The common risk difference combines the strata's differences. "
                    "Miettinen–Nurminen weights (Miettinen and Nurminen 1985): each stratum "
                    "weighs the inverse of the variance of its risk difference. Each stratum's "
                    "weight stands beside its table.")
    assert _cells(page, "prespec-stratum") == [["negative-pressure", "11", "99", "110"],
                                               ["gauze", "23", "86", "109"]]
    rows = _fields(page)
    assert rows["Statistic (z)"] == "-2.510"
    assert rows["Interval (95% stratified-miettinen-nurminen)"] == "(-0.1688, -0.0213)"
    assert rows["Strata"] == "site"


def test_cmh_weights_are_named_in_words() -> None:
    hyp = stratified_entry()
    hyp["stratified"] = {"weights": "cmh", "stratum_weights": [0.55, 0.45]}
    page = _page(hyp)
    assert ("Cochran–Mantel–Haenszel weights: stratum h weighs n₁ₕ·n₂ₕ / (n₁ₕ + n₂ₕ), so "
            "larger and more balanced strata count more.") in _text(page)
    assert "Stratum: site = south — weight 0.45" in _text(page)


def test_weights_that_do_not_match_the_strata_name_the_key() -> None:
    hyp = stratified_entry()
    hyp["stratified"]["stratum_weights"] = [1.0]
    with pytest.raises(PrespecError, match=re.escape(
            "results.json: hypotheses.H2.stratified.stratum_weights: expected 2 weights, one "
            "per stratum table, found 1")):
        _page(hyp)


def test_a_cmh_test_over_strata_shows_no_weights() -> None:
    hyp = stratified_entry()
    del hyp["stratified"]
    hyp.update(test="cochran-mantel-haenszel", planned_test="cochran-mantel-haenszel",
               statistic=6.31, df=1)
    page = _page(hyp)
    assert "weight" not in _text(page)
    assert _fields(page)["Statistic (Cochran–Mantel–Haenszel chi-square)"] == "6.310 (df 1)"


# --- the rehearsal ----------------------------------------------------------------------------


COVARIATES = [
    {"hypothesis": "H1", "column": "age", "kind": "numeric", "analysed": 398, "missing": 2,
     "summary": {"mean": 61.23, "sd": 9.812, "min": 34, "median": 62, "max": 88},
     "levels": None},
    {"hypothesis": "H1", "column": "site", "kind": "categorical", "analysed": 400,
     "missing": 0, "summary": None,
     "levels": [{"level": "north", "count": 220}, {"level": "south", "count": 180}]},
]


def rehearsal_with_covariates(fits: bool = True) -> dict[str, Any]:
    res = blinded_results()
    res["covariates"] = copy.deepcopy(COVARIATES)
    res["model_checks"] = [{"hypothesis": "H1", "fits": fits,
                            "reason": None if fits else "separation: site=south"}]
    return res


def test_the_rehearsal_shows_the_covariates_pooled_and_the_model_check() -> None:
    res = rehearsal_with_covariates()
    page = sections.pooled(res)
    assert page.index("Pooled outcomes") < page.index("Covariates of the adjusted analyses")
    assert _cells(page, "prespec-covariates-numeric") == [
        ["H1", "age", "398", "2", "61.23", "9.812", "34", "62", "88"]]
    assert _cells(page, "prespec-covariates-categorical") == [
        ["H1", "site", "400", "0", "north", "220"], ["H1", "site", "", "", "south", "180"]]
    assert _cells(page, "prespec-model-checks") == [["H1", "yes", "—"]]
    assert "prespec-model-failed" not in page
    assert "None of these figures belongs to a group." in _text(page)
    assert blinded.leaks(res) == []


def test_a_model_that_did_not_fit_on_the_dummy_allocation_is_flagged() -> None:
    page = sections.pooled(rehearsal_with_covariates(fits=False))
    assert _cells(page, "prespec-model-checks") == [["H1", "no", "separation: site=south"]]
    box = re.search(r'<div class="prespec-model-failed"[^>]*>(.*?)</div>', page, re.DOTALL)
    assert box is not None and _text(box.group(1)) == (
        "The working model did not fit for H1 on the dummy allocation (the reason is in the "
        "table). If it fails so on the real allocation, the run uses the plan's pre-specified "
        "fallback test instead.")


def test_a_rehearsal_without_covariates_and_a_run_show_no_covariate_section() -> None:
    assert "Covariates" not in sections.pooled(blinded_results())
    res = run_results(adjusted_entry())
    res["covariates"] = COVARIATES  # never shown for a run
    assert blinded.covariates(res) == ""


def test_adjusted_parts_in_a_rehearsal_are_named_as_leaks() -> None:
    res = blinded_results()
    res["hypotheses"][0]["adjusted"] = adjusted_entry()["adjusted"]
    res["hypotheses"][1]["stratified"] = {"weights": "cmh", "stratum_weights": [1.0]}
    assert blinded.leaks(res) == ["hypotheses.H1.adjusted", "hypotheses.H2.stratified"]


def test_a_malformed_model_check_names_its_key() -> None:
    res = rehearsal_with_covariates()
    res["model_checks"][0]["fits"] = "yes"
    with pytest.raises(PrespecError, match=re.escape(
            "results.json: model_checks[0].fits: expected true or false")):
        sections.pooled(res)


# --- tables/ ----------------------------------------------------------------------------------


def _rows(path: Path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def test_a_model_table_per_adjusted_hypothesis(tmp_path: Path) -> None:
    fallen = fallback_entry()
    fallen["id"] = "H3"
    res = run_results(adjusted_entry(), stratified_entry(), fallen)
    write_tables(tmp_path, res)
    assert model_table("H1") == "tables/model-H1.csv"
    assert _rows(tmp_path / model_table("H1")) == [
        MODEL_HEADER,
        ["term", "intercept", "-1.4021", "0.3113", "", "", ""],
        ["term", "group", "-0.7987", "0.2905", "", "", ""],
        ["term", "age", "0.02034", "0.01021", "", "", ""],
        ["term", "site=south", "0.3046", "0.2017", "", "", ""],
        ["conditional-odds-ratio", "group", "0.44993", "", "0.25461", "0.79508", "0.95"],
        ["marginal-risk", "negative-pressure", "0.10132", "0.02107", "", "", ""],
        ["marginal-risk", "gauze", "0.19766", "0.02811", "", "", ""],
    ]
    # no model after a fallback, and none for a stratified test: no model table
    names = sorted(p.name for p in (tmp_path / "tables").iterdir())
    assert names == sorted(["H1.csv", "H2.csv", "H3.csv", "model-H1.csv",
                            "groups-infection.csv", "groups-reopening.csv", "results.csv",
                            "statistics.csv"])


def test_a_hostile_term_cannot_become_a_formula(tmp_path: Path) -> None:
    hyp = adjusted_entry()
    hyp["adjusted"]["model"]["terms"][3]["term"] = "=cmd|' /C calc'!A0"
    write_tables(tmp_path, run_results(hyp))
    cell = _rows(tmp_path / model_table("H1"))[4][1]
    assert not cell.startswith("=") and cell.endswith("=cmd|' /C calc'!A0")


def test_model_tables_never_share_a_name_with_other_kinds() -> None:
    assert hypothesis_table("model-H1") == "tables/model%2DH1.csv"
    assert model_table("H/1") == "tables/model-H%2F1.csv"
    assert len({model_table("H1"), hypothesis_table("model-H1"), hypothesis_table("H1")}) == 3


# --- the results models -----------------------------------------------------------------------


def _run_doc(*hyps: dict[str, Any]) -> dict[str, Any]:
    path = next(p for p in sorted(Path(__file__).parent.glob("fixtures/studies/**/results.json"))
                if "before-issue-15/tour" in str(p))
    doc = json.loads(path.read_text("utf-8"))
    base = doc["hypotheses"][0]
    doc["hypotheses"] = [{**base, **h, "pre_specified": True} for h in hyps]
    return doc


def test_the_models_hold_the_adjusted_and_stratified_keys() -> None:
    doc = _run_doc(adjusted_entry(), fallback_entry(), stratified_entry())
    done = finish(copy.deepcopy(doc))
    assert done == doc  # the same keys, values and types
    assert list(done["hypotheses"][0])[-2:] == ["adjusted", "pre_specified"]
    read = read_results(done)
    assert isinstance(read, RunResults)
    first = read.hypotheses[0].adjusted
    assert first is not None and first.model is not None and first.risks is not None
    assert first.model.conditional_odds_ratio.value == 0.44993
    assert [c.reference for c in first.covariates] == [None, "north"]
    assert first.missing_covariate == {"negative-pressure": 2, "gauze": 1}
    second = read.hypotheses[1].adjusted
    assert second is not None and second.model is None and second.fallback is not None
    assert second.fallback.test == "two-proportion-z"
    third = read.hypotheses[2].stratified
    assert third is not None and third.stratum_weights == [0.5527, 0.4473]


@pytest.mark.parametrize(("change", "problem"), [
    (lambda h: h["adjusted"].update(variance="robust"),
     "hypotheses[0].adjusted.variance: Input should be 'ye' or 'ge'"),
    (lambda h: h["adjusted"]["missing_covariate"].update(gauze="1"),
     "hypotheses[0].adjusted.missing_covariate.gauze: Input should be a valid integer"),
    (lambda h: h["adjusted"]["model"].pop("terms"),
     "hypotheses[0].adjusted.model.terms: Field required"),
    (lambda h: h["adjusted"]["risks"][0].update(odds=0.1),
     "hypotheses[0].adjusted.risks[0].odds: Extra inputs are not permitted"),
])
def test_the_models_refuse_what_the_contract_does_not_hold(change: Any, problem: str) -> None:
    assert_refused(adjusted_entry(), change, problem)


def assert_refused(hyp: dict[str, Any], change: Any, problem: str) -> None:
    """``change(hyp)`` makes a results document the models refuse, first at ``problem``."""
    from prespec.common.records import first_problem

    change(hyp)
    with pytest.raises(ValidationError) as caught:
        finish(_run_doc(hyp))
    assert first_problem(caught.value) == problem


def test_the_new_keys_are_optional_and_described() -> None:
    fields = Hypothesis.model_fields
    assert fields["adjusted"].default is None and fields["stratified"].default is None
    assert fields["adjusted"].description and fields["stratified"].description
    rehearsal = RehearsalResults.model_fields
    assert rehearsal["covariates"].default is None and rehearsal["model_checks"].default is None
    from prespec import api

    defs = api.schema("results")["$defs"]
    for name in ("Adjusted", "Covariate", "MarginalRisk", "WorkingModel", "ModelTerm",
                 "ConditionalOddsRatio", "Fallback", "Stratified", "RehearsedCovariate",
                 "ModelCheck"):
        props = defs[name]["properties"]
        assert all(p.get("description") for p in props.values()), name


def test_a_rehearsal_with_covariates_goes_through_the_models() -> None:
    path = next(p for p in sorted(Path(__file__).parent.glob("fixtures/studies/**/results.json"))
                if json.loads(p.read_text("utf-8"))["kind"] == "rehearsal")
    doc = json.loads(path.read_text("utf-8"))
    doc["covariates"] = copy.deepcopy(COVARIATES)
    doc["model_checks"] = [{"hypothesis": "H1", "fits": False, "reason": "separation"}]
    done = finish(copy.deepcopy(doc))
    assert done["covariates"] == COVARIATES and done["model_checks"] == doc["model_checks"]
    assert list(done).index("model_checks") < list(done).index("data_dictionary")
    read = read_results(done)
    assert isinstance(read, RehearsalResults) and read.covariates is not None
    assert read.covariates[1].levels is not None and read.covariates[1].levels[1].count == 180
    doc["covariates"][0]["summary"]["mode"] = 60
    with pytest.raises(ValidationError):
        finish(doc)


def test_the_data_dictionary_names_covariate_roles_in_words() -> None:
    assert blinded.role_words("hypotheses.H1.covariates.age") == "covariate age of H1"
    assert (blinded.role_words("hypotheses.H1.randomisation_strata")
            == "randomisation strata of H1")
    assert blinded.role_words("hypotheses.H1.strata") == "strata of H1"
