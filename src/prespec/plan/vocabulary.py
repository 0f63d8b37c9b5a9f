"""The names of the plan format, and which of them this version of prespec can run.

Every name of the plan format (docs/plan-format.md) is *known*: the plan model accepts it and
checks its rules. Only the *available* names run in this release; a known but unavailable name
is refused with its own message. A later issue makes a method available by adding its name to
an ``AVAILABLE_*`` set.

Compare kinds: ``pair`` is ``compare: [a, b]``, ``single`` is ``compare: [a]``, ``all`` is the
k-group comparison and ``trend`` the ordered one.
"""

from __future__ import annotations

from typing import Literal

Kind = Literal["pair", "single", "all", "trend"]

KINDS: tuple[Kind, ...] = ("pair", "single", "all", "trend")
KIND_LABELS: dict[str, str] = {
    "pair": "[a, b]",
    "single": "[a]",
    "all": "all",
    "trend": "trend",
}

# Tests, per compare kind (docs/plan-format.md, "What each kind of `compare` takes").
KNOWN_TESTS_BY_KIND: dict[str, frozenset[str]] = {
    "pair": frozenset(
        {
            "pearson-chi-square",
            "likelihood-ratio",
            "two-proportion-z",
            "fisher-exact",
            "barnard-exact",
            "boschloo-exact",
            "cochran-mantel-haenszel",
            "farrington-manning",
            "stratified-score",
            "g-computation",
            "posterior-probability",
        }
    ),
    "single": frozenset({"binomial-exact", "one-proportion-z", "posterior-probability"}),
    "all": frozenset({"pearson-chi-square", "likelihood-ratio", "fisher-exact"}),
    "trend": frozenset({"cochran-armitage-trend"}),
}
KNOWN_TESTS: frozenset[str] = frozenset().union(*KNOWN_TESTS_BY_KIND.values())

# Every test of the format runs in this version.
AVAILABLE_TESTS_BY_KIND: dict[str, frozenset[str]] = dict(KNOWN_TESTS_BY_KIND)
AVAILABLE_KINDS: frozenset[str] = frozenset(KINDS)

# Tests that only have a two-sided form, per kind; every test on `all` is two-sided only.
TWO_SIDED_ONLY_BY_KIND: dict[str, frozenset[str]] = {
    "pair": frozenset({"likelihood-ratio"}),
    "single": frozenset(),
    "all": KNOWN_TESTS_BY_KIND["all"],
    "trend": frozenset(),
}
# Tests that take `continuity: true` (the corrected statistic), per kind.
CONTINUITY_TESTS_BY_KIND: dict[str, frozenset[str]] = {
    "pair": frozenset({"pearson-chi-square", "cochran-mantel-haenszel"}),
    "single": frozenset(),
    "all": frozenset(),
    "trend": frozenset(),
}
STRATIFIED_TESTS: frozenset[str] = frozenset({"cochran-mantel-haenszel", "stratified-score"})
# The covariate-adjusted test: a working model fitted on the units, not on a count table.
ADJUSTED_TESTS: frozenset[str] = frozenset({"g-computation"})
# Bayesian decision rules: outside the frequentist multiplicity, decided by a posterior
# probability against a threshold.
BAYESIAN_TESTS: frozenset[str] = frozenset({"posterior-probability"})
# The smallest Beta parameter of a prior (stats.bayes.MIN_PARAMETER, held equal by a test).
MIN_BETA_PARAMETER = 0.05
# Tests for non-inferiority and equivalence (with a margin), and those used only there.
MARGIN_TESTS: frozenset[str] = frozenset({"farrington-manning", "two-proportion-z",
                                          "stratified-score", "g-computation"})
MARGIN_ONLY_TESTS: frozenset[str] = frozenset({"farrington-manning"})
# Tests a tipping-point sensitivity analysis refuses, and why (the others are on arrays).
NO_TIPPING_POINT_TESTS: dict[str, str] = {
    "barnard-exact": "an unconditional exact test searches a supremum over the nuisance "
                     "parameter for every table, too slow to repeat over a whole grid",
    "boschloo-exact": "an unconditional exact test searches a supremum over the nuisance "
                      "parameter for every table, too slow to repeat over a whole grid",
    "cochran-mantel-haenszel": "the number of events among a group's missing does not say "
                               "in which strata they fall, so the stratified grid is not "
                               "defined",
    "stratified-score": "the number of events among a group's missing does not say in which "
                        "strata they fall, so the stratified grid is not defined",
    "g-computation": "the working model needs each unit's covariates, and a grid of imputed "
                     "counts does not say which units the imputed events fall on",
    "posterior-probability": "a Bayesian rule has no p-value to compare across the grid",
}

# Measures, per kind; the first is the default (CMH defaults to the odds ratio).
MEASURES_BY_KIND: dict[str, tuple[str, ...]] = {
    "pair": ("risk-difference", "risk-ratio", "odds-ratio"),
    "single": ("proportion",),
    "all": (),
    "trend": (),
}
STRATIFIED_DEFAULT_MEASURE = "odds-ratio"
KNOWN_MEASURES: frozenset[str] = frozenset().union(*map(frozenset, MEASURES_BY_KIND.values()))
AVAILABLE_MEASURES: frozenset[str] = KNOWN_MEASURES

# Intervals, per measure; the first is the default.
INTERVALS_BY_MEASURE: dict[str, tuple[str, ...]] = {
    "risk-difference": ("newcombe", "wald", "agresti-caffo", "miettinen-nurminen"),
    "risk-ratio": ("katz", "koopman"),
    "odds-ratio": ("woolf", "miettinen-nurminen", "exact-conditional"),
    "proportion": ("wilson", "clopper-pearson", "jeffreys"),
}
# Under a stratified test the interval is the stratified one, one per measure.
STRATIFIED_INTERVALS: dict[str, str] = {
    "odds-ratio": "robins-breslow-greenland",
    "risk-ratio": "greenland-robins",
    "risk-difference": "sato",
}
# Tests that bring their own measures and intervals: per measure (the first is the default
# measure), the intervals that go with it (the first is the default).
OWN_INTERVALS: dict[str, dict[str, tuple[str, ...]]] = {
    "cochran-mantel-haenszel": {m: (i,) for m, i in STRATIFIED_INTERVALS.items()},
    "stratified-score": {
        "risk-difference": ("stratified-miettinen-nurminen", "stratified-newcombe"),
    },
    "g-computation": {
        "risk-difference": ("g-computation",),
        "risk-ratio": ("g-computation",),
        "odds-ratio": ("g-computation",),
    },
    "posterior-probability": {
        "risk-difference": ("equal-tailed-credible",),
        "proportion": ("equal-tailed-credible",),
    },
}
KNOWN_INTERVALS: frozenset[str] = frozenset().union(
    *map(frozenset, INTERVALS_BY_MEASURE.values()),
    *(frozenset(i for ints in own.values() for i in ints) for own in OWN_INTERVALS.values()),
)
AVAILABLE_INTERVALS: frozenset[str] = KNOWN_INTERVALS

ALTERNATIVES: tuple[str, ...] = ("two-sided", "greater", "less")
KNOWN_COMPARISONS: tuple[str, ...] = ("superiority", "non-inferiority", "equivalence")
AVAILABLE_COMPARISONS: frozenset[str] = frozenset(KNOWN_COMPARISONS)
ROLES: tuple[str, ...] = ("primary", "secondary", "exploratory")
MISSING_RULES: tuple[str, ...] = ("exclude", "event", "no-event", "error")
PAIRWISE: tuple[str, ...] = ("reference", "all")

KNOWN_MULTIPLICITY: tuple[str, ...] = (
    "none",
    "bonferroni",
    "sidak",
    "holm",
    "hochberg",
    "hommel",
    "fixed-sequence",
    "benjamini-hochberg",
    "benjamini-yekutieli",
    "graphical",
)
# The names written alone; `graphical` is only ever a mapping.
MULTIPLICITY_NAMES: tuple[str, ...] = tuple(m for m in KNOWN_MULTIPLICITY if m != "graphical")
AVAILABLE_MULTIPLICITY: frozenset[str] = frozenset(KNOWN_MULTIPLICITY)

# Optional hypothesis keys that are known; those not available are refused when given.
KNOWN_HYPOTHESIS_OPTIONS: frozenset[str] = frozenset(
    {
        "title",
        "alternative",
        "comparison",
        "margin",
        "measure",
        "interval",
        "continuity",
        "sparse",
        "role",
        "null_rate",
        "strata",
        "scores",
        "then",
        "monte_carlo",
        "estimand",
        "sensitivity",
        "looks",
        "covariates",
        "variance",
        "randomisation_strata",
        "covariate_missing",
        "fallback",
        "weights",
        "prior",
        "threshold",
        "credible",
        "sceptical_prior",
    }
)
AVAILABLE_HYPOTHESIS_OPTIONS: frozenset[str] = KNOWN_HYPOTHESIS_OPTIONS

# Keys of later parts of the format (none at present; docs/plan-format.md lists every key):
# named so that a plan using them is told they are not available yet, not that they are unknown.
LATER_KEYS: dict[str, frozenset[str]] = {
    "plan": frozenset(),
    "data": frozenset(),
    "hypothesis": frozenset(),
}

# Families (a hypothesis template with `over`): how the members are flagged, and the tests a
# family member may use (two groups; no strata, no margin).
FLAG_METHODS: tuple[str, ...] = ("benjamini-hochberg", "double-fdr")
FAMILY_TESTS: frozenset[str] = KNOWN_TESTS_BY_KIND["pair"] - {
    "cochran-mantel-haenszel", "farrington-manning", "stratified-score", "g-computation",
    "posterior-probability"}

# Covariate adjustment (test: g-computation): the kinds of covariate, the variances, what a
# blank covariate does, and the tests a failed working model may fall back to.
COVARIATE_KINDS: tuple[str, ...] = ("numeric", "categorical")
VARIANCES: tuple[str, ...] = ("ye", "ge")
COVARIATE_MISSING: tuple[str, ...] = ("exclude", "error")
FALLBACK_TESTS: frozenset[str] = KNOWN_TESTS_BY_KIND["pair"] - {
    "cochran-mantel-haenszel", "stratified-score", "g-computation", "posterior-probability"}
DEFAULT_FALLBACK = "two-proportion-z"
# Stratified score test (test: stratified-score): the weights of the strata.
STRATUM_WEIGHTS: tuple[str, ...] = ("cmh", "miettinen-nurminen")
FAMILY_KEYS: tuple[str, ...] = ("over", "within", "levels", "flag_method", "flag_level",
                                "group_level", "members")


def unavailable(name: str, available: frozenset[str], where: str = "", shown: str = "") -> str:
    """The one message for a known name that this version cannot run.

    ``where`` names the compare kind the list is for; ``shown`` replaces the quoted name.
    """
    names = ", ".join(sorted(available)) or "none yet"
    label = f"available for {where}" if where else "available"
    return (f"{shown or repr(name)} is known but not available in this version of prespec "
            f"({label}: {names})")


# Plan-time limits on keys whose cost grows without bound, with the reason each error gives.
MAX_MONTE_CARLO_TABLES = 10_000_000
MAX_LOOKS = 20
_LOOKS_REASON = ("the boundaries' computation grows steeply with the number of looks (20 take "
                 "about a second, 50 several seconds, 200 over a minute), and a group-sequential "
                 "design has a handful")
LIMIT_REASONS: dict[str, str] = {
    "tables": (f"with {MAX_MONTE_CARLO_TABLES:,} tables the Monte Carlo standard error is below "
               "0.0002 at any p-value, and each million tables takes a second or more"),
    "fractions": _LOOKS_REASON,
    "sizes": _LOOKS_REASON,
}
