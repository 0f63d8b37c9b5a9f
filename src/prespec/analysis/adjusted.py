"""Covariate-adjusted and stratified effects of one hypothesis (docs/plan-format.md,
"Covariate adjustment and stratified risk differences").

``g-computation`` fits its working model to the hypothesis's analysed units
(``data.prepare.Units``), standardises the two risks and tests the marginal effect; when the
model cannot be used it runs the pre-specified ``fallback`` test on the same units' counts,
with a note. ``stratified-score`` tests and estimates a common risk difference over the strata.
Both write their own keys of the entry (``adjusted``, ``stratified``); the numbers come from
``stats.adjusted`` and ``stats.stratified_difference``.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from prespec.common.departures import Note
from prespec.plan import vocabulary as v
from prespec.stats import adjusted as gcomp
from prespec.stats import margins
from prespec.stats import stratified_difference as sdiff
from prespec.stats.results import Estimate, TestResult

if TYPE_CHECKING:
    from prespec.data.prepare import Units
    from prespec.plan.model import Hypothesis

# --- g-computation ---

def fit(hyp: Hypothesis, units: Units, level: float) -> gcomp.Adjusted:
    """The working model on the units; :class:`stats.adjusted.ModelFailure` when unusable."""
    matrix, names, _ = gcomp.design_matrix(list(units.covariates))
    strata = None
    if units.strata is not None:
        strata = np.unique(units.strata.astype(str), return_inverse=True)[1]
    return gcomp.g_computation(
        units.outcome, units.treated, matrix, names, weights=units.weights,
        measure=hyp.measure, variance=hyp.variance, level=level, strata=strata)


def adjusted_test(model: gcomp.Adjusted, hyp: Hypothesis) -> TestResult:
    """The z test of the marginal effect: superiority, or at the margin (two one-sided tests
    for equivalence)."""
    if hyp.comparison == "equivalence":
        low, high = hyp.margin
        return margins.tost(model.test("greater", low), model.test("less", high))
    if hyp.comparison == "non-inferiority":
        return model.test(hyp.alternative, hyp.margin)
    return model.test(hyp.alternative)


def _covariates_json(units: Units) -> list[dict[str, Any]]:
    _, _, levels = gcomp.design_matrix(list(units.covariates))
    out = []
    for column, kind, _values in units.covariates:
        found = list(levels.get(column, ())) if kind == "categorical" else None
        out.append({"column": column, "kind": kind, "levels": found,
                    "reference": found[0] if found else None})
    return out


def adjusted_json(hyp: Hypothesis, units: Units, model: gcomp.Adjusted | None,
                  fallback: dict[str, str] | None) -> dict[str, Any]:
    """The ``adjusted`` key of an entry: covariates, variance, risks, working model."""
    out: dict[str, Any] = {
        "covariates": _covariates_json(units),
        "variance": hyp.variance,
        "randomisation_strata": hyp.randomisation_strata,
        "missing_covariate": {g: sum(units.missing_covariate.get(g, {}).values())
                              for g in units.groups},
        "risks": None,
        "model": None,
        "fallback": fallback,
    }
    if model is None:
        return out
    (vaa, _), (_, vbb) = model.risk_covariance
    out["risks"] = [{"group": g, "risk": float(r), "standard_error": float(np.sqrt(var))}
                    for g, r, var in zip(units.groups, model.risks, (vaa, vbb), strict=True)]
    odds = model.model.conditional_odds_ratio
    out["model"] = {
        "terms": [{"term": t.name, "coefficient": float(t.coefficient),
                   "standard_error": float(t.standard_error)} for t in model.model.terms],
        "conditional_odds_ratio": {"value": float(odds.value),
                                   "ci": [float(odds.low), float(odds.high)],
                                   "level": float(odds.level)},
        "iterations": int(model.model.iterations),
    }
    return out


def run_adjusted(hyp: Hypothesis, units: Units, level: float, notes: list[Note],
                 unadjusted: Any) -> tuple[str, TestResult, Estimate | None, dict[str, Any]]:
    """The test that ran, its result, the estimate and the ``adjusted`` key.

    ``unadjusted(run_as)`` runs a test of the plan's vocabulary on the units' count table
    and returns (result, estimate): the fallback when the working model fails.
    """
    try:
        model = fit(hyp, units, level)
    except gcomp.ModelFailure as exc:
        reason = str(exc)
        run_as = hyp.model_copy(update={
            "test": hyp.fallback,
            "interval": v.INTERVALS_BY_MEASURE[hyp.measure][0]})
        notes.append(Note("model-fallback", f"{hyp.id}: the working model of {hyp.test} could "
                          f"not be used ({reason}); the pre-specified fallback {hyp.fallback} "
                          "ran unadjusted on the same units"))
        result, est = unadjusted(run_as)
        return (hyp.fallback, result, est,
                adjusted_json(hyp, units, None, {"test": hyp.fallback, "reason": reason}))
    return (hyp.test, adjusted_test(model, hyp), model.estimate,
            adjusted_json(hyp, units, model, None))


# --- the stratified score test ---

def _delta(hyp: Any) -> float:
    """The risk difference the stratified test is at: 0, or the non-inferiority margin."""
    return float(hyp.margin) if hyp.comparison == "non-inferiority" else 0.0


def stratified_score(strata: list[tuple[int, int, int, int]], hyp: Any) -> TestResult:
    """The stratified Miettinen–Nurminen score test, at the margin where there is one."""
    weights = hyp.weights or "cmh"
    if hyp.comparison == "equivalence":
        low, high = hyp.margin
        return margins.tost(
            sdiff.stratified_score_test(strata, weights=weights, delta=low,
                                        alternative="greater"),
            sdiff.stratified_score_test(strata, weights=weights, delta=high,
                                        alternative="less"))
    return sdiff.stratified_score_test(strata, weights=weights, delta=_delta(hyp),
                                       alternative=hyp.alternative)


STRATIFIED_SCORE_INTERVALS = {
    "stratified-miettinen-nurminen": sdiff.stratified_score_interval,
    "stratified-newcombe": sdiff.stratified_newcombe_interval,
}


def stratified_estimate(strata: list[tuple[int, int, int, int]], hyp: Any,
                        level: float) -> Estimate:
    return STRATIFIED_SCORE_INTERVALS[hyp.interval](strata, level, weights=hyp.weights or "cmh")


def stratified_json(strata: list[tuple[int, int, int, int]], hyp: Any,
                    notes: list[Note]) -> dict[str, Any]:
    """The ``stratified`` key: the weighting and each stratum's normalised weight (at the
    risk difference tested: 0, or the non-inferiority margin; under equivalence at 0), with a
    note where the miettinen-nurminen weights are not defined there."""
    weights = hyp.weights or "cmh"
    shares = sdiff.stratum_weights(strata, weights=weights, delta=_delta(hyp))
    if not all(math.isfinite(w) for w in shares):
        notes.append(Note("stratum-weight-undefined", f"{hyp.id}: at a risk difference of "
                          f"{_delta(hyp):g} a stratum's restricted variance is 0 (no events, or "
                          "only events, in both groups), so its miettinen-nurminen weight is "
                          "infinite: the statistic there is 0 and the test cannot reject; "
                          "cmh weights do not have this property"))
    return {"weights": weights,
            "stratum_weights": [float(w) if math.isfinite(w) else None for w in shares]}
