"""The canonical form of a plan, what its fingerprint is taken over.

Golden fingerprints: the example plans in ``plans/`` and the test plans frozen in
``tests/fixtures/plans/`` (copied from the plans the other test modules build: sparse switches,
gates, every compare kind, graphical multiplicity, families, looks, sensitivity, estimands,
population filters, the design section, Monte Carlo, data sources). Each value was computed by
prespec at commit c74a456, before the canonical form was declared, so these tests prove that
declaring it moved no fingerprint. Never regenerate them: a plan must keep its fingerprint under
every later version. The lock files of earlier versions (``tests/fixtures/studies/``) must
rebuild to exactly the resolved plan they store.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Literal, get_args

import pytest
from pydantic import BaseModel, Field

from prespec.plan import (
    Hypothesis,
    Outcome,
    Plan,
    Sparse,
    Then,
    fingerprint,
    load_plan,
    plan_from_resolved,
    resolve,
)
from prespec.plan.canonical_form import Canonical, CanonicalModel, default_of
from prespec.plan.looks import Looks
from prespec.plan.model import DataSpec
from prespec.plan.yamlread import parse_plan_yaml, read_plan_bytes

ROOT = Path(__file__).parent.parent
FROZEN = Path(__file__).parent / "fixtures" / "plans"
STUDIES = Path(__file__).parent / "fixtures" / "studies"

# sha256 of the RFC 8785 JSON of the resolved plan, by prespec c74a456  # computed, then frozen
GOLDEN = {
    "plans/bayesian-secondary.yaml":
        "sha256:5852c50e315e1bca54fe5a4e4333246cc8a64c6e896def3993d9065ea38c4e23",
    "bayes-every-key.yaml":
        "sha256:68a661f1290323b568389c6e9b31c0d0d897bb2a33c7a8a3825733a0e442de81",
    "plans/adjusted-primary.yaml":
        "sha256:7e18609b35a070d787488a412b93721e6b213b58c6790bd6b419877c4b340688",
    "adjusted-every-key.yaml":
        "sha256:9ba7f63c8a1798cb509d1aa554d0c15bd5f5d3d6348a41b1294ae48b4246a2fd",
    "plans/methods-tour.yaml":
        "sha256:2c6b68cc3c720ef6b89c2435dedbe18764406850ef132c2149bcb7ab30ed389d",
    "plans/safety-review.yaml":
        "sha256:a9ad4a412b45f68eb171f68e72fa1e66e9a1fa8b2b363b0a2875c3a7bec5a22d",
    # issue 20: a family over an event table (data.events); computed, then frozen
    "plans/safety-events.yaml":
        "sha256:9221a1d3388fc46e903960f9dc0cbba0a2642696a7e2ad9e470fa153841a6596",
    "plans/wound-dressing.yaml":
        "sha256:7f1707a66696d7cb2301f395720e7f624fce4f13b8bd0d9a6c13f8c8f4a615ac",
    "all-kinds.yaml":
        "sha256:c8b6bf68ccea17596eb218144ee1791ffbaf96fdb0606246bcb7904bd0952c7f",
    "analysis-switches.yaml":
        "sha256:4b08b6b7b36617cb39576bdc50b9dbf76f6def16147e36aa51af99a31648edac",
    "design-kinds.yaml":
        "sha256:20dd4180d1a6d66fc5c77965fc4637ffe1419eb06fcf0bf4e25d67400d44471e",
    "design-scenarios.yaml":
        "sha256:df3f89b1338d923e3d4b1025764a503c85655b2c0bfba0004f4cc52d78e20ac9",
    "estimands-follow-ups.yaml":
        "sha256:42f2c0a944db77841741c43a725abb36a25e61b1012a875e5243c6e39bd50d39",
    "estimands.yaml":
        "sha256:2665b5e28dc9ad2ca40a3739df498b71bccf190c7374dddde8b8b69ae5704316",
    "family-beside-ordinary.yaml":
        "sha256:48b4fb8f19c6e8ecee248a692976871ebaa9ca8b36329d618dedea35b336f09d",
    "family-declared-list.yaml":
        "sha256:1c93c97002d81d4b1c2fb71cabb6379eda383207426124c503f4f07b9c6f85ff",
    "family-double-fdr.yaml":
        "sha256:742a575bcd4e9f41defc2a67c797762dff1b8df9ea10d69326fdca57e2b891ce",
    "filters.yaml":
        "sha256:f1402b564cae3a99e9b3e07c80c8703b618f66a50e68f14a5483d17002d1455a",
    "gated-follow-ups.yaml":
        "sha256:ca502740bfd09da51de63342e7c0be1cdf0f9ce7039afe606e8cd2d90cbb76b6",
    "graphical.yaml":
        "sha256:9ac7f9b2bee478e6209132357feec7f164e031aecd70701c13009d277214e617",
    "looks-design.yaml":
        "sha256:43b66735b7630a74c3ff38235605ee316e40edf0db3d901cda34ab79c799dccf",
    "looks-futility.yaml":
        "sha256:7977baa51091292413b0fae9545d221265dcff436355e742489cdf001b0ed855",
    "looks-holm.yaml":
        "sha256:1297563171c9676ded36bac128595855033bcdc45dfe2abc42938475bf4bc218",
    "monte-carlo.yaml":
        "sha256:97af07625cf44fd5602e16331ed9c6f2f9033ba8190a8dba7960aa5ef5cb954d",
    "sensitivity-stratified.yaml":
        "sha256:4c03bede1068d382113123f5b254dd89e1eae8472f6230dc70d28b3b8994d7ef",
    "sensitivity.yaml":
        "sha256:7fa6da1f9b841f2713ff6b4ee263a0801055a67417c57abe1c84d3419c4402c0",
    "source-database.yaml":
        "sha256:199ed3c9fb7dcf6f63997d5c243fa210986667509c52b2e778909ba93e3fca21",
    "source-files.yaml":
        "sha256:42737e846a776b33fa9f4dd2d3d5085d407fddc6333fbd8e45b5c2a0abd8864e",
    "wound-dressing-variant.yaml":
        "sha256:b2a38785af62c9466ec8977868b7ca774a10d8edb5d16b1bcd589a02305bdca9",
}


def golden_path(name: str) -> Path:
    return ROOT / name if name.startswith("plans/") else FROZEN / name


def test_every_frozen_plan_has_a_golden_fingerprint() -> None:
    frozen = {p.name for p in FROZEN.glob("*.yaml")}
    examples = {f"plans/{p.name}" for p in (ROOT / "plans").glob("*.yaml")}
    assert frozen | examples == set(GOLDEN)


@pytest.mark.parametrize("name", list(GOLDEN))
def test_golden_fingerprint(name: str) -> None:
    loaded = load_plan(golden_path(name))
    assert loaded.fingerprint == GOLDEN[name]
    # the lock stores the resolved plan; rebuilt from it, the plan resolves to the same bytes
    assert resolve(plan_from_resolved(loaded.resolved)) == loaded.resolved
    assert fingerprint(loaded.resolved) == GOLDEN[name]


def lock_versions() -> list[tuple[str, dict]]:
    out = []
    for lock in sorted(STUDIES.rglob("*.lock.json")):
        doc = json.loads(lock.read_text("utf-8"))
        for version in doc["versions"]:
            out.append((f"{lock.relative_to(STUDIES)} v{version['version']}", version))
    return out


@pytest.mark.parametrize("name,version", lock_versions(), ids=[n for n, _ in lock_versions()])
def test_a_plan_locked_by_an_earlier_version_rebuilds_to_what_its_lock_stores(
        name: str, version: dict) -> None:
    plan = plan_from_resolved(version["plan"], source=name)
    assert resolve(plan) == version["plan"]
    assert fingerprint(resolve(plan)) == version["fingerprint"]


# --- the declaration ---------------------------------------------------------------------------

def plan_models(model: type[BaseModel] = Plan) -> dict[str, type[BaseModel]]:
    """Every model reachable from ``model`` through its fields' types, by class name."""
    found: dict[str, type[BaseModel]] = {}

    def visit(tp: Any) -> None:
        if isinstance(tp, type) and issubclass(tp, BaseModel) and tp.__name__ not in found:
            found[tp.__name__] = tp
            for info in tp.model_fields.values():
                visit(info.annotation)
        for arg in get_args(tp):
            visit(arg)

    visit(model)
    return found


# The keys written whatever their value: those that fingerprints were first taken over. The set
# is closed; a key added to the plan goes into if_set (left out at its default).
ALWAYS = {
    "Plan": ("prespec", "title", "protocol", "data", "outcomes", "alpha", "multiplicity",
             "hypotheses", "design"),
    "DataSpec": ("id", "group", "groups", "reference", "include", "planned_n"),
    "Condition": ("column", "in_", "not_in", "equals", "between", "is_missing"),
    "Outcome": ("column", "event", "no_event", "missing", "favourable"),
    "GraphicalMultiplicity": ("method", "weights", "transitions"),
    "Hypothesis": ("id", "title", "outcome", "compare", "test", "alternative", "comparison",
                   "margin", "measure", "interval", "continuity", "sparse", "role", "null_rate",
                   "strata", "scores", "then", "monte_carlo", "estimand", "sensitivity"),
    "Sparse": ("min_expected", "test"),
    "Then": ("pairwise", "multiplicity"),
    "MonteCarlo": ("tables", "seed"),
    "Estimand": ("population", "variable", "intercurrent"),
    "Intercurrent": ("event", "column", "happened", "strategy", "counts_as", "outcome_column"),
    "Looks": ("fractions", "sizes", "efficacy", "gamma", "futility"),
    "Futility": ("spending", "gamma", "binding"),
    "Design": ("assumed", "power", "allocation", "dropout", "continuity", "scenarios"),
    # issue 17: a model reached only through a new key (sceptical_prior), so its keys are all
    # written whenever it is; no earlier plan holds it
    "BetaByMean": ("mean", "n"),
    # issue 20: reached only through a new key (data.events); no earlier plan holds it
    "EventsSpec": ("id", "level"),
}
# The keys left out at their default, and that default: what a plan without the key means.
# A released default never changes.
LEFT_OUT_AT_DEFAULT = {
    ("DataSpec", "source"): None,
    ("DataSpec", "table"): None,
    ("DataSpec", "password_from"): None,
    # issue 20: the event table, and its optional keys
    ("DataSpec", "events"): None,
    ("EventsSpec", "source"): None,
    ("EventsSpec", "table"): None,
    ("EventsSpec", "within"): None,
    ("Hypothesis", "looks"): None,
    ("Hypothesis", "over"): None,
    # the family keys: written in full on a family (over given), else left out at None
    ("Hypothesis", "within"): None,
    ("Hypothesis", "levels"): None,
    ("Hypothesis", "flag_method"): None,
    ("Hypothesis", "flag_level"): None,
    ("Hypothesis", "group_level"): None,
    ("Hypothesis", "members"): None,
    # covariate adjustment and the stratified score test: written only by the tests using them
    ("Hypothesis", "covariates"): None,
    ("Hypothesis", "variance"): None,
    ("Hypothesis", "randomisation_strata"): None,
    ("Hypothesis", "covariate_missing"): None,
    ("Hypothesis", "fallback"): None,
    ("Hypothesis", "weights"): None,
    # a Bayesian rule: written only by posterior-probability
    ("Hypothesis", "prior"): None,
    ("Hypothesis", "threshold"): None,
    ("Hypothesis", "credible"): None,
    ("Hypothesis", "sceptical_prior"): None,
    # a Bayesian rule's interim looks
    ("Looks", "stop_for_success"): None,
    ("Looks", "stop_for_futility"): None,
}


def test_the_keys_always_written_are_the_first_releases() -> None:
    models = plan_models()
    assert set(models) == set(ALWAYS)
    for name, model in models.items():
        form = model.CANONICAL
        assert form is not None and form.always == ALWAYS[name], (
            f"{name}: a key added to the plan must be declared if_set (left out at its "
            "default), or every plan's fingerprint moves")


def test_the_keys_left_out_at_their_default_and_their_defaults() -> None:
    declared = {}
    for name, model in plan_models().items():
        form = model.CANONICAL
        for key in (*form.if_set, *form.with_key):
            declared[(name, key)] = default_of(model, key)
    assert declared == LEFT_OUT_AT_DEFAULT
    hypothesis = Hypothesis.CANONICAL
    assert dict(hypothesis.with_key) == {key: "over" for key in
                                         ("within", "levels", "flag_method", "flag_level",
                                          "group_level", "members")}


def test_a_family_writes_its_keys_and_an_ordinary_hypothesis_leaves_them_out() -> None:
    resolved = load_plan(FROZEN / "family-beside-ordinary.yaml").resolved
    ordinary, family = resolved["hypotheses"]
    assert not {"over", "within", "levels", "flag_method", "flag_level", "group_level",
                "members", "looks"} & set(ordinary)
    assert {k: family[k] for k in ("over", "within", "levels", "flag_method", "flag_level",
                                   "group_level", "members")} == {
        "over": "worst_term", "within": None, "levels": None,
        "flag_method": "benjamini-hochberg", "flag_level": 0.05, "group_level": None,
        "members": None}
    assert "looks" not in family
    data = load_plan(FROZEN / "source-database.yaml").resolved["data"]
    assert (data["source"], data["table"], data["password_from"]) == (
        "postgresql://ana@db.example/trial", "visits", "TRIAL_DB_PASSWORD")
    assert not {"source", "table", "password_from"} & set(resolved["data"])


def test_a_field_not_declared_fails_when_the_model_is_made() -> None:
    with pytest.raises(TypeError, match=r"^_Outcome.label: not declared in _Outcome.CANONICAL; "
                                        r"a key added to the plan enters the fingerprint only "
                                        r"when it differs from its default: add it to if_set"):
        class _Outcome(Outcome):
            label: str | None = None
    with pytest.raises(TypeError, match=r"^_Hypothesis.CANONICAL: sponsor is not a field"):
        class _Hypothesis(Hypothesis):
            CANONICAL = Hypothesis.CANONICAL.adding(if_set=("sponsor",))
    with pytest.raises(TypeError, match=r"^_Sparse.CANONICAL: note has no default, so it "
                                        r"cannot be left out; declare it in always"):
        class _Sparse(Sparse):
            CANONICAL = Sparse.CANONICAL.adding(if_set=("note",))
            note: str
    with pytest.raises(TypeError, match=r"^_Then.CANONICAL: multiplicity is declared more"):
        class _Then(Then):
            CANONICAL = Then.CANONICAL.adding(if_set=("multiplicity",))
    with pytest.raises(TypeError, match=r"^_Fresh: declare CANONICAL"):
        class _Fresh(CanonicalModel):
            size: int = 1


# --- a key added later -------------------------------------------------------------------------

class LooksLater(Looks):
    CANONICAL = Looks.CANONICAL.adding(if_set=("information",))
    information: Literal["observed", "planned"] = "observed"


class HypothesisLater(Hypothesis):
    CANONICAL = Hypothesis.CANONICAL.adding(if_set=("confirmatory_note", "stop_early"))
    confirmatory_note: str | None = None
    stop_early: bool = False
    looks: LooksLater | None = None


class OutcomeLater(Outcome):
    CANONICAL = Outcome.CANONICAL.adding(if_set=("label",))
    label: str | None = None


class DataLater(DataSpec):
    CANONICAL = DataSpec.CANONICAL.adding(if_set=("weights",))
    weights: dict[str, float] = Field(default={})


class PlanLater(Plan):
    CANONICAL = Plan.CANONICAL.adding(if_set=("sponsor",))
    sponsor: str | None = None
    data: DataLater
    outcomes: dict[str, OutcomeLater]
    hypotheses: list[HypothesisLater]


def raw_plan(path: Path) -> dict[str, Any]:
    return parse_plan_yaml(read_plan_bytes(path, str(path)), str(path)).data


def later_fingerprint(raw: dict[str, Any], model: type[Plan] = PlanLater) -> str:
    return fingerprint(resolve(model.model_validate(raw)))


@pytest.mark.parametrize("name", list(GOLDEN))
def test_keys_added_later_leave_every_fingerprint_unchanged(name: str) -> None:
    raw = raw_plan(golden_path(name))
    assert later_fingerprint(raw) == GOLDEN[name]
    # and a plan that uses one of them has another fingerprint, which holds that key
    used = {**raw, "hypotheses": [{**raw["hypotheses"][0], "stop_early": True},
                                  *raw["hypotheses"][1:]]}
    assert later_fingerprint(used) != GOLDEN[name]
    assert resolve(PlanLater.model_validate(used))["hypotheses"][0]["stop_early"] is True
    assert later_fingerprint({**raw, "sponsor": "Invented Foundation"}) != GOLDEN[name]


def test_a_key_added_later_as_always_would_move_every_fingerprint() -> None:
    # why the kinds matter: the same new key, declared always, moves the fingerprint
    class OutcomeAlways(Outcome):
        CANONICAL = Canonical(always=(*Outcome.CANONICAL.always, "label"))
        label: str | None = None

    class PlanAlways(Plan):
        outcomes: dict[str, OutcomeAlways]

    for name in ("plans/wound-dressing.yaml", "looks-holm.yaml"):
        raw = raw_plan(golden_path(name))
        assert later_fingerprint(raw, PlanAlways) != GOLDEN[name]
        assert later_fingerprint(raw, Plan) == GOLDEN[name]
