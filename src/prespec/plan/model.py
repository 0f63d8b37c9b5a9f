"""The plan model, declared once: validation and the JSON Schema both come from it.

The models accept the whole vocabulary of format version 1 (docs/plan-format.md) and check
types; the rules across keys are in :mod:`prespec.plan.rules`. Defaults that depend on other
keys (the reference group, the measure and the interval) are filled in before validation, so a
validated model is always resolved.
"""

from __future__ import annotations

import difflib
from typing import Annotated, Any, ClassVar, Literal

from pydantic import (
    BeforeValidator,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    model_validator,
)
from pydantic_core import PydanticCustomError

from prespec.plan import vocabulary as v
from prespec.plan.canonical_form import Canonical, CanonicalModel
from prespec.plan.families import FAMILY_DOC, family_defaults
from prespec.plan.looks import Looks
from prespec.plan.yamlread import describe, show

TestName = Literal[tuple(sorted(v.KNOWN_TESTS))]  # type: ignore[valid-type]
MeasureName = Literal[tuple(sorted(v.KNOWN_MEASURES))]  # type: ignore[valid-type]
IntervalName = Literal[tuple(sorted(v.KNOWN_INTERVALS))]  # type: ignore[valid-type]
MultiplicityName = Literal[v.MULTIPLICITY_NAMES]  # type: ignore[valid-type]
Alternative = Literal[v.ALTERNATIVES]  # type: ignore[valid-type]
ComparisonName = Literal[v.KNOWN_COMPARISONS]  # type: ignore[valid-type]
Role = Literal[v.ROLES]  # type: ignore[valid-type]
MissingRule = Literal[v.MISSING_RULES]  # type: ignore[valid-type]
Pairwise = Literal[v.PAIRWISE]  # type: ignore[valid-type]
FlagMethod = Literal[v.FLAG_METHODS]  # type: ignore[valid-type]
CovariateKind = Literal[v.COVARIATE_KINDS]  # type: ignore[valid-type]
VarianceName = Literal[v.VARIANCES]  # type: ignore[valid-type]
CovariateMissing = Literal[v.COVARIATE_MISSING]  # type: ignore[valid-type]
StratumWeights = Literal[v.STRATUM_WEIGHTS]  # type: ignore[valid-type]


def problem(message: str) -> PydanticCustomError:
    """A validation error whose message is used as it is."""
    return PydanticCustomError("prespec", "{message}", {"message": message})


def suggest(word: object, choices: Any) -> str:
    """``"; did you mean 'x'?"`` for a close match among ``choices``, else ``""``."""
    if not isinstance(word, str):
        return ""
    close = difflib.get_close_matches(word, [str(c) for c in choices], n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


def _not_bool(value: Any) -> Any:
    if isinstance(value, bool):
        raise problem(f"expected a number, found {describe(value)}")
    return value


def _scalar(value: Any) -> Any:
    if isinstance(value, bool):
        word = "true" if value else "false"
        raise problem(
            f"{word} is a boolean, and a value list holds text or numbers; "
            f"quote it ('{word}') if the data hold that text"
        )
    if not isinstance(value, (str, int, float)):
        raise problem(f"expected text or a number, found {describe(value)}")
    return value


Scalar = Annotated[str | int | float, BeforeValidator(_scalar)]
Number = Annotated[float, BeforeValidator(_not_bool)]
Probability = Annotated[float, Field(gt=0, lt=1), BeforeValidator(_not_bool)]


def _compare(value: Any) -> Any:
    if isinstance(value, str):
        if value in ("all", "trend"):
            return value
        raise problem(
            f"'{value}' is not a known compare (known: all, trend, [a, b] or [a]); "
            f"to compare one group write [{value}]"
        )
    if isinstance(value, list):
        if len(value) not in (1, 2):
            raise problem(
                f"expected one or two groups ([a, b] or [a]), found a list of {len(value)}"
            )
        for item in value:
            if not isinstance(item, str):
                raise problem(f"expected group names (text), found {describe(item)}")
        return value
    raise problem(f"expected [a, b], [a], all or trend, found {describe(value)}")


def _margin(value: Any) -> Any:
    if value is None:
        return value
    if isinstance(value, list):
        if len(value) == 2 and all(_is_number(x) for x in value):
            return value
        raise problem("expected [low, high], two numbers, for an equivalence margin")
    if _is_number(value):
        return value
    raise problem(f"expected a number, or [low, high] for equivalence, found {describe(value)}")


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _format_version(value: Any) -> Any:
    if value != 1 or isinstance(value, bool) or not isinstance(value, int):
        raise problem(f"{describe(value)} is not a known format version (known: 1)")
    return value


def _multiplicity(value: Any) -> Any:
    if isinstance(value, str):
        if value == "graphical":
            raise problem(
                "graphical takes a mapping: {method: graphical, weights: {...}, "
                "transitions: {...}}"
            )
        if value not in v.MULTIPLICITY_NAMES:
            known = ", ".join(v.KNOWN_MULTIPLICITY)
            raise problem(
                f"{show(value)} is not a known multiplicity (known: {known})"
                + suggest(value, v.KNOWN_MULTIPLICITY)
            )
        return value
    if isinstance(value, dict):
        method = value.get("method")
        if method != "graphical" and method in v.MULTIPLICITY_NAMES:
            raise problem(f"only graphical takes a mapping; write multiplicity: {method}")
        return value
    if isinstance(value, GraphicalMultiplicity):
        return value
    raise problem(f"expected a multiplicity name or a mapping, found {describe(value)}")


class _Model(CanonicalModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class Condition(_Model):
    """One population filter on a column; exactly one operator is given."""

    column: str = Field(description="the column the condition reads")
    in_: list[Scalar] | None = Field(default=None, alias="in",
                                     description="the row is kept when its value is one of these")
    not_in: list[Scalar] | None = Field(
        default=None, description="the row is kept when its value is none of these (a blank "
        "value fails)")
    equals: Scalar | None = Field(default=None, description="the row is kept when its value "
                                  "equals this")
    between: list[Number] | None = Field(default=None, description="[low, high], inclusive")
    is_missing: bool | None = Field(default=None, description="true: keep the rows whose value "
                                    "is blank; false: keep the others")

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("column", "in_", "not_in", "equals", "between", "is_missing"))

    OPERATORS: ClassVar[tuple[tuple[str, str], ...]] = (
        ("in", "in_"),
        ("not_in", "not_in"),
        ("equals", "equals"),
        ("between", "between"),
        ("is_missing", "is_missing"),
    )

    def given(self) -> list[str]:
        """The operators given, by their YAML names."""
        return [name for name, attr in self.OPERATORS if getattr(self, attr) is not None]

    def op(self) -> tuple[str, object]:
        """The operator and its operand, e.g. ``("in", ["yes"])`` or ``("is_missing", True)``."""
        for name, attr in self.OPERATORS:
            value = getattr(self, attr)
            if value is not None:
                return name, value
        raise ValueError(f"condition on {self.column!r} has no operator")


def _data_source(value: Any) -> Any:
    """A URL in ``data.source`` must not hold a password (``password_from`` names it)."""
    if not isinstance(value, str) or "://" not in value:
        return value
    from urllib.parse import parse_qs, urlsplit

    parts = urlsplit(value)
    query = {k.lower() for k in parse_qs(parts.query, keep_blank_values=True)}
    if parts.password is not None or "password" in query:
        raise problem("the URL holds a password; keep it out of the plan and name the "
                      "environment variable that holds it in data.password_from")
    return value


def _env_name(value: Any) -> Any:
    import re

    if isinstance(value, str) and not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", value):
        raise problem(f"{show(value)} is not an environment variable name")
    return value


class EventsSpec(_Model):
    """An event table: one row per event, joined to the units by their id (for a family with
    over: events)."""

    source: str | None = Field(
        default=None, description="the event table: a file path or glob inside the plan's "
        "folder (relative to it), read as the unit table is read; with a database URL in "
        "data.source, give table instead")
    table: str | None = Field(default=None, description="the event table in the database of "
                              "data.source (a database URL)")
    id: str = Field(description="the column of the event table holding the unit id; it "
                    "joins data.id of the unit table")
    level: str = Field(description="the column holding the level of each event (e.g. the "
                       "event term): a family with over: events runs once per level")
    within: str | None = Field(default=None, description="the column grouping the levels "
                               "(e.g. body_system), for double-fdr; a level belongs to one "
                               "group")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("id", "level"),
                                               if_set=("source", "table", "within"))

    @model_validator(mode="after")
    def _one_place(self) -> EventsSpec:
        if (self.source is None) == (self.table is None):
            raise problem("name the event table once: source (a file or glob) or table (in "
                          "the database of data.source)")
        return self


class DataSpec(_Model):
    """Which columns hold the unit id and the group, the groups, and the population."""

    id: str = Field(description="unique unit id column")
    group: str = Field(description="the column that holds the group")
    groups: list[str] = Field(description="allowed group levels, in display order")
    reference: str | None = Field(default=None, description="the default comparator of "
                                  "pairwise follow-ups; left out, the first of groups")
    include: list[Condition] = Field(default=[], description="the analysis population: the "
                                     "conditions every row must meet; a blank value fails all "
                                     "but is_missing")
    planned_n: dict[str, Annotated[int, Field(gt=0)]] | None = Field(
        default=None, description="planned analysed size per group; an analysed total below it "
        "is the departure sample-size-shortfall")
    source: Annotated[str | None, BeforeValidator(_data_source)] = Field(
        default=None, description="the data: a file path or glob inside the plan's folder "
        "(relative to it), or an SQLAlchemy URL without a password")
    table: str | None = Field(default=None, description="the table of a database source")
    password_from: Annotated[str | None, BeforeValidator(_env_name)] = Field(
        default=None, description="the environment variable that holds the database password")
    events: EventsSpec | None = Field(
        default=None, description="an event table (one row per event) beside the unit table; "
        "a family with over: events counts, per level, the units with at least one event of "
        "that level")

    # a plan without a data source resolves as before these keys existed
    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("id", "group", "groups", "reference", "include", "planned_n"),
        if_set=("source", "table", "password_from", "events"))

    @model_validator(mode="after")
    def _source_keys(self) -> DataSpec:
        is_url = self.source is not None and "://" in self.source
        if self.table is not None and not is_url:
            raise problem("data.table goes with a database URL in data.source")
        if self.password_from is not None and not is_url:
            raise problem("data.password_from goes with a database URL in data.source")
        if is_url and not self.table:
            raise problem("data.source is a database URL: name the table in data.table")
        if self.events is not None and self.events.table is not None and not is_url:
            raise problem("data.events.table goes with a database URL in data.source; name a "
                          "file in data.events.source")
        if self.events is not None and self.events.source is not None and is_url:
            raise problem("data.source is a database URL: name the event table of that "
                          "database in data.events.table")
        return self

    @model_validator(mode="before")
    @classmethod
    def _default_reference(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("reference") is None:
            groups = data.get("groups")
            if isinstance(groups, list) and groups and isinstance(groups[0], str):
                return {**data, "reference": groups[0]}
        return data


class Outcome(_Model):
    """A binary outcome: the column and the values that count as event and as no event."""

    column: str = Field(description="the column holding the outcome")
    event: list[Scalar] = Field(description="the values that count as the event")
    no_event: list[Scalar] = Field(description="the values that count as no event")
    missing: MissingRule = Field(description="what a blank outcome counts as: left out "
                                 "(exclude), an event, no event, or bad input (error)")
    favourable: Literal["event", "no-event"] | None = Field(
        default=None,
        description="which value is the good one; needed by worst-case and best-case "
        "sensitivity analyses",
    )

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("column", "event", "no_event", "missing", "favourable"))


class Sparse(_Model):
    """A pre-specified switch of test when the smallest expected count is below a bound."""

    min_expected: Annotated[float, Field(gt=0), BeforeValidator(_not_bool)] = Field(
        description="the switch fires when the smallest expected count (row total × column "
        "total / grand total) is below this")
    test: TestName = Field(description="the test used instead; it keeps the alternative")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("min_expected", "test"))


class Then(_Model):
    """Follow-up pairwise comparisons after a rejected k-group hypothesis (gatekeeping)."""

    pairwise: Pairwise = Field(description="reference: each group against data.reference; "
                               "all: every pair of groups")
    multiplicity: MultiplicityName = Field(description="the adjustment over the follow-ups")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("pairwise", "multiplicity"))


class MonteCarlo(_Model):
    """A Monte Carlo p-value for an exact k-group test."""

    tables: Annotated[int, Field(gt=0, le=v.MAX_MONTE_CARLO_TABLES)] = Field(
        description="how many random tables are drawn")
    seed: Annotated[int, Field(ge=0)] = Field(description="the seed of the draw, so that the "
                                              "p-value can be recomputed")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("tables", "seed"))


class Intercurrent(_Model):
    """An intercurrent event and the strategy that handles it (ICH E9(R1))."""

    event: str = Field(description="what happened, in words")
    column: str = Field(description="the column that says whether it happened")
    happened: list[Scalar] = Field(description="the values of the column meaning it happened")
    strategy: Literal["treatment-policy", "composite", "while-on-treatment"] = Field(
        description="treatment-policy: the outcome as observed; composite: the event decides "
        "the outcome (counts_as); while-on-treatment: the outcome before the event "
        "(outcome_column)")
    counts_as: Literal["event", "no-event"] | None = Field(
        default=None, description="composite: what the intercurrent event counts as"
    )
    outcome_column: str | None = Field(
        default=None,
        description="while-on-treatment: the column holding the outcome observed before the "
        "intercurrent event",
    )

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("event", "column", "happened", "strategy", "counts_as", "outcome_column"))


class Estimand(_Model):
    """The estimand in the attributes of ICH E9(R1); the summary measure is the `measure`."""

    population: str | None = Field(default=None, description="in words")
    variable: str | None = Field(default=None, description="in words")
    intercurrent: list[Intercurrent] = Field(default=[], description="the intercurrent "
                                             "events and their strategies")

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("population", "variable", "intercurrent"))


SensitivityName = Literal["worst-case", "best-case", "tipping-point"]


class Design(_Model):
    """What the sample size is planned on: assumed rates, power, allocation and dropout."""

    assumed: dict[str, Probability] = Field(description="assumed event rate per group")
    power: Probability = Field(description="the target power of each hypothesis")
    allocation: dict[str, Annotated[float, Field(gt=0), BeforeValidator(_not_bool)]] | None = (
        Field(default=None, description="relative group sizes; left out, equal (lock writes "
              "1 for every group)")
    )
    dropout: Annotated[float, Field(ge=0, lt=1), BeforeValidator(_not_bool)] = Field(
        default=0.0, description="the share of units expected to give no outcome; the sizes "
        "to enrol are divided by 1 − dropout")
    continuity: bool = Field(default=False, description="continuity correction in the 2×2 "
                             "sample-size formula")
    scenarios: dict[str, dict[str, Probability]] = Field(
        default={}, description="named rate sets for --simulate; global-null is always added"
    )

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("assumed", "power", "allocation", "dropout", "continuity", "scenarios"))


class BetaByMean(_Model):
    """A beta distribution given by its mean and its effective sample size n (a + b)."""

    mean: Probability = Field(description="the mean, in (0, 1)")
    n: Annotated[float, Field(gt=0), BeforeValidator(_not_bool)] = Field(
        description="the effective sample size a + b, > 0")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("mean", "n"))


Positive = Annotated[float, Field(gt=0), BeforeValidator(_not_bool)]
BetaPrior = Annotated[list[Positive], Field(min_length=2, max_length=2)]


def _prior_tag(value: Any) -> str:
    return "mean" if isinstance(value, (dict, BetaByMean)) else "beta"


Prior = Annotated[
    Annotated[BetaPrior, Tag("beta")] | Annotated[BetaByMean, Tag("mean")],
    Discriminator(_prior_tag),
]


def _priors(value: Any) -> Any:
    """A prior given as {mean, n} is resolved into [a, b] = [mean·n, (1 − mean)·n] (at lock
    the resolved plan holds the beta parameters); anything invalid is left for the model's
    own message."""
    if not isinstance(value, dict):
        return value
    out = {}
    for group, prior in value.items():
        if (isinstance(prior, dict) and set(prior) == {"mean", "n"}
                and all(_is_number(prior[k]) for k in ("mean", "n"))
                and 0 < prior["mean"] < 1 and prior["n"] > 0):
            prior = [prior["mean"] * prior["n"], (1 - prior["mean"]) * prior["n"]]
        out[group] = prior
    return out


class GraphicalMultiplicity(_Model):
    """The graphical procedure: initial weights and transition weights between hypotheses."""

    method: Literal["graphical"] = Field(description="graphical")
    weights: dict[str, Number] = Field(description="the initial share of alpha per hypothesis "
                                       "id, each in [0, 1], summing to at most 1")
    transitions: dict[str, dict[str, Number]] = Field(
        default={}, description="per hypothesis id, the share of its level passed to each "
        "other hypothesis when it is rejected; each row sums to at most 1, no self-transition")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("method", "weights", "transitions"))


def _multiplicity_tag(value: Any) -> str:
    return "graphical" if isinstance(value, (dict, GraphicalMultiplicity)) else "name"


Multiplicity = Annotated[
    Annotated[MultiplicityName, Tag("name")] | Annotated[GraphicalMultiplicity, Tag("graphical")],
    Discriminator(_multiplicity_tag),
    BeforeValidator(_multiplicity),
]


def kind_of(compare: Any) -> str | None:
    """The compare kind of a raw or validated ``compare`` value, or None if it has none."""
    if compare in ("all", "trend"):
        return str(compare)
    if isinstance(compare, list) and len(compare) in (1, 2):
        return "pair" if len(compare) == 2 else "single"
    return None


def default_measure(kind: str | None, test: Any) -> str | None:
    """The default measure for a compare kind and test (docs/plan-format.md, "What each kind of
    `compare` takes"): a test with its own intervals names its first measure."""
    measures = v.MEASURES_BY_KIND.get(kind or "", ())
    if not measures:
        return None
    if test in v.OWN_INTERVALS:
        return next((m for m in v.OWN_INTERVALS[test] if m in measures), None)
    return measures[0]


def default_interval(kind: str | None, test: Any, measure: Any) -> str | None:
    """The default interval for a measure: the test's own first one under a test that brings
    its own (the stratified one under cochran-mantel-haenszel)."""
    if kind not in ("pair", "single") or measure not in v.INTERVALS_BY_MEASURE:
        return None
    if test in v.OWN_INTERVALS:
        own = v.OWN_INTERVALS[test].get(measure)
        return own[0] if own else None
    return v.INTERVALS_BY_MEASURE[measure][0]


class Hypothesis(_Model):
    """One pre-specified comparison."""

    id: str = Field(description="unique; no space, ':', '[' or ']' (kept for derived ids)")
    title: str | None = Field(default=None, description="shown in the report")
    outcome: str = Field(description="the name of one of outcomes")
    compare: Annotated[
        list[str] | Literal["all", "trend"], BeforeValidator(_compare)
    ] = Field(description="[a, b] (first vs second), [a], all or trend")
    test: TestName = Field(description="never defaulted: it is what is pre-specified; "
                           "docs/plan-format.md lists which tests go with which compare")
    alternative: Alternative = Field(
        default="two-sided", description="greater / less: the first group's proportion is "
        "larger / smaller (for trend, greater: rising with the score)")
    comparison: ComparisonName = Field(
        default="superiority", description="non-inferiority needs a one-sided alternative and "
        "a margin; equivalence takes margin: [low, high] (two one-sided tests)")
    margin: Annotated[float | list[float] | None, BeforeValidator(_margin)] = Field(
        default=None, description="non-inferiority: on the measure's scale, on the far side of "
        "no difference; equivalence: [low, high]")
    measure: MeasureName | None = Field(
        default=None, description="left out: the first measure of the compare kind (under a "
        "test with its own measures, its first: the odds ratio under cochran-mantel-haenszel); "
        "none for all and trend")
    interval: IntervalName | None = Field(
        default=None, description="left out: the first interval of the measure (under a test "
        "with its own intervals, its first: the stratified one under cochran-mantel-haenszel)")
    continuity: bool = Field(default=False, description="the continuity-corrected statistic "
                             "(2×2 pearson-chi-square and cochran-mantel-haenszel only)")
    sparse: Sparse | None = Field(default=None, description="a pre-specified switch of test "
                                  "for sparse tables; a note when it fires, not a departure")
    role: Role = Field(default="primary", description="exploratory hypotheses are outside the "
                       "multiplicity family and reported with their nominal p-value (families "
                       "default to exploratory)")
    null_rate: Probability | None = Field(default=None, description="compare [a]: the rate "
                                          "under the null hypothesis; required there")
    strata: list[str] | None = Field(default=None, description="the stratification columns of "
                                     "cochran-mantel-haenszel and stratified-score (required by "
                                     "them, used only by them)")
    scores: list[Number] | None = Field(
        default=None, description="trend: one distinct number per group in data.groups order; "
        "left out, 0, 1, …")
    then: Then | None = Field(default=None, description="compare all: follow-up pairwise "
                              "comparisons, tested only if this hypothesis is rejected")
    monte_carlo: MonteCarlo | None = Field(
        default=None, description="fisher-exact on compare all: a Monte Carlo p-value instead "
        "of full enumeration")
    estimand: Estimand | None = Field(default=None, description="the estimand's attributes "
                                      "(ICH E9(R1)), stated in the report before the result")
    sensitivity: list[SensitivityName] | None = Field(
        default=None, description="analyses of the missing outcomes reported beside the "
        "result; worst-case and best-case need outcomes.<name>.favourable")
    looks: Looks | None = Field(default=None, description="interim analyses of this hypothesis")
    # A family (a template expanded over the levels of a column): prespec.plan.families.
    over: str | None = Field(default=None, description=FAMILY_DOC["over"])
    within: str | None = Field(default=None, description=FAMILY_DOC["within"])
    levels: list[str] | dict[str, list[str]] | None = Field(
        default=None, description=FAMILY_DOC["levels"])
    flag_method: FlagMethod | None = Field(default=None, description=FAMILY_DOC["flag_method"])
    flag_level: Probability | None = Field(default=None, description=FAMILY_DOC["flag_level"])
    group_level: Probability | None = Field(default=None, description=FAMILY_DOC["group_level"])
    members: list[str] | None = Field(default=None, description=FAMILY_DOC["members"])
    # Covariate adjustment (test: g-computation) and the stratified score test.
    covariates: dict[str, CovariateKind] | None = Field(
        default=None, description="g-computation: the baseline covariates of the working "
        "model, column: numeric or categorical (a categorical one is coded by indicators, its "
        "first level in sorted order the reference)")
    variance: VarianceName | None = Field(
        default=None, description="g-computation: ye (Ye et al. 2023; the "
        "default) or ge (Ge et al. 2011, delta method over the HC0 sandwich)")
    randomisation_strata: list[str] | None = Field(
        default=None, description="g-computation with variance ye: the columns randomisation "
        "was stratified by (permuted blocks within strata); the variance then takes the "
        "stratified-randomisation form")
    covariate_missing: CovariateMissing | None = Field(
        default=None, description="g-computation: a unit with a blank covariate is left out "
        "with the departure missing-covariate (exclude, the default), or is bad input (error)")
    fallback: TestName | None = Field(
        default=None, description="g-computation: the unadjusted test run when the working "
        "model fails (no convergence, separation, collinear covariates), with a note; left "
        "out, two-proportion-z")
    weights: StratumWeights | None = Field(
        default=None, description="stratified-score: the weights of the strata, cmh "
        "(n1·n2/(n1 + n2), the default) or miettinen-nurminen (inverse variance at the "
        "restricted estimates)")
    # A Bayesian rule (test: posterior-probability).
    prior: Annotated[dict[str, Prior] | None, BeforeValidator(_priors)] = Field(
        default=None, description="posterior-probability: a Beta(a, b) prior per compared "
        "group, [a, b] or {mean, n} (resolved into [a, b] at lock); left out, [1, 1] each")
    threshold: Probability | None = Field(
        default=None, description="posterior-probability: the rule is met when the posterior "
        "probability reaches this; required")
    credible: Probability | None = Field(
        default=None, description="posterior-probability: the level of the equal-tailed "
        "credible interval; left out, 0.95")
    sceptical_prior: BetaByMean | None = Field(
        default=None, description="posterior-probability: the sceptical prior of the "
        "prior-sensitivity table, the same for every compared group (centred on no "
        "difference); left out, docs/bayes.md says how it is chosen")

    # an ordinary hypothesis resolves as before families and looks existed; a family writes
    # all its keys
    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("id", "title", "outcome", "compare", "test", "alternative", "comparison",
                "margin", "measure", "interval", "continuity", "sparse", "role", "null_rate",
                "strata", "scores", "then", "monte_carlo", "estimand", "sensitivity"),
        if_set=("looks", "over", "covariates", "variance", "randomisation_strata",
                "covariate_missing", "fallback", "weights", "prior", "threshold", "credible",
                "sceptical_prior"),
        with_key={key: "over" for key in v.FAMILY_KEYS if key != "over"})

    @model_validator(mode="before")
    @classmethod
    def _default_estimate(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            return data
        kind, test = kind_of(data.get("compare")), data.get("test")
        out = dict(data)
        if out.get("measure") is None:
            out["measure"] = default_measure(kind, test)
        if out.get("interval") is None:
            out["interval"] = default_interval(kind, test, out["measure"])
        if test in v.ADJUSTED_TESTS:
            out.setdefault("variance", "ye")
            out.setdefault("covariate_missing", "exclude")
            out.setdefault("fallback", v.DEFAULT_FALLBACK)
        if test == "stratified-score":
            out.setdefault("weights", "cmh")
        if test in v.BAYESIAN_TESTS:
            compare = data.get("compare")
            if out.get("prior") is None and isinstance(compare, list) and all(
                    isinstance(g, str) for g in compare):
                out["prior"] = {g: [1, 1] for g in compare}
            out.setdefault("credible", 0.95)
        return out

    @property
    def outside_multiplicity(self) -> bool:
        """Exploratory hypotheses and Bayesian rules are outside the multiplicity family."""
        return self.role == "exploratory" or self.test in v.BAYESIAN_TESTS

    @property
    def kind(self) -> Literal["pair", "single", "all", "trend"]:
        """``pair`` for [a, b], ``single`` for [a], else ``all`` or ``trend``."""
        if self.compare == "all" or self.compare == "trend":
            return self.compare
        return "pair" if len(self.compare) == 2 else "single"


class Plan(_Model):
    """A plan file of format version 1, every default resolved."""

    model_config = ConfigDict(title="prespec plan (format version 1)")

    prespec: Annotated[Literal[1], BeforeValidator(_format_version)] = Field(
        description="format version"
    )
    title: str = Field(description="the study's title, shown in the report")
    protocol: str | None = Field(default=None, description="free text, such as the protocol "
                                 "number")
    data: DataSpec = Field(description="the columns, the groups and the analysis population")
    outcomes: dict[str, Outcome] = Field(description="the binary outcomes, by name")
    alpha: Probability = Field(description="the significance level; intervals are at "
                               "1 − alpha (1 − 2·alpha one-sided and with a margin)")
    multiplicity: Multiplicity = Field(
        description="the adjustment over the non-exploratory hypotheses: a name, or a mapping "
        "for graphical")
    hypotheses: list[Hypothesis] = Field(description="the pre-specified comparisons, in order "
                                         "(the order fixed-sequence tests them in)")
    design: Design | None = Field(default=None, description="what prespec design sizes the "
                                  "study on; part of the fingerprint")

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("prespec", "title", "protocol", "data", "outcomes", "alpha", "multiplicity",
                "hypotheses", "design"))

    @model_validator(mode="before")
    @classmethod
    def _family_defaults(cls, data: Any) -> Any:
        return family_defaults(data)

    @model_validator(mode="before")
    @classmethod
    def _equal_allocation(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            return data
        design, groups = data.get("design"), (data.get("data") or {}).get("groups")
        if (isinstance(design, dict) and design.get("allocation") is None
                and isinstance(groups, list) and all(isinstance(g, str) for g in groups)):
            return {**data, "design": {**design, "allocation": {g: 1 for g in groups}}}
        return data

    def hypothesis(self, id: str) -> Hypothesis:
        """The hypothesis with this id; KeyError if there is none."""
        for hyp in self.hypotheses:
            if hyp.id == id:
                return hyp
        raise KeyError(id)
