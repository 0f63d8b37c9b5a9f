"""The plan keys of covariate adjustment (g-computation) and of the stratified score test:
their defaults, what the lock writes, and one clear error line for each misuse."""

from __future__ import annotations

from pathlib import Path

import pytest

from prespec.demo.adjusted import PLAN_TEXT
from prespec.errors import PlanError
from prespec.plan import load_plan

HERE = Path(__file__).parents[1]


def test_the_example_plan_is_the_demo_plan() -> None:
    assert (HERE / "plans" / "adjusted-primary.yaml").read_text("utf-8") == PLAN_TEXT


def test_defaults_are_resolved_and_written_only_where_used(tmp_path: Path) -> None:
    text = PLAN_TEXT.replace("    variance: ye\n", "").replace("    weights: cmh\n", "").replace(
        "    measure: risk-difference\n    interval: stratified-miettinen-nurminen\n", "")
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    loaded = load_plan(path)
    h1, h2 = loaded.resolved["hypotheses"]
    assert {k: h1[k] for k in ("covariates", "variance", "randomisation_strata",
                               "covariate_missing", "fallback", "measure", "interval")} == {
        "covariates": {"age": "numeric", "frail": "numeric", "centre": "categorical"},
        "variance": "ye", "randomisation_strata": ["centre"], "covariate_missing": "exclude",
        "fallback": "two-proportion-z", "measure": "risk-difference",
        "interval": "g-computation"}
    assert "weights" not in h1
    assert {k: h2[k] for k in ("weights", "measure", "interval", "strata")} == {
        "weights": "cmh", "measure": "risk-difference",
        "interval": "stratified-miettinen-nurminen", "strata": ["centre"]}
    assert not {"covariates", "variance", "randomisation_strata", "covariate_missing",
                "fallback"} & set(h2)
    # the defaults written out give the same fingerprint as left out
    full = tmp_path / "full.yaml"
    full.write_text(PLAN_TEXT, encoding="utf-8")
    assert load_plan(full).fingerprint == loaded.fingerprint


H1_COV = "    covariates: {age: numeric, frail: numeric, centre: categorical}\n"
H2_WEIGHTS = "    weights: cmh\n"

CASES = [
    ("covariates without g-computation",
     PLAN_TEXT.replace(H2_WEIGHTS, H2_WEIGHTS + "    covariates: {age: numeric}\n"),
     "covariates: {age: numeric}", "hypotheses.H2.covariates",
     "is used only with test: g-computation"),
    ("weights without stratified-score",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    weights: cmh\n"),
     "    weights: cmh\n    randomisation_strata", "hypotheses.H1.weights",
     "is used only with test: stratified-score"),
    ("the group column as a covariate",
     PLAN_TEXT.replace(H1_COV, "    covariates: {arm: categorical}\n"),
     "covariates: {arm: categorical}", "hypotheses.H1.covariates.arm",
     "'arm' is the group column; covariates are other columns"),
    ("the outcome column as a covariate",
     PLAN_TEXT.replace(H1_COV, "    covariates: {pneumonia_14d: numeric}\n"),
     "covariates: {pneumonia_14d", "hypotheses.H1.covariates.pneumonia_14d",
     "is an outcome column; covariates are baseline columns"),
    ("a misspelt covariate kind",
     PLAN_TEXT.replace(H1_COV, "    covariates: {age: numerical}\n"),
     "covariates: {age: numerical}", "hypotheses.H1.covariates.age",
     "'numerical'"),
    ("g-computation without covariates", PLAN_TEXT.replace(H1_COV, ""),
     "test: g-computation", "hypotheses.H1.test", "needs covariates:"),
    ("randomisation strata with the ge variance",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ge\n"),
     "randomisation_strata: [centre]", "hypotheses.H1.randomisation_strata",
     "the stratified-randomisation form is that of variance: ye"),
    ("a stratified fallback",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    fallback: stratified-score\n"),
     "fallback: stratified-score", "hypotheses.H1.fallback",
     "'stratified-score' cannot be the fallback of 'g-computation'"),
    ("a two-sided-only fallback under a one-sided alternative",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    fallback: likelihood-ratio\n"
                       "    alternative: less\n"),
     "fallback: likelihood-ratio", "hypotheses.H1.fallback", "tested two-sided only"),
    ("a risk ratio under stratified-score",
     PLAN_TEXT.replace("    interval: stratified-miettinen-nurminen\n", "").replace(
         "    weights: cmh\n    measure: risk-difference\n",
         "    weights: cmh\n    measure: risk-ratio\n"),
     "measure: risk-ratio", "hypotheses.H2.measure",
     "'risk-ratio' is not a measure of 'stratified-score' (measures: risk-difference)"),
    ("an unstratified interval under stratified-score",
     PLAN_TEXT.replace("interval: stratified-miettinen-nurminen", "interval: newcombe"),
     "interval: newcombe", "hypotheses.H2.interval",
     "(intervals: stratified-miettinen-nurminen, stratified-newcombe)"),
    ("stratified-score without strata", PLAN_TEXT.replace("    strata: [centre]\n", ""),
     "test: stratified-score", "hypotheses.H2.test", "needs strata:"),
    ("a sparse switch on g-computation",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    sparse: {min_expected: 5, "
                       "test: fisher-exact}\n"),
     "sparse: {min_expected", "hypotheses.H1.sparse", "its fallback key names the test"),
    ("worst-case on g-computation",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    sensitivity: [worst-case]\n")
     .replace("    missing: exclude\n", "    missing: exclude\n    favourable: no-event\n"),
     "sensitivity: [worst-case]", "hypotheses.H1.sensitivity[1]",
     "worst-case imputes a count table"),
    ("tipping-point on stratified-score",
     PLAN_TEXT.replace(H2_WEIGHTS, H2_WEIGHTS + "    sensitivity: [tipping-point]\n"),
     "sensitivity: [tipping-point]", "hypotheses.H2.sensitivity[1]",
     "tipping-point is not available with 'stratified-score'"),
    ("a family on g-computation",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    over: centre\n"
                       "    flag_method: benjamini-hochberg\n"),
     "test: g-computation", "hypotheses.H1.test", "is not a test for a family"),
    ("interim looks on g-computation",
     PLAN_TEXT.replace("    variance: ye\n", "    variance: ye\n    looks: {fractions: [0.5, 1], "
                       "efficacy: obrien-fleming}\n"),
     "looks: {fractions", "hypotheses.H1.looks", "interim looks need a test with a signed z"),
]


def assert_one_error_line(plan: Path, text: str, marker: str, path: str, says: str) -> None:
    """``text`` written to ``plan`` fails to load with one error line at the line of ``marker``
    (which must occur once), at key ``path``, saying ``says``."""
    plan.write_text(text, encoding="utf-8")
    with pytest.raises(PlanError) as caught:
        load_plan(plan)
    err = caught.value
    assert "\n" not in str(err)
    assert text.count(marker) == 1, marker
    line = text[:text.index(marker)].count("\n") + 1
    assert (err.file, err.line, err.path) == (str(plan), line, path), str(err)
    assert says in err.message, str(err)
    assert err.exit_status == 2


@pytest.mark.parametrize(("name", "text", "marker", "path", "says"), CASES,
                         ids=[c[0] for c in CASES])
def test_one_error_line_per_misuse(tmp_path: Path, name: str, text: str, marker: str,
                                   path: str, says: str) -> None:
    assert_one_error_line(tmp_path / "plan.yaml", text, marker, path, says)
