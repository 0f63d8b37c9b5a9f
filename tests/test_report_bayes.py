"""The report of a Bayesian hypothesis (test posterior-probability): src/prespec/report/bayes.py,
its place in sections.py (result rows, decision words, the multiplicity section), its figures
(bayes-<id>.png, oc-<id>.png, the marking in the forest plot), its table (tables/bayes-<id>.csv)
and the results models that declare it (analysis/results.py).

The results below are invented, in the shape of the results.json contract of issue 17 (the
wound-dressing scenario: negative-pressure against gauze, infection). Their numbers are made
consistent here with scipy (posterior probabilities by ``scipy.integrate.quad`` over
``scipy.stats.beta``), but the report computes nothing: the tests check that it shows each
number results.json holds, labelled, and that a Bayesian rule is never worded as a test.
"""

from __future__ import annotations

import copy
import csv
import functools
import html
import json
import re
from pathlib import Path
from typing import Any

import matplotlib
import matplotlib.style
import numpy as np
import pytest
from matplotlib.image import imread
from scipy import integrate, stats

from prespec.analysis.results import Hypothesis, RunResults, finish, read_results
from prespec.errors import PrespecError
from prespec.report import bayes, sections
from prespec.report.figures import _DifferencesJob, _estimate_label, _estimate_rows, write_figures
from prespec.report.tablenames import bayes_table, hypothesis_table
from prespec.report.tables import write_tables

try:
    from test_report_adjusted import (
        _cells,
        _fields,
        _page,
        _run_doc,
        _text,
        assert_refused,
        run_results,
    )
    from test_report_figures import HOSTILE_ATTR, HOSTILE_SCRIPT, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_adjusted import (
        _cells,
        _fields,
        _page,
        _run_doc,
        _text,
        assert_refused,
        run_results,
    )
    from tests.test_report_figures import HOSTILE_ATTR, HOSTILE_SCRIPT, sample_results

PRIORS = {"negative-pressure": (1.0, 1.0), "gauze": (2.0, 8.0)}
POSTERIORS = {"negative-pressure": (20.0, 160.0), "gauze": (38.0, 150.0)}


@functools.cache
def _density(a: float, b: float, xs: tuple[float, ...]) -> list[float]:
    return [round(float(v), 6) for v in stats.beta(a, b).pdf(np.array(xs))]


@functools.cache
def _difference_density(first: tuple[float, float], second: tuple[float, float],
                        ds: tuple[float, ...]) -> list[float]:
    """The density of p_a − p_b at each d: ∫ f_a(y + d) f_b(y) dy (scipy quad)."""
    fa, fb = stats.beta(*first), stats.beta(*second)
    def at(d: float) -> float:
        if abs(d) >= 1.0:
            return 0.0
        value = integrate.quad(lambda y: fa.pdf(y + d) * fb.pdf(y), max(0.0, -d),
                               min(1.0, 1.0 - d))[0]
        return round(value, 6)

    return [at(d) for d in ds]


def _curve() -> list[dict[str, Any]]:
    """An invented curve along the null boundary rate_a = rate_b, peaking at 0.42."""
    rates = [round(r, 2) for r in np.linspace(0.0, 1.0, 11)]
    probs = [0.0, 0.011, 0.02, 0.026, 0.031, 0.029, 0.024, 0.018, 0.011, 0.004, 0.0]
    return [{"rate_a": r, "rate_b": r, "probability": p} for r, p in zip(rates, probs,
                                                                         strict=True)]


def bayes_entry() -> dict[str, Any]:
    """An invented Bayesian comparison: Pr(p_np − p_gauze < 0 | data) against 0.975.

    negative-pressure 19/178 with a flat prior, gauze 36/178 with Beta(2, 8) given as mean 0.2
    and effective sample size 10. Posterior probability 0.9925 (scipy.integrate.quad over
    scipy.stats.beta: 0.99249265...), posterior mean of the difference -0.0910 and the 95%
    equal-tailed credible interval (-0.1647, -0.0179) by a root search on its distribution
    function; under a flat prior 0.9936, under a sceptical Beta(30, 170) in each group 0.9492.
    """
    xs = tuple(np.linspace(0.0, 1.0, 101))
    ds = tuple(np.linspace(-1.0, 1.0, 201))
    np_post, g_post = POSTERIORS["negative-pressure"], POSTERIORS["gauze"]
    return {
        "id": "H4", "title": "Negative-pressure vs gauze, Bayesian", "role": "secondary",
        "kind": "pair", "outcome": "infection", "compare": ["negative-pressure", "gauze"],
        "alternative": "less", "comparison": "superiority", "margin": None,
        "null_rate": None, "scores": None, "strata": None,
        "planned_test": "posterior-probability", "test": "posterior-probability",
        "continuity": None, "statistic": None, "df": None, "p_value": None,
        "p_adjusted": None, "reject": True,
        "estimate": {"measure": "risk-difference", "value": -0.091, "ci": [-0.1647, -0.0179],
                     "ci_method": "equal-tailed-credible", "level": 0.95, "note": None},
        "table": {"groups": ["negative-pressure", "gauze"], "events": [19, 36],
                  "totals": [178, 178]},
        "expected": None, "strata_tables": None, "homogeneity": None, "monte_carlo": None,
        "margin_check": None, "rule": None, "parent": None, "gate": None, "family": None,
        "posterior_probability": 0.9925, "threshold": 0.975,
        "bayesian": {
            "alternative": "less", "margin": 0.0, "null_rate": None,
            "prior": [
                {"group": "negative-pressure", "a": 1.0, "b": 1.0, "mean": None, "n": None},
                {"group": "gauze", "a": 2.0, "b": 8.0, "mean": 0.2, "n": 10.0},
            ],
            "posterior": [
                {"group": "negative-pressure", "a": 20.0, "b": 160.0, "mean": 0.1111},
                {"group": "gauze", "a": 38.0, "b": 150.0, "mean": 0.2021},
            ],
            "statement": ("The posterior probability that infection is less frequent with "
                          "negative-pressure than with gauze is 0.9925, above the threshold "
                          "0.975: the rule is met."),
            "densities": {
                "x": [round(float(x), 2) for x in xs],
                "groups": {"negative-pressure": list(_density(*np_post, xs)),
                           "gauze": list(_density(*g_post, xs))},
                "difference_x": [round(float(d), 2) for d in ds],
                "difference": list(_difference_density(np_post, g_post, ds)),
                "region": [-1.0, 0.0],
            },
            "sensitivity": [
                {"prior": "flat",
                 "priors": [{"group": "negative-pressure", "a": 1.0, "b": 1.0},
                            {"group": "gauze", "a": 1.0, "b": 1.0}],
                 "posterior_probability": 0.9936, "rule_met": True,
                 "estimate": {"value": -0.0944, "ci": [-0.1695, -0.0202]}},
                {"prior": "sceptical",
                 "priors": [{"group": "negative-pressure", "a": 30.0, "b": 170.0},
                            {"group": "gauze", "a": 30.0, "b": 170.0}],
                 "posterior_probability": 0.9492, "rule_met": False,
                 "estimate": {"value": -0.0422, "ci": [-0.093, 0.0084]},
                 "centre": 0.15, "n": 200.0},
                {"prior": "plan",
                 "priors": [{"group": "negative-pressure", "a": 1.0, "b": 1.0},
                            {"group": "gauze", "a": 2.0, "b": 8.0}],
                 "posterior_probability": 0.9925, "rule_met": True,
                 "estimate": {"value": -0.091, "ci": [-0.1647, -0.0179]}},
            ],
            "operating_characteristics": {
                "sizes": {"negative-pressure": 180, "gauze": 180}, "alpha": 0.05,
                "type_one_error": 0.031, "at_rate": 0.42, "exceeds_alpha": False,
                "power": 0.87, "assumed": {"negative-pressure": 0.1, "gauze": 0.2},
                "curve": _curve(),
            },
        },
    }


def single_entry() -> dict[str, Any]:
    """An invented single-group rule: Pr(p_np < 0.2 | data) against 0.95, no design."""
    hyp = bayes_entry()
    xs = tuple(np.linspace(0.0, 1.0, 101))
    hyp.update(
        id="H7", title="Negative-pressure below 20%", kind="single",
        compare=["negative-pressure"], null_rate=0.2, role="exploratory",
        posterior_probability=0.9994, threshold=0.95,
        estimate={"measure": "proportion", "value": 0.1111, "ci": [0.0693, 0.1615],
                  "ci_method": "equal-tailed-credible", "level": 0.95, "note": None},
        table={"groups": ["negative-pressure"], "events": [19], "totals": [178]},
    )
    hyp["bayesian"] = {
        "alternative": "less", "margin": None, "null_rate": 0.2,
        "prior": [{"group": "negative-pressure", "a": 1.0, "b": 1.0, "mean": None, "n": None}],
        "posterior": [{"group": "negative-pressure", "a": 20.0, "b": 160.0, "mean": 0.1111}],
        "statement": "The posterior probability that the rate is below 0.20 is 0.9994.",
        "densities": {"x": [round(float(x), 2) for x in xs],
                      "groups": {"negative-pressure": list(_density(20.0, 160.0, xs))},
                      "region": [0.0, 0.2]},
        "sensitivity": [],
        "operating_characteristics": None,
    }
    return hyp


# --- the result rows and the decision words ---------------------------------------------------


def test_the_result_rows_show_probability_threshold_and_the_rule() -> None:
    shown = _fields(_page(bayes_entry()))
    assert shown["Estimate (risk difference, posterior mean)"] == "-0.0910"
    assert shown["Credible interval (95%, equal-tailed)"] == "(-0.1647, -0.0179)"
    assert shown["Rule's event"] == "p(negative-pressure) − p(gauze) < 0.00"
    assert shown["Posterior probability"] == "0.9925"
    assert shown["Threshold"] == "0.975"
    assert shown["Decision"] == "rule met"
    assert shown["Test used"] == "posterior-probability"


def test_a_bayesian_rule_is_never_worded_as_a_test() -> None:
    fragment = _page(bayes_entry())
    labels = set(_fields(fragment))
    assert not {"p-value", "Adjusted p-value", "Statistic", "Statistic (z)"} & labels
    page = _text(fragment)
    for word in ("reject H0", "confidence", "Statistic"):
        assert word not in page, word
    assert "credible" in page.lower()


def test_a_rule_not_met_says_so() -> None:
    hyp = bayes_entry()
    hyp.update(reject=False, posterior_probability=0.9612)
    shown = _fields(_page(hyp))
    assert shown["Decision"] == "rule not met"
    assert shown["Posterior probability"] == "0.9612"
    assert sections.decision(hyp, "hypotheses.H4") == "rule not met"
    hyp["reject"] = None
    assert sections.decision(hyp, "hypotheses.H4") == "—"


@pytest.mark.parametrize(("value", "threshold", "shown"), [
    (0.9925, 0.975, "0.9925"),
    (0.97496, 0.975, "0.97496"),  # 4 decimals would print it equal to the threshold
    (0.975, 0.975, "0.9750"),
    (0.9750001, 0.975, "0.9750001"),
    (0.99996, None, "> 0.9999"),
    (1.0, None, "1.0000"),
    (3e-6, None, "< 0.0001"),
    (0.0, None, "0.0000"),
    (None, 0.975, "—"),
])
def test_posterior_probabilities_are_never_shown_equal_to_a_threshold_they_miss(
        value: float | None, threshold: float | None, shown: str) -> None:
    assert bayes.fmt_probability(value, threshold) == shown


def test_priors_and_posteriors_and_how_each_prior_was_given() -> None:
    page = _page(bayes_entry())
    assert _cells(page, "prespec-bayes-priors") == [
        ["negative-pressure", "Beta(1, 1)", "Beta parameters", "Beta(20, 160)", "0.1111"],
        ["gauze", "Beta(2, 8)", "mean 0.2, effective sample size 10", "Beta(38, 150)",
         "0.2021"],
    ]
    assert "Beta(a + events, b + non-events)" in _text(page)


def test_the_sentence_and_the_multiplicity_line() -> None:
    page = _text(_page(bayes_entry()))
    assert ("The posterior probability that infection is less frequent with negative-pressure "
            "than with gauze is 0.9925, above the threshold 0.975: the rule is met.") in page
    assert ("H4 is decided by a pre-specified Bayesian rule, not by a test: it lies outside "
            "the frequentist multiplicity adjustment (no p-value, no adjusted p-value, no "
            "family). Its frequentist operating characteristics at the planned sizes are "
            "shown instead, below.") in page


def test_the_parts_come_in_the_reading_order() -> None:
    page = _page(bayes_entry())
    marks = ['class="prespec prespec-counts"', 'class="prespec prespec-bayes-priors"',
             "Posterior probability", 'class="prespec-bayes-statement"',
             'class="prespec-bayes-multiplicity"', 'class="prespec prespec-bayes-sensitivity"',
             "Operating characteristics of the rule"]
    places = [page.index(m) for m in marks]
    assert places == sorted(places)


def test_the_prior_sensitivity_table() -> None:
    page = _page(bayes_entry())
    assert _cells(page, "prespec-bayes-sensitivity") == [
        ["flat", "negative-pressure Beta(1, 1); gauze Beta(1, 1)", "0.9936", "rule met",
         "-0.0944", "(-0.1695, -0.0202)"],
        ["sceptical, centred on no difference (centre 0.15, effective sample size 200)",
         "negative-pressure Beta(30, 170); gauze Beta(30, 170)", "0.9492", "rule not met",
         "-0.0422", "(-0.0930, 0.0084)"],
        ["the plan's prior", "negative-pressure Beta(1, 1); gauze Beta(2, 8)", "0.9925",
         "rule met", "-0.0910", "(-0.1647, -0.0179)"],
    ]
    head = re.search(r'prespec-bayes-sensitivity">(.*?)</thead>', page, re.DOTALL)
    assert head and "95% credible interval" in _text(head.group(1))
    assert "against the threshold 0.975" in _text(page)


def test_the_operating_characteristics_within_alpha() -> None:
    page = _page(bayes_entry())
    shown = _fields(page)
    assert shown["Planned sizes"] == "negative-pressure 180, gauze 180"
    assert shown["Type I error (maximised)"] == (
        "0.0310, where both groups' true rates are 0.42")
    assert shown["Alpha"] == "0.05"
    assert shown["Against alpha"] == "within alpha"
    assert shown["Power at the assumed rates"] == "0.8700 (negative-pressure 0.10, gauze 0.20)"
    assert "the null boundary p(negative-pressure) = p(gauze) + 0.00" in _text(page)
    assert "prespec-bayes-exceeds" not in page


def test_a_type_one_error_above_alpha_is_said_plainly() -> None:
    hyp = bayes_entry()
    hyp["bayesian"]["operating_characteristics"].update(type_one_error=0.0623,
                                                        exceeds_alpha=True)
    page = _page(hyp)
    assert _fields(page)["Against alpha"] == "exceeds alpha"
    box = re.search(r'<div class="prespec-bayes-exceeds"[^>]*>(.*?)</div>', page, re.DOTALL)
    assert box, "no box"
    assert _text(box.group(1)) == (
        "Type I error above alpha. The rule's maximised type I error 0.0623 exceeds alpha 0.05: "
        "where the null hypothesis holds, the rule can be met more often than alpha allows. The "
        "plan may intend it; a reader should know it.")


def test_with_a_margin_the_maximum_is_placed_by_the_second_group() -> None:
    hyp = bayes_entry()
    hyp["bayesian"]["margin"] = 0.05
    shown = _fields(_page(hyp))
    assert shown["Type I error (maximised)"] == "0.0310, where the true rate of gauze is 0.42"
    assert shown["Rule's event"] == "p(negative-pressure) − p(gauze) < 0.05"


def test_without_operating_characteristics_the_line_says_none_were_computed() -> None:
    page = _text(_page(single_entry()))
    assert ("Its operating characteristics would be shown instead, but the plan has no design "
            "or no planned sizes, so none were computed.") in page
    assert "Operating characteristics of the rule" not in page
    assert "Prior sensitivity" not in page  # no rows: no table


def test_a_single_group_rule() -> None:
    page = _page(single_entry())
    shown = _fields(page)
    assert shown["Estimate (proportion, posterior mean)"] == "0.1111"
    assert shown["Rule's event"] == "p(negative-pressure) < 0.20"
    assert shown["Rate compared with"] == "0.20" and "Null hypothesis" not in shown
    assert shown["Posterior probability"] == "0.9994"
    assert shown["Threshold"] == "0.95"
    assert shown["Rule (exploratory)"] == "rule met"
    assert "Decision" not in shown
    assert "Exploratory: the rule's outcome is shown, and no decision is drawn from it." in (
        _text(page))
    assert "p-value" not in _text(page).replace("(no p-value, no adjusted p-value, no family)", "")


def test_the_multiplicity_section_keeps_a_bayesian_rule_outside() -> None:
    res = run_results(*sample_results()["hypotheses"][:2], bayes_entry())
    part = sections.multiplicity(res)
    row = next(r for r in re.findall(r"<tr>(.*?)</tr>", part) if r.startswith("<td>H4</td>"))
    h4 = [_text(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row)]
    assert h4 == ["H4", "secondary", "—", "not adjusted (Bayesian rule)", "rule met"]
    assert ("H4: decided by a pre-specified Bayesian rule on a posterior probability, outside "
            "the frequentist multiplicity adjustment; the operating characteristics of each "
            "rule are shown with it where the plan gives a design and planned sizes.") in (
        _text(part))
    assert sections._family_label(bayes_entry(), "hypotheses.H4", "holm") == (
        "none (Bayesian rule)")
    explored = sections.multiplicity(run_results(single_entry()))
    row = next(r for r in re.findall(r"<tr>(.*?)</tr>", explored) if r.startswith("<td>H7</td>"))
    assert [_text(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row)] == [
        "H7", "exploratory", "—", "not adjusted (Bayesian rule)",
        "no decision (rule met, exploratory)"]


def test_bayesian_labels_are_escaped() -> None:
    hyp = bayes_entry()
    hyp["bayesian"]["statement"] = HOSTILE_SCRIPT
    hyp["bayesian"]["prior"][0]["group"] = HOSTILE_ATTR
    hyp["bayesian"]["sensitivity"][0]["prior"] = HOSTILE_SCRIPT
    page = _page(hyp)
    assert HOSTILE_SCRIPT not in page and HOSTILE_ATTR not in page
    assert html.escape(HOSTILE_SCRIPT, quote=True) in page


@pytest.mark.parametrize(("change", "message"), [
    (lambda h: h.update(posterior_probability="0.99"),
     "results.json: hypotheses.H4.posterior_probability: expected a number or null"),
    (lambda h: h["bayesian"]["prior"][1].update(a="2"),
     "results.json: hypotheses.H4.bayesian.prior[1].a: expected a number or null"),
    (lambda h: h["bayesian"]["sensitivity"][1].update(rule_met="no"),
     "results.json: hypotheses.H4.bayesian.sensitivity[1].rule_met: expected true, false"),
    (lambda h: h["bayesian"]["densities"]["groups"]["gauze"].pop(),
     "results.json: hypotheses.H4.bayesian.densities.groups.gauze: expected 101 values"),
    (lambda h: h["bayesian"]["operating_characteristics"]["curve"][3].update(probability=[]),
     "results.json: hypotheses.H4.bayesian.operating_characteristics.curve[3].probability"),
    (lambda h: h["bayesian"]["posterior"].pop(),
     "results.json: hypotheses.H4.bayesian.posterior: expected 2 entries"),
])
def test_a_malformed_bayesian_part_names_its_key(change: Any, message: str) -> None:
    hyp = bayes_entry()
    change(hyp)
    with pytest.raises(PrespecError, match=re.escape(message)):
        _page(hyp)


def test_a_hypothesis_without_the_new_keys_shows_none_of_their_parts() -> None:
    hyp = sample_results()["hypotheses"][0]
    page = _page(hyp)
    assert "prespec-bayes" not in page and "rule met" not in page
    assert _fields(page)["Decision"] == "reject H0"


# --- figures ----------------------------------------------------------------------------------


def _png(path: Path) -> np.ndarray:
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    return imread(path)


def test_the_figures_are_written_as_pngs(tmp_path: Path) -> None:
    res = run_results(bayes_entry(), single_entry())
    written = write_figures(res, tmp_path)
    names = [p.relative_to(tmp_path).as_posix() for p in written]
    assert bayes.bayes_name("H4") == "figures/bayes-H4.png"
    assert bayes.oc_name("H4") == "figures/oc-H4.png"
    assert {"figures/bayes-H4.png", "figures/oc-H4.png", "figures/bayes-H7.png"} <= set(names)
    assert "figures/oc-H7.png" not in names  # no operating characteristics, no figure
    for name in ("bayes-H4.png", "oc-H4.png", "bayes-H7.png"):
        image = _png(tmp_path / "figures" / name)
        assert image.shape[1] == 1600 and image.shape[0] > 600  # 8 inches at 200 dpi
    assert (tmp_path / "figures" / "bayes-H4.png").stat().st_size > 20_000


def test_the_figures_are_the_same_bytes_on_a_second_run(tmp_path: Path) -> None:
    res = run_results(bayes_entry())
    write_figures(res, tmp_path / "a")
    write_figures(res, tmp_path / "b")
    for name in ("bayes-H4.png", "oc-H4.png"):
        assert ((tmp_path / "a" / "figures" / name).read_bytes()
                == (tmp_path / "b" / "figures" / name).read_bytes())


def _draw(job: Any) -> Any:
    with matplotlib.style.context("default"), matplotlib.rc_context({"text.parse_math": False}):
        return job.draw()


def test_the_density_figure_draws_the_results_points_and_shades_the_event() -> None:
    hyp = bayes_entry()
    b = bayes.read_bayes(hyp, "hypotheses.H4")
    assert b is not None
    fig = _draw(bayes.BayesJob(b))
    top, bottom = fig.axes[:2]
    lines = {ln.get_label(): ln for ln in top.get_lines()}
    drawn = lines["negative-pressure: Beta(20, 160)"]
    assert list(drawn.get_ydata()) == hyp["bayesian"]["densities"]["groups"]["negative-pressure"]
    assert "gauze: Beta(38, 150)" in lines
    diff = {ln.get_label(): ln for ln in bottom.get_lines()}
    assert list(diff["posterior of the difference"].get_ydata()) == (
        hyp["bayesian"]["densities"]["difference"])
    assert list(diff["margin 0.00"].get_xdata()) == [0.0, 0.0]
    shaded = [c for c in bottom.collections if c.get_label().startswith("rule's event")]
    assert len(shaded) == 1
    xs = shaded[0].get_paths()[0].vertices[:, 0]
    assert xs.max() <= 0.0 + 1e-12  # only the region [-1, 0] is shaded
    footer = fig.get_supxlabel()
    assert footer == ("Shaded: p(negative-pressure) − p(gauze) < 0.00, posterior probability "
                      "0.9925; threshold 0.975: rule met.")


def test_the_operating_figure_draws_the_curve_and_alpha() -> None:
    hyp = bayes_entry()
    b = bayes.read_bayes(hyp, "hypotheses.H4")
    assert b is not None
    fig = _draw(bayes.OperatingJob(b))
    ax = fig.axes[0]
    lines = {ln.get_label(): ln for ln in ax.get_lines()}
    curve = lines["probability that the rule is met"]
    assert list(curve.get_ydata()) == [p["probability"] for p in _curve()]
    assert list(curve.get_xdata()) == [p["rate_b"] for p in _curve()]
    assert list(lines["alpha 0.05"].get_ydata()) == [0.05, 0.05]
    assert list(lines["maximum 0.0310"].get_xdata()) == [0.42]


def test_the_forest_plot_marks_a_bayesian_estimate_as_credible() -> None:
    res = run_results(sample_results()["hypotheses"][0], bayes_entry())
    rows = {r.label.split("\n")[0]: r for r in _estimate_rows(res)}
    h4 = rows["H4 (Bayesian)"]
    assert h4.bayesian and not rows["H1"].bayesian
    explored = _estimate_rows(run_results(single_entry()))[0]
    assert explored.label.startswith("H7 (exploratory, Bayesian)\n") and explored.exploratory
    assert _estimate_label(h4) == "-0.0910\n(-0.1647, -0.0179) 95% credible"
    assert _estimate_label(rows["H1"]) == "-0.0940\n(-0.1700, -0.0190) 95%"
    fig = _draw(_DifferencesJob(list(rows.values())))
    legend = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
    assert "Bayesian: posterior mean, credible interval" in legend
    markers = {ln.get_marker() for ax in fig.axes for ln in ax.get_lines()}
    assert {"s", "D"} <= markers


# --- tables/ ----------------------------------------------------------------------------------


def _rows(path: Path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def test_a_bayes_table_per_bayesian_hypothesis(tmp_path: Path) -> None:
    res = run_results(bayes_entry(), single_entry())
    write_tables(tmp_path, res)
    assert bayes_table("H4") == "tables/bayes-H4.csv"
    assert _rows(tmp_path / bayes_table("H4")) == [
        bayes.BAYES_HEADER,
        ["prior", "plan", "negative-pressure", "1.0", "1.0", "", "", "", "", "", "", "", "", ""],
        ["prior", "plan", "gauze", "2.0", "8.0", "0.2", "10.0", "", "", "", "", "", "", ""],
        ["posterior", "plan", "negative-pressure", "20.0", "160.0", "0.1111", "", "", "", "",
         "", "", "", ""],
        ["posterior", "plan", "gauze", "38.0", "150.0", "0.2021", "", "", "", "", "", "", "",
         ""],
        ["decision", "plan", "", "", "", "", "", "0.9925", "0.975", "true", "-0.091",
         "-0.1647", "-0.0179", "0.95"],
        ["sensitivity-prior", "flat", "negative-pressure", "1.0", "1.0", "", "", "", "", "",
         "", "", "", ""],
        ["sensitivity-prior", "flat", "gauze", "1.0", "1.0", "", "", "", "", "", "", "", "",
         ""],
        ["sensitivity", "flat", "", "", "", "", "", "0.9936", "0.975", "true", "-0.0944",
         "-0.1695", "-0.0202", "0.95"],
        ["sensitivity-prior", "sceptical", "negative-pressure", "30.0", "170.0", "", "", "",
         "", "", "", "", "", ""],
        ["sensitivity-prior", "sceptical", "gauze", "30.0", "170.0", "", "", "", "", "", "",
         "", "", ""],
        ["sensitivity", "sceptical", "", "", "", "0.15", "200.0", "0.9492", "0.975", "false",
         "-0.0422", "-0.093", "0.0084", "0.95"],
        ["sensitivity-prior", "plan", "negative-pressure", "1.0", "1.0", "", "", "", "", "",
         "", "", "", ""],
        ["sensitivity-prior", "plan", "gauze", "2.0", "8.0", "", "", "", "", "", "", "", "",
         ""],
        ["sensitivity", "plan", "", "", "", "", "", "0.9925", "0.975", "true", "-0.091",
         "-0.1647", "-0.0179", "0.95"],
    ]
    assert len(_rows(tmp_path / bayes_table("H7"))) == 4  # header, prior, posterior, decision
    names = sorted(p.name for p in (tmp_path / "tables").iterdir())
    assert names == sorted(["H4.csv", "H7.csv", "bayes-H4.csv", "bayes-H7.csv",
                            "groups-infection.csv", "groups-reopening.csv", "results.csv",
                            "statistics.csv"])


def test_a_hostile_group_cannot_become_a_formula(tmp_path: Path) -> None:
    hyp = bayes_entry()
    hyp["bayesian"]["prior"][0]["group"] = "=cmd|' /C calc'!A0"
    write_tables(tmp_path, run_results(hyp))
    cell = _rows(tmp_path / bayes_table("H4"))[1][2]
    assert not cell.startswith("=") and cell.endswith("=cmd|' /C calc'!A0")


def test_bayes_tables_never_share_a_name_with_other_kinds() -> None:
    assert hypothesis_table("bayes-H1") == "tables/bayes%2DH1.csv"
    assert bayes_table("H/1") == "tables/bayes-H%2F1.csv"
    assert len({bayes_table("H1"), hypothesis_table("bayes-H1"), hypothesis_table("H1")}) == 3


# --- the results models -----------------------------------------------------------------------


def test_the_models_hold_the_bayesian_keys() -> None:
    doc = _run_doc(bayes_entry(), single_entry())
    done = finish(copy.deepcopy(doc))
    assert done == doc  # the same keys, values and types
    assert list(done["hypotheses"][0])[-4:] == ["posterior_probability", "threshold",
                                                "bayesian", "pre_specified"]
    read = read_results(done)
    assert isinstance(read, RunResults)
    first = read.hypotheses[0]
    assert first.posterior_probability == 0.9925 and first.threshold == 0.975
    assert first.bayesian is not None and first.bayesian.operating_characteristics is not None
    assert first.bayesian.prior[1].mean == 0.2 and first.bayesian.prior[1].n == 10.0
    assert first.bayesian.sensitivity[1].centre == 0.15
    assert first.bayesian.operating_characteristics.curve[4].probability == 0.031
    second = read.hypotheses[1].bayesian
    assert second is not None and second.densities is not None
    assert second.densities.difference is None and second.operating_characteristics is None


@pytest.mark.parametrize(("change", "problem"), [
    (lambda h: h["bayesian"].update(alternative="two-sided"),
     "hypotheses[0].bayesian.alternative: Input should be 'greater' or 'less'"),
    (lambda h: h["bayesian"]["prior"][0].pop("mean"),
     "hypotheses[0].bayesian.prior[0].mean: Field required"),
    (lambda h: h["bayesian"]["operating_characteristics"]["sizes"].update(gauze=180.5),
     ("hypotheses[0].bayesian.operating_characteristics.sizes.gauze: Input should be a valid "
      "integer")),
    (lambda h: h["bayesian"]["sensitivity"][0].update(weight=1),
     "hypotheses[0].bayesian.sensitivity[0].weight: Extra inputs are not permitted"),
])
def test_the_models_refuse_what_the_contract_does_not_hold(change: Any, problem: str) -> None:
    assert_refused(bayes_entry(), change, problem)


def test_the_new_keys_are_optional_and_described() -> None:
    fields = Hypothesis.model_fields
    names = list(fields)
    for key in ("posterior_probability", "threshold", "bayesian"):
        assert fields[key].default is None and fields[key].description, key
        assert names.index(key) < names.index("pre_specified")
    from prespec import api

    defs = api.schema("results")["$defs"]
    for name in ("Bayesian", "BetaPrior", "BetaPosterior", "BetaParameters", "Densities",
                 "BayesEstimate", "PriorSensitivity", "OperatingCharacteristics",
                 "OperatingPoint"):
        props = defs[name]["properties"]
        assert all(p.get("description") for p in props.values()), name


# --- the whole report -------------------------------------------------------------------------


def test_the_rendered_report_shows_the_rule_and_its_figures(tmp_path: Path) -> None:
    """One notebook execution (seconds): the figures reach the page after their hypothesis."""
    from prespec.report import render

    res = run_results(sample_results()["hypotheses"][0], bayes_entry())
    folder = tmp_path / "report"
    folder.mkdir()
    (folder / "results.json").write_text(json.dumps(res, indent=2) + "\n", encoding="utf-8")
    write_figures(res, folder)
    render.render_notebook(folder)
    page = (folder / "report.html").read_text(encoding="utf-8")
    words = _text(page)
    assert "Posterior probability 0.9925" in words and "Threshold 0.975" in words
    assert "Decision rule met" in words and "Decision reject H0" in words  # H4, then H1
    images = re.findall(r'<img alt="([^"]*)" src="data:image/png;base64,', page)
    alts = [html.unescape(a) for a in images]
    assert alts.count("Posterior densities of H4, the region of the rule's event shaded "
                      "(p(negative-pressure) − p(gauze) < 0.00); posterior probability "
                      "0.9925") == 1
    assert alts.count("Probability that the rule of H4 is met along the null boundary "
                      "p(negative-pressure) = p(gauze) + 0.00, against alpha") == 1
    density = next(i for i, a in enumerate(alts) if a.startswith("Posterior densities of H4"))
    assert page.index(images[density]) > page.index("Prior sensitivity")
