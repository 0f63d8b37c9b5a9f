"""The ``looks:`` key of the plan: accepted forms, the schema, and each rule's one-line error
(file:line: key: message), nothing written."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from prespec import api
from prespec.errors import PlanError
from prespec.plan import load_plan
from prespec.plan.looks import EFFICACY, FUTILITY, looks_issues
from prespec.stats import sequential

PLAN = """\
prespec: 1
title: Negative-pressure dressing versus gauze, 30-day wound infection
data:
  id: participant
  group: arm
  groups: [negative-pressure, gauze, alginate]
  planned_n: {negative-pressure: 300, gauze: 300, alginate: 300}
outcomes:
  infection: {column: infected_30d, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
design:
  assumed: {negative-pressure: 0.10, gauze: 0.20, alginate: 0.15}
  power: 0.8
hypotheses:
  - id: H1
    outcome: infection
    compare: [negative-pressure, gauze]
    test: two-proportion-z
    looks:
      fractions: [0.5, 1]
      efficacy: lan-demets-obrien-fleming
  - id: H2
    outcome: infection
    compare: all
    test: pearson-chi-square
    role: exploratory
"""
LOOKS = """\
    looks:
      fractions: [0.5, 1]
      efficacy: lan-demets-obrien-fleming
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "trial.yaml"
    path.write_text(text)
    return path


def error(tmp_path: Path, text: str) -> str:
    path = write(tmp_path, text)
    with pytest.raises(PlanError) as info:
        load_plan(path)
    message = str(info.value)
    assert "\n" not in message
    assert sorted(p.name for p in tmp_path.iterdir()) == ["trial.yaml"]  # nothing written
    return message


def line_of(text: str, fragment: str, occurrence: int = 1) -> int:
    found = [i for i, line in enumerate(text.splitlines(), start=1) if fragment in line]
    return found[occurrence - 1]


def with_looks(body: str) -> str:
    return PLAN.replace(LOOKS, body)


def test_names_are_the_maths_modules() -> None:
    assert EFFICACY == sequential.EFFICACY
    assert FUTILITY == sequential.FUTILITY


def test_a_plan_with_looks_loads_with_its_defaults(tmp_path: Path) -> None:
    loaded = load_plan(write(tmp_path, with_looks(
        "    looks:\n      sizes: [200, 400, 600]\n      efficacy: hwang-shih-decani\n"
        "      gamma: -4\n      futility: {spending: lan-demets-pocock}\n")))
    looks = loaded.resolved["hypotheses"][0]["looks"]
    assert looks == {"fractions": None, "sizes": [200, 400, 600], "efficacy": "hwang-shih-decani",
                     "gamma": -4.0, "futility": {"spending": "lan-demets-pocock", "gamma": None,
                                                 "binding": False}}
    assert loaded.model.hypotheses[0].looks.planned_fractions() == [1 / 3, 2 / 3, 1.0]
    assert "looks" not in loaded.resolved["hypotheses"][1]  # no looks: not in the resolved plan


def test_schema_lists_looks() -> None:
    schema = api.schema()
    text = json.dumps(schema)
    assert "looks" in schema["$defs"]["Hypothesis"]["properties"]
    efficacy = schema["$defs"]["Looks"]["properties"]["efficacy"]  # optional: a Bayesian
    assert [a["enum"] for a in efficacy["anyOf"] if "enum" in a] == [list(EFFICACY)]  # rule's
    assert {"stop_for_success", "stop_for_futility"} <= set(  # looks stop by probabilities
        schema["$defs"]["Looks"]["properties"])
    assert "binding" in schema["$defs"]["Futility"]["properties"]
    assert "not available" not in text


BAD = [
    ("not increasing", "    looks:\n      fractions: [0.6, 0.4, 1]\n      efficacy: pocock\n",
     "fractions: [", "hypotheses.H1.looks.fractions", "must increase from look to look"),
    ("not ending at 1", ("    looks:\n      fractions: [0.3, 0.6]\n      efficacy: "
     "lan-demets-pocock\n"), "fractions: [", "hypotheses.H1.looks.fractions", "must end at 1"),
    ("one look", "    looks:\n      fractions: [1]\n      efficacy: lan-demets-pocock\n",
     "fractions: [", "hypotheses.H1.looks.fractions", "at least two looks"),
    ("above 1", "    looks:\n      fractions: [0.5, 1.5]\n      efficacy: lan-demets-pocock\n",
     "fractions: [", "hypotheses.H1.looks.fractions[2]", "must be at most 1, found 1.5"),
    ("both fractions and sizes", ("    looks:\n      fractions: [0.5, 1]\n      sizes: [300, 600]\n"
     "      efficacy: pocock\n"), "looks:", "hypotheses.H1.looks", "either fractions"),
    ("gamma missing", "    looks:\n      fractions: [0.5, 1]\n      efficacy: hwang-shih-decani\n",
     "efficacy: hwang", "hypotheses.H1.looks.gamma", "is required for hwang-shih-decani"),
    ("gamma on another function", ("    looks:\n      fractions: [0.5, 1]\n      efficacy: pocock\n"
     "      gamma: -2\n"), "gamma:", "hypotheses.H1.looks.gamma", "only with hwang-shih-decani"),
    ("futility gamma missing", ("    looks:\n      fractions: [0.5, 1]\n      efficacy: pocock\n"
     "      futility: {spending: hwang-shih-decani}\n"), "futility:",
     "hypotheses.H1.looks.futility.gamma", "is required for hwang-shih-decani"),
    ("binding futility", ("    looks:\n      fractions: [0.5, 1]\n      efficacy: pocock\n"
     "      futility: {spending: lan-demets-pocock, binding: true}\n"), "futility:",
     "hypotheses.H1.looks.futility.binding", "binding futility boundaries are not supported"),
    ("unknown spending", "    looks:\n      fractions: [0.5, 1]\n      efficacy: obrien\n",
     "efficacy: obrien", "hypotheses.H1.looks.efficacy", "obrien"),
    ("misspelt key", "    looks:\n      fraction: [0.5, 1]\n      efficacy: pocock\n",
     "fraction:", "hypotheses.H1.looks", "'fraction' is not a known key"),
    ("classical on unequal looks", ("    looks:\n      fractions: [0.3, 1]\n      efficacy: "
     "obrien-fleming\n"), "fractions: [", "hypotheses.H1.looks.fractions",
     "equally spaced looks only"),
    ("exact test", "    looks:\n      fractions: [0.5, 1]\n      efficacy: pocock\n",
     "looks:", "hypotheses.H1.looks", "'fisher-exact' has none"),
    ("continuity", "    continuity: true\n    test: pearson-chi-square\n" + LOOKS, "looks:",
     "hypotheses.H1.looks", "continuity-corrected chi-square is not on the scale"),
    ("non-inferiority", "    comparison: non-inferiority\n    alternative: less\n    margin: 0.05\n"
     + LOOKS, "looks:", "hypotheses.H1.looks", "superiority comparisons, not non-inferiority"),
    ("sparse switch", "    sparse: {min_expected: 5, test: fisher-exact}\n" + LOOKS, "looks:",
     "hypotheses.H1.looks", "sparse switch would change the test"),
    ("sizes against planned_n", "    looks:\n      sizes: [300, 500]\n      efficacy: pocock\n",
     "sizes:", "hypotheses.H1.looks.sizes", "the last size (500) differs"),
]


@pytest.mark.parametrize(("name", "body", "fragment", "key", "message"), BAD,
                         ids=[b[0] for b in BAD])
def test_bad_looks(tmp_path: Path, name: str, body: str, fragment: str, key: str,
                   message: str) -> None:
    text = with_looks(body)
    if name == "exact test":
        text = text.replace("test: two-proportion-z", "test: fisher-exact")
    if name == "continuity":
        text = text.replace("    test: two-proportion-z\n", "")
    found = error(tmp_path, text)
    where = f"{tmp_path / 'trial.yaml'}:{line_of(text, fragment)}: {key}: "
    assert found.startswith(where), found
    assert message in found


def test_looks_on_an_exploratory_hypothesis(tmp_path: Path) -> None:
    text = PLAN.replace("    role: exploratory\n", "    role: exploratory\n" + LOOKS)
    found = error(tmp_path, text)
    assert found.startswith(f"{tmp_path / 'trial.yaml'}:{line_of(text, 'looks:', 2)}: "
                            "hypotheses.H2.looks: 'H2' is exploratory")


def test_looks_on_a_k_group_comparison(tmp_path: Path) -> None:
    text = PLAN.replace("    role: exploratory\n", "    role: primary\n" + LOOKS)
    found = error(tmp_path, text)
    assert ": hypotheses.H2.looks: interim looks apply to compare [a, b]" in found


def test_fractions_need_planned_n(tmp_path: Path) -> None:
    text = PLAN.replace("  planned_n: {negative-pressure: 300, gauze: 300, alginate: 300}\n", "")
    found = error(tmp_path, text)
    assert found.startswith(f"{tmp_path / 'trial.yaml'}:{line_of(text, 'fractions:')}: "
                            "hypotheses.H1.looks.fractions: the observed information fraction")
    # planned sizes instead of planned_n are enough
    load_plan(write(tmp_path, text.replace("fractions: [0.5, 1]", "sizes: [300, 600]")))


def test_futility_needs_a_design(tmp_path: Path) -> None:
    text = with_looks(LOOKS + "      futility: {spending: lan-demets-obrien-fleming}\n")
    text = text.replace("design:\n  assumed: {negative-pressure: 0.10, gauze: 0.20, alginate: "
                        "0.15}\n  power: 0.8\n", "")
    found = error(tmp_path, text)
    assert ": hypotheses.H1.looks.futility: a futility boundary spends beta = 1 − power" in found


SECOND = """\
  - id: H3
    outcome: infection
    compare: [alginate, gauze]
    test: two-proportion-z
    looks:
      fractions: [0.5, 1]
      efficacy: lan-demets-pocock
"""


def test_looks_in_a_multiplicity_family(tmp_path: Path) -> None:
    # weighted Bonferroni procedures run over the looks as graphs: accepted
    for method in ("holm", "bonferroni", "fixed-sequence"):
        load_plan(write(tmp_path, (PLAN + SECOND).replace("multiplicity: none",
                                                          f"multiplicity: {method}")))
    graph = ("multiplicity: {method: graphical, weights: {H1: 0.8, H3: 0.2}, transitions: "
             "{H1: {H3: 1}, H3: {H1: 1}}}")
    load_plan(write(tmp_path, (PLAN + SECOND).replace("multiplicity: none", graph)))
    # others are refused, with the reason
    text = (PLAN + SECOND).replace("multiplicity: none", "multiplicity: hochberg")
    found = error(tmp_path, text)
    assert found.startswith(f"{tmp_path / 'trial.yaml'}:{line_of(text, 'looks:')}: "
                            "hypotheses.H1.looks: interim looks inside a multiplicity family of 2 "
                            "hypotheses are supported with the graphical procedure over the looks "
                            "(Maurer and Bretz 2013)")
    assert "hochberg is not a weighted Bonferroni procedure" in found
    # one hypothesis with looks beside a plain one: the plain one is tested at the final look
    plain = SECOND.replace("    looks:\n      fractions: [0.5, 1]\n      efficacy: "
                           "lan-demets-pocock\n", "")
    load_plan(write(tmp_path, (PLAN + plain).replace("multiplicity: none", "multiplicity: holm")))
    # gated follow-ups are refused in such a family
    gated = (PLAN + plain).replace("multiplicity: none", "multiplicity: holm").replace(
        "    role: exploratory\n", "    role: secondary\n    then: {pairwise: reference, "
        "multiplicity: holm}\n")
    assert ": hypotheses.H2.then: gated follow-up comparisons are not supported" in error(
        tmp_path, gated)


def test_every_hypothesis_plans_the_same_number_of_looks(tmp_path: Path) -> None:
    text = PLAN + SECOND.replace("[0.5, 1]", "[0.25, 0.5, 1]")
    found = error(tmp_path, text)
    assert ": hypotheses.H3.looks: plans 3 looks and 'H1' plans 2" in found


def test_rules_do_nothing_without_looks(tmp_path: Path) -> None:
    loaded = load_plan(write(tmp_path, PLAN))
    assert list(looks_issues(loaded.model, loaded.model.hypotheses[1], ("hypotheses", 1))) == []


def test_check_prints_the_plan_with_looks(tmp_path: Path) -> None:
    res = api.check(write(tmp_path, PLAN))
    assert res.loaded.model.hypotheses[0].looks is not None
    assert res.lock_status == "not locked"
    assert "; 2 looks at information 0.5, 1; lan-demets-obrien-fleming\n" in res.summary + "\n"
