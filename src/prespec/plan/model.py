"""The plan model, declared once: validation and the JSON Schema both come from it.

The models accept the whole vocabulary of format version 1 (SPEC.md) and check types; the rules
across keys are in :mod:`prespec.plan.rules`. Defaults that depend on other keys (the
reference group, the measure and the interval) are filled in before validation, so a validated
model is always resolved.
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

    column: str
    in_: list[Scalar] | None = Field(default=None, alias="in")
    not_in: list[Scalar] | None = None
    equals: Scalar | None = None
    between: list[Number] | None = Field(default=None, description="[low, high], inclusive")
    is_missing: bool | None = None

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


class DataSpec(_Model):
    """Which columns hold the unit id and the group, the groups, and the population."""

    id: str = Field(description="unique unit id column")
    group: str = Field(description="the column that holds the group")
    groups: list[str] = Field(description="allowed group levels, in display order")
    reference: str | None = Field(default=None, description="default comparator; first group")
    include: list[Condition] = Field(default=[], description="every condition must hold")
    planned_n: dict[str, Annotated[int, Field(gt=0)]] | None = None
    source: Annotated[str | None, BeforeValidator(_data_source)] = Field(
        default=None, description="the data: a file path or glob inside the plan's folder "
        "(relative to it), or an SQLAlchemy URL without a password")
    table: str | None = Field(default=None, description="the table of a database source")
    password_from: Annotated[str | None, BeforeValidator(_env_name)] = Field(
        default=None, description="the environment variable that holds the database password")

    # a plan without a data source resolves as before these keys existed
    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("id", "group", "groups", "reference", "include", "planned_n"),
        if_set=("source", "table", "password_from"))

    @model_validator(mode="after")
    def _source_keys(self) -> DataSpec:
        is_url = self.source is not None and "://" in self.source
        if self.table is not None and not is_url:
            raise problem("data.table goes with a database URL in data.source")
        if self.password_from is not None and not is_url:
            raise problem("data.password_from goes with a database URL in data.source")
        if is_url and not self.table:
            raise problem("data.source is a database URL: name the table in data.table")
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

    column: str
    event: list[Scalar]
    no_event: list[Scalar]
    missing: MissingRule = Field(description="what a blank outcome counts as")
    favourable: Literal["event", "no-event"] | None = Field(
        default=None,
        description="which value is the good one; needed by worst-case and best-case "
        "sensitivity analyses",
    )

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("column", "event", "no_event", "missing", "favourable"))


class Sparse(_Model):
    """A pre-specified switch of test when the smallest expected count is below a bound."""

    min_expected: Annotated[float, Field(gt=0), BeforeValidator(_not_bool)]
    test: TestName

    CANONICAL: ClassVar[Canonical] = Canonical(always=("min_expected", "test"))


class Then(_Model):
    """Follow-up pairwise comparisons after a rejected k-group hypothesis (gatekeeping)."""

    pairwise: Pairwise
    multiplicity: MultiplicityName

    CANONICAL: ClassVar[Canonical] = Canonical(always=("pairwise", "multiplicity"))


class MonteCarlo(_Model):
    """A Monte Carlo p-value for an exact k-group test."""

    tables: Annotated[int, Field(gt=0, le=v.MAX_MONTE_CARLO_TABLES)]
    seed: Annotated[int, Field(ge=0)]

    CANONICAL: ClassVar[Canonical] = Canonical(always=("tables", "seed"))


class Intercurrent(_Model):
    """An intercurrent event and the strategy that handles it (ICH E9(R1))."""

    event: str = Field(description="what happened, in words")
    column: str = Field(description="the column that says whether it happened")
    happened: list[Scalar] = Field(description="the values of the column meaning it happened")
    strategy: Literal["treatment-policy", "composite", "while-on-treatment"]
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
    intercurrent: list[Intercurrent] = Field(default=[])

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("population", "variable", "intercurrent"))


SensitivityName = Literal["worst-case", "best-case", "tipping-point"]


class Design(_Model):
    """What the sample size is planned on: assumed rates, power, allocation and dropout."""

    assumed: dict[str, Probability] = Field(description="assumed event rate per group")
    power: Probability
    allocation: dict[str, Annotated[float, Field(gt=0), BeforeValidator(_not_bool)]] | None = (
        Field(default=None, description="relative group sizes; default equal")
    )
    dropout: Annotated[float, Field(ge=0, lt=1), BeforeValidator(_not_bool)] = 0.0
    continuity: bool = False
    scenarios: dict[str, dict[str, Probability]] = Field(
        default={}, description="named rate sets for --simulate; global-null is always added"
    )

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("assumed", "power", "allocation", "dropout", "continuity", "scenarios"))


class GraphicalMultiplicity(_Model):
    """The graphical procedure: initial weights and transition weights between hypotheses."""

    method: Literal["graphical"]
    weights: dict[str, Number]
    transitions: dict[str, dict[str, Number]] = Field(default={})

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
    """The default measure for a compare kind and test (SPEC.md, "How the keys combine")."""
    measures = v.MEASURES_BY_KIND.get(kind or "", ())
    if not measures:
        return None
    if test in v.STRATIFIED_TESTS:
        return v.STRATIFIED_DEFAULT_MEASURE
    return measures[0]


def default_interval(kind: str | None, test: Any, measure: Any) -> str | None:
    """The default interval for a measure, the stratified one under a stratified test."""
    if kind not in ("pair", "single") or measure not in v.INTERVALS_BY_MEASURE:
        return None
    if test in v.STRATIFIED_TESTS:
        return v.STRATIFIED_INTERVALS.get(measure)
    return v.INTERVALS_BY_MEASURE[measure][0]


class Hypothesis(_Model):
    """One pre-specified comparison."""

    id: str
    title: str | None = None
    outcome: str
    compare: Annotated[
        list[str] | Literal["all", "trend"], BeforeValidator(_compare)
    ] = Field(description="[a, b] (first vs second), [a], all or trend")
    test: TestName
    alternative: Alternative = "two-sided"
    comparison: ComparisonName = "superiority"
    margin: Annotated[float | list[float] | None, BeforeValidator(_margin)] = None
    measure: MeasureName | None = None
    interval: IntervalName | None = None
    continuity: bool = False
    sparse: Sparse | None = None
    role: Role = "primary"
    null_rate: Probability | None = None
    strata: list[str] | None = None
    scores: list[Number] | None = None
    then: Then | None = None
    monte_carlo: MonteCarlo | None = None
    estimand: Estimand | None = None
    sensitivity: list[SensitivityName] | None = None
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

    # an ordinary hypothesis resolves as before families and looks existed; a family writes
    # all its keys
    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("id", "title", "outcome", "compare", "test", "alternative", "comparison",
                "margin", "measure", "interval", "continuity", "sparse", "role", "null_rate",
                "strata", "scores", "then", "monte_carlo", "estimand", "sensitivity"),
        if_set=("looks", "over"),
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
        return out

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
    title: str
    protocol: str | None = None
    data: DataSpec
    outcomes: dict[str, Outcome]
    alpha: Probability
    multiplicity: Multiplicity
    hypotheses: list[Hypothesis]
    design: Design | None = None

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
