"""Tests of the report's figures (src/prespec/report/figures.py) and of its value formatting.

The results below are invented (the wound-dressing scenario of docs/plan-format.md); the
report computes nothing, so the tests check that what is drawn and shown is what results.json
holds.
"""

from __future__ import annotations

import copy
import itertools
import json
import math
from pathlib import Path
from typing import Any

import matplotlib
import numpy as np
import pytest
from matplotlib.image import imread

from prespec.errors import PrespecError
from prespec.report import values
from prespec.report.figures import (
    DIFFERENCES,
    MULTIPLICITY_GRAPH,
    _DifferencesJob,
    _estimate_rows,
    _graph_job,
    _log_ticks,
    has_estimates,
    has_graph,
    proportions_name,
    write_figures,
)

TITLE = "Dressing <b>regimens</b> & 30-day wound infection"
CAUTION = (
    "prespec computes what the plan asks; it does not judge whether the plan suits the study. "
    "Results that inform clinical or regulatory decisions need review by a qualified "
    "statistician under the applicable guidance (ICH E9 and local requirements)."
)


def sample_results() -> dict[str, Any]:
    """An invented run of a three-arm wound-dressing plan, touching every kind of hypothesis."""
    groups = [
        {"group": "gauze", "events": 41, "total": 196, "missing": 4, "proportion": 0.2092,
         "ci": [0.158, 0.271], "ci_method": "wilson", "level": 0.95},
        {"group": "alginate", "events": 30, "total": 200, "missing": 0, "proportion": 0.15,
         "ci": [0.1072, 0.2061], "ci_method": "wilson", "level": 0.95},
        {"group": "negative-pressure", "events": 23, "total": 198, "missing": 2,
         "proportion": 0.1162, "ci": [0.0788, 0.1681], "ci_method": "wilson", "level": 0.95},
    ]
    reopen = [
        {"group": "gauze", "events": 3, "total": 196, "missing": 4, "proportion": 0.0153,
         "ci": [0.0052, 0.044], "ci_method": "wilson", "level": 0.95},
        {"group": "alginate", "events": 1, "total": 200, "missing": 0, "proportion": 0.005,
         "ci": [0.0009, 0.0277], "ci_method": "wilson", "level": 0.95},
        {"group": "negative-pressure", "events": 0, "total": 198, "missing": 2,
         "proportion": 0.0, "ci": [0.0, 0.019], "ci_method": "wilson", "level": 0.95},
    ]
    base = {"comparison": "superiority", "margin": None, "continuity": False, "rule": None}
    hypotheses = [
        {**base, "id": "H1", "title": "Negative-pressure vs gauze", "role": "primary",
         "outcome": "infection", "compare": ["negative-pressure", "gauze"],
         "alternative": "two-sided", "planned_test": "pearson-chi-square",
         "test": "pearson-chi-square", "statistic": 6.12, "df": 1, "p_value": 0.0134,
         "p_adjusted": 0.0268, "reject": True,
         "estimate": {"measure": "risk-difference", "value": -0.094, "ci": [-0.17, -0.019],
                      "ci_method": "newcombe", "level": 0.95},
         "table": {"groups": ["negative-pressure", "gauze"], "events": [23, 41],
                   "totals": [198, 196]},
         "expected": [[32.1, 165.9], [31.9, 164.1]]},
        {**base, "id": "H2", "title": "Alginate vs gauze, wound reopening", "role": "secondary",
         "outcome": "reopening", "compare": ["alginate", "gauze"], "alternative": "two-sided",
         "planned_test": "pearson-chi-square", "test": "fisher-exact", "statistic": None,
         "df": None, "p_value": 0.3712, "p_adjusted": 0.3712, "reject": False,
         "estimate": {"measure": "risk-ratio", "value": 0.3267, "ci": [0.0343, 3.108],
                      "ci_method": "katz", "level": 0.95},
         "table": {"groups": ["alginate", "gauze"], "events": [1, 3], "totals": [200, 196]},
         "expected": [[2.02, 197.98], [1.98, 194.02]],
         "rule": {"switch": "sparse", "min_expected": 5, "smallest_expected": 1.98,
                  "from": "pearson-chi-square", "to": "fisher-exact"}},
        {**base, "id": "H3", "title": "Negative-pressure not worse than alginate",
         "role": "secondary", "outcome": "infection", "compare": ["negative-pressure", "alginate"],
         "alternative": "less", "comparison": "non-inferiority", "margin": 0.05,
         "planned_test": "farrington-manning", "test": "farrington-manning",
         "statistic": -3.41, "df": None, "p_value": 0.0000321, "p_adjusted": 0.0000963,
         "reject": True,
         "estimate": {"measure": "risk-difference", "value": -0.0338, "ci": [-0.0951, 0.0268],
                      "ci_method": "miettinen-nurminen", "level": 0.9},
         "table": {"groups": ["negative-pressure", "alginate"], "events": [23, 30],
                   "totals": [198, 200]},
         "expected": [[26.37, 171.63], [26.63, 173.37]]},
        {**base, "id": "H4", "title": "Any difference among the three arms",
         "role": "exploratory", "outcome": "infection", "compare": "all",
         "alternative": "two-sided", "planned_test": "pearson-chi-square",
         "test": "pearson-chi-square", "statistic": 6.205, "df": 2, "p_value": 0.04494,
         "p_adjusted": None, "reject": None, "estimate": None,
         "table": {"groups": ["gauze", "alginate", "negative-pressure"],
                   "events": [41, 30, 23], "totals": [196, 200, 198]},
         "expected": [[31.02, 164.98], [31.65, 168.35], [31.33, 166.67]]},
        {**base, "id": "H5", "title": "Odds of reopening, negative-pressure vs gauze",
         "role": "exploratory", "outcome": "reopening", "compare": ["negative-pressure", "gauze"],
         "alternative": "two-sided", "planned_test": "fisher-exact", "test": "fisher-exact",
         "statistic": None, "df": None, "p_value": 0.1224, "p_adjusted": None, "reject": None,
         "estimate": {"measure": "odds-ratio", "value": 0.1408, "ci": [0.0072, 2.743],
                      "ci_method": "woolf", "level": 0.95},
         "table": {"groups": ["negative-pressure", "gauze"], "events": [0, 3],
                   "totals": [198, 196]},
         "expected": [[1.51, 196.49], [1.49, 194.51]]},
        {**base, "id": "H6", "title": "Alginate vs gauze, infection", "role": "secondary",
         "outcome": "infection", "compare": ["alginate", "gauze"], "alternative": "two-sided",
         "planned_test": "two-proportion-z", "test": "two-proportion-z", "statistic": None,
         "df": None, "p_value": None, "p_adjusted": None, "reject": None,
         "estimate": {"measure": "risk-difference", "value": None, "ci": None,
                      "ci_method": "wald", "level": 0.95},
         "table": {"groups": ["alginate", "gauze"], "events": [30, 41], "totals": [200, 196]},
         "expected": None},
    ]
    return {
        "prespec": 1,
        "kind": "run",
        "title": TITLE,
        "protocol": "WD-2027-01",
        "plan": "sha256:3f0c" + "1" * 60,
        "plan_version": 2,
        "data": "sha256:9ab1" + "2" * 60,
        "data_file": "data/wounds.csv",
        "created": "2026-12-01T23:10:00Z",
        "actor": "jdoe",
        "alpha": 0.05,
        "multiplicity": "holm",
        "environment": {"python": "3.11.7", "numpy": "2.4.6", "scipy": "1.17.1",
                        "statsmodels": "0.15.0", "pandas": "3.1.1", "prespec": "0.1.0"},
        "population": {"rows_read": 612, "excluded_by_filter": 9, "excluded_group": 3,
                       "analysed": 600},
        "groups": {"infection": groups, "reopening": reopen},
        "hypotheses": hypotheses,
        "deviations": [
            {"code": "sample-size-shortfall", "detail": "gauze analysed 196 of 300 planned",
             "expected": "300", "found": "196"},
            {"code": "unexpected-group", "detail": "3 rows with arm 'foam <x>'",
             "expected": "gauze, alginate, negative-pressure", "found": "foam <x>"},
        ],
        "notes": [{"code": "missing-excluded", "detail": "6 blank outcomes left out"}],
        "caution": CAUTION,
    }


def rehearsal_results() -> dict[str, Any]:
    """A blinded rehearsal: no groups, no hypotheses, no departures."""
    res = sample_results()
    for key in ("groups", "hypotheses", "population"):
        del res[key]
    res.update(kind="rehearsal", deviations=[], notes=[], title="Rehearsal of WD-2027-01")
    return res


#: Hostile labels: markup, attribute breakers, script URLs, quotes, line breaks, terminal
#: escape sequences, template and notebook syntax. The report must show them as text.
HOSTILE_SCRIPT = '<script>alert("t")</script>'
HOSTILE_ATTR = '"><img src=x onerror=alert(1)>'
HOSTILE_URL = "javascript:alert(2)"
HOSTILE_QUOTES = "it's \"quoted\"\nand on 'two' lines"
HOSTILE_NOTEBOOK = "\x1b[31mred\x1b[0m {{ 7*7 }} ${x} %%bash !ls </div><!-- \\u003c"
HOSTILE = (HOSTILE_SCRIPT, HOSTILE_ATTR, HOSTILE_URL, HOSTILE_QUOTES, HOSTILE_NOTEBOOK)


def full_results() -> dict[str, Any]:
    """An invented run that carries every field of the full statistical engine and overrides.

    Stratified odds ratio with per-site tables and a homogeneity test (H1); non-inferiority
    whose interval and test disagree, overridden on the command line (H2); equivalence of a
    risk ratio against margins [0.8, 1.25] (H3); a single group against a null rate (H4); a
    k-group test with a Monte Carlo p-value and open follow-ups (H5); a trend with scores (H6);
    a k-group test not rejected, its follow-up behind a closed gate with a zero-cell note (H7);
    H8, whose every label is hostile; and an odds ratio that is infinite, with a null upper
    limit (H9). Multiplicity is the graphical procedure.
    """
    res = sample_results()
    res["title"] = f"Dressing trial {HOSTILE_SCRIPT} {HOSTILE_ATTR}"
    res["protocol"] = HOSTILE_URL
    res["actor"] = HOSTILE_QUOTES
    res["groups"][HOSTILE_ATTR] = [
        {"group": HOSTILE_SCRIPT, "events": 5, "total": 50, "missing": 0, "proportion": 0.1,
         "ci": [0.0435, 0.2136], "ci_method": "wilson", "level": 0.95},
        {"group": "gauze", "events": 9, "total": 52, "missing": 0, "proportion": 0.1731,
         "ci": [0.0937, 0.2975], "ci_method": "wilson", "level": 0.95},
    ]
    base = {"comparison": "superiority", "margin": None, "continuity": False, "rule": None,
            "expected": None, "role": "primary", "alternative": "two-sided"}
    trio = ["gauze", "alginate", "negative-pressure"]
    hyps: list[dict[str, Any]] = [
        {**base, "id": "H1", "kind": "pair", "title": "Negative-pressure vs gauze, by site",
         "outcome": "infection", "compare": ["negative-pressure", "gauze"],
         "planned_test": "cochran-mantel-haenszel", "test": "cochran-mantel-haenszel",
         "statistic": 6.31, "df": 1, "p_value": 0.012, "p_adjusted": 0.024, "reject": True,
         "estimate": {"measure": "odds-ratio", "value": 0.4912, "ci": [0.2801, 0.8614],
                      "ci_method": "robins-breslow-greenland", "level": 0.95},
         "table": {"groups": ["negative-pressure", "gauze"], "events": [23, 41],
                   "totals": [198, 196]},
         "strata": ["site"],
         "strata_tables": [
             {"stratum": {"site": "north"}, "events": [11, 22], "totals": [101, 99]},
             {"stratum": {"site": HOSTILE_SCRIPT}, "events": [12, 19], "totals": [97, 97]},
         ],
         "homogeneity": {"test": "breslow-day-tarone", "statistic": 0.412, "df": 1,
                         "p_value": 0.521}},
        {**base, "id": "H2", "kind": "pair", "title": "Alginate not worse than gauze",
         "role": "secondary", "outcome": "infection", "compare": ["alginate", "gauze"],
         "alternative": "less", "comparison": "non-inferiority", "margin": 0.05,
         "planned_test": "two-proportion-z", "test": "two-proportion-z", "statistic": -2.03,
         "df": None, "p_value": 0.0212, "p_adjusted": 0.0424, "reject": True,
         "estimate": {"measure": "risk-difference", "value": -0.0592,
                      "ci": [-0.1301, 0.0512], "ci_method": "newcombe", "level": 0.9},
         "table": {"groups": ["alginate", "gauze"], "events": [30, 41], "totals": [200, 196]},
         "margin_check": {"interval_excludes_margin": False, "agrees_with_test": False},
         "pre_specified": False},
        {**base, "id": "H3", "kind": "pair", "title": "Healing equivalent, alginate vs gauze",
         "role": "secondary", "outcome": "healing", "compare": ["alginate", "gauze"],
         "alternative": "two-sided", "comparison": "equivalence", "margin": [0.8, 1.25],
         "planned_test": "two-proportion-z", "test": "two-proportion-z", "statistic": None,
         "df": None, "p_value": 0.0391, "p_adjusted": 0.0391, "reject": True,
         "estimate": {"measure": "risk-ratio", "value": 0.9446, "ci": [0.8602, 1.0373],
                      "ci_method": "katz", "level": 0.9},
         "table": {"groups": ["alginate", "gauze"], "events": [160, 166], "totals": [200, 196]},
         "margin_check": {"interval_excludes_margin": True, "agrees_with_test": True}},
        {**base, "id": "H4", "kind": "single", "title": "Negative-pressure infection below 30%",
         "role": "secondary", "outcome": "infection", "compare": ["negative-pressure"],
         "alternative": "less", "null_rate": 0.3, "planned_test": "binomial-exact",
         "test": "binomial-exact", "statistic": None, "df": None, "p_value": 0.0000012,
         "p_adjusted": 0.0000048, "reject": True,
         "estimate": {"measure": "proportion", "value": 0.1162, "ci": [0.0788, 0.1681],
                      "ci_method": "wilson", "level": 0.9},
         "table": {"groups": ["negative-pressure"], "events": [23], "totals": [198]},
         "expected": [[59.4, 138.6]]},
        {**base, "id": "H5", "kind": "all", "title": "Any difference among the arms",
         "outcome": "infection", "compare": "all", "planned_test": "fisher-exact",
         "test": "fisher-exact", "statistic": None, "df": None, "p_value": 0.0431,
         "p_adjusted": 0.0431, "reject": True, "estimate": None,
         "table": {"groups": trio, "events": [41, 30, 23], "totals": [196, 200, 198]},
         "monte_carlo": {"tables": 100000, "seed": 1, "standard_error": 0.00064}},
        {**base, "id": "H5:alginate-vs-gauze", "kind": "pair", "parent": "H5",
         "gate": "open", "family": "H5 pairwise", "title": "Alginate vs gauze",
         "outcome": "infection", "compare": ["alginate", "gauze"],
         "planned_test": "fisher-exact", "test": "fisher-exact", "statistic": None, "df": None,
         "p_value": 0.1712, "p_adjusted": 0.1712, "reject": False,
         "estimate": {"measure": "risk-difference", "value": -0.0592, "ci": [-0.1341, 0.0153],
                      "ci_method": "newcombe", "level": 0.95},
         "table": {"groups": ["alginate", "gauze"], "events": [30, 41], "totals": [200, 196]}},
        {**base, "id": "H5:negative-pressure-vs-gauze", "kind": "pair", "parent": "H5",
         "gate": "open", "family": "H5 pairwise", "title": "Negative-pressure vs gauze",
         "outcome": "infection", "compare": ["negative-pressure", "gauze"],
         "planned_test": "fisher-exact", "test": "fisher-exact", "statistic": None, "df": None,
         "p_value": 0.0143, "p_adjusted": 0.0286, "reject": True,
         "estimate": {"measure": "risk-difference", "value": -0.0930, "ci": [-0.1660, -0.0190],
                      "ci_method": "newcombe", "level": 0.95},
         "table": {"groups": ["negative-pressure", "gauze"], "events": [23, 41],
                   "totals": [198, 196]}},
        {**base, "id": "H6", "kind": "trend", "title": "Infection falls across the arms",
         "role": "secondary", "outcome": "infection", "compare": "trend", "scores": [0, 1, 2.5],
         "planned_test": "cochran-armitage-trend", "test": "cochran-armitage-trend",
         "statistic": -2.481, "df": None, "p_value": 0.0131, "p_adjusted": 0.0262,
         "reject": True, "estimate": None,
         "table": {"groups": trio, "events": [41, 30, 23], "totals": [196, 200, 198]}},
        {**base, "id": "H7", "kind": "all", "title": "Any difference in reopening",
         "role": "secondary", "outcome": "reopening", "compare": "all",
         "planned_test": "pearson-chi-square", "test": "pearson-chi-square", "statistic": 3.02,
         "df": 2, "p_value": 0.2209, "p_adjusted": 0.2209, "reject": False, "estimate": None,
         "table": {"groups": trio, "events": [3, 1, 0], "totals": [196, 200, 198]}},
        {**base, "id": "H7:gauze-vs-negative-pressure", "kind": "pair", "parent": "H7",
         "gate": "closed", "family": "H7 pairwise",
         "title": "Reopening, gauze vs negative-pressure",
         "role": "secondary", "outcome": "reopening", "compare": ["gauze", "negative-pressure"],
         "planned_test": "fisher-exact", "test": "fisher-exact", "statistic": None, "df": None,
         "p_value": 0.1224, "p_adjusted": None, "reject": False,
         "estimate": {"measure": "risk-ratio", "value": 7.0711, "ci": [0.3681, 135.83],
                      "ci_method": "katz", "level": 0.95,
                      "note": "0.5 added to every cell because a cell is zero"},
         "table": {"groups": ["gauze", "negative-pressure"], "events": [3, 0],
                   "totals": [196, 198]}},
        {**base, "id": "H8", "kind": "pair", "title": f"{HOSTILE_SCRIPT} {HOSTILE_NOTEBOOK}",
         "role": "exploratory", "outcome": HOSTILE_ATTR, "compare": [HOSTILE_SCRIPT, "gauze"],
         "planned_test": "fisher-exact", "test": "fisher-exact", "statistic": None, "df": None,
         "p_value": 0.4012, "p_adjusted": None, "reject": None,
         "estimate": {"measure": "risk-difference", "value": -0.0731, "ci": [-0.2210, 0.0732],
                      "ci_method": "newcombe", "level": 0.95, "note": HOSTILE_URL},
         "table": {"groups": [HOSTILE_SCRIPT, "gauze"], "events": [5, 9], "totals": [50, 52]},
         "pre_specified": False},
        {**base, "id": "H9", "kind": "pair",
         "title": "Odds of reopening, gauze vs negative-pressure",
         "role": "exploratory", "outcome": "reopening", "compare": ["gauze", "negative-pressure"],
         "planned_test": "fisher-exact", "test": "fisher-exact", "statistic": None, "df": None,
         "p_value": 0.1224, "p_adjusted": None, "reject": None,
         "estimate": {"measure": "odds-ratio", "value": None, "ci": [0.6179, None],
                      "ci_method": "exact-conditional", "level": 0.95},
         "table": {"groups": ["gauze", "negative-pressure"], "events": [3, 0],
                   "totals": [196, 198]}},
    ]
    res["hypotheses"] = hyps
    res["multiplicity"] = {
        "method": "graphical",
        "weights": {"H1": 0.5, "H2": 0.2, "H3": 0.1, "H4": 0.1, "H5": 0.1, "H6": 0.0,
                    "H7": 0.0},
        "transitions": {"H1": {"H2": 0.5, "H3": 0.5}, "H2": {"H1": 1}, "H3": {"H4": 1},
                        "H4": {"H5": 1}, "H5": {"H6": 0.5, "H7": 0.5}, "H6": {"H1": 1},
                        "H7": {"H1": 1}},
    }
    res["overrides"] = [
        {"key": "hypotheses.H2.test", "locked": "farrington-manning", "used": "two-proportion-z"},
        {"key": "hypotheses.H8.interval", "locked": "wald", "used": HOSTILE_ATTR},
    ]
    res["deviations"] = [
        {"code": "override", "detail": f"test of H2 replaced on the command line {HOSTILE_URL}",
         "expected": "farrington-manning", "found": "two-proportion-z"},
        {"code": "unexpected-group", "detail": f"2 rows with arm {HOSTILE_QUOTES}",
         "expected": "gauze, alginate, negative-pressure", "found": HOSTILE_NOTEBOOK},
    ]
    res["notes"] = [{"code": "zero-cell", "detail": f"H3: 0.5 added {HOSTILE_SCRIPT}"}]
    return res


# --- value formatting -------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("p", "shown"),
    [
        (0.0134, "0.01340"),
        (0.04494, "0.04494"),
        (0.371249, "0.3712"),
        (1.0, "1.000"),
        (0.00012345, "0.0001234"),  # 4 significant digits, still fixed notation
        (0.0001, "0.0001000"),
        (0.0000999, "< 0.0001"),
        (0.0, "< 0.0001"),
        (None, "—"),
    ],
)
def test_fmt_p(p: float | None, shown: str) -> None:
    assert values.fmt_p(p) == shown


def test_number_formats() -> None:
    assert values.fmt_estimate(-0.094) == "-0.0940"
    assert values.fmt_estimate(None) == "—"
    assert values.fmt_statistic(6.12) == "6.120"
    assert values.fmt_level(0.95) == "95%"
    assert values.fmt_level(0.9) == "90%"
    assert values.fmt_level(0.975) == "97.5%"
    assert values.fmt_interval(-0.17, -0.019) == "(-0.1700, -0.0190)"
    assert values.fmt_interval(None, 0.2) == "(—, 0.2000)"
    assert values.fmt_interval(None, None) == "—"
    assert values.fmt_count(41) == "41"
    assert values.fmt_count(41.0) == "41"


def test_new_formats() -> None:
    assert values.fmt_rate(0.3) == "0.30"
    assert values.fmt_rate(0.125) == "0.125"
    assert values.fmt_rate(0.05) == "0.05"
    assert values.fmt_thousands(100000) == "100,000"
    assert values.fmt_thousands(None) == "—"
    assert values.fmt_weight(0.5) == "0.5"
    assert values.fmt_weight(1) == "1"
    assert values.fmt_weight(1 / 3) == "0.3333"
    assert values.fmt_error(0.00123) == "0.0012"
    assert values.plain(0.025) == "0.025"
    assert values.plain(True) == "true"
    assert values.plain(["wald", 2]) == '["wald", 2]'
    assert values.plain(None) == "—"


def test_visible_shows_control_characters_as_escapes() -> None:
    assert values.visible("a\x1b[31mb\x00c\u2028d") == "a\\x1b[31mb\\x00c\\u2028d"
    assert values.visible("tab\tand\nline") == "tab\tand\nline"  # kept as they are


def test_readers_reject_wrong_types_naming_the_key() -> None:
    assert values.number(None, "a") is None
    assert values.number(float("nan"), "a") is None
    assert values.number(3, "a") == 3.0
    with pytest.raises(PrespecError, match=r"^results.json: hypotheses\[1\].p_value: expected a "
                                           r"number or null, found 'abc'$"):
        values.number("abc", "hypotheses[1].p_value")
    with pytest.raises(PrespecError, match="expected a number"):
        values.number(True, "x")
    with pytest.raises(PrespecError, match=r"expected \[low, high\]"):
        values.pair([0.1], "ci")


# --- figures ------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def drawn(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[Path]]:
    folder = tmp_path_factory.mktemp("figures")
    return folder, write_figures(sample_results(), folder)


def test_figures_written_with_deterministic_names(drawn: tuple[Path, list[Path]]) -> None:
    folder, paths = drawn
    assert [p.relative_to(folder).as_posix() for p in paths] == [
        "figures/proportions-infection.png",
        "figures/proportions-reopening.png",
        "figures/differences.png",
    ]
    assert sorted(p.name for p in (folder / "figures").iterdir()) == [
        "differences.png", "differences.svg", "proportions-infection.png",
        "proportions-infection.svg", "proportions-reopening.png", "proportions-reopening.svg",
    ]  # an SVG beside each PNG, no temporary file left


def test_figures_decode_with_sane_shapes(drawn: tuple[Path, list[Path]]) -> None:
    _, paths = drawn
    for path in paths:
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        img = imread(path)
        height, width, channels = img.shape
        assert width == 1600  # 8 inches at 200 dpi
        assert 150 <= height <= 2000
        assert channels in (3, 4)
        # Something is drawn: the image is neither blank nor one colour.
        assert np.unique(img[..., :3].reshape(-1, 3), axis=0).shape[0] > 20
    proportions = imread(paths[0])
    differences = imread(paths[2])
    # Three panels of 6 hypotheses with an estimate are taller than 3 groups.
    assert differences.shape[0] > proportions.shape[0]


def test_figures_identical_bytes_on_second_run(
    drawn: tuple[Path, list[Path]], tmp_path: Path
) -> None:
    _, first = drawn
    second = write_figures(sample_results(), tmp_path)
    for a, b in zip(first, second, strict=True):
        assert a.read_bytes() == b.read_bytes(), a.name
        assert b"Software" not in a.read_bytes()  # no creator stamp
        assert b"tIME" not in a.read_bytes()  # no time chunk


def test_figures_follow_the_results(drawn: tuple[Path, list[Path]], tmp_path: Path) -> None:
    _, first = drawn
    res = sample_results()
    res["hypotheses"][0]["estimate"]["value"] = -0.05
    changed = write_figures(res, tmp_path)
    assert changed[2].read_bytes() != first[2].read_bytes()
    assert changed[0].read_bytes() == first[0].read_bytes()


def test_no_differences_figure_without_estimates(tmp_path: Path) -> None:
    res = sample_results()
    for hyp in res["hypotheses"]:
        hyp["estimate"] = None
    assert not has_estimates(res)
    paths = write_figures(res, tmp_path)
    assert [p.name for p in paths] == ["proportions-infection.png", "proportions-reopening.png"]
    assert not (tmp_path / DIFFERENCES).exists()


def test_rehearsal_writes_no_figures_and_does_not_fail(tmp_path: Path) -> None:
    assert write_figures(rehearsal_results(), tmp_path) == []


def test_dollar_signs_and_markup_in_titles_are_plain_text(tmp_path: Path) -> None:
    res = sample_results()
    res["hypotheses"][0]["title"] = "Cost $5 vs $10 <i>arm</i>"
    res["groups"]["infection"][0]["group"] = "$x^2$"
    paths = write_figures(res, tmp_path)  # mathtext would fail or render; plain text does not
    assert all(imread(p).shape[1] == 1600 for p in paths)


def test_malformed_results_raise_one_line_error(tmp_path: Path) -> None:
    res = sample_results()
    res["groups"]["infection"][1]["proportion"] = "0.15"
    with pytest.raises(PrespecError, match=r"groups.infection\[1\].proportion: expected a number"):
        write_figures(res, tmp_path)
    res = sample_results()
    res["hypotheses"][2]["estimate"]["ci"] = [0.1, 0.2, 0.3]
    with pytest.raises(PrespecError, match=r"hypotheses.H3.estimate.ci: expected \[low, high\]"):
        write_figures(res, tmp_path)


def test_write_figures_does_not_change_the_results_or_the_backend(tmp_path: Path) -> None:
    res = sample_results()
    before = copy.deepcopy(res)
    backend = matplotlib.get_backend()
    write_figures(res, tmp_path)
    assert res == before
    assert json.dumps(res) == json.dumps(before)
    assert matplotlib.get_backend() == backend


@pytest.mark.parametrize(
    ("outcome", "name"),
    [
        ("infection", "figures/proportions-infection.png"),
        ("wound_reopening.30d", "figures/proportions-wound_reopening.30d.png"),
    ],
)
def test_proportions_name_plain(outcome: str, name: str) -> None:
    assert proportions_name(outcome) == name


def test_proportions_name_unsafe_outcome_stays_in_figures() -> None:
    for outcome in ("../../etc/passwd", "a/b", "infection rate", "..", "x."):
        name = proportions_name(outcome)
        assert name.startswith("figures/proportions-") and name.endswith(".png")
        assert "/" not in name[len("figures/"):] and ".." not in name
    assert proportions_name("a/b") != proportions_name("a b")


# --- the full engine's fields: forest panels, margins, null rate, the graph --------------------


def _panels(results: dict[str, Any]) -> dict[str, Any]:
    """The forest plot's axes by their x label (drawn in memory, not saved)."""
    with matplotlib.rc_context({"text.parse_math": False}):
        fig = _DifferencesJob(_estimate_rows(results)).draw()
    return {ax.get_xlabel().split("\n")[0]: ax for ax in fig.axes if ax.get_xlabel()}, fig


def _vertical_lines(ax: Any) -> dict[float, str]:
    """x position -> ``solid`` or ``broken`` (dashed, dotted) for each ``vlines`` segment."""
    found: dict[float, str] = {}
    for coll in ax.collections:
        for seg in coll.get_segments():
            if len(seg) == 2 and seg[0][0] == seg[1][0]:
                style = coll.get_linestyle()[0]
                found[round(float(seg[0][0]), 6)] = "solid" if style[1] is None else "broken"
    return found


def test_forest_equivalence_ratio_margins_on_log_scale() -> None:
    res = full_results()
    res["hypotheses"] = [h for h in res["hypotheses"] if h["id"] == "H3"]
    panels, _ = _panels(res)
    ax = panels["risk ratio (first group over second), log scale"]
    assert ax.get_xscale() == "log"
    lines = _vertical_lines(ax)
    assert lines[0.8] == "broken" and lines[1.25] == "broken"  # both margins of [0.8, 1.25]
    low, high = ax.get_xlim()
    assert low < 0.8 and high > 1.25
    ticks = [round(t, 6) for t in ax.get_xticks()]
    assert {0.8, 1.0, 1.25} <= set(ticks)


def test_forest_proportion_panel_has_null_rate_line_and_stays_in_unit_range() -> None:
    panels, fig = _panels(full_results())
    ax = panels["proportion with the event"]
    lines = _vertical_lines(ax)
    assert lines[0.3] == "broken"  # dotted
    low, high = ax.get_xlim()
    assert 0.0 <= low < 0.0788 and 0.3 < high <= 1.0
    legend = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
    assert legend == ["confirmatory (primary or secondary)", "follow-up, tested (gate open)",
                      "follow-up, not tested (gate closed)", "exploratory (nominal p, no claim)",
                      "no difference (0, or 1 for a ratio)", "margin", "null rate (H0)"]


def test_forest_rows_of_the_full_results() -> None:
    rows = {r.label.split("\n")[0]: r for r in _estimate_rows(full_results())}
    # k-group and trend hypotheses (estimate null) have no row.
    assert not any(k.startswith(("H5 ", "H6", "H7 ")) for k in rows)
    assert "H5" not in rows and "H7" not in rows
    closed = rows["H7:gauze-vs-negative-pressure"]
    assert closed.measure == "risk-ratio" and closed.kind == "not-tested"
    assert closed.label.split("\n")[1:] == ["(not tested: gate closed)",
                                            "Reopening, gauze vs", "negative-pressure"]
    assert rows["H4"].null_rate == 0.3 and rows["H4"].measure == "proportion"
    assert rows["H3"].margins == (0.8, 1.25)
    h9 = rows["H9 (exploratory)"]
    assert h9.kind == "exploratory" and rows["H1"].kind == "confirmatory"
    assert rows["H5:alginate-vs-gauze"].kind == "follow-up"
    assert (h9.value, h9.low, h9.high) == (None, 0.6179, None)


def test_log_ticks_keep_marks_and_never_crowd() -> None:
    assert _log_ticks(0.64, 1.56, [1.0, 0.8, 1.25]) == [0.7, 0.8, 1.0, 1.25, 1.5]
    # Over three decades the margins would crowd the 1: the value of no difference wins.
    ticks = _log_ticks(0.5, 170.0, [1.0, 0.8, 1.25])
    assert ticks == [1.0, 10.0, 100.0]
    for lo, hi in [(0.01, 50.0), (0.3, 3.0), (0.9, 1.1)]:
        ticks = _log_ticks(lo, hi, [1.0])
        gaps = [math.log10(b / a) for a, b in itertools.pairwise(ticks)]
        assert ticks and all(g >= 0.08 * math.log10(hi / lo) - 1e-12 for g in gaps)


def test_graph_layout_on_a_circle_clockwise_from_the_top() -> None:
    job = _graph_job(full_results()["multiplicity"])
    assert [n for n, _ in job.nodes] == ["H1", "H2", "H3", "H4", "H5", "H6", "H7"]
    assert dict(job.nodes)["H1"] == 0.5
    pos = job.positions()
    assert pos["H1"] == pytest.approx((0.0, 1.0))
    assert all(math.hypot(x, y) == pytest.approx(1.0) for x, y in pos.values())
    assert pos["H2"][0] > 0  # clockwise: the second node is to the right of the first
    assert ("H1", "H2", 0.5) in job.edges and ("H2", "H1", 1.0) in job.edges
    # A node named only by a transition is drawn (without a weight); a zero weight is no arrow.
    job = _graph_job({"weights": {"H1": 1}, "transitions": {"H1": {"H2": 0}, "H2": {"H3": 1}}})
    assert job.nodes == (("H1", 1.0), ("H2", None), ("H3", None))
    assert job.edges == (("H2", "H3", 1.0),)


def test_graph_figure_written_decodes_and_is_deterministic(tmp_path: Path) -> None:
    res = full_results()
    assert has_graph(res) and not has_graph(sample_results())
    paths = write_figures(res, tmp_path / "a")
    names = [p.relative_to(tmp_path / "a").as_posix() for p in paths]
    assert names[-2:] == [DIFFERENCES, MULTIPLICITY_GRAPH]
    graph = tmp_path / "a" / MULTIPLICITY_GRAPH
    img = imread(graph)
    assert img.shape[:2] == (1200, 1600)
    assert np.unique(img[..., :3].reshape(-1, 3), axis=0).shape[0] > 20
    again = write_figures(full_results(), tmp_path / "b")
    assert (tmp_path / "b" / MULTIPLICITY_GRAPH).read_bytes() == graph.read_bytes()
    assert b"tIME" not in graph.read_bytes() and b"Software" not in graph.read_bytes()
    assert len(again) == len(paths)
    changed = full_results()
    changed["multiplicity"]["transitions"]["H1"] = {"H2": 0.25, "H3": 0.75}
    write_figures(changed, tmp_path / "c")
    assert (tmp_path / "c" / MULTIPLICITY_GRAPH).read_bytes() != graph.read_bytes()


def test_no_graph_figure_without_the_graphical_procedure(tmp_path: Path) -> None:
    paths = write_figures(sample_results(), tmp_path)
    assert MULTIPLICITY_GRAPH not in [p.relative_to(tmp_path).as_posix() for p in paths]


def test_malformed_graph_names_the_key(tmp_path: Path) -> None:
    res = full_results()
    res["multiplicity"]["transitions"]["H2"] = {"H1": "all"}
    with pytest.raises(PrespecError, match=r"^results.json: multiplicity.transitions.H2.H1: "
                                           r"expected a number"):
        write_figures(res, tmp_path)
    assert not (tmp_path / "figures").exists()  # nothing written when a figure fails


def test_hostile_labels_in_figures_are_plain_text(tmp_path: Path) -> None:
    paths = write_figures(full_results(), tmp_path)
    hostile = proportions_name(HOSTILE_ATTR)
    assert hostile in [p.relative_to(tmp_path).as_posix() for p in paths]
    assert "<" not in hostile and '"' not in hostile
    assert all(imread(p).shape[1] == 1600 for p in paths)


# --- figures fit for paper: 200 dpi, an SVG beside each, full labels, no colliding ticks -----


def _png_dpi(path: Path) -> tuple[float, float]:
    """The resolution a PNG's pHYs chunk declares, in dots per inch (PNG specification 11.3.5.3:
    pixels per metre, unit 1)."""
    import struct

    data = path.read_bytes()
    at = data.index(b"pHYs")
    x, y, unit = struct.unpack(">IIB", data[at + 4:at + 13])
    assert unit == 1
    return x * 0.0254, y * 0.0254


def test_every_figure_is_200_dpi_with_a_parseable_svg_beside_it(tmp_path: Path) -> None:
    import xml.etree.ElementTree as ET

    paths = write_figures(full_results(), tmp_path / "a")
    again = write_figures(full_results(), tmp_path / "b")
    for path, other in zip(paths, again, strict=True):
        assert _png_dpi(path) == pytest.approx((200.0, 200.0), abs=0.01)
        svg = path.with_suffix(".svg")
        root = ET.parse(svg).getroot()
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
        assert root.get("width") == "576pt"  # 8 inches
        text = svg.read_text("utf-8")
        assert "<dc:date>" not in text and "Matplotlib v" not in text  # no stamp
        assert other.with_suffix(".svg").read_bytes() == svg.read_bytes()  # same bytes again
    assert sorted(p.name for p in (tmp_path / "a" / "figures").iterdir()) == sorted(
        [p.name for p in paths] + [p.with_suffix(".svg").name for p in paths])


def _figure_of(results: dict[str, Any]) -> Any:
    from prespec.report.canvas import RC

    with matplotlib.rc_context(RC):
        fig = _DifferencesJob(_estimate_rows(results)).draw()
        fig.draw_without_rendering()
    return fig


def _texts_inside(fig: Any) -> list[str]:
    """Every visible text of the figure, each asserted to lie inside the figure."""
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    seen = []
    for artist in fig.findobj(matplotlib.text.Text):
        if not artist.get_visible() or not artist.get_text():
            continue
        ext = artist.get_window_extent(renderer)
        assert ext.x0 >= box.x0 - 0.5 and ext.x1 <= box.x1 + 0.5, artist.get_text()
        assert ext.y0 >= box.y0 - 0.5 and ext.y1 <= box.y1 + 0.5, artist.get_text()
        seen.append(artist.get_text())
    return seen


def _tick_boxes(fig: Any) -> list[list[Any]]:
    renderer = fig.canvas.get_renderer()
    out = []
    for ax in fig.axes:
        if not ax.get_xlabel():
            continue
        lo, hi = sorted(ax.get_xlim())
        out.append(sorted((t.label1.get_window_extent(renderer) for t in ax.xaxis.get_major_ticks()
                           if lo <= t.get_loc() <= hi and t.label1.get_text()),
                          key=lambda b: b.x0))
    return out


LONG_TITLE = ("Negative-pressure wound therapy against standard sterile gauze dressing in "
              "adults after elective colorectal surgery, infection within thirty days")


@pytest.mark.parametrize(("value", "low", "high"), [
    (-0.07, -0.11, -0.04),  # a small difference: ticks every 0.025 or 0.05 near each other
    (-0.0007, -0.0011, -0.0004),  # a tiny one
    (0.3, -0.9, 0.95),  # nearly the whole range
    (-12.5, -40.0, 30.0),  # a measure with no natural range
])
def test_long_labels_are_whole_and_inside_and_ticks_never_collide(
        value: float, low: float, high: float) -> None:
    res = sample_results()
    res["hypotheses"] = [h for h in res["hypotheses"] if h["id"] in ("H1", "H3", "H5")]
    res["hypotheses"][0]["title"] = LONG_TITLE
    res["hypotheses"][0]["id"] = "H1-the-primary-comparison-of-infection-between-two-regimens"
    res["hypotheses"][0]["estimate"].update({"value": value, "ci": [low, high]})
    res["hypotheses"][1]["margin"] = None
    fig = _figure_of(res)
    shown = " ".join(" ".join(t.split()) for t in _texts_inside(fig))
    for word in LONG_TITLE.split():
        assert word in shown  # every word of the title drawn: wrapped, never cut with "…"
    assert "…" not in shown
    assert "the-primary-comparison" in shown.replace("\n", "")
    for boxes in _tick_boxes(fig):
        assert len(boxes) >= 2
        for a, b in itertools.pairwise(boxes):
            assert a.x1 < b.x0, "tick labels overlap"


def test_kinds_are_drawn_distinctly_with_a_legend_and_a_direction() -> None:
    fig = _figure_of(full_results())
    legend = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
    assert legend[:4] == ["confirmatory (primary or secondary)", "follow-up, tested (gate open)",
                          "follow-up, not tested (gate closed)",
                          "exploratory (nominal p, no claim)"]
    markers = {(line.get_marker(), line.get_markerfacecolor(), line.get_linestyle())
               for leg in fig.legends for line in leg.get_lines()[:4]}
    assert len(markers) == 4  # four kinds, four looks
    labels = [ax.get_xlabel() for ax in fig.axes if ax.get_xlabel()]
    assert all("\u2190" in lab and "\u2192" in lab for lab in labels)
    assert any("fewer events in the first group named" in lab for lab in labels)
    # the grey line at no difference in each panel of a difference or a ratio
    refs = [line.get_xdata()[0] for ax in fig.axes for line in ax.get_lines()
            if line.get_linestyle() == "-" and len(line.get_xdata()) == 2
            and line.get_xdata()[0] == line.get_xdata()[1]]
    assert 0.0 in refs and 1.0 in refs


@pytest.mark.parametrize(("favourable", "left"), [
    ("no-event", "favours the first group named"),
    ("event", "favours the second group named"),
])
def test_direction_follows_the_outcomes_favourable_value(favourable: str, left: str) -> None:
    res = sample_results()
    res["hypotheses"] = [h for h in res["hypotheses"] if h["id"] == "H1"]
    res["flow"] = {"outcomes": {"infection": {"missing": "exclude", "favourable": favourable}}}
    fig = _figure_of(res)
    (label,) = [ax.get_xlabel() for ax in fig.axes if ax.get_xlabel()]
    assert label.split("\n")[1].startswith(f"\u2190 {left}")
