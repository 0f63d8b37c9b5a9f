"""An interim look of a Bayesian rule (test: posterior-probability with ``looks``;
docs/bayes.md, "Interim looks").

At an interim look the hypothesis reports the posterior probability of its event and the
predictive probability of meeting its rule at the final analysis (the planned sizes,
data.planned_n): each group's future events are beta-binomial given its posterior so far, and
the final rule is the region where the posterior probability reaches ``threshold``
(:func:`prespec.stats.bayes.predictive_probability`, exact). The look stops for success where
the posterior probability reaches ``stop_for_success``; futility may be considered (the bound
is non-binding) where the predictive probability falls below ``stop_for_futility``. At the
final look the rule is the hypothesis's own: the posterior probability against ``threshold``.

The decisions match the regions of the design's exact operating characteristics
(:func:`prespec.stats.bayes.sequential_operating_characteristics`): the same comparison with
the same tie tolerance, so a look decides as the design counted it.

References
----------
Lee JJ, Liu DD. A predictive probability design for phase II cancer clinical trials. Clinical
Trials 2008; 5: 93-106.
Berry SM, Carlin BP, Lee JJ, Müller P. Bayesian Adaptive Methods for Clinical Trials. Chapman &
Hall/CRC, 2010, ch. 4.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from prespec.common.departures import Note
from prespec.errors import BadInput
from prespec.plan.looks import bayes_look_sizes, planned_total
from prespec.stats import bayes

if TYPE_CHECKING:
    from prespec.analysis.looks import LookRun
    from prespec.plan.model import Hypothesis, Plan

#: The decisions of a Bayesian look.
DECISIONS: tuple[str, ...] = ("continue", "stop-for-success", "futility-may-be-considered",
                              "rule-met-at-final", "rule-not-met-at-final")
#: What a Bayesian look's log entry records of the hypothesis (the next look's history).
HISTORY_KEYS: tuple[str, ...] = ("id", "analysed", "fraction", "estimate",
                                 "posterior_probability", "predictive_probability", "crossed")
#: The relative gap between a group's analysed and planned size at a look beyond which the
#: look is said to be off its planned sizes (the design's figures hold at the planned sizes).
SIZE_TOLERANCE = 0.05


def is_bayesian(block: dict[str, Any]) -> bool:
    """Whether a results.json ``looks`` block is a Bayesian rule's."""
    return block.get("rule") == "bayesian"


def _predictive(hyp: Hypothesis, events: list[int], totals: list[int], final: list[int],
                priors: list[tuple[float, float]]) -> float:
    if hyp.kind == "single":
        return bayes.predictive_probability_single(
            events[0], totals[0], final[0], priors[0], null_rate=float(hyp.null_rate),
            alternative=hyp.alternative, threshold=float(hyp.threshold))
    return bayes.predictive_probability(
        events[0], totals[0], events[1], totals[1], final[0], final[1], priors[0], priors[1],
        margin=float(hyp.margin or 0.0), alternative=hyp.alternative,
        threshold=float(hyp.threshold))


def _check_sizes(hyp: Hypothesis, groups: list[str], totals: list[int], final: list[int],
                 run: LookRun) -> None:
    """An interim look must come before every group's final size."""
    if run.final:
        return
    done = [f"{g} {n} of {f}" for g, n, f in zip(groups, totals, final, strict=True) if n >= f]
    if done:
        raise BadInput(f"{hyp.id}: look {run.look} of {run.of} has reached the planned final "
                       f"size of {', '.join(done)}; the predictive probability is of success "
                       f"at the final sizes, so run it as the final analysis (--look {run.of})")


def _statement(hyp: Hypothesis, entry: dict[str, Any], run: LookRun, decision: str,
               predictive: float | None) -> str:
    """The sentence of an interim look: what the probabilities are against the look's own
    thresholds (the final ``threshold`` does not decide at an interim look)."""
    looks = hyp.looks
    probability = float(entry["posterior_probability"])
    text = (f"At look {run.look} of {run.of}, the posterior probability of the rule's event is "
            f"{probability:.4f}")
    if looks.stop_for_success is not None:
        reached = "reaches" if decision == "stop-for-success" else "does not reach"
        text += f", which {reached} the interim success threshold {looks.stop_for_success:g}"
    text += (f"; the predictive probability of meeting the rule (posterior probability at "
             f"least {hyp.threshold:g}) at the final analysis is {predictive:.4f}")
    if looks.stop_for_futility is not None:
        below = "below" if decision == "futility-may-be-considered" else "not below"
        text += f", {below} the futility threshold {looks.stop_for_futility:g} (non-binding)"
    return text + f". Decision: {decision.replace('-', ' ')}."


def bayes_look(plan: Plan, hyp: Hypothesis, entry: dict[str, Any], run: LookRun,
               notes: list[Note]) -> dict[str, Any]:
    """The ``looks`` block of a Bayesian rule at this look. At an interim look the entry's
    ``threshold`` becomes ``stop_for_success`` (null without one) and ``reject`` whether the
    look stops for success, and the sentence says so; at the final look they stay the rule's."""
    looks = hyp.looks
    groups = list(hyp.compare)
    table = entry["table"]
    events = [int(x) for x in table["events"]]
    totals = [int(n) for n in table["totals"]]
    planned = bayes_look_sizes(plan, hyp) or []
    final = [sizes[-1] for sizes in planned]
    _check_sizes(hyp, groups, totals, final, run)
    priors = [(float(hyp.prior[g][0]), float(hyp.prior[g][1])) for g in groups]
    probability = float(entry["posterior_probability"])
    total = planned_total(plan, hyp)
    analysed = sum(totals)
    predictive = None
    if run.final:
        crossed = bayes.meets_threshold(probability, float(hyp.threshold))
        decision = "rule-met-at-final" if crossed else "rule-not-met-at-final"
    else:
        predictive = _predictive(hyp, events, totals, final, priors)
        crossed = looks.stop_for_success is not None and bayes.meets_threshold(
            probability, float(looks.stop_for_success))
        futile = looks.stop_for_futility is not None and \
            predictive < float(looks.stop_for_futility) - bayes.TIE_TOLERANCE
        decision = ("stop-for-success" if crossed else
                    "futility-may-be-considered" if futile else "continue")
        entry["threshold"] = looks.stop_for_success
        entry["reject"] = crossed
        for row in entry["bayesian"]["sensitivity"]:  # against the look's threshold too
            row["rule_met"] = None if looks.stop_for_success is None else \
                bayes.meets_threshold(float(row["posterior_probability"]),
                                      float(looks.stop_for_success))
        entry["bayesian"]["statement"] = _statement(hyp, entry, run, decision, predictive)
    past = [(p.look, p.hypotheses[hyp.id]) for p in run.history if hyp.id in p.hypotheses]
    stopped = [k for k, h in past if h.get("crossed")]
    if stopped:
        notes.append(Note("look-after-stop", f"{hyp.id}: look(s) {', '.join(map(str, stopped))} "
                          f"stopped for success; the trial continued to look {run.look}"))
    planned_now = [sizes[run.look - 1] for sizes in planned]
    off = [f"{g} {n} (planned {p})" for g, n, p in zip(groups, totals, planned_now, strict=True)
           if abs(n - p) > SIZE_TOLERANCE * p]
    if off:
        notes.append(Note("bayes-look-sizes", f"{hyp.id}: look {run.look} of {run.of} analysed "
                          f"{', '.join(off)}; the design's operating characteristics hold at "
                          "the planned sizes"))
    history = [{"look": k, **{key: h.get(key) for key in HISTORY_KEYS if key != "id"}}
               for k, h in past]
    block = {
        "rule": "bayesian",
        "look": run.look,
        "of": run.of,
        "planned_fractions": looks.planned_fractions(),
        "planned_sizes": dict(zip(groups, planned, strict=True)),
        "planned_total": total,
        "analysed": analysed,
        "observed_fraction": analysed / total if total else None,
        "sizes": dict(zip(groups, totals, strict=True)),
        "estimate": entry["estimate"]["value"],
        "posterior_probability": probability,
        "threshold": float(hyp.threshold),
        "stop_for_success": looks.stop_for_success,
        "stop_for_futility": looks.stop_for_futility,
        "predictive_probability": predictive,
        "crossed": crossed,
        "decision": decision,
        "history": history,
    }
    return block
