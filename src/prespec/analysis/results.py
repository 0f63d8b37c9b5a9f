"""The results document (``results.json``), declared once as typed models.

Who writes what: ``hypotheses.analyse`` computes each hypothesis's entry and the decision of its
family (``p_adjusted``, ``reject``: the plan's multiplicity, a gated follow-up family);
``looks.apply_looks`` then decides instead for a hypothesis with interim looks or in a graph
over the looks (it adds ``looks`` or ``graph``); ``families``, ``sensitivity`` and the design
add their parts; ``workflow/execute.py`` and ``workflow/rehearse.py`` put the document
together. One function, :func:`finish`, makes it the document that is written: it checks it
against these models, sets the run's ``overrides`` and each result's ``pre_specified``, and
returns the models' dump, in the order and with the values the writers produced (keys never
set stay absent, so that a document and its dump are byte for byte the same).

``verify`` reads a document through :func:`read_results`, which accepts the keys an earlier
prespec left out and ignores keys it does not know, so that every old report keeps loading.
(The report reads results.json on its own, defensively, naming the key path of any problem.)
``prespec schema --of results`` prints the JSON Schema of :class:`Results`.
"""
from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import Discriminator, Field, RootModel, Tag

from prespec.common.records import (
    LENIENT,
    TAG,
    Count,
    DataFile,
    Departure,
    Flag,
    Interval,
    NoteEntry,
    Number,
    Part,
    Text,
    draft_2020_12,
)

# --- shared pieces ---

class Table(Part):
    """A count table: per group (in the order compared) its events and analysed total."""

    groups: list[Text]
    events: list[Count]
    totals: list[Count]


class Estimate(Part):
    """The measure, its value and interval (``ci``), the interval's method and level."""

    measure: Text
    value: Number | None
    ci: Interval
    ci_method: Text
    level: Number
    note: Text | None = None  # an adjustment the interval made (absent in a family member)


class Rule(Part):
    """The pre-specified sparse switch, when it applied."""

    switch: Literal["sparse"]
    min_expected: Number
    smallest_expected: Number
    from_: Text = Field(alias="from")
    to: Text


class Population(Part):
    rows_read: Count
    excluded_by_filter: Count
    excluded_group: Count
    analysed: Count


class FlowCounts(Part):
    """Rows per plan group, and of any other value of the group column (a blank included)."""

    groups: dict[Text, Count]
    other: Count


class FlowCondition(Part):
    """One condition of ``data.include`` and the rows it left out (each row under the first
    condition it fails, in the plan's order)."""

    column: Text
    condition: Text
    excluded: FlowCounts


class FlowOutcome(Part):
    missing: Text  # the plan's rule for a blank or unmapped outcome
    favourable: Text | None


class Flow(Part):
    """The participant flow by group (written since issue 18; absent from earlier reports):
    rows read, left out by each population condition, outside the groups, analysed."""

    read: FlowCounts
    conditions: list[FlowCondition]
    outside_groups: Count
    analysed: dict[Text, Count]
    outcomes: dict[Text, FlowOutcome]


class GraphMultiplicity(Part):
    """The plan's graphical procedure, as the plan resolves it."""

    method: Literal["graphical"]
    weights: dict[Text, Number]
    transitions: dict[Text, dict[Text, Number]]


class Override(Part):
    """A command-line change to the locked analysis: the key, the locked and the used value."""

    key: Text
    locked: Any
    used: Any


# --- a hypothesis of a run ---

class MarginCheck(Part):
    interval_excludes_margin: Flag
    agrees_with_test: Flag | None


class Homogeneity(Part):
    """Breslow–Day with Tarone's correction over the strata."""

    test: Text
    statistic: Number | None
    df: Number | None
    p_value: Number | None


class MonteCarlo(Part):
    tables: Count
    seed: Count
    standard_error: Number | None


class StratumTable(Part):
    stratum: dict[Text, Any]
    events: list[Count]
    totals: list[Count]


class IntercurrentEvent(Part):
    event: Text
    column: Text
    strategy: Text
    counts_as: Text | None
    outcome_column: Text | None
    affected: Count


class Estimand(Part):
    """The estimand's attributes (ICH E9(R1)) and one paragraph in words."""

    population: Text
    variable: Text
    intercurrent: list[IntercurrentEvent]
    summary: Text | None
    text: Text


class CompleteCounts(Part):
    events: list[Count]
    totals: list[Count]


class ExtremeCase(Part):
    """A worst-case or best-case analysis: every missing outcome imputed one way per group."""

    analysis: Literal["worst-case", "best-case"]
    imputed: dict[Text, Text]
    table: Table
    test: Text
    statistic: Number | None
    df: Number | None
    p_value: Number | None
    estimate: Estimate | None
    rule: Rule | None
    reject_nominal: Flag | None


class TippingPoint(Part):
    """The tipping-point grid: p-values over every imputation of the missing outcomes."""

    analysis: Literal["tipping-point"]
    groups: list[Text]
    missing: list[Count]
    complete: CompleteCounts
    alpha: Number
    test: Text
    p_values: list[list[Number | None]]
    observed_point: list[Number] | None  # the observed rates (the grid axes are counts)
    primary_rejects: Flag | None
    cells_changing: Count
    boundary: list[list[Count | None]]
    cells: Count
    cells_not_computable: Count
    cells_switched: Count


def _analysis(value: Any) -> str:
    kind = value.get("analysis") if isinstance(value, dict) else getattr(value, "analysis", "")
    return TAG + ("tipping" if kind == "tipping-point" else "extreme")


Sensitivity = Annotated[
    Annotated[TippingPoint, Tag(TAG + "tipping")] | Annotated[ExtremeCase, Tag(TAG + "extreme")],
    Discriminator(_analysis),
]


class GraphLevel(Part):
    """A hypothesis's place in the graphical procedure run over the interim looks."""

    method: Text
    initial_level: Number
    level: Number
    rejected_at: Count | None
    order: Count | None


class Boundary(Part):
    """The efficacy (and futility) boundary at one look, at the information observed."""

    look: Count
    fraction: Number
    observed_fraction: Number
    z: Number | None
    nominal_p: Number | None
    alpha_spent: Number
    futility_z: Number | None
    beta_spent: Number | None


class PlannedBoundary(Part):
    look: Count
    fraction: Number
    z: Number | None
    nominal_p: Number | None
    alpha_spent: Number


class LookHistory(Part):
    """An earlier look of the hypothesis, as its log entry recorded it."""

    look: Count
    analysed: Count | None
    fraction: Number | None
    z: Number | None
    information: Number | None
    estimate: Number | None
    crossed: Flag | None


class RepeatedInterval(Part):
    look: Count
    estimate: Number | None
    ci: Interval
    level: Number


class AdjustedInference(Part):
    """The inference adjusted for stopping at a look (stage-wise ordering)."""

    measure: Text
    ordering: Text
    p_value: Number | None
    estimate: Number | None
    ci: Interval
    level: Number
    look: Count


class Futility(Part):
    spending: Text
    gamma: Number | None
    binding: Flag


class Looks(Part):
    """This look of a hypothesis with interim looks: boundaries, decision and history."""

    look: Count
    of: Count
    efficacy: Text
    gamma: Number | None
    futility: Futility | None
    sides: Literal[1, 2]
    direction: Literal[-1, 1]
    planned_fractions: list[Number]
    planned_total: Count
    analysed: Count
    observed_fraction: Number | None
    z: Number | None
    information: Number | None
    estimate: Number | None
    boundary: Number | None
    futility_boundary: Number | None
    crossed: Flag
    decision: Text
    boundaries: list[Boundary]
    planned_boundaries: list[PlannedBoundary]
    history: list[LookHistory]
    adjusted: AdjustedInference | None
    repeated_ci: list[RepeatedInterval]
    scale: Text
    graph: GraphLevel | None


class BayesLookHistory(Part):
    """An earlier look of a Bayesian rule, as its log entry recorded it."""

    look: Count
    analysed: Count | None
    fraction: Number | None
    estimate: Number | None
    posterior_probability: Number | None
    predictive_probability: Number | None
    crossed: Flag | None


class BayesLooks(Part):
    """This look of a Bayesian rule with interim looks (docs/bayes.md, "Interim looks")."""

    rule: Literal["bayesian"]
    look: Count
    of: Count
    planned_fractions: list[Number]
    planned_sizes: dict[Text, list[Count]]
    planned_total: Count | None
    analysed: Count
    observed_fraction: Number | None
    sizes: dict[Text, Count]
    estimate: Number | None  # the posterior mean
    posterior_probability: Number
    threshold: Number  # the rule's, at the final analysis
    stop_for_success: Number | None
    stop_for_futility: Number | None
    predictive_probability: Number | None  # interim looks only
    crossed: Flag  # an interim look: stops for success; the final: the rule met
    decision: Text
    history: list[BayesLookHistory]


# --- a covariate-adjusted (g-computation) or stratified risk difference ---

class Covariate(Part):
    """A baseline covariate of the working model, as the plan declares it."""

    column: Text = Field(description="The data column.")
    kind: Literal["numeric", "categorical"] = Field(
        description="numeric: one term; categorical: one indicator per level but the reference.")
    levels: list[Text | Number] | None = Field(
        description="A categorical covariate's levels in sorted order; null for a numeric one.")
    reference: Text | Number | None = Field(
        description="The reference level (the first in sorted order); null for a numeric one.")


class MarginalRisk(Part):
    """One group's marginal (standardised) risk: every analysed unit's predicted risk under
    that group, averaged."""

    group: Text = Field(description="The group.")
    risk: Number | None = Field(description="The standardised risk.")
    standard_error: Number | None = Field(description="Its standard error, by the variance used.")


class ModelTerm(Part):
    term: Text = Field(description="intercept, group, a numeric covariate, or column=level.")
    coefficient: Number | None = Field(description="The maximum-likelihood coefficient (logit).")
    standard_error: Number | None = Field(description="Its model-based standard error.")


class ConditionalOddsRatio(Part):
    """The group's odds ratio given the covariates: exp of the group coefficient, from the
    working model. It is not the effect tested (that is marginal)."""

    value: Number | None = Field(description="exp(group coefficient).")
    ci: Interval = Field(description="Its interval [low, high].")
    level: Number = Field(description="The interval's level.")


class WorkingModel(Part):
    """The logistic working model: outcome ~ group indicator + covariates."""

    terms: list[ModelTerm] = Field(description="The terms in the model's order.")
    conditional_odds_ratio: ConditionalOddsRatio = Field(
        description="The group's odds ratio conditional on the covariates.")
    iterations: Count | None = Field(description="Iterations of the fit.")


class Fallback(Part):
    """The pre-specified test that ran because the working model failed."""

    test: Text = Field(description="The fallback test that ran (unadjusted).")
    reason: Text = Field(description="Why the model failed (separation, non-convergence …).")


class Adjusted(Part):
    """What a g-computation hypothesis adds: the covariates, the variance and why it holds,
    the units left out, the marginal risks and the working model (both null after a
    fallback), and the fallback."""

    covariates: list[Covariate] = Field(description="The covariates in the plan's order.")
    variance: Literal["ye", "ge"] = Field(description="The plan's variance key.")
    randomisation_strata: list[Text] | None = Field(
        description="The columns randomisation was stratified by; null: simple randomisation.")
    missing_covariate: dict[Text, Count] = Field(
        description="Per group, the units left out for a missing covariate.")
    risks: list[MarginalRisk] | None = Field(
        description="The two marginal risks, in the order compared; null after a fallback.")
    model: WorkingModel | None = Field(description="The working model; null after a fallback.")
    fallback: Fallback | None = Field(
        description="Set when the model failed and the pre-specified fallback test ran.")


class Stratified(Part):
    """The weighting of a stratified-score hypothesis's common risk difference."""

    weights: Literal["cmh", "miettinen-nurminen"] = Field(description="The plan's weights key.")
    stratum_weights: list[Number | None] = Field(
        description="Each stratum's normalised weight at the risk difference tested, aligned "
        "with strata_tables; null where the miettinen-nurminen weights are not defined there "
        "(a restricted variance of 0).")


# --- a Bayesian hypothesis (test posterior-probability) ---

class BetaPrior(Part):
    """One group's Beta(a, b) prior, as the lock resolved it."""

    group: Text = Field(description="The group.")
    a: Number = Field(description="The first Beta parameter.")
    b: Number = Field(description="The second Beta parameter.")
    mean: Number | None = Field(
        description="The prior mean the plan gave (with n); null when given as [a, b].")
    n: Number | None = Field(
        description="The effective sample size the plan gave (with mean); null when given as "
        "[a, b].")


class BetaPosterior(Part):
    """One group's conjugate Beta posterior."""

    group: Text = Field(description="The group.")
    a: Number = Field(description="a of the prior plus the events.")
    b: Number = Field(description="b of the prior plus the non-events.")
    mean: Number | None = Field(description="The posterior mean of the group's rate.")


class BetaParameters(Part):
    """One group's Beta(a, b) prior of a prior-sensitivity analysis."""

    group: Text = Field(description="The group.")
    a: Number = Field(description="The first Beta parameter.")
    b: Number = Field(description="The second Beta parameter.")


class Densities(Part):
    """Points of the posterior densities, for the report's figure (evaluated by the analysis)."""

    x: list[Number] = Field(description="The rates at which the group densities are given.")
    groups: dict[Text, list[Number | None]] = Field(
        description="Per group, its posterior density at each x.")
    difference_x: list[Number] | None = Field(
        default=None, description="A pair: the differences at which its density is given.")
    difference: list[Number | None] | None = Field(
        default=None, description="A pair: the posterior density of the difference p_a - p_b.")
    region: Interval = Field(
        description="[low, high]: the values (of the difference, or of the rate of a single "
        "group) where the rule's event holds.")


class BayesEstimate(Part):
    """An estimate of a prior-sensitivity analysis: posterior mean and credible interval."""

    value: Number | None = Field(description="The posterior mean.")
    ci: Interval = Field(description="The equal-tailed credible interval [low, high].")


class PriorSensitivity(Part):
    """The same data under another prior: flat, sceptical, or the plan's."""

    prior: Text = Field(description="flat, sceptical, or the plan's prior.")
    priors: list[BetaParameters] = Field(description="The Beta prior of each group.")
    posterior_probability: Number | None = Field(
        description="The posterior probability of the rule's event under these priors.")
    rule_met: Flag | None = Field(description="Whether it reaches the threshold.")
    estimate: BayesEstimate | None = Field(description="Posterior mean and credible interval.")
    centre: Number | None = Field(
        default=None, description="sceptical: the common rate it is centred on.")
    n: Number | None = Field(default=None, description="sceptical: its effective sample size.")


class OperatingPoint(Part):
    """The probability that the rule is met at one point of the null boundary."""

    rate_a: Number = Field(description="The true rate of the first group.")
    rate_b: Number | None = Field(description="The true rate of the second; null for one group.")
    probability: Number | None = Field(description="The exact probability the rule is met.")


class SequentialPoint(Part):
    """A Bayesian rule with interim looks at one point of true rates."""

    rates: dict[Text, Number] = Field(description="The true rate of each group.")
    success: Number = Field(description="The probability of stopping for success at an "
                            "interim look or meeting the rule at the final analysis.")
    stop_for_success: list[Number] = Field(
        description="Per interim look, the probability of stopping for success there.")
    futility: list[Number] = Field(
        description="Per interim look, the probability of stopping for futility there if the "
        "non-binding bound were followed.")
    expected_size: dict[Text, Number] = Field(
        description="Each group's expected analysed size (stopping for success only).")


class BayesLookDesign(Part):
    """The planned looks of a Bayesian rule and their exact operating characteristics."""

    sizes: dict[Text, list[Count]] = Field(
        description="Each group's planned cumulative analysed size at each look.")
    stop_for_success: Number | None = Field(description="The interim success threshold.")
    stop_for_futility: Number | None = Field(description="The predictive-probability "
                                             "futility threshold (non-binding).")
    under_null: SequentialPoint = Field(description="Where the type I error is largest.")
    under_assumed: SequentialPoint | None = Field(description="At the assumed rates.")


class OperatingCharacteristics(Part):
    """The rule's exact frequentist operating characteristics at the planned sizes."""

    sizes: dict[Text, Count] = Field(description="The planned size of each group.")
    alpha: Number = Field(description="The plan's alpha, against which the type I error is "
                          "held.")
    type_one_error: Number | None = Field(
        description="The probability the rule is met, maximised over the null boundary.")
    at_rate: Number | None = Field(description="Where on the null boundary the maximum lies.")
    exceeds_alpha: Flag | None = Field(description="Whether type_one_error exceeds alpha.")
    power: Number | None = Field(description="The probability the rule is met at the assumed "
                                 "rates.")
    assumed: dict[Text, Number] | None = Field(description="The design's assumed rates.")
    curve: list[OperatingPoint] = Field(
        description="The probability the rule is met along the null boundary.")
    looks: BayesLookDesign | None = Field(
        default=None, description="A rule with interim looks: its planned looks (the figures "
        "above then count stopping for success at a look as the rule met).")


class Bayesian(Part):
    """What a posterior-probability hypothesis adds: priors, posteriors, the sentence, the
    density points, the prior-sensitivity analyses and the operating characteristics."""

    alternative: Literal["greater", "less"] = Field(
        description="greater: the event is p_a - p_b > margin (or p > null_rate); less: below.")
    margin: Number | None = Field(description="A pair: the margin of the difference.")
    null_rate: Number | None = Field(description="One group: the rate it is compared with.")
    prior: list[BetaPrior] = Field(description="Each group's prior, in the order compared.")
    posterior: list[BetaPosterior] = Field(description="Each group's posterior, same order.")
    statement: Text = Field(description="The result in one sentence, written by the analysis.")
    densities: Densities | None = Field(description="Points of the densities for the figure.")
    sensitivity: list[PriorSensitivity] = Field(
        description="The same data under the flat, the sceptical and the plan's prior.")
    operating_characteristics: OperatingCharacteristics | None = Field(
        description="Null when the plan has no design or no planned_n.")


class Hypothesis(Part):
    """One hypothesis of the plan, or a follow-up (``parent``), as a run computed it.

    ``p_adjusted`` and ``reject`` are the decision of its family (the plan's multiplicity, a
    gated follow-up family, or the boundaries of its interim looks); for test
    ``posterior-probability`` ``reject`` is the Bayesian rule met (``posterior_probability`` at
    least ``threshold``) and the hypothesis is in no family. ``pre_specified`` is false when a
    command-line override reached the result."""

    id: Text
    title: Text | None
    role: Text
    kind: Text
    outcome: Text
    compare: list[Text] | Text
    alternative: Text
    comparison: Text
    margin: Number | list[Number] | None
    null_rate: Number | None
    scores: list[Number] | None
    strata: list[Text] | None
    planned_test: Text
    test: Text
    continuity: Flag | None
    statistic: Number | None
    df: Number | None
    p_value: Number | None
    p_adjusted: Number | None
    reject: Flag | None
    estimate: Estimate | None
    table: Table
    expected: list[list[Number]] | None
    strata_tables: list[StratumTable] | None
    homogeneity: Homogeneity | None
    monte_carlo: MonteCarlo | None
    margin_check: MarginCheck | None
    rule: Rule | None
    parent: Text | None
    gate: Literal["open", "closed"] | None
    family: Text | None
    estimand: Estimand | None = None  # added after the first results documents
    sensitivity: list[Sensitivity] | None = None
    looks: Looks | BayesLooks | None = None  # only for a hypothesis with interim looks
    graph: GraphLevel | None = None  # the final analysis of a graph over looks
    adjusted: Adjusted | None = Field(
        default=None, description="test g-computation: the covariate-adjusted analysis.")
    stratified: Stratified | None = Field(
        default=None, description="test stratified-score: the weighting over the strata.")
    posterior_probability: Number | None = Field(
        default=None, description="test posterior-probability: the posterior probability of "
        "the rule's event.")
    threshold: Number | None = Field(
        default=None, description="test posterior-probability: the rule is met when the "
        "posterior probability reaches it.")
    bayesian: Bayesian | None = Field(
        default=None, description="test posterior-probability: priors, posteriors, "
        "prior sensitivity and operating characteristics.")
    pre_specified: Flag | None = None  # set by :func:`finish`


class GroupRow(Part):
    """One group's events, total, missing and proportion with its Wilson interval."""

    group: Text
    events: Count
    total: Count
    missing: Count
    proportion: Number | None
    ci: Interval
    ci_method: Text
    level: Number


# --- families (``over``) ---

class Member(Part):
    """One member of a family: a level of the ``over`` column, compared like its template."""

    id: Text
    level: Text | Number
    group: Text | None
    table: Table
    estimate: Estimate | None
    test: Text
    statistic: Number | None
    df: Number | None
    p_value: Number | None
    p_adjusted: Number | None
    p_group: Number | None
    flagged: Flag
    rule: Rule | None
    rows: Count


class FamilyGroup(Part):
    group: Text
    members: Count
    p_group: Number
    flagged: Flag
    members_flagged: Count


class Family(Part):
    """A family of hypotheses over the levels of a column, flagged by its own procedure."""

    id: Text
    title: Text | None
    outcome: Text
    compare: list[Text]
    over: Text
    level_column: Text | None = None  # a family over the event table: its level column
    within: Text | None
    declared: Flag
    method: Text
    level: Number
    group_level: Number | None
    planned_test: Text
    alternative: Text
    measure: Text | None
    interval: Text | None
    ci_level: Number
    threshold: Number | None
    groups: list[FamilyGroup] | None
    left_out: Count
    members: list[Member]
    members_total: Count
    members_flagged: Count
    members_without_data: Count
    pre_specified: Flag | None = None


class EventTable(Part):
    """The event table of ``data.events`` that a run joined to the unit table."""

    data_file: Text = Field(description="The event table, relative to the plan's folder "
                            "(or its database).")
    data: Text = Field(description="Its fingerprint: a file's SHA-256, else of its rows.")
    query: Text | None = Field(description="The query that joined it; null in-process.")
    rows: Count = Field(description="Its rows.")
    unmatched_rows: Count = Field(description="Rows whose id is blank or not in the unit "
                                  "table (the departure unmatched-event-id).")
    unmatched_ids: Count = Field(description="How many distinct such ids.")
    blank_level_rows: Count = Field(description="Rows of known units with a blank level (the "
                                    "departure blank-event-level).")
    outside_rows: Count = Field(description="Rows of units outside the analysis population.")


class RehearsedEventLevel(Part):
    level: Text = Field(description="A level of the event table.")
    rows: Count = Field(description="Its event rows of known units, all groups together.")
    label: Text | None = Field(default=None, description="The label the event table declares "
                               "for this stored level (a dataset file's); absent without one.")


class EventColumn(Part):
    """A column of the event table the plan reads, with the label the file declares."""

    column: Text = Field(description="The column.")
    role: Text = Field(description="data.events.id, data.events.level or data.events.within.")
    label: Text | None = Field(default=None, description="Its label; absent without one.")


class RehearsedEventTable(Part):
    """The event table on the rehearsal's data, pooled over the groups."""

    data_file: Text = Field(description="The event table, relative to the plan's folder.")
    data: Text = Field(description="Its fingerprint.")
    rows: Count = Field(description="Its rows.")
    unmatched_rows: Count = Field(description="Rows whose id is blank or not in the unit "
                                  "table.")
    unmatched_ids: Count = Field(description="How many distinct such ids.")
    blank_level_rows: Count = Field(description="Rows of known units with a blank level.")
    outside_rows: Count = Field(description="Rows of units outside the analysis population.")
    levels: list[RehearsedEventLevel] = Field(description="Event rows per level.")
    columns: list[EventColumn] | None = Field(
        default=None, description="The columns read, with their labels: only when the event "
        "table declares labels (a transport or dataset file).")


# --- the design's planned versus achieved sizes ---

class DesignHypothesis(Part):
    id: Text
    alpha: Number | None
    method: Text | None
    n_per_group: dict[Text, Count] | None
    n_enrol_per_group: dict[Text, Count] | None
    achieved_per_group: dict[Text, Count] | None
    power_at_achieved: Number | None


class Design(Part):
    """Planned versus achieved: the design's sizes per hypothesis and the power achieved."""

    rule: Text | None
    power: Number
    dropout: Number
    assumed: dict[Text, Number]
    hypotheses: list[DesignHypothesis]
    two_sided_power: Text | None = None  # absent in a report written before both tails


# --- the documents ---

class LockedVersion(Part):
    """One locked version of the plan, as its ``lock`` or ``amend`` entry of the log gives it."""

    version: Count = Field(description="The lock version: 1 for the lock, 2, … for amendments.")
    action: Literal["lock", "amend"] = Field(description="The log entry's action.")
    at: Text = Field(description="When the entry was written (RFC 3339 UTC).")
    actor: Text = Field(description="Who locked or amended.")
    reason: Text | None = Field(description="The amendment's reason; null for the lock.")


class Locked(Part):
    """When the plan that ran was locked and amended, and the versions recorded at its lock."""

    versions: list[LockedVersion] = Field(
        description="Every lock and amend entry of the log before the run, in order.")
    environment: dict[Text, Text] = Field(
        description="The environment recorded with the version in force (lock or amend).")


class Provenance(Part):
    """The fields that open every results document: what ran, on what, by whom, with what."""

    prespec: Literal[1]
    kind: Literal["run", "rehearsal"]
    title: Text
    protocol: Text | None
    plan: Text
    plan_version: Count | None
    data: Text
    data_file: Text
    data_files: list[DataFile] | None = None  # a glob: every file read
    engine: Text | None = None  # added with the engines
    engine_library: Text | None = None
    query: Text | None = None
    created: Text
    actor: Text
    alpha: Number
    multiplicity: Text | GraphMultiplicity
    environment: dict[Text, Text]
    locked: Locked | None = Field(
        default=None, description="The lock history and the environment at lock; absent when "
        "the plan ran unlocked, and in reports written before it was recorded.")


class LabelledValue(Part):
    value: Text  # a value the plan names, as text
    label: Text  # the label the data file declares for that stored value


class DataLabel(Part):
    """A column a run reads, with the labels a dataset file declares for it and for the
    values the plan names (``data_labels``)."""

    column: Text
    role: Text
    label: Text | None = None
    values: list[LabelledValue]


class RunResults(Provenance):
    """``results.json`` of a run (or an interim look) on the data."""

    kind: Literal["run"]
    population: Population
    flow: Flow | None = None  # since issue 18
    groups: dict[Text, list[GroupRow]]
    hypotheses: list[Hypothesis]
    deviations: list[Departure]
    notes: list[NoteEntry]
    caution: Text
    design: Design | None = None
    families: list[Family] | None = None
    event_table: EventTable | None = None  # only with data.events
    overrides: list[Override] | None = None
    data_labels: list[DataLabel] | None = None


class PooledOutcome(Part):
    """One outcome over all analysed rows of a rehearsal (no group is known)."""

    events: Count
    total: Count
    missing: Count
    rate: Number | None
    ci: Interval
    ci_method: Text
    level: Number


class RehearsedHypothesis(Part):
    """Whether one hypothesis's computation ran on the dummy allocation, and what stopped it."""

    id: Text
    title: Text | None
    role: Text
    outcome: Text
    compare: list[Text] | Text
    test: Text
    parent: Text | None
    executed: Flag
    problem: Text | None


class RehearsedMember(Part):
    id: Text
    level: Text | Number
    group: Text | None
    events: Count
    total: Count
    missing: Count


class RehearsedFamily(Part):
    id: Text
    title: Text | None
    over: Text
    level_column: Text | None = None  # a family over the event table: its level column
    within: Text | None
    declared: Flag
    method: Text
    level: Number
    members: list[RehearsedMember]
    executed: Flag
    problem: Text | None


class DictionaryValue(Part):
    value: Text | None  # null: the blank cells
    count: Count
    meaning: Text | None
    label: Text | None = None  # the value label a dataset file declares for the stored value


class DictionaryColumn(Part):
    column: Text
    role: Text
    distinct: Count
    blank: Count
    values: list[DictionaryValue]
    more: Count
    more_count: Count
    duplicates: Count | None = None
    label: Text | None = None  # the column label a dataset file declares


class GroupColumn(Part):
    column: Text
    read: Literal[False]


class DataDictionary(Part):
    """The columns the plan reads, their values and what the plan makes of each."""

    rows: Count
    counted_over: Text
    group_column: GroupColumn
    columns: list[DictionaryColumn]


class CovariateSummary(Part):
    """A numeric covariate over all analysed units of a rehearsal (no group is known)."""

    mean: Number | None
    sd: Number | None
    min: Number | None
    median: Number | None
    max: Number | None


class CovariateLevel(Part):
    level: Text | Number = Field(description="A level of a categorical covariate.")
    count: Count = Field(description="Its units, all groups together.")


class RehearsedCovariate(Part):
    """A covariate of an adjusted hypothesis on the rehearsal's data, pooled over groups."""

    hypothesis: Text = Field(description="The hypothesis whose working model uses it.")
    column: Text = Field(description="The data column.")
    kind: Literal["numeric", "categorical"] = Field(description="As the plan declares it.")
    analysed: Count = Field(description="Units with a value.")
    missing: Count = Field(description="Units without one.")
    summary: CovariateSummary | None = Field(
        description="A numeric covariate's distribution; null for a categorical one.")
    levels: list[CovariateLevel] | None = Field(
        description="A categorical covariate's levels and counts; null for a numeric one.")


class ModelCheck(Part):
    """Whether an adjusted hypothesis's working model fitted on the dummy allocation."""

    hypothesis: Text = Field(description="The hypothesis.")
    fits: Flag = Field(description="Whether the working model fitted.")
    reason: Text | None = Field(description="Why not, when it did not.")


class RehearsalResults(Provenance):
    """``results.json`` of a rehearsal: blinded, pooled figures only."""

    kind: Literal["rehearsal"]
    blinded: Literal[True]
    population: Population
    planned_total: Count | None
    analysed_total: Count
    pooled: dict[Text, PooledOutcome]
    hypotheses: list[RehearsedHypothesis]
    families: list[RehearsedFamily] | None = None
    event_table: RehearsedEventTable | None = Field(
        default=None, description="The event table of data.events, pooled over the groups.")
    covariates: list[RehearsedCovariate] | None = Field(
        default=None, description="The covariates of adjusted hypotheses, pooled over groups.")
    model_checks: list[ModelCheck] | None = Field(
        default=None, description="Each adjusted hypothesis's working model on the dummy "
        "allocation.")
    data_dictionary: DataDictionary
    deviations: list[Departure]
    notes: list[NoteEntry]
    caution: Text


def _kind(value: Any) -> str:
    kind = value.get("kind") if isinstance(value, dict) else getattr(value, "kind", None)
    return TAG + ("rehearsal" if kind == "rehearsal" else "run")


Document = Annotated[
    Annotated[RunResults, Tag(TAG + "run")] | Annotated[RehearsalResults, Tag(TAG + "rehearsal")],
    Discriminator(_kind),
]


class Results(RootModel[Document]):
    """A results document: a run's or a rehearsal's, told apart by ``kind``."""


def reached_by(ident: str, role: str | None, overrides: list[Override]) -> bool:
    """Whether a command-line override reaches the result of hypothesis ``ident``: one on
    the hypothesis (or on the hypothesis a follow-up or member belongs to, ``H3:a-vs-b``),
    ``multiplicity`` for a hypothesis in the main family, ``alpha`` for every one."""
    for change in overrides:
        key = change.key
        if key.startswith("hypotheses."):
            owner = key.split(".")[1]
            if ident == owner or ident.startswith(owner + ":"):
                return True
        elif key == "multiplicity":
            if role != "exploratory":
                return True
        else:  # alpha: every decision and interval level
            return True
    return False


def finish(results: dict[str, Any], overrides: list[dict[str, Any]] | None = None
           ) -> dict[str, Any]:
    """The results document as it is written, assembled and checked here alone.

    ``results`` (from ``workflow/execute.py`` or ``workflow/rehearse.py``) is checked against
    the models: a key or a value the contract does not hold is a programming error, raised
    before anything is written. With ``overrides`` (a run's command-line changes, each
    ``{"key", "locked", "used"}``; ``[]`` for none), the run's ``overrides`` are set and each
    hypothesis's and family's ``pre_specified`` (a family lies outside the plan's
    multiplicity). The document is the models' dump: the writers' keys, order and values.
    """
    doc = Results.model_validate(results).root
    if overrides is not None:
        if not isinstance(doc, RunResults):
            raise ValueError("only a run's results take overrides")
        doc.overrides = [Override.model_validate(o) for o in overrides]
        for hyp in doc.hypotheses:
            hyp.pre_specified = not reached_by(hyp.id, hyp.role, doc.overrides)
        for fam in doc.families or []:
            fam.pre_specified = not reached_by(fam.id, "exploratory", doc.overrides)
    return doc.dumped()


def read_results(doc: Any) -> RunResults | RehearsalResults:
    """A results document read back (``verify --rerun``): keys an earlier prespec did not write
    take their defaults, keys it does not know are ignored. Raises ``ValidationError`` for a
    document that is not one (a value of the wrong type, a required key missing)."""
    return Results.model_validate(doc, context={LENIENT: True}).root


def read_provenance(doc: Any) -> Provenance:
    """Only the fields that open a results document (what ran, on what, by whom), read like
    :func:`read_results`: what ``verify`` compares with the log for every report, at a cost
    that does not grow with the document."""
    return Provenance.model_validate(doc, context={LENIENT: True})


def json_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of a results document, from the models."""
    return draft_2020_12(Results.model_json_schema(by_alias=True, mode="validation"),
                         "prespec results.json")
