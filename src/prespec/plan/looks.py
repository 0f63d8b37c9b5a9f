"""Interim looks in the plan: the ``looks:`` mapping of a hypothesis and its rules.

``looks`` names the planned information fractions (or the planned cumulative total sizes), the
efficacy spending function and an optional non-binding futility boundary (docs/plan-format.md,
"How the keys combine"). The model is declared here and used by
:class:`prespec.plan.model.Hypothesis`; :func:`looks_issues` checks the rules across keys,
and calls the boundary maths on the planned looks so that a plan the maths refuses is refused
at ``check``.

A Bayesian rule (``test: posterior-probability``) has looks of its own kind: no spending
function, but ``stop_for_success`` (the posterior probability at which an interim look stops
for success) and ``stop_for_futility`` (the predictive probability of meeting the rule at the
final sizes below which futility may be considered, non-binding), at planned sizes per group
that ``data.planned_n`` fixes: :func:`bayes_look_sizes` (docs/bayes.md, "Interim looks").

Which frequentist hypotheses may have looks: a confirmatory (primary or secondary) superiority comparison
of two groups whose test gives a signed z on the risk-difference scale: ``two-proportion-z``,
or ``pearson-chi-square`` without continuity correction (the signed root of X² is that pooled
z). Exact tests have no z; the corrected chi-square, the likelihood ratio and the stratified
tests are not on the scale Z_k ~ N(θ·sqrt(I_k), 1) that the boundaries assume; a sparse switch
would change the test between looks. Binding futility boundaries are not supported. In a
multiplicity family of more than one hypothesis, looks need a weighted Bonferroni procedure
(``graphical``, ``bonferroni``, ``holm``, ``fixed-sequence``), run over the looks as the
graphical procedure of Maurer and Bretz (2013), and no gated follow-ups:
:func:`plan_looks_issues`.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterator
from typing import TYPE_CHECKING, Annotated, Any, ClassVar, Literal

from pydantic import BeforeValidator, ConfigDict, Field
from pydantic_core import PydanticCustomError

from prespec.plan.canonical_form import Canonical, CanonicalModel
from prespec.plan.locate import Issue
from prespec.plan.vocabulary import BAYESIAN_TESTS, MAX_LOOKS
from prespec.plan.yamlread import KeyPath, show

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

#: The efficacy spending functions and classical boundaries (the maths module's names).
EFFICACY: tuple[str, ...] = ("lan-demets-obrien-fleming", "lan-demets-pocock",
                             "hwang-shih-decani", "obrien-fleming", "pocock")
#: The futility (beta) spending functions.
FUTILITY: tuple[str, ...] = ("lan-demets-obrien-fleming", "lan-demets-pocock",
                             "hwang-shih-decani")
#: Boundaries that hold only at their planned, equally spaced looks.
CLASSICAL: frozenset[str] = frozenset({"obrien-fleming", "pocock"})
#: The tests whose statistic is a signed z on the risk-difference scale.
Z_TESTS: frozenset[str] = frozenset({"two-proportion-z", "pearson-chi-square"})
#: The multiplicity procedures that run over interim looks, as graphs (Maurer & Bretz 2013).
GRAPH_METHODS: tuple[str, ...] = ("graphical", "bonferroni", "holm", "fixed-sequence")
#: How far (absolute) an observed information fraction may lie from a classical boundary's
#: planned fraction before the look is off its plan. # common practice: a few per cent
CLASSICAL_TOLERANCE = 0.05


def _not_bool(value: Any) -> Any:
    if isinstance(value, bool):
        raise PydanticCustomError("prespec", "{message}",
                                  {"message": f"expected a number, found {show(value)}"})
    return value


Real = Annotated[float, BeforeValidator(_not_bool)]
Fraction = Annotated[float, Field(gt=0, le=1), BeforeValidator(_not_bool)]
Probability = Annotated[float, Field(gt=0, lt=1), BeforeValidator(_not_bool)]


class _Model(CanonicalModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class Futility(_Model):
    """A non-binding futility boundary from a beta spending function."""

    spending: Literal[FUTILITY] = Field(  # type: ignore[valid-type]
        description="the beta spending function")
    gamma: Real | None = Field(default=None, description="hwang-shih-decani only")
    binding: bool = Field(default=False, description="only false (non-binding) is supported")

    CANONICAL: ClassVar[Canonical] = Canonical(always=("spending", "gamma", "binding"))


class Looks(_Model):
    """The interim analyses of one hypothesis: when, and with which boundaries."""

    fractions: list[Fraction] | None = Field(
        default=None, max_length=MAX_LOOKS,
        description="planned information fractions, increasing, ending at 1")
    sizes: list[Annotated[int, Field(gt=0)]] | None = Field(
        default=None, max_length=MAX_LOOKS, description="planned cumulative total sizes (both "
        "groups), increasing; instead of fractions")
    efficacy: Literal[EFFICACY] | None = Field(  # type: ignore[valid-type]
        default=None, description="the efficacy spending function or classical boundary "
        "(a frequentist test; required there)")
    gamma: Real | None = Field(default=None, description="hwang-shih-decani only")
    futility: Futility | None = Field(default=None, description="an optional non-binding "
                                      "futility boundary")
    stop_for_success: Probability | None = Field(
        default=None, description="a Bayesian rule: stop for success at an interim look where "
        "the posterior probability reaches this")
    stop_for_futility: Probability | None = Field(
        default=None, description="a Bayesian rule: futility may be considered at an interim "
        "look where the predictive probability of meeting the rule at the final analysis falls "
        "below this (non-binding)")

    CANONICAL: ClassVar[Canonical] = Canonical(
        always=("fractions", "sizes", "efficacy", "gamma", "futility"),
        if_set=("stop_for_success", "stop_for_futility"))

    def planned_fractions(self) -> list[float]:
        """The planned information fractions (from ``sizes`` when those are given)."""
        if self.fractions is not None:
            return list(self.fractions)
        sizes = self.sizes or []
        return [s / sizes[-1] for s in sizes] if sizes else []


def looks_words(looks: Looks) -> str:
    """The looks in one phrase, for ``prespec check``."""
    when = ", ".join(f"{t:.3g}" for t in looks.planned_fractions())
    if looks.efficacy is None:  # a Bayesian rule
        words = f"{len(looks.planned_fractions())} looks at information {when}"
        if looks.stop_for_success is not None:
            words += (f"; stop for success where the posterior probability reaches "
                      f"{looks.stop_for_success:g}")
        if looks.stop_for_futility is not None:
            words += (f"; futility may be considered where the predictive probability of "
                      f"success falls below {looks.stop_for_futility:g} (non-binding)")
        return words
    words = f"{len(looks.planned_fractions())} looks at information {when}; {looks.efficacy}"
    if looks.gamma is not None:
        words += f" (gamma {looks.gamma:g})"
    if looks.futility is not None:
        words += f"; non-binding futility {looks.futility.spending}"
        if looks.futility.gamma is not None:
            words += f" (gamma {looks.futility.gamma:g})"
    return words


def planned_total(plan: Plan, hyp: Hypothesis) -> int | None:
    """The planned total size of a hypothesis's two groups: the last of ``looks.sizes``, else
    the sum of their ``data.planned_n``; None when neither is given."""
    if hyp.looks is not None and hyp.looks.sizes:
        return int(hyp.looks.sizes[-1])
    planned = plan.data.planned_n or {}
    groups = list(hyp.compare) if isinstance(hyp.compare, list) else []
    if groups and all(g in planned for g in groups):
        return int(sum(planned[g] for g in groups))
    return None


def bayes_look_sizes(plan: Plan, hyp: Hypothesis) -> list[list[int]] | None:
    """Per compared group of a Bayesian rule with looks, its planned cumulative analysed size
    at each look: the planned fraction times its data.planned_n, rounded half up, the last
    look its data.planned_n; None without data.planned_n for every compared group."""
    planned = plan.data.planned_n or {}
    groups = list(hyp.compare) if isinstance(hyp.compare, list) else []
    if hyp.looks is None or not groups or not all(g in planned for g in groups):
        return None
    fractions = hyp.looks.planned_fractions()
    return [[math.floor(f * planned[g] + 0.5) for f in fractions[:-1]] + [int(planned[g])]
            for g in groups]


def sides(hyp: Hypothesis) -> int:
    """2 for a two-sided alternative (alpha / 2 per side), else 1."""
    return 2 if hyp.alternative == "two-sided" else 1


def _increasing(values: list[float]) -> bool:
    return all(b > a for a, b in itertools.pairwise(values))


def looks_issues(plan: Plan, hyp: Hypothesis, path: KeyPath) -> Iterator[Issue]:
    """Every breach of the rules of one hypothesis's ``looks``."""
    looks = hyp.looks
    if looks is None:
        return
    where: KeyPath = (*path, "looks")
    if hyp.role == "exploratory":
        yield Issue(where, f"{show(hyp.id)} is exploratory; interim looks with stopping "
                    "boundaries apply to primary or secondary hypotheses", at_key=True)
        return
    if hyp.test in BAYESIAN_TESTS:
        yield from _bayesian_looks_issues(plan, hyp, where)
        return
    for key in ("stop_for_success", "stop_for_futility"):
        if getattr(looks, key) is not None:
            yield Issue((*where, key), "is used only with test: posterior-probability (a "
                        "Bayesian rule); a frequentist test stops by its efficacy and futility "
                        "boundaries", at_key=True)
    if looks.efficacy is None:
        yield Issue(where, "needs efficacy: the efficacy spending function or classical "
                    f"boundary ({', '.join(EFFICACY)})", at_key=True)
        return
    if hyp.kind != "pair":
        yield Issue(where, "interim looks apply to compare [a, b] (a signed z on the risk "
                    "difference), not to compare " + str(hyp.compare if isinstance(
                        hyp.compare, str) else "[a]"), at_key=True)
        return
    if hyp.test not in Z_TESTS:
        yield Issue(where, f"interim looks need a test with a signed z statistic "
                    f"(two-proportion-z, or pearson-chi-square on 2×2 via the signed root); "
                    f"'{hyp.test}' has none the boundaries can use", at_key=True)
        return
    if hyp.continuity:
        yield Issue(where, "interim looks use the uncorrected statistic; the continuity-"
                    "corrected chi-square is not on the scale of the boundaries (set "
                    "continuity: false)", at_key=True)
    if hyp.comparison != "superiority":
        yield Issue(where, f"interim looks apply to superiority comparisons, not "
                    f"{hyp.comparison}", at_key=True)
    if hyp.sparse is not None:
        yield Issue(where, "a sparse switch would change the test between looks; leave "
                    "sparse out of a hypothesis with looks", at_key=True)
    yield from _schedule_issues(plan, hyp, where)
    yield from _spending_issues(looks.efficacy, looks.gamma, where, "efficacy")
    if looks.futility is not None:
        fut: KeyPath = (*where, "futility")
        yield from _spending_issues(looks.futility.spending, looks.futility.gamma, fut,
                                    "spending")
        if looks.futility.binding:
            yield Issue((*fut, "binding"), "binding futility boundaries are not supported: "
                        "the futility boundary is non-binding (the efficacy boundaries ignore "
                        "it); set binding: false")
        if plan.design is None:
            yield Issue(fut, "a futility boundary spends beta = 1 − power and needs the "
                        "power it is planned at: give design: {assumed: ..., power: ...}",
                        at_key=True)


def _bayesian_looks_issues(plan: Plan, hyp: Hypothesis, where: KeyPath) -> Iterator[Issue]:
    """The looks of a Bayesian rule: stopped by the posterior probability (success) and the
    predictive probability of success at the final sizes (futility, non-binding), at planned
    sizes per group that data.planned_n fixes (docs/bayes.md, "Interim looks")."""
    looks = hyp.looks
    for key in ("efficacy", "gamma", "futility"):
        if getattr(looks, key) is not None:
            yield Issue((*where, key), "a Bayesian rule stops by stop_for_success (posterior "
                        "probability) and stop_for_futility (predictive probability), not by a "
                        "spending function; leave it out", at_key=True)
    if looks.stop_for_success is None and looks.stop_for_futility is None:
        yield Issue(where, "give stop_for_success (the posterior probability at which an "
                    "interim look stops for success, e.g. 0.995), stop_for_futility (the "
                    "predictive probability of final success below which futility may be "
                    "considered, e.g. 0.05), or both", at_key=True)
    found = list(_schedule_issues(plan, hyp, where))
    yield from found
    if found:
        return
    groups = list(hyp.compare)
    planned = plan.data.planned_n or {}
    missing = [g for g in groups if g not in planned]
    if missing:
        key = "fractions" if looks.fractions is not None else "sizes"
        yield Issue((*where, key), "the predictive probability is of success at the final "
                    f"sizes: give data.planned_n for {' and '.join(missing)}")
        return
    for group, sizes in zip(groups, bayes_look_sizes(plan, hyp) or [], strict=True):
        if sizes[0] < 1 or not _increasing([float(n) for n in sizes]):
            yield Issue(where, f"the planned sizes of {show(group)} at the looks "
                        f"({', '.join(map(str, sizes))}: the fractions times its planned_n "
                        f"{planned[group]}) must start at 1 or more and increase from look to "
                        "look", at_key=True)
            return


def _schedule_issues(plan: Plan, hyp: Hypothesis, where: KeyPath) -> Iterator[Issue]:
    looks = hyp.looks
    if (looks.fractions is None) == (looks.sizes is None):
        yield Issue(where, "give either fractions (planned information fractions) or sizes "
                    "(planned cumulative total sizes), not both or neither", at_key=True)
        return
    key = "fractions" if looks.fractions is not None else "sizes"
    values = [float(x) for x in (looks.fractions or looks.sizes or [])]
    if len(values) < 2:
        yield Issue((*where, key), "must list at least two looks (the interim ones and the "
                    "final analysis)")
        return
    if not _increasing(values):
        yield Issue((*where, key), f"must increase from look to look, found "
                    f"{', '.join(show(x) for x in values)}")
        return
    if key == "fractions" and values[-1] != 1:
        yield Issue((*where, key), f"must end at 1 (the final analysis), found "
                    f"{show(values[-1])}")
        return
    groups = list(hyp.compare)
    planned = plan.data.planned_n or {}
    if key == "fractions" and not all(g in planned for g in groups):
        yield Issue((*where, key), "the observed information fraction is the analysed total "
                    "over the planned total: give data.planned_n for "
                    f"{' and '.join(groups)} (prespec design computes it), or looks.sizes")
    elif key == "sizes" and all(g in planned for g in groups):
        total = sum(planned[g] for g in groups)
        if int(values[-1]) != total:
            yield Issue((*where, key), f"the last size ({int(values[-1])}) differs from the "
                        f"planned total of {' and '.join(groups)} in data.planned_n ({total})")
    if looks.efficacy in CLASSICAL:
        from prespec.stats.sequential import equally_spaced

        fractions = looks.planned_fractions()
        if not equally_spaced(fractions):
            yield Issue((*where, key), f"{looks.efficacy} boundaries hold for equally spaced "
                        f"looks only, found fractions {', '.join(f'{x:.4g}' for x in fractions)}"
                        "; use a spending function (lan-demets-obrien-fleming, ...) instead")


def _spending_issues(name: str, gamma: float | None, where: KeyPath,
                     key: str) -> Iterator[Issue]:
    if name == "hwang-shih-decani":
        if gamma is None:
            yield Issue((*where, "gamma"), "is required for hwang-shih-decani (the shape of "
                        "the spending function, e.g. -4)", line_path=(*where, key))
        elif gamma == 0:
            yield Issue((*where, "gamma"), "hwang-shih-decani needs gamma other than 0")
    elif gamma is not None:
        yield Issue((*where, "gamma"), f"is used only with hwang-shih-decani, not {name}",
                    at_key=True)


def plan_looks_issues(plan: Plan) -> Iterator[Issue]:
    """Rules across hypotheses: one number of looks, and in a multiplicity family of more than
    one hypothesis a procedure that runs over the looks, without gated follow-ups."""
    with_looks = [
        (i, h)
        for i, h in enumerate(plan.hypotheses)
        if h.looks is not None and h.role != "exploratory"
    ]
    if not with_looks:
        return
    counts = {h.id: len(h.looks.planned_fractions()) for _, h in with_looks}
    first_id, first_count = next(iter(counts.items()))
    for i, h in with_looks:
        if counts[h.id] != first_count and counts[h.id] >= 2:
            yield Issue(
                ("hypotheses", i, "looks"),
                f"plans {counts[h.id]} looks and "
                f"{show(first_id)} plans {first_count}; every hypothesis with looks "
                "must plan the same number (--look K runs look K of each)",
                at_key=True,
            )
    family = [h for h in plan.hypotheses if not h.outside_multiplicity]
    method = plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical"
    in_family = [(i, h) for i, h in with_looks if not h.outside_multiplicity]
    if method == "none" or len(family) < 2 or not in_family:
        return
    i, h = in_family[0]
    if method not in GRAPH_METHODS:
        yield Issue(
            ("hypotheses", i, "looks"),
            f"interim looks inside a multiplicity family "
            f"of {len(family)} hypotheses are supported with the graphical procedure "
            f"over the looks (Maurer and Bretz 2013), that is with multiplicity "
            f"{', '.join(GRAPH_METHODS)} or none; {method} is not a weighted Bonferroni "
            "procedure and is not supported with looks",
            at_key=True,
        )
    for j, other in enumerate(plan.hypotheses):
        if other.then is not None and other.role != "exploratory":
            yield Issue(
                ("hypotheses", j, "then"),
                "gated follow-up comparisons are not "
                "supported in a plan whose multiplicity family runs over interim looks",
                at_key=True,
            )


def all_looks_issues(plan: Plan) -> Iterator[Issue]:
    """The rules of every hypothesis's looks, then across them; only when all hold, the planned
    boundaries (so that a rule, not the maths, names a plain mistake)."""
    found = [issue for i, hyp in enumerate(plan.hypotheses)
             for issue in looks_issues(plan, hyp, ("hypotheses", i))]
    found += list(plan_looks_issues(plan))
    if found:
        yield from found
        return
    yield from boundary_issues(plan)


def boundary_issues(plan: Plan) -> Iterator[Issue]:
    """The planned boundaries of every valid schedule, computed; a refusal of the maths is an
    issue at the hypothesis's ``looks``."""
    from prespec.stats.sequential import boundaries

    for i, hyp in enumerate(plan.hypotheses):
        looks = hyp.looks
        if looks is None or looks.efficacy is None:  # none, or a Bayesian rule's
            continue
        try:
            boundaries(looks.planned_fractions(), alpha=float(plan.alpha), sides=sides(hyp),
                       efficacy=looks.efficacy, gamma=looks.gamma,
                       futility=looks.futility.spending if looks.futility else None,
                       futility_gamma=looks.futility.gamma if looks.futility else None,
                       power=plan.design.power if plan.design is not None else None)
        except ValueError as exc:
            yield Issue(("hypotheses", i, "looks"), f"the boundaries cannot be computed: "
                        f"{exc}", at_key=True)
