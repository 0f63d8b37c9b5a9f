"""The planned group-sequential design of each hypothesis with interim looks, for
``prespec design``: the boundaries at the planned fractions, the cumulative alpha spent, the
maximum inflation of the sample size and the expected sample size under the null and under
the design's assumed rates.

The fixed-sample size is the one :mod:`prespec.design.document` computes; a group-sequential
design needs ``inflation`` times that information at the last look (Jennison & Turnbull 2000,
ch. 2 and 7); the expected sizes are the expected information over the fixed one, times the
fixed size (the futility boundary followed when there is one, as a trial that stops for
futility would). The maths is :func:`prespec.stats.sequential.design`.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from prespec.plan.looks import sides

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan


def looks_design(plan: Plan, hyp: Hypothesis, alpha: float,
                 n_per_group: dict[str, int] | None) -> dict[str, Any] | None:
    """The design figures of one hypothesis's looks at its alpha share, or None."""
    from prespec.stats.sequential import design

    looks = hyp.looks
    if looks is None or looks.efficacy is None or plan.design is None or alpha <= 0:
        # (a Bayesian rule's looks are in its operating characteristics)
        return None
    fut = looks.futility
    got = design(looks.planned_fractions(), alpha=alpha, sides=sides(hyp),
                 efficacy=looks.efficacy, gamma=looks.gamma,
                 futility=fut.spending if fut else None,
                 futility_gamma=fut.gamma if fut else None, power=float(plan.design.power))
    b = got.boundaries
    out: dict[str, Any] = {
        "boundaries": [{"look": k + 1, "fraction": b.fractions[k], "z": b.z[k],
                        "nominal_p": b.nominal_p[k], "alpha_spent": b.alpha_spent[k]}
                       for k in range(len(b.z))],
        "futility": None if b.futility_z is None else [
            {"look": k + 1, "z": b.futility_z[k], "beta_spent": (b.beta_spent or ())[k]}
            for k in range(len(b.z))],
        "efficacy": looks.efficacy,
        "inflation": got.inflation,
        "expected_fraction_null": got.expected_fraction_null,
        "expected_fraction_alternative": got.expected_fraction_alternative,
        "sequential_power": got.power,
        "n_max_per_group": None,
        "expected_n_null": None,
        "expected_n_alternative": None,
    }
    if n_per_group:
        fixed = sum(n_per_group.values())
        out["n_max_per_group"] = {g: math.ceil(n * got.inflation - 1e-9)
                                  for g, n in n_per_group.items()}
        out["expected_n_null"] = fixed * got.expected_fraction_null
        out["expected_n_alternative"] = fixed * got.expected_fraction_alternative
    return out


def add_looks(plan: Plan, doc: dict[str, Any]) -> None:
    """Add ``boundaries`` and the sequential figures to each design entry with looks."""
    by_id = {h.id: h for h in plan.hypotheses}
    for entry in doc["hypotheses"]:
        hyp = by_id.get(entry["id"])
        if hyp is None or hyp.looks is None:
            continue
        found = looks_design(plan, hyp, float(entry["alpha"]), entry.get("n_per_group"))
        if found is not None:
            entry.update(found)


def looks_lines(entry: dict[str, Any]) -> list[str]:
    """The terminal lines of one hypothesis's looks (none without)."""
    if "boundaries" not in entry:
        return []
    lines = [f"      interim looks ({entry['efficacy']}): look, fraction, efficacy z, nominal p, "
             "cumulative alpha spent" + (", futility z" if entry["futility"] else "")
             + " (z in the direction of benefit)"]
    for row in entry["boundaries"]:
        fut = ""
        if entry["futility"]:
            fut = f"  {entry['futility'][row['look'] - 1]['z']:7.3f}"
        lines.append(f"        {row['look']}  {row['fraction']:.4f}  {row['z']:7.4f}  "
                     f"{row['nominal_p']:.5f}  {row['alpha_spent']:.5f}{fut}")
    lines.append(f"      maximum sample size: {entry['inflation']:.4f} × the fixed-sample size "
                 "(inflation factor)")
    if entry["n_max_per_group"]:
        n = ", ".join(f"{g} {v}" for g, v in entry["n_max_per_group"].items())
        lines.append(f"      maximum analysed n per group: {n}")
        lines.append(f"      expected total analysed n: {entry['expected_n_null']:.1f} under the "
                     f"null, {entry['expected_n_alternative']:.1f} at the assumed rates")
    else:
        lines.append(f"      expected information: {entry['expected_fraction_null']:.4f} (null), "
                     f"{entry['expected_fraction_alternative']:.4f} (assumed rates) × the "
                     "fixed-sample one")
    return lines
