"""Families in the plan: the keys, their defaults, and every mistake as one line with file:line."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from prespec import api
from prespec.demo.safety import PLAN_TEXT, TERMS
from prespec.errors import PlanError
from prespec.plan import load_plan, plan_from_resolved
from prespec.plan import vocabulary as v

PLAN = """\
prespec: 1
title: Tolerability of two invented hand gels
data:
  id: participant
  group: gel
  groups: [new, standard]
outcomes:
  reported:
    column: had_event
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    outcome: reported
    compare: [new, standard]
    test: fisher-exact
    over: event_term
    within: body_system
    levels: {skin: [dryness, redness], eyes: [watering]}
    flag_method: double-fdr
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "plan.yaml"
    path.write_text(text)
    return path


def swap(old: str, new: str, text: str = PLAN) -> str:
    assert text.count(old) == 1, old
    return text.replace(old, new)


def line_of(text: str, marker: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), start=1) if marker in line)


def test_defaults_are_written_into_the_resolved_plan(tmp_path: Path) -> None:
    loaded = load_plan(write(tmp_path, PLAN))
    hyp = loaded.resolved["hypotheses"][0]
    assert hyp["flag_level"] == 0.05 and hyp["group_level"] == 0.05  # the plan's alpha
    assert hyp["role"] == "exploratory"
    assert hyp["measure"] == "risk-difference" and hyp["interval"] == "newcombe"
    assert hyp["members"] == ["AE[dryness]", "AE[redness]", "AE[watering]"]
    # the resolved plan validates again as it is (a lock's plan is re-read on every run)
    again = plan_from_resolved(json.loads(json.dumps(loaded.resolved)))
    assert again.hypotheses[0].members == hyp["members"]


def test_run_time_family_has_no_members_and_its_own_level(tmp_path: Path) -> None:
    text = swap("    levels: {skin: [dryness, redness], eyes: [watering]}\n", "")
    text = swap("    flag_method: double-fdr\n", "    flag_method: double-fdr\n"
                "    flag_level: 0.1\n    group_level: 0.2\n", text)
    hyp = load_plan(write(tmp_path, text)).resolved["hypotheses"][0]
    assert hyp["members"] is None and hyp["levels"] is None
    assert (hyp["flag_level"], hyp["group_level"]) == (0.1, 0.2)


def test_example_plan_is_the_demo_plan_and_checks() -> None:
    here = Path(__file__).parents[1] / "plans" / "safety-review.yaml"
    assert here.read_text() == PLAN_TEXT
    loaded = load_plan(here)
    members = loaded.resolved["hypotheses"][0]["members"]
    assert len(members) == sum(len(t) for t in TERMS.values()) == 30
    assert members[0] == "AE[dryness]" and "AE[eye irritation]" in members
    summary = api.check(here).summary
    assert "family over event_term within body_system (30 declared levels)" in summary
    assert "flagged by double-fdr at 0.1 across groups, 0.1 within" in summary


def test_schema_lists_the_family_keys_and_they_are_no_longer_later_keys() -> None:
    props = api.schema()["$defs"]["Hypothesis"]["properties"]
    for key in ("over", "within", "levels", "flag_method", "flag_level", "group_level",
                "members"):
        assert key in props, key
    assert "unique within each level" in props["over"]["description"]
    assert "over" not in v.LATER_KEYS["hypothesis"]
    assert "within" not in v.LATER_KEYS["hypothesis"]


BAD = [
    ("within without over", swap("    over: event_term\n", ""), "within: body_system",
     "hypotheses.AE.within", "'within' is used only in a family"),
    ("double FDR without within", swap("    within: body_system\n", "").replace(
        "    levels: {skin: [dryness, redness], eyes: [watering]}\n",
        "    levels: [dryness, redness]\n"), "flag_method: double-fdr",
     "hypotheses.AE.flag_method", "needs within: COLUMN"),
    ("one term in two body systems",
     swap("eyes: [watering]", "eyes: [watering, redness]"), "levels:",
     "hypotheses.AE.levels.eyes[2]", "'redness' is also listed under 'skin'"),
    ("term listed twice", swap("[dryness, redness]", "[dryness, dryness]"), "levels:",
     "hypotheses.AE.levels.skin[2]", "'dryness' is listed twice"),
    ("no flag method", swap("    flag_method: double-fdr\n", ""), "- id: AE",
     "hypotheses.AE.flag_method", "is required for a family"),
    ("unknown flag method", swap("flag_method: double-fdr", "flag_method: holm"),
     "flag_method: holm", "hypotheses.AE.flag_method", "'holm' is not a known flag method"),
    ("over the group column", swap("over: event_term", "over: gel"), "over: gel",
     "hypotheses.AE.over", "'gel' is data.group"),
    ("within equal to over", swap("within: body_system", "within: event_term"),
     "within: event_term", "hypotheses.AE.within", "is the over column"),
    ("a list with within", swap("{skin: [dryness, redness], eyes: [watering]}",
                                "[dryness, redness]"), "levels:", "hypotheses.AE.levels",
     "declare the levels as a mapping"),
    ("compare all", swap("compare: [new, standard]", "compare: all").replace(
        "test: fisher-exact", "test: pearson-chi-square"), "compare: all",
     "hypotheses.AE.compare", "a family compares two groups"),
    ("stratified test", swap("test: fisher-exact", "test: cochran-mantel-haenszel\n"
                             "    strata: [site]"), "test: cochran", "hypotheses.AE.test",
     "is not a test for a family"),
    ("another measure", swap("test: fisher-exact", "test: fisher-exact\n"
                             "    measure: odds-ratio"), "measure: odds-ratio",
     "hypotheses.AE.measure", "a family estimates the risk difference"),
    ("a role", swap("test: fisher-exact", "test: fisher-exact\n    role: primary"),
     "role: primary", "hypotheses.AE.role", "leave role out"),
    ("group level under BH", swap("flag_method: double-fdr",
                                  "flag_method: benjamini-hochberg\n    group_level: 0.1"),
     "group_level", "hypotheses.AE.group_level", "only with flag_method: double-fdr"),
    ("members written by hand", swap("    flag_method: double-fdr\n",
                                     "    flag_method: double-fdr\n    members: ['AE[x]']\n"),
     "members:", "hypotheses.AE.members", "is written by lock from levels"),
    ("flag level out of range", swap("    flag_method: double-fdr\n",
                                     "    flag_method: double-fdr\n    flag_level: 1.5\n"),
     "flag_level: 1.5", "hypotheses.AE.flag_level", "1.5"),
]


@pytest.mark.parametrize(("name", "text", "marker", "path", "says"), BAD,
                         ids=[b[0] for b in BAD])
def test_mistakes_are_one_line_with_file_line_and_key(tmp_path: Path, name: str, text: str,
                                                      marker: str, path: str,
                                                      says: str) -> None:
    plan = write(tmp_path, text)
    with pytest.raises(PlanError) as caught:
        load_plan(plan)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(f"{plan}:{line_of(text, marker)}: {path}: "), message
    assert says in message, message


def test_a_family_cannot_carry_graphical_weight(tmp_path: Path) -> None:
    text = swap("multiplicity: holm", "multiplicity: {method: graphical, weights: {AE: 1}}")
    with pytest.raises(PlanError, match="exploratory"):
        load_plan(write(tmp_path, text))


def test_plans_without_families_keep_their_fingerprints() -> None:
    # the fingerprints prespec gave these plans before families existed (commit 76f746c)
    plans = Path(__file__).parents[1] / "plans"
    loaded = load_plan(plans / "wound-dressing.yaml")
    assert loaded.fingerprint == (
        "sha256:7f1707a66696d7cb2301f395720e7f624fce4f13b8bd0d9a6c13f8c8f4a615ac")
    assert load_plan(plans / "methods-tour.yaml").fingerprint == (
        "sha256:2c6b68cc3c720ef6b89c2435dedbe18764406850ef132c2149bcb7ab30ed389d")
    for hyp in loaded.resolved["hypotheses"]:
        assert not set(v.FAMILY_KEYS) & set(hyp)
