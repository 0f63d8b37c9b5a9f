"""Loading a plan: the good plan, defaults, the YAML 1.2 core schema, lines, schema, summary.

The plan is the invented wound-dressing trial of docs/plan-format.md, restricted to what
this release runs.
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import pytest

from prespec.errors import PlanError
from prespec.plan import (
    Condition,
    LoadedPlan,
    Plan,
    json_schema,
    load_plan,
    plan_from_resolved,
    summary,
    value_key,
)
from prespec.plan.yamlread import core_value, parse_plan_yaml

GOOD = """\
# An invented three-arm trial (demonstration only).
prespec: 1
title: Dressing regimens and 30-day wound infection
protocol: WD-2027-01
data:
  id: participant
  group: arm
  groups: [gauze, alginate, negative-pressure]
  reference: gauze
  include:
    - {column: consented, in: ["yes"]}
  planned_n: {gauze: 300, alginate: 300, negative-pressure: 300}
outcomes:
  infection:
    column: infected_30d
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    title: Negative-pressure vs gauze, 30-day infection
    outcome: infection
    compare: [negative-pressure, gauze]
    test: pearson-chi-square
    alternative: two-sided
    measure: risk-difference
    interval: newcombe
    sparse: {min_expected: 5, test: fisher-exact}
    role: primary
  - id: H2
    outcome: infection
    compare: [alginate, gauze]
    test: two-proportion-z
    interval: wald
    role: secondary
  - id: H3
    outcome: infection
    compare: all
    test: pearson-chi-square
    role: exploratory
"""


def write(tmp_path: Path, text: str | bytes, name: str = "plan.yaml") -> Path:
    """Write a plan file and return its path."""
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def load_text(tmp_path: Path, text: str) -> LoadedPlan:
    return load_plan(write(tmp_path, text))


def test_good_plan_loads_with_its_values(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD)
    loaded = load_plan(path)
    plan = loaded.model
    assert loaded.path == path
    assert loaded.file_sha256 == "sha256:" + hashlib.sha256(GOOD.encode()).hexdigest()
    assert plan.prespec == 1
    assert plan.title == "Dressing regimens and 30-day wound infection"
    assert plan.protocol == "WD-2027-01"
    assert plan.data.groups == ["gauze", "alginate", "negative-pressure"]
    assert plan.data.planned_n == {"gauze": 300, "alginate": 300, "negative-pressure": 300}
    assert plan.data.include[0].op() == ("in", ["yes"])
    assert plan.outcomes["infection"].event == [1]
    assert plan.outcomes["infection"].no_event == [0]
    assert plan.alpha == 0.05
    assert plan.multiplicity == "holm"
    assert [h.id for h in plan.hypotheses] == ["H1", "H2", "H3"]
    h1 = plan.hypothesis("H1")
    assert h1.sparse is not None
    assert (h1.sparse.min_expected, h1.sparse.test) == (5.0, "fisher-exact")
    assert [h.kind for h in plan.hypotheses] == ["pair", "pair", "all"]
    with pytest.raises(KeyError):
        plan.hypothesis("H9")


def test_defaults_are_resolved(tmp_path: Path) -> None:
    loaded = load_text(tmp_path, GOOD)
    h2 = loaded.model.hypothesis("H2")
    assert (h2.alternative, h2.comparison, h2.continuity) == ("two-sided", "superiority", False)
    assert (h2.measure, h2.interval) == ("risk-difference", "wald")
    assert h2.title is None and h2.margin is None and h2.sparse is None
    h3 = loaded.model.hypothesis("H3")
    assert (h3.measure, h3.interval) == (None, None)  # compare: all has no estimate
    r_h2 = loaded.resolved["hypotheses"][1]
    assert r_h2 == {
        "id": "H2", "title": None, "outcome": "infection", "compare": ["alginate", "gauze"],
        "test": "two-proportion-z", "alternative": "two-sided", "comparison": "superiority",
        "margin": None, "measure": "risk-difference", "interval": "wald", "continuity": False,
        "sparse": None, "role": "secondary", "null_rate": None, "strata": None, "scores": None,
        "then": None, "monte_carlo": None, "estimand": None, "sensitivity": None,
    }
    assert loaded.resolved["design"] is None
    assert loaded.resolved["outcomes"]["infection"]["favourable"] is None
    assert loaded.resolved["data"]["include"] == [
        {"column": "consented", "in": ["yes"], "not_in": None, "equals": None,
         "between": None, "is_missing": None}
    ]


def test_defaults_when_absent(tmp_path: Path) -> None:
    text = (GOOD.replace("  reference: gauze\n", "")
            .replace('  include:\n    - {column: consented, in: ["yes"]}\n', "")
            .replace("protocol: WD-2027-01\n", "")
            .replace("    interval: wald\n", "")
            .replace("    role: secondary\n", ""))
    loaded = load_text(tmp_path, text)
    assert loaded.model.data.reference == "gauze"  # the first group
    assert loaded.model.data.include == []
    assert loaded.resolved["protocol"] is None
    h2 = loaded.model.hypothesis("H2")
    assert h2.role == "primary"
    assert h2.interval == "newcombe"  # first interval for the risk difference


def test_resolved_round_trips(tmp_path: Path) -> None:
    loaded = load_text(tmp_path, GOOD)
    stored = json.loads(json.dumps(loaded.resolved))  # as a lock file stores it
    again = plan_from_resolved(stored)
    assert isinstance(again, Plan)
    assert again == loaded.model
    assert again.model_dump(mode="json", by_alias=True) == loaded.resolved


def test_plan_from_resolved_reports_the_source() -> None:
    with pytest.raises(PlanError) as caught:
        plan_from_resolved({"prespec": 1}, source="trial.lock.json")
    assert str(caught.value).startswith("trial.lock.json: ")
    assert caught.value.line is None
    with pytest.raises(PlanError, match="must be a mapping"):
        plan_from_resolved([], source="lock")  # type: ignore[arg-type]


def test_file_part_is_the_path_as_given(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    write(tmp_path, GOOD.replace("alpha: 0.05", "alpha: 2"))
    monkeypatch.chdir(tmp_path)
    with pytest.raises(PlanError) as caught:
        load_plan("plan.yaml")
    assert str(caught.value) == "plan.yaml:19: alpha: must be between 0 and 1, exclusive, found 2"


def test_missing_file_and_folder(tmp_path: Path) -> None:
    with pytest.raises(PlanError, match="no such plan file"):
        load_plan(tmp_path / "absent.yaml")
    with pytest.raises(PlanError, match="is a folder"):
        load_plan(tmp_path)


@pytest.mark.parametrize(
    ("text", "value"),
    [
        ("yes", "yes"), ("no", "no"), ("on", "on"), ("off", "off"), ("y", "y"), ("n", "n"),
        ("Yes", "Yes"), ("true", True), ("True", True), ("TRUE", True), ("false", False),
        ("FALSE", False), ("tRUE", "tRUE"), ("null", None), ("~", None), ("", None),
        ("NULL", None), ("1", 1), ("-7", -7), ("+5", 5), ("007", 7), ("0o17", 15),
        ("0x1F", 31), ("1e-3", 0.001), ("5e-2", 0.05), ("0.05", 0.05), (".5", 0.5),
        ("1.", 1.0), ("1_000", "1_000"), ("0b101", "0b101"), ("12:30", "12:30"),
        ("2027-01-01", "2027-01-01"), (".inf", math.inf), ("-.Inf", -math.inf),
    ],
)
def test_core_schema_values(text: str, value: object) -> None:
    # YAML 1.2.2, section 10.3.2 (core schema tag resolution)  # common practice
    got = core_value(text)
    assert got == value
    assert type(got) is type(value)


def test_core_schema_nan() -> None:
    assert math.isnan(core_value(".nan")) and math.isnan(core_value(".NaN"))
    assert core_value(".Nan") == ".Nan"  # not one of the three core spellings


def test_yaml_words_stay_text_in_value_lists(tmp_path: Path) -> None:
    text = GOOD.replace("event: [1]", "event: [yes, on, y]").replace("no_event: [0]",
                                                                    "no_event: [no, off, n]")
    outcome = load_text(tmp_path, text).model.outcomes["infection"]
    assert outcome.event == ["yes", "on", "y"]
    assert outcome.no_event == ["no", "off", "n"]


def test_explicit_core_tags_and_exponent_numbers(tmp_path: Path) -> None:
    text = (GOOD.replace("protocol: WD-2027-01", "protocol: !!str 2027")
            .replace("alpha: 0.05", "alpha: 5e-2"))
    loaded = load_text(tmp_path, text)
    assert loaded.model.protocol == "2027"
    assert loaded.model.alpha == 0.05


def test_aliases_within_the_caps_are_read(tmp_path: Path) -> None:
    text = (GOOD.replace("title: Dressing regimens", "title: &name Dressing regimens")
            .replace("    title: Negative-pressure vs gauze, 30-day infection",
                     "    title: *name"))
    loaded = load_text(tmp_path, text)
    assert loaded.model.hypothesis("H1").title == loaded.model.title


def test_a_python_tag_runs_nothing(tmp_path: Path) -> None:
    marker = tmp_path / "ran"
    text = GOOD.replace("protocol: WD-2027-01",
                        f"protocol: !!python/object/apply:os.system ['touch {marker}']")
    with pytest.raises(PlanError, match="tag '!!python/object/apply:os.system' is not allowed"):
        load_text(tmp_path, text)
    assert not marker.exists()


def test_line_map_records_values_and_keys() -> None:
    doc = parse_plan_yaml(GOOD.encode(), "plan.yaml")
    assert doc.lines[("hypotheses", 1, "test")] == 35
    assert doc.lines[("hypotheses", 1)] == 32
    assert doc.key_lines[("alpha",)] == 19
    assert doc.lines[("data", "groups", 2)] == 8
    assert doc.lines[("data", "include", 0, "in", 0)] == 11


def test_conditions_give_their_operator(tmp_path: Path) -> None:
    conditions = (
        '    - {column: consented, in: ["yes"]}\n'
        "    - {column: site, not_in: [S9]}\n"
        "    - {column: stratum, equals: 2}\n"
        "    - {column: age, between: [18, 80]}\n"
        "    - {column: withdrawn, is_missing: true}\n"
    )
    text = GOOD.replace('    - {column: consented, in: ["yes"]}\n', conditions)
    include = load_text(tmp_path, text).model.data.include
    assert [c.op() for c in include] == [
        ("in", ["yes"]), ("not_in", ["S9"]), ("equals", 2), ("between", [18.0, 80.0]),
        ("is_missing", True),
    ]
    assert all(isinstance(c, Condition) for c in include)


def test_value_key_matches_text_and_numbers() -> None:
    # docs/plan-format.md, "Reading the data": 1, "1" and 1.0 agree; text is exact after trimming.
    assert value_key(1) == value_key("1") == value_key(1.0) == value_key(" 1.0 ")
    assert value_key("yes") == value_key(" yes ")
    assert value_key("Yes") != value_key("yes")
    assert value_key("1a") != value_key(1)


def test_json_schema_describes_the_plan() -> None:
    schema = json_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    top = {"prespec", "title", "protocol", "data", "outcomes", "alpha", "multiplicity",
           "hypotheses", "design"}
    assert set(schema["properties"]) == top
    assert set(schema["required"]) == top - {"protocol", "design"}
    assert schema["additionalProperties"] is False
    hyp = schema["$defs"]["Hypothesis"]["properties"]
    assert "fisher-exact" in hyp["test"]["enum"]
    assert "in" in schema["$defs"]["Condition"]["properties"]
    alpha = schema["properties"]["alpha"]
    assert (alpha["exclusiveMinimum"], alpha["exclusiveMaximum"]) == (0, 1)
    json.dumps(schema)  # JSON-able


def test_json_schema_validates_the_good_plan(tmp_path: Path) -> None:
    jsonschema = pytest.importorskip("jsonschema")
    schema = json_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    validator = jsonschema.Draft202012Validator(schema)
    loaded = load_text(tmp_path, GOOD)
    raw = parse_plan_yaml(GOOD.encode(), "plan.yaml").data
    assert list(validator.iter_errors(raw)) == []
    assert list(validator.iter_errors(loaded.resolved)) == []
    bad = dict(raw, alhpa=0.05)
    assert [e.validator for e in validator.iter_errors(bad)] == ["additionalProperties"]
    assert not validator.is_valid(dict(raw, alpha="0.05"))
    assert not validator.is_valid(dict(raw, alpha=1.5))


def test_summary_lists_the_plan(tmp_path: Path) -> None:
    text = summary(load_text(tmp_path, GOOD).model)
    lines = text.splitlines()
    assert lines[0] == "Plan:          Dressing regimens and 30-day wound infection"
    assert "Protocol:      WD-2027-01" in lines
    assert "Groups:        gauze (reference), alginate, negative-pressure (column arm)" in lines
    assert "Population:    rows where consented is one of 'yes'" in lines
    assert ("  infection: column infected_30d; event = 1; no event = 0; blank counts as: "
            "exclude") in lines
    assert "Alpha:         0.05, multiplicity: holm" in lines
    assert "Hypotheses (3):" in lines
    assert ("      pearson-chi-square; two-sided; superiority; risk-difference with newcombe "
            "interval; fisher-exact if an expected count is below 5") in lines
    assert "  H2 [secondary] infection: alginate vs gauze" in lines
    assert "  H3 [exploratory] infection: all 3 groups" in lines


SUMMARY_PLAN = """\
prespec: 1
title: Invented three-arm trial for the summary
data:
  id: participant
  group: arm
  groups: [low, mid, high]
outcomes:
  relief: {column: relief, event: [1], no_event: [0], missing: exclude, favourable: event}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: K
    outcome: relief
    compare: all
    test: pearson-chi-square
    then: {pairwise: reference, multiplicity: hochberg}
  - id: T
    outcome: relief
    compare: trend
    test: cochran-armitage-trend
    alternative: greater
    scores: [0, 1, 2.5]
  - id: P
    outcome: relief
    compare: [high, low]
    test: two-proportion-z
    sensitivity: [worst-case, tipping-point]
  - id: F
    outcome: relief
    compare: all
    test: fisher-exact
    monte_carlo: {tables: 20000, seed: 3}
    role: exploratory
"""


def test_summary_says_what_follows_the_k_group_test_and_what_it_tests(tmp_path: Path) -> None:
    lines = summary(load_text(tmp_path, SUMMARY_PLAN).model).splitlines()
    by_id = {line.split()[0]: lines[i + 1] for i, line in enumerate(lines)
             if line.startswith("  ") and not line.startswith("   ")}
    assert by_id["K"] == (
        "      pearson-chi-square; test of equal proportions in every group, against any "
        "difference (no direction); then, only if K is rejected, each group against the "
        "reference (mid vs low, high vs low) by pearson-chi-square, two-sided, "
        "risk-difference with newcombe interval, adjusted by hochberg among themselves")
    assert by_id["T"] == ("      cochran-armitage-trend; one-sided: the proportion rises with "
                          "the score; scores 0, 1, 2.5")
    assert by_id["P"] == ("      two-proportion-z; two-sided; superiority; risk-difference with "
                          "newcombe interval; sensitivity for missing outcomes: worst-case, "
                          "tipping-point")
    assert by_id["F"] == ("      fisher-exact; test of equal proportions in every group, "
                          "against any difference (no direction); Monte Carlo p-value from "
                          "20,000 tables, seed 3")
    assert "superiority" not in by_id["K"] + by_id["T"] + by_id["F"]
