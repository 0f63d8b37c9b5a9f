"""The results document's models (analysis/results.py): every results.json an earlier prespec
wrote (tests/fixtures/studies/) and every one the example plans give today validates against
``prespec schema --of results``, checked by jsonschema (a validator we did not write), and
goes through the models to the very bytes it has; the models refuse what the contract does not
hold as a document is written, and ignore it as one is read."""

from __future__ import annotations

import copy
import json
import shutil
from pathlib import Path
from typing import Any

import jsonschema
import pytest
from pydantic import ValidationError

import prespec.report
from prespec import api, cli
from prespec.analysis.results import (
    Hypothesis,
    RehearsalResults,
    RunResults,
    finish,
    read_results,
)
from prespec.common.records import first_problem
from prespec.common.shown import json_text
from prespec.demo.safety import safety_frame
from prespec.demo.wound import demo_data

ROOT = Path(__file__).parents[1]
FIXTURES = ROOT / "tests" / "fixtures" / "studies"
OLD_RESULTS = sorted(FIXTURES.rglob("results.json"))
PLANS = {  # example plan: its invented data
    "wound-dressing.yaml": demo_data,
    "methods-tour.yaml": demo_data,
    "safety-review.yaml": lambda: safety_frame().to_csv(index=False),
}


@pytest.fixture(scope="module")
def validator() -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(api.schema("results"))


@pytest.fixture(scope="module")
def run_validator() -> jsonschema.Draft202012Validator:
    """The schema's branch for a run's document (the whole schema says only that a bad
    document is neither a run's nor a rehearsal's)."""
    schema = api.schema("results")
    return jsonschema.Draft202012Validator({"$ref": "#/$defs/RunResults",
                                            "$defs": schema["$defs"]})


def _errors(validator: jsonschema.Draft202012Validator, doc: Any) -> list[str]:
    return [f"{'/'.join(map(str, e.absolute_path))}: {e.message}"
            for e in validator.iter_errors(doc)]


def _written(doc: dict[str, Any]) -> bytes:
    """The bytes prespec writes for a results document (workflow/publish.build_report)."""
    return (json_text(doc, indent=2, allow_nan=False) + "\n").encode("utf-8")


def test_the_schema_is_a_draft_2020_12_schema(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["schema", "--of", "results"]) == 0
    schema = json.loads(capsys.readouterr().out)
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["title"] == "prespec results.json"
    assert schema == api.schema("results")
    assert cli.main(["schema"]) == 0  # the plan's, as before
    assert json.loads(capsys.readouterr().out) == api.schema("plan") == api.schema()


def test_there_are_old_results_to_check() -> None:
    kinds = sorted(json.loads(p.read_text("utf-8"))["kind"] for p in OLD_RESULTS)
    assert kinds == ["rehearsal", "run", "run", "run", "run", "run", "run"]


@pytest.mark.parametrize("path", OLD_RESULTS, ids=lambda p: str(p.relative_to(FIXTURES)))
def test_every_old_results_json_validates_and_keeps_its_bytes(
        path: Path, validator: jsonschema.Draft202012Validator) -> None:
    raw = path.read_bytes()
    doc = json.loads(raw)
    assert _errors(validator, doc) == []
    # through the models: the same keys, order and values, so the bytes today's writer gives
    # (an old file may differ from them in its escapes: before-issue-13 holds a raw U+202E)
    assert _written(finish(doc)) == _written(doc)
    assert finish(doc) == doc
    read = read_results(doc)
    assert isinstance(read, RehearsalResults if doc["kind"] == "rehearsal" else RunResults)
    assert (read.plan, read.data, read.kind) == (doc["plan"], doc["data"], doc["kind"])


@pytest.fixture(scope="module")
def example_runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Each example plan locked and run on its invented data, and rehearsed (no notebook)."""
    patch = pytest.MonkeyPatch()
    patch.setattr(prespec.report, "render_notebook", lambda folder: None)
    out = {}
    try:
        for name, data in PLANS.items():
            folder = tmp_path_factory.mktemp(name.split(".")[0])
            plan = folder / name
            shutil.copy(ROOT / "plans" / name, plan)
            (folder / "data.csv").write_text(data(), encoding="utf-8")
            api.lock(plan, actor="models")
            out[name] = api.run(plan, folder / "data.csv", actor="models").folder
            out[f"{name} rehearsal"] = api.rehearse(plan, folder / "data.csv",
                                                   actor="models").folder
    finally:
        patch.undo()
    return out


@pytest.mark.parametrize("name", [*PLANS, *(f"{p} rehearsal" for p in PLANS)])
def test_results_of_every_example_plan_validate(
        name: str, example_runs: dict[str, Path],
        validator: jsonschema.Draft202012Validator) -> None:
    raw = (example_runs[name] / "results.json").read_bytes()
    doc = json.loads(raw)
    assert doc["kind"] == ("rehearsal" if name.endswith("rehearsal") else "run")
    assert _errors(validator, doc) == []
    assert _written(finish(doc)) == raw
    if doc["kind"] == "run":  # what api.run marks: no override, so every result pre-specified
        assert doc["overrides"] == []
        assert [h["pre_specified"] for h in doc["hypotheses"]] == [True] * len(doc["hypotheses"])
        assert list(doc)[-1] == "overrides"


def test_the_example_runs_hold_the_parts_the_models_declare(
        example_runs: dict[str, Path]) -> None:
    docs = {n: json.loads((f / "results.json").read_text("utf-8"))
            for n, f in example_runs.items()}
    tour = read_results(docs["methods-tour.yaml"])
    assert isinstance(tour, RunResults)
    kinds = {h.kind for h in tour.hypotheses}
    assert {"pair", "all", "trend", "single"} <= kinds
    assert [h.id for h in tour.hypotheses if h.parent == "H5"] == [
        "H5:alginate-vs-gauze", "H5:negative-pressure-vs-gauze", "H5:negative-pressure-vs-alginate"]
    assert any(h.strata_tables and h.homogeneity for h in tour.hypotheses)
    safety = read_results(docs["safety-review.yaml"])
    assert isinstance(safety, RunResults) and safety.families
    assert len(safety.families[0].members) == safety.families[0].members_total > 0
    wound = read_results(docs["wound-dressing.yaml"])
    assert isinstance(wound, RunResults) and wound.design is not None
    assert [h.id for h in wound.design.hypotheses] == ["H1", "H2", "H3"]


def _run_doc() -> dict[str, Any]:
    path = next(p for p in OLD_RESULTS if "before-issue-15/tour" in str(p))
    return json.loads(path.read_text("utf-8"))


def test_a_key_the_contract_does_not_hold_is_refused_as_written(
        validator: jsonschema.Draft202012Validator,
        run_validator: jsonschema.Draft202012Validator) -> None:
    doc = _run_doc()
    doc["hypotheses"][1]["p_value_rounded"] = 0.05
    with pytest.raises(ValidationError) as caught:
        finish(doc)
    assert first_problem(caught.value) == ("hypotheses[1].p_value_rounded: Extra inputs are "
                                           "not permitted")
    assert not validator.is_valid(doc)
    assert _errors(run_validator, doc) == [
        ("hypotheses/1: Additional properties are not allowed ('p_value_rounded' was "
         "unexpected)")]
    # read back, an unknown key (of a later prespec, say) is ignored
    assert read_results(doc).hypotheses[1].p_value == doc["hypotheses"][1]["p_value"]


def test_a_value_of_the_wrong_type_is_refused_as_written_and_as_read(
        validator: jsonschema.Draft202012Validator,
        run_validator: jsonschema.Draft202012Validator) -> None:
    doc = _run_doc()
    doc["hypotheses"][0]["table"]["events"][0] = "41"
    for check in (finish, read_results):
        with pytest.raises(ValidationError) as caught:
            check(doc)
        assert first_problem(caught.value) == ("hypotheses[0].table.events[0]: Input should be "
                                               "a valid integer")
    assert not validator.is_valid(doc)
    assert _errors(run_validator, doc) == [
        "hypotheses/0/table/events/0: '41' is not of type 'integer'"]
    doc = _run_doc()
    doc["hypotheses"][0]["p_value"] = 1  # an int where a float is usual stays a number
    assert finish(doc)["hypotheses"][0]["p_value"] == 1
    assert type(finish(doc)["hypotheses"][0]["p_value"]) is int
    doc["kind"] = "rehearsal"  # a run's document is no rehearsal's
    with pytest.raises(ValidationError):
        finish(doc)
    assert not validator.is_valid(doc)


def test_keys_an_earlier_prespec_did_not_write_are_optional_when_read() -> None:
    doc = _run_doc()
    for key in ("engine", "engine_library", "query", "design", "overrides"):
        doc.pop(key, None)
    for hyp in doc["hypotheses"]:
        for key in ("estimand", "sensitivity", "pre_specified"):
            hyp.pop(key)
    read = read_results(doc)
    assert isinstance(read, RunResults)
    assert (read.engine, read.design, read.overrides) == (None, None, None)
    assert read.hypotheses[0].estimand is None and read.hypotheses[0].pre_specified is None
    assert "engine" not in finish(doc) and "estimand" not in finish(doc)["hypotheses"][0]


def _override(key: str, locked: Any, used: Any) -> dict[str, Any]:
    return {"key": key, "locked": locked, "used": used}


def test_finish_marks_what_an_override_reached() -> None:
    doc = _run_doc()
    for hyp in doc["hypotheses"]:
        hyp.pop("pre_specified")
    doc.pop("overrides")
    roles = {h["id"]: h["role"] for h in doc["hypotheses"]}
    follow = next(h["id"] for h in doc["hypotheses"] if h["parent"] is not None)
    parent = follow.split(":")[0]

    def marked(*changes: dict[str, Any]) -> dict[str, bool]:
        done = finish(copy.deepcopy(doc), list(changes))
        assert done["overrides"] == list(changes) and list(done)[-1] == "overrides"
        assert all(list(h)[-1] == "pre_specified" for h in done["hypotheses"])
        return {h["id"]: h["pre_specified"] for h in done["hypotheses"]}

    assert set(marked().values()) == {True}
    assert set(marked(_override("alpha", 0.05, 0.025)).values()) == {False}
    by_test = marked(_override(f"hypotheses.{parent}.test", "pearson-chi-square",
                               "likelihood-ratio"))
    assert {i for i, v in by_test.items() if not v} == {
        i for i in roles if i == parent or i.startswith(parent + ":")}
    by_family = marked(_override("multiplicity", "holm", "bonferroni"))
    assert by_family == {i: roles[i] == "exploratory" for i in roles}
    assert finish(copy.deepcopy(doc))["hypotheses"][0].get("pre_specified") is None


def test_a_family_is_reached_only_by_an_override_of_its_own() -> None:
    path = next(p for p in OLD_RESULTS if "safety" in str(p) and "-run" in str(p))
    doc = json.loads(path.read_text("utf-8"))
    fam = doc["families"][0]["id"]
    mult = finish(copy.deepcopy(doc), [_override("multiplicity", "holm", "hochberg")])
    assert mult["families"][0]["pre_specified"] is True  # outside the plan's multiplicity
    own = finish(copy.deepcopy(doc), [_override(f"hypotheses.{fam}.test", "fisher-exact",
                                                "two-proportion-z")])
    assert own["families"][0]["pre_specified"] is False
    with pytest.raises(ValueError, match="only a run's results take overrides"):
        rehearsal = next(p for p in OLD_RESULTS if "rehearsal" in str(p))
        finish(json.loads(rehearsal.read_text("utf-8")), [])


def test_sensitivity_entries_are_told_apart_by_their_analysis() -> None:
    entry = _run_doc()["hypotheses"][0]
    table = {"groups": ["a", "b"], "events": [3, 4], "totals": [10, 10]}
    extreme = {"analysis": "worst-case", "imputed": {"a": "event", "b": "no-event"},
               "table": table, "test": "fisher-exact", "statistic": None, "df": None,
               "p_value": 1.0, "estimate": None, "rule": None, "reject_nominal": False}
    hyp = Hypothesis.model_validate({**entry, "sensitivity": [extreme]})
    assert hyp.dumped()["sensitivity"] == [extreme]
    with pytest.raises(ValidationError) as caught:  # a tipping-point entry lacks its grid
        Hypothesis.model_validate({**entry, "sensitivity": [{**extreme,
                                                             "analysis": "tipping-point"}]})
    assert first_problem(caught.value).startswith("sensitivity[0].groups: Field required")
