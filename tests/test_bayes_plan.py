"""The plan keys of a Bayesian rule (test: posterior-probability): what lock resolves and
writes, and one clear error line for each misuse."""

from __future__ import annotations

from pathlib import Path

import pytest

from prespec.errors import PlanError
from prespec.plan import load_plan

try:
    from test_adjusted_plan import assert_one_error_line
except ImportError:  # tests collected as a package
    from tests.test_adjusted_plan import assert_one_error_line

HERE = Path(__file__).parents[1]
EXAMPLE = (HERE / "plans" / "bayesian-secondary.yaml").read_text("utf-8")
H2_PRIOR = "    prior: {alginate: {mean: 0.2, n: 4}, gauze: {mean: 0.2, n: 4}}\n"


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_a_prior_by_its_mean_is_resolved_into_beta_parameters(tmp_path: Path) -> None:
    resolved = load_plan(_write(tmp_path, EXAMPLE)).resolved
    h1, h2 = resolved["hypotheses"]
    assert h2["prior"] == {"alginate": [0.8, 3.2], "gauze": [0.8, 3.2]}
    assert {k: h2[k] for k in ("threshold", "credible", "measure", "interval", "alternative",
                               "comparison", "margin")} == {
        "threshold": 0.975, "credible": 0.95, "measure": "risk-difference",
        "interval": "equal-tailed-credible", "alternative": "less",
        "comparison": "superiority", "margin": None}
    assert "sceptical_prior" not in h2
    assert not {"prior", "threshold", "credible", "sceptical_prior"} & set(h1)
    # written as the beta parameters, the plan has the same fingerprint
    same = EXAMPLE.replace(H2_PRIOR, "    prior: {alginate: [0.8, 3.2], gauze: [0.8, 3.2]}\n")
    assert load_plan(_write(tmp_path, same)).fingerprint == load_plan(
        _write(tmp_path, EXAMPLE)).fingerprint


def test_a_left_out_prior_is_uniform_and_one_group_takes_proportion(tmp_path: Path) -> None:
    text = EXAMPLE.replace(H2_PRIOR, "").replace("    compare: [alginate, gauze]\n",
                                                 "    compare: [alginate]\n    null_rate: 0.2\n")
    h2 = load_plan(_write(tmp_path, text)).resolved["hypotheses"][1]
    assert h2["prior"] == {"alginate": [1.0, 1.0]}
    assert (h2["measure"], h2["interval"]) == ("proportion", "equal-tailed-credible")


def test_the_bayesian_rule_is_outside_the_multiplicity_family(tmp_path: Path) -> None:
    from prespec.analysis.decision import family_of

    model = load_plan(_write(tmp_path, EXAMPLE)).model
    assert [family_of(h) for h in model.hypotheses] == ["main", None]
    assert [h.outside_multiplicity for h in model.hypotheses] == [False, True]


CASES = [
    ("two-sided", EXAMPLE.replace("    alternative: less\n", ""), "test: posterior-probability",
     "hypotheses.H2.test", "a posterior-probability rule is one-sided"),
    ("no threshold", EXAMPLE.replace("    threshold: 0.975\n", ""),
     "test: posterior-probability", "hypotheses.H2.test", "needs threshold:"),
    ("a threshold of 1", EXAMPLE.replace("threshold: 0.975", "threshold: 1"), "threshold: 1",
     "hypotheses.H2.threshold", ""),
    ("a prior for another group",
     EXAMPLE.replace(H2_PRIOR, "    prior: {alginate: [1, 1], gauzе: [2, 8]}\n"),
     "prior: {alginate", "hypotheses.H2.prior.gauzе", "is not one of the compared groups"),
    ("a prior missing a group", EXAMPLE.replace(H2_PRIOR, "    prior: {alginate: [1, 1]}\n"),
     "prior: {alginate", "hypotheses.H2.prior", "gives no prior for 'gauze'"),
    ("a negative beta parameter",
     EXAMPLE.replace(H2_PRIOR, "    prior: {alginate: [1, -1], gauze: [2, 8]}\n"),
     "prior: {alginate", "hypotheses.H2.prior.alginate[2]", "must be greater than 0"),
    ("a mean of 1", EXAMPLE.replace("gauze: {mean: 0.2, n: 4}", "gauze: {mean: 1, n: 4}"),
     "prior: {alginate", "hypotheses.H2.prior.gauze.mean", "must be less than 1"),
    ("a margin of 1", EXAMPLE.replace("    threshold: 0.975\n",
                                      "    threshold: 0.975\n    margin: 1\n"),
     "margin: 1", "hypotheses.H2.margin", "one risk difference in (-1, 1)"),
    ("non-inferiority", EXAMPLE.replace("    threshold: 0.975\n", "    threshold: 0.975\n"
                                        "    comparison: non-inferiority\n    margin: 0.05\n"),
     "comparison: non-inferiority", "hypotheses.H2.comparison", "with comparison: superiority"),
    ("a prior on a frequentist test",
     EXAMPLE.replace("    interval: newcombe\n", "    interval: newcombe\n    threshold: 0.9\n"),
     "threshold: 0.9\n", "hypotheses.H1.threshold", "is used only with test: posterior-probability"),
    ("a graphical weight", EXAMPLE.replace(
        "multiplicity: holm", "multiplicity: {method: graphical, weights: {H1: 0.5, H2: 0.5}}"),
     "multiplicity: {method", "multiplicity.weights.H2", "is a Bayesian rule"),
    ("interim looks", EXAMPLE.replace("    credible: 0.95\n", "    credible: 0.95\n    looks: "
                                      "{fractions: [0.5, 1], efficacy: obrien-fleming}\n"),
     "efficacy: obrien-fleming", "hypotheses.H2.looks.efficacy",
     "a Bayesian rule stops by stop_for_success"),
    ("a sparse switch", EXAMPLE.replace("    credible: 0.95\n", "    credible: 0.95\n    sparse: "
                                        "{min_expected: 5, test: fisher-exact}\n"),
     "sparse: {min_expected", "hypotheses.H2.sparse", ""),
]


@pytest.mark.parametrize(("name", "text", "marker", "path", "says"), CASES,
                         ids=[c[0] for c in CASES])
def test_one_error_line_per_misuse(tmp_path: Path, name: str, text: str, marker: str,
                                   path: str, says: str) -> None:
    assert_one_error_line(tmp_path / "plan.yaml", text, marker, path, says)


def test_the_smallest_beta_parameter_is_the_kernels(tmp_path: Path) -> None:
    from prespec.plan import vocabulary as v
    from prespec.stats import bayes

    assert v.MIN_BETA_PARAMETER == bayes.MIN_PARAMETER
    text = EXAMPLE.replace("gauze: {mean: 0.2, n: 4}", "gauze: {mean: 0.01, n: 4}")
    with pytest.raises(PlanError) as caught:
        load_plan(_write(tmp_path, text))
    assert caught.value.path == "hypotheses.H2.prior.gauze"
    assert "a Beta parameter of 0.04 is below 0.05" in caught.value.message
