"""A Bayesian rule of one hypothesis (test: posterior-probability; docs/bayes.md).

Conjugate beta posteriors of the compared groups' rates, the posterior probability of the
rule's event against the pre-specified threshold, the posterior mean and equal-tailed credible
interval, the same under a flat and a sceptical prior, and the rule's exact operating
characteristics at the planned sizes. The numbers come from ``stats.bayes``; a Bayesian rule
is outside the frequentist multiplicity family, so it has no p-value and no adjusted one.
"""

from __future__ import annotations

import functools
import math
from typing import TYPE_CHECKING, Any

import numpy as np

from prespec.common.departures import Note
from prespec.stats import bayes

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

#: The sceptical prior, when the plan names none, is worth this share of the planned data of
#: the smallest compared group, and at least SCEPTICAL_MIN_N units.
SCEPTICAL_SHARE = 0.25
SCEPTICAL_MIN_N = 10.0
#: Points of each density curve written for the report's figure.
DENSITY_POINTS = 161


def _prior_mean(prior: Any) -> float:
    a, b = prior
    return float(a) / (float(a) + float(b))


def sceptical_prior(hyp: Hypothesis, plan: Plan) -> tuple[float, float]:
    """(centre, n) of the sceptical prior: the plan's, else centred on no difference (the mean
    of the compared groups' prior means; one group: its null_rate) and worth a quarter of the
    smallest compared group's planned_n (at least 10 units; 10 without planned_n)."""
    if hyp.sceptical_prior is not None:
        return float(hyp.sceptical_prior.mean), float(hyp.sceptical_prior.n)
    groups = list(hyp.compare)
    if hyp.kind == "single":
        centre = float(hyp.null_rate)
    else:
        centre = float(np.mean([_prior_mean(hyp.prior[g]) for g in groups]))
    planned = plan.data.planned_n or {}
    sizes = [planned[g] for g in groups if g in planned]
    n = max(SCEPTICAL_MIN_N, SCEPTICAL_SHARE * min(sizes)) if len(sizes) == len(groups) \
        else SCEPTICAL_MIN_N
    return centre, float(n)


def _posterior(hyp: Hypothesis, events: list[int], totals: list[int],
               priors: list[tuple[float, float]]) -> bayes.Posterior:
    if hyp.kind == "single":
        return bayes.posterior_single(events[0], totals[0], priors[0], null_rate=hyp.null_rate,
                                      alternative=hyp.alternative, credible=hyp.credible)
    return bayes.posterior_difference(
        events[0], totals[0], events[1], totals[1], priors[0], priors[1],
        margin=float(hyp.margin or 0.0), alternative=hyp.alternative, credible=hyp.credible)


def _estimate(post: bayes.Posterior) -> dict[str, Any]:
    return {"value": float(post.mean), "ci": [float(post.low), float(post.high)]}


def _priors_json(groups: list[str], priors: list[tuple[float, float]]) -> list[dict[str, Any]]:
    return [{"group": g, "a": float(a), "b": float(b)} for g, (a, b) in
            zip(groups, priors, strict=True)]


def _finite(values: Any) -> list[float | None]:
    return [float(v) if math.isfinite(float(v)) else None for v in values]


def _densities(hyp: Hypothesis, post: bayes.Posterior, groups: list[str]) -> dict[str, Any]:
    """The posterior densities for the report's figure, on grids where their mass lies."""
    from scipy import stats

    lows, highs = [], []
    for a, b in post.posteriors:
        lows.append(float(stats.beta.ppf(1e-5, a, b)))
        highs.append(float(stats.beta.ppf(1 - 1e-5, a, b)))
    x = np.linspace(max(0.0, min(lows)), min(1.0, max(highs)), DENSITY_POINTS)
    out: dict[str, Any] = {
        "x": x.tolist(),
        "groups": {g: _finite(stats.beta.pdf(x, a, b))
                   for g, (a, b) in zip(groups, post.posteriors, strict=True)},
        "difference_x": None, "difference": None,
    }
    margin = float(hyp.margin or 0.0)
    if hyp.kind == "single":
        edge = float(hyp.null_rate)
        out["region"] = [edge, 1.0] if hyp.alternative == "greater" else [0.0, edge]
        return out
    (a1, b1), (a2, b2) = post.posteriors
    var = (a1 * b1 / ((a1 + b1) ** 2 * (a1 + b1 + 1))
           + a2 * b2 / ((a2 + b2) ** 2 * (a2 + b2 + 1)))
    mean = a1 / (a1 + b1) - a2 / (a2 + b2)
    half = 6.0 * math.sqrt(var)
    d = np.linspace(max(-1.0, mean - half), min(1.0, mean + half), DENSITY_POINTS)
    out["difference_x"] = d.tolist()
    out["difference"] = _finite([bayes.difference_pdf(float(t), post.posteriors[0],
                                                      post.posteriors[1]) for t in d])
    out["region"] = [margin, 1.0] if hyp.alternative == "greater" else [-1.0, margin]
    return out


def _statement(hyp: Hypothesis, groups: list[str], post: bayes.Posterior, met: bool) -> str:
    side = "exceeds" if hyp.alternative == "greater" else "falls below"
    if hyp.kind == "single":
        event = f"the event rate of {groups[0]} {side} {hyp.null_rate:g}"
    else:
        margin = float(hyp.margin or 0.0)
        by = f" by more than {margin:g}" if margin > 0 and hyp.alternative == "greater" else (
            f" by more than {-margin:g}" if margin < 0 and hyp.alternative == "less" else "")
        event = (f"the event rate of {groups[0]} {side} that of {groups[1]}{by}"
                 if margin == 0 or by else
                 f"the difference in event rates ({groups[0]} minus {groups[1]}) "
                 f"{side} {margin:g}")
    verdict = ("reaches the threshold {t:g}: the rule is met" if met else
               "does not reach the threshold {t:g}: the rule is not met")
    digits = 4  # enough digits that the number shown is on the side of the threshold it is
    while digits < 12 and (float(f"{post.probability:.{digits}f}") >= hyp.threshold) != met:
        digits += 1
    return (f"Given the data and the prior, the posterior probability that {event} is "
            f"{post.probability:.{digits}f}, which " + verdict.format(t=hyp.threshold) + ".")


@functools.lru_cache(maxsize=16)
def _kernel_oc(sizes: tuple[int, ...], priors: tuple[tuple[float, ...], ...],
               null_rate: float | None, margin: float, alternative: str, threshold: float,
               assumed: tuple[float, ...] | None,
               looks: tuple[float | None, float | None, tuple[tuple[int, ...], ...]] | None
               = None) -> bayes.OC:
    """The kernel's operating characteristics, kept for the process: a run, a check or a
    design asks for the same rule's more than once (the analysis and planned versus achieved;
    the summary and the warning). ``looks``: (stop_for_success, stop_for_futility, the
    cumulative sizes of each group at each look) of a rule with interim looks."""
    if looks is not None:
        success, futility, per_group = looks
        if null_rate is not None:
            return bayes.sequential_operating_characteristics_single(
                per_group[0], priors[0], null_rate=null_rate, alternative=alternative,
                threshold=threshold, stop_for_success=success, stop_for_futility=futility,
                assumed=assumed[0] if assumed else None)
        return bayes.sequential_operating_characteristics(
            per_group[0], per_group[1], priors[0], priors[1], margin=margin,
            alternative=alternative, threshold=threshold, stop_for_success=success,
            stop_for_futility=futility, assumed=assumed)
    if null_rate is not None:
        return bayes.operating_characteristics_single(
            sizes[0], priors[0], null_rate=null_rate, alternative=alternative,
            threshold=threshold, assumed=assumed[0] if assumed else None)
    return bayes.operating_characteristics(
        sizes[0], sizes[1], priors[0], priors[1], margin=margin, alternative=alternative,
        threshold=threshold, assumed=assumed)


@functools.lru_cache(maxsize=16)
def _kernel_points(per_group: tuple[tuple[int, ...], ...],
                   priors: tuple[tuple[float, ...], ...], null_rate: float | None,
                   margin: float, alternative: str, threshold: float,
                   success: float | None, futility: float | None,
                   points: tuple[tuple[float, ...], ...]) -> tuple[bayes.SequentialOC, ...]:
    """The kernel's sequential figures of a rule with looks at points of true rates (one rate
    per group each), in one call (the rule's regions made once), kept for the process as
    :func:`_kernel_oc` is."""
    common: dict[str, Any] = {"alternative": alternative, "threshold": threshold,
                              "stop_for_success": success, "stop_for_futility": futility}
    if null_rate is not None:
        return tuple(bayes.sequential_rule_probability_single(
            per_group[0], priors[0], null_rate=null_rate,
            rates=[point[0] for point in points], **common))
    return tuple(bayes.sequential_rule_probability(
        per_group[0], per_group[1], priors[0], priors[1], margin=margin,
        rates_a=[point[0] for point in points], rates_b=[point[1] for point in points],
        **common))


def _look_point(groups: list[str], rates: tuple[float, ...],
                got: bayes.SequentialOC) -> dict[str, Any]:
    """The sequential figures at one point of true rates: the probability of success, of
    stopping for success at each interim look, of stopping for futility there if the bound
    were followed, and each group's expected analysed size."""
    return {"rates": dict(zip(groups, rates, strict=True)), "success": float(got.success),
            "stop_for_success": [float(x) for x in got.stop_for_success],
            "futility": [float(x) for x in got.futility],
            "expected_size": dict(zip(groups, (float(x) for x in got.expected_size),
                                      strict=True))}


def operating_characteristics(hyp: Hypothesis, plan: Plan) -> dict[str, Any] | None:
    """The rule's exact operating characteristics at the planned sizes (data.planned_n of the
    compared groups): the type I error maximised over the null boundary and the power at the
    design's assumed rates; None without planned sizes for every compared group. With interim
    looks, those of the rule with its stopping for success (futility is non-binding, so it
    does not lower the type I error), and per look the stopping probabilities where the type I
    error is largest and at the assumed rates."""
    from prespec.plan.looks import bayes_look_sizes

    groups = list(hyp.compare)
    planned = plan.data.planned_n or {}
    if not all(g in planned for g in groups):
        return None
    design = plan.design
    assumed = None
    if design is not None and all(g in design.assumed for g in groups):
        assumed = tuple(float(design.assumed[g]) for g in groups)
    priors = tuple(tuple(float(x) for x in hyp.prior[g]) for g in groups)
    per_group = bayes_look_sizes(plan, hyp)
    looks = None if per_group is None else (
        hyp.looks.stop_for_success, hyp.looks.stop_for_futility,
        tuple(tuple(sizes) for sizes in per_group))
    null_rate = hyp.null_rate if hyp.kind == "single" else None
    margin = float(hyp.margin or 0.0)
    oc = _kernel_oc(tuple(int(planned[g]) for g in groups), priors, null_rate, margin,
                    hyp.alternative, float(hyp.threshold), assumed, looks)
    out = {
        "sizes": {g: int(planned[g]) for g in groups},
        "alpha": float(plan.alpha),
        "type_one_error": float(oc.type_one_error),
        "at_rate": None if oc.at_rate is None else float(oc.at_rate),
        "exceeds_alpha": bool(oc.type_one_error > plan.alpha),
        "power": None if oc.power is None else float(oc.power),
        "assumed": None if assumed is None else dict(zip(groups, assumed, strict=True)),
        # two groups: along the null boundary; one group: over its true rate (rate_b null)
        "curve": [{"rate_a": float(ra), "rate_b": None if hyp.kind == "single" else float(rb),
                   "probability": float(p)} for rb, ra, p in oc.curve],
    }
    if looks is not None:
        success, futility, sizes = looks
        if null_rate is not None:
            worst: tuple[float, ...] = (float(null_rate),)
        else:
            rate_b = float(oc.at_rate)
            worst = (min(1.0, max(0.0, rate_b + margin)), rate_b)
        points = (worst,) if assumed is None else (worst, assumed)
        got = _kernel_points(sizes, priors, null_rate, margin, hyp.alternative,
                             float(hyp.threshold), success, futility, points)
        out["looks"] = {
            "sizes": dict(zip(groups, per_group, strict=True)),
            "stop_for_success": success,
            "stop_for_futility": futility,
            "under_null": _look_point(groups, worst, got[0]),
            "under_assumed": None if assumed is None else _look_point(groups, assumed, got[1]),
        }
    return out


def run_bayes(hyp: Hypothesis, plan: Plan, events: list[int], totals: list[int],
              notes: list[Note]) -> dict[str, Any]:
    """The keys of a Bayesian entry: no p-value; ``reject`` is the rule met."""
    groups = list(hyp.compare)
    priors = [tuple(float(p) for p in hyp.prior[g]) for g in groups]
    post = _posterior(hyp, events, totals, priors)
    met = bayes.meets_threshold(post.probability, hyp.threshold)  # as the design's region
    sensitivity = []
    centre, n = sceptical_prior(hyp, plan)
    rows = [("flat", [(1.0, 1.0)] * len(groups))]
    sceptical = bayes.beta_from_mean(centre, n)
    if min(sceptical) >= bayes.MIN_PARAMETER:
        rows.append(("sceptical", [sceptical] * len(groups)))
    else:
        notes.append(Note("not-computable", f"{hyp.id}: the sceptical prior Beta"
                          f"({sceptical[0]:.4g}, {sceptical[1]:.4g}) has a parameter below "
                          f"{bayes.MIN_PARAMETER:g}; its row of the prior-sensitivity table is "
                          "left out"))
    for label, these in rows:
        other = _posterior(hyp, events, totals, these)
        row = {"prior": label, "priors": _priors_json(groups, these),
               "posterior_probability": float(other.probability),
               "rule_met": bayes.meets_threshold(other.probability, hyp.threshold),
               "estimate": _estimate(other)}
        if label == "sceptical":
            row.update(centre=centre, n=n)
        sensitivity.append(row)
    measure = "proportion" if hyp.kind == "single" else "risk-difference"
    oc = operating_characteristics(hyp, plan)
    if oc is not None and oc["exceeds_alpha"]:
        notes.append(Note("bayes-type-one-error", f"{hyp.id}: at the planned sizes the rule's "
                          f"type I error, maximised over the null boundary, is "
                          f"{oc['type_one_error']:.4f}, above alpha {plan.alpha:g}"))
    return {
        "statistic": None, "df": None, "p_value": None,
        "reject": met,
        "posterior_probability": float(post.probability),
        "threshold": float(hyp.threshold),
        "estimate": {"measure": measure, "value": float(post.mean),
                     "ci": [float(post.low), float(post.high)],
                     "ci_method": "equal-tailed-credible", "level": float(hyp.credible),
                     "note": None},
        "bayesian": {
            "alternative": hyp.alternative,
            "margin": None if hyp.kind == "single" else float(hyp.margin or 0.0),
            "null_rate": hyp.null_rate,
            "prior": [{**p, "mean": None, "n": None} for p in _priors_json(groups, priors)],
            "posterior": [{"group": g, "a": float(a), "b": float(b), "mean": float(a / (a + b))}
                          for g, (a, b) in zip(groups, post.posteriors, strict=True)],
            "statement": _statement(hyp, groups, post, met),
            "densities": _densities(hyp, post, groups),
            "sensitivity": sensitivity,
            "operating_characteristics": oc,
        },
    }


def type_one_error_warnings(plan: Plan) -> list[str]:
    """One line per Bayesian rule whose exact type I error at the planned sizes, maximised over
    the null boundary, exceeds alpha: a warning at check, design and lock, not an error (the
    plan may intend it)."""
    from prespec.plan import vocabulary as v

    out = []
    for hyp in plan.hypotheses:
        if hyp.test not in v.BAYESIAN_TESTS or hyp.threshold is None:
            continue
        oc = operating_characteristics(hyp, plan)
        if oc is not None and oc["exceeds_alpha"]:
            out.append(f"hypotheses.{hyp.id}: the rule's exact type I error at the planned sizes "
                       f"({', '.join(f'{g} {n}' for g, n in oc['sizes'].items())}), maximised "
                       f"over the null boundary, is {oc['type_one_error']:.4f}, above alpha "
                       f"{plan.alpha:g}; lock it only if that is intended")
    return out
