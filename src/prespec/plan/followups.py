"""The follow-up comparisons a hypothesis's ``then`` names: each group against the reference,
or every pair. The plan's summary words them and the run tests them from this one list."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan


def follow_ups(hyp: Hypothesis, plan: Plan) -> list[Any]:
    """The pairwise hypotheses of ``then``: each arm against the reference, or every pair."""
    groups = list(plan.data.groups)
    if hyp.then.pairwise == "reference":
        ref = plan.data.reference
        pairs = [(g, ref) for g in groups if g != ref]
    else:
        pairs = [(groups[j], groups[i]) for i in range(len(groups))
                 for j in range(i + 1, len(groups))]
    return [
        hyp.model_copy(update={
            "id": f"{hyp.id}:{a}-vs-{b}",
            "title": f"{a} vs {b} (follow-up of {hyp.id})",
            "compare": [a, b],
            "measure": "risk-difference",
            "interval": "newcombe",
            "then": None,
            "monte_carlo": None,
        })
        for a, b in pairs
    ]
