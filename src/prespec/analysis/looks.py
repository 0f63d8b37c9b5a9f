"""Interim looks at run time: which look this is, what earlier looks found, the boundaries
recomputed at the information observed, the decision and the inference adjusted for stopping.

The history of a hypothesis (earlier looks' information fractions and z statistics) is read
from the audit log: the ``look`` entries (and a ``run`` entry of the final analysis) of the same
lock version carry them in their details, so the sequence is auditable from the log alone.

Scale: for a comparison [a, b], θ = p_a − p_b, the pooled z of the two-proportion test (the
signed root of the uncorrected Pearson X²), and I = 1 / (p̄(1 − p̄)(1/n_a + 1/n_b)), so that
Z = θ̂·sqrt(I) and Z_k ~ N(θ·sqrt(I_k), 1) as the boundaries assume (Jennison & Turnbull 2000,
ch. 3). The observed information fraction is the analysed total over the planned total.

Spending-function boundaries (Lan & DeMets 1983) are recomputed at the fractions actually
observed, the final look spending all that is left; classical boundaries (O'Brien & Fleming
1979; Pocock 1977) hold only at their planned equally spaced looks, and a look away from its
planned fraction is the departure ``look-off-plan``. Once a boundary is crossed (and always at
the final look) the inference is adjusted by the stage-wise ordering (Armitage 1957; Tsiatis,
Rosner & Mehta 1984; Jennison & Turnbull 2000, ch. 8); repeated confidence intervals are
given at every look (Jennison & Turnbull 1989).

References
----------
Jennison C, Turnbull BW. Group Sequential Methods with Applications to Clinical Trials.
Chapman & Hall/CRC, 2000.
Jennison C, Turnbull BW. Interim analyses: the repeated confidence interval approach. Journal
of the Royal Statistical Society B 1989; 51: 305-361.
Lan KKG, DeMets DL. Discrete sequential boundaries for clinical trials. Biometrika 1983; 70:
659-663.
Tsiatis AA, Rosner GL, Mehta CR. Exact confidence intervals following a group sequential test.
Biometrics 1984; 40: 797-803.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from prespec.analysis.bayes_looks import HISTORY_KEYS as BAYES_HISTORY_KEYS
from prespec.analysis.bayes_looks import bayes_look, is_bayesian
from prespec.common.departures import Departure, Note
from prespec.errors import BadInput
from prespec.plan.looks import CLASSICAL, CLASSICAL_TOLERANCE, planned_total, sides
from prespec.plan.vocabulary import BAYESIAN_TESTS

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

#: The decisions of a look.
DECISIONS: tuple[str, ...] = (
    "continue",
    "stop-for-efficacy",
    "futility-may-be-considered",
    "reject-at-final",
    "not-rejected-at-final",
    "rejected-earlier",
    "not-computable",
)
#: The per-hypothesis keys a look's log entry records.
HISTORY_KEYS: tuple[str, ...] = ("id", "analysed", "fraction", "z", "information", "estimate",
                                  "crossed")


@dataclass(frozen=True)
class PastLook:
    """One earlier look as its log entry records it."""

    look: int
    seq: int
    action: str
    data: str | None
    hypotheses: dict[str, dict[str, Any]]  # id -> {analysed, fraction, z, information, estimate}


@dataclass(frozen=True)
class LookRun:
    """The look being run, with what the log holds of the looks of the same lock version."""

    look: int
    of: int
    history: tuple[PastLook, ...]  # the first entry of each earlier look number, in order
    repeated: tuple[PastLook, ...]  # earlier entries of this same look number
    later: tuple[int, ...]  # look numbers above this one already run

    @property
    def final(self) -> bool:
        return self.look == self.of


def number_of_looks(plan: Plan) -> int | None:
    """The number of looks the plan names (the same for every hypothesis with looks), or None."""
    for hyp in plan.hypotheses:
        if hyp.looks is not None:
            return len(hyp.looks.planned_fractions())
    return None


def past_looks(entries: list[dict[str, Any]], fingerprint: str) -> list[PastLook]:
    """Every look recorded in the log for the plan ``fingerprint``, in log order."""
    out = []
    for e in entries:
        details = e.get("details") if isinstance(e.get("details"), dict) else {}
        number = details.get("look")
        if e.get("action") not in ("look", "run") or e.get("plan") != fingerprint \
                or not isinstance(number, int) or isinstance(number, bool):
            continue
        hyps = {str(h.get("id")): dict(h) for h in details.get("hypotheses") or []
                if isinstance(h, dict)}
        out.append(PastLook(number, int(e["seq"]), str(e["action"]), e.get("data"), hyps))
    return out


def look_run(plan: Any, entries: list[dict[str, Any]], fingerprint: str,
             look: int | None) -> LookRun | None:
    """The look to run: ``look``, or the final one for a plain run of a plan with looks;
    None for a plan without looks run plainly. ``--look`` on a plan without looks, or a look
    number the plan does not name, is bad input."""
    count = number_of_looks(plan)
    if count is None:
        if look is not None:
            raise BadInput(f"--look {look}: the plan names no interim looks (no hypothesis has "
                           "looks:); run it without --look")
        return None
    if look is None:
        look = count
    if isinstance(look, bool) or not 1 <= look <= count:
        raise BadInput(f"--look {look}: the plan names looks 1 to {count}")
    done = past_looks(entries, fingerprint)
    first: dict[int, PastLook] = {}
    for p in done:
        first.setdefault(p.look, p)
    history = tuple(first[k] for k in sorted(first) if k < look)
    repeated = tuple(p for p in done if p.look == look)
    later = tuple(sorted(k for k in first if k > look))
    return LookRun(look, count, history, repeated, later)


def order_departures(run: LookRun) -> list[Departure]:
    """``look-repeated``, ``look-out-of-order`` and ``final-without-looks`` of this look."""
    out: list[Departure] = []
    name = "the final analysis" if run.final else f"look {run.look} of {run.of}"
    if run.repeated:
        entries = ", ".join(str(p.seq) for p in run.repeated)
        out.append(Departure("look-repeated", f"{name} was already run (log entry {entries}); "
                             "it is run again, and the earlier result stands in the history",
                             f"look {run.look} run once", f"look {run.look} run "
                             f"{len(run.repeated) + 1} times"))
    ran = [p.look for p in run.history]
    missing = [k for k in range(1, run.look) if k not in ran]
    shown = ", ".join(str(k) for k in ran) or "none"
    if run.final and missing:
        out.append(Departure("final-without-looks", f"the final analysis is run without interim "
                             f"look(s) {', '.join(map(str, missing))} of the plan",
                             f"looks 1 to {run.of - 1} run before the final analysis",
                             f"interim looks run: {shown}"))
    elif missing or run.later:
        what = []
        if missing:
            what.append(f"look(s) {', '.join(map(str, missing))} not yet run")
        if run.later:
            what.append(f"look(s) {', '.join(map(str, run.later))} already run")
        expected = (f"looks 1 to {run.look - 1} run before look {run.look}, none after"
                    if run.look > 1 else "no later look run before look 1")
        found = ", ".join(str(k) for k in sorted({*ran, *run.later})) or "none"
        out.append(Departure("look-out-of-order", f"look {run.look} of {run.of} is run with "
                             + " and ".join(what), expected, f"looks run: {found}"))
    return out


def _direction(plan: Plan, hyp: Hypothesis) -> int:
    """+1 when benefit is a higher first-group proportion, −1 when lower: the alternative, or
    for a two-sided test the design's assumed rates (+1 without them)."""
    if hyp.alternative == "greater":
        return 1
    if hyp.alternative == "less":
        return -1
    design = plan.design
    if design is not None:
        a, b = hyp.compare
        if a in design.assumed and b in design.assumed and design.assumed[a] < design.assumed[b]:
            return -1
    return 1


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def observe(events: list[int], totals: list[int]) -> dict[str, float | None]:
    """θ̂ = p_a − p_b, the pooled z and the information I = 1 / var₀(θ̂) of a 2×2 table."""
    from prespec.stats.proportions import two_proportion_z

    (x1, x2), (n1, n2) = events, totals
    if n1 <= 0 or n2 <= 0:
        return {"estimate": None, "z": None, "information": None}
    pooled = (x1 + x2) / (n1 + n2)
    variance = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2)
    z = two_proportion_z(x1, n1, x2, n2).statistic
    return {"estimate": x1 / n1 - x2 / n2, "z": _finite(z),
            "information": 1.0 / variance if variance > 0 else None}


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _bounds_for(
    plan: Plan, hyp: Hypothesis, fractions: list[float], final: bool, alpha: float | None = None
) -> Any:
    """The planned boundaries and those at ``fractions``, at ``alpha`` (default the plan's);
    futility with the drift of the planned design."""
    from prespec.stats.sequential import boundaries

    looks = hyp.looks
    fut = looks.futility
    common: dict[str, Any] = {
        "alpha": float(plan.alpha if alpha is None else alpha),
        "sides": sides(hyp),
        "efficacy": looks.efficacy,
        "gamma": looks.gamma,
        "futility": fut.spending if fut else None,
        "futility_gamma": fut.gamma if fut else None,
        "power": plan.design.power if fut is not None else None,
    }
    planned = boundaries(looks.planned_fractions(), **common)
    if looks.efficacy in CLASSICAL:
        return planned, planned
    return planned, boundaries(fractions, final=final, drift=planned.drift, **common)


def hypothesis_look(
    plan: Plan,
    hyp: Hypothesis,
    entry: dict[str, Any],
    run: LookRun,
    notes: list[Note],
    graph: dict[str, Any] | None = None,
) -> tuple[dict[str, Any], list[Departure]]:
    """The ``looks`` block of one hypothesis at this look, and its ``look-off-plan``
    departures; the entry's ``p_adjusted`` and ``reject`` become the sequential ones.

    ``graph`` (from :func:`graph_decisions`): the hypothesis's level in the graphical
    procedure and the look it was rejected at; its boundaries are then at that level, the
    decision is the procedure's, and ``p_adjusted`` is null. The repeated confidence
    intervals and the adjusted inference stay at the plan's alpha (intervals are never
    adjusted for multiplicity)."""
    from prespec.analysis.hypotheses import interval_level

    looks = hyp.looks
    table = entry["table"]
    total = planned_total(plan, hyp)
    analysed = int(sum(table["totals"]))
    now = observe(list(table["events"]), list(table["totals"]))
    fraction = analysed / total if total else math.nan
    past = [(p.look, p.hypotheses[hyp.id]) for p in run.history if hyp.id in p.hypotheses]
    numbers = [k for k, _ in past] + [run.look]
    observed = [float(h.get("fraction")) for _, h in past] + [fraction]
    used = observed[:-1] + [1.0 if run.final else fraction]
    classical = looks.efficacy in CLASSICAL
    planned_t = looks.planned_fractions()
    if not classical:
        _check_fractions(hyp.id, numbers, used, run)
    planned, bounds = _bounds_for(plan, hyp, used, run.final)
    decide = bounds  # the boundaries that decide: at the graph level under a procedure
    if graph is not None:
        decide = (
            _bounds_for(plan, hyp, used, run.final, graph["level"])[1]
            if graph["level"] > 0
            else None
        )
    departures: list[Departure] = []
    if classical:
        target = planned_t[run.look - 1]
        if abs(fraction - target) > CLASSICAL_TOLERANCE:
            departures.append(Departure(
                "look-off-plan", f"{hyp.id}: look {run.look} of {run.of} is at information "
                f"fraction {_fmt(fraction)} ({analysed} of {total}), its {looks.efficacy} "
                f"boundary is planned at {_fmt(target)}; classical boundaries hold only at their "
                f"planned equally spaced looks (tolerance {CLASSICAL_TOLERANCE:g})",
                _fmt(target), _fmt(fraction)))
        index = [k - 1 for k in numbers]
    else:
        index = list(range(len(numbers)))
    rows = _boundary_rows(numbers, index, observed, bounds, decide)
    direction = _direction(plan, hyp)
    z = now["z"]
    b = None if decide is None else decide.z[index[-1]]
    level = interval_level(float(plan.alpha), hyp.alternative, hyp.comparison)
    earlier = (
        graph is not None and graph["rejected_at"] is not None and graph["rejected_at"] < run.look
    )
    crossed, decision = _decide(hyp, z, b, direction, run, graph, decide, index[-1], notes)
    stopped_before = [k for k, h in past if h.get("crossed")] if graph is None else []
    if stopped_before:
        notes.append(Note("look-after-stop", f"{hyp.id}: look(s) {', '.join(map(str, stopped_before))} "
                          f"crossed the efficacy boundary; the trial continued to look {run.look}"))
    complete = numbers == list(range(1, run.look + 1))
    history = [{"look": k, **{key: h.get(key) for key in HISTORY_KEYS if key != "id"}}
               for k, h in past]
    values = [*(h for _, h in past), {**now, "analysed": analysed}]
    adjusted = None
    if z is not None and not earlier and (crossed or run.final):
        zs = [h.get("z") for h in values]
        infos = [h.get("information") for h in values]
        if not complete or None in zs or None in infos:
            notes.append(Note("no-adjusted-inference", f"{hyp.id}: the adjusted inference needs "
                              "the z statistic of every look up to this one; some are missing"))
        else:
            adjusted = _adjusted(hyp, zs, infos, bounds, direction, level, run, notes)
    repeated = _repeated(values, numbers, [bounds.z[i] for i in index])
    block = {
        "look": run.look,
        "of": run.of,
        "efficacy": looks.efficacy,
        "gamma": looks.gamma,
        "futility": None if looks.futility is None else looks.futility.model_dump(mode="json"),
        "sides": sides(hyp),
        "direction": direction,
        "planned_fractions": planned_t,
        "planned_total": total,
        "analysed": analysed,
        "observed_fraction": fraction,
        "z": z,
        "information": now["information"],
        "estimate": now["estimate"],
        "boundary": b,
        "futility_boundary": None
        if decide is None or decide.futility_z is None or run.final
        else decide.futility_z[index[-1]],
        "crossed": crossed,
        "decision": decision,
        "boundaries": rows,
        "planned_boundaries": [{"look": k + 1, "fraction": planned.fractions[k],
                                "z": planned.z[k], "nominal_p": planned.nominal_p[k],
                                "alpha_spent": planned.alpha_spent[k]}
                               for k in range(len(planned.fractions))],
        "history": history,
        "adjusted": adjusted,
        "repeated_ci": [{**r, "level": level} for r in repeated],
        "scale": "risk difference (first group minus second); z is the pooled two-proportion z",
        "graph": graph,
    }
    entry["p_adjusted"] = None if adjusted is None or graph is not None else adjusted["p_value"]
    entry["reject"] = crossed
    return block, departures


def _boundary_rows(numbers: list[int], index: list[int], observed: list[float], bounds: Any,
                   decide: Any) -> list[dict[str, Any]]:
    """One row per look: the fraction the boundaries use, the one observed, and the deciding
    boundaries (none at level 0 in a graph)."""
    rows = []
    for j, (k, i) in enumerate(zip(numbers, index, strict=True)):
        d = decide
        rows.append({
            "look": k,
            "fraction": bounds.fractions[i],
            "observed_fraction": observed[j],
            "z": None if d is None else d.z[i],
            "nominal_p": None if d is None else d.nominal_p[i],
            "alpha_spent": 0.0 if d is None else d.alpha_spent[i],
            "futility_z": None if d is None or d.futility_z is None else d.futility_z[i],
            "beta_spent": None if d is None or d.beta_spent is None else d.beta_spent[i],
        })
    return rows


def _decide(hyp: Hypothesis, z: float | None, b: float | None, direction: int, run: LookRun,
            graph: dict[str, Any] | None, decide: Any, last: int,
            notes: list[Note]) -> tuple[bool | None, str]:
    """Whether the efficacy boundary is crossed (the graph's rejection under a procedure), and
    the decision of this look."""
    if graph is not None and graph["rejected_at"] is not None and graph["rejected_at"] < run.look:
        return True, "rejected-earlier"
    if z is None:
        notes.append(Note("not-computable", f"{hyp.id}: the z statistic of look {run.look} is "
                          "not defined (no events, or all events, in both groups); no decision"))
        return None, "not-computable"
    if graph is not None:
        crossed = graph["rejected_at"] == run.look
    else:
        crossed = abs(z) >= b if sides(hyp) == 2 else direction * z >= b
    if run.final:
        return crossed, "reject-at-final" if crossed else "not-rejected-at-final"
    if crossed:
        return True, "stop-for-efficacy"
    if decide is not None and decide.futility_z is not None \
            and direction * z <= decide.futility_z[last]:
        return False, "futility-may-be-considered"
    return False, "continue"


def _repeated(values: list[dict[str, Any]], numbers: list[int],
              bound_z: list[float]) -> list[dict[str, Any]]:
    """The repeated confidence interval of every look (Jennison & Turnbull 1989)."""
    from prespec.stats.sequential import repeated_ci

    out = []
    for j, h in enumerate(values):
        est, info = h.get("estimate"), h.get("information")
        if est is None or info is None:
            out.append({"look": numbers[j], "estimate": est, "ci": [None, None]})
            continue
        low, high = repeated_ci(float(est), float(info), bound_z[j])
        out.append({"look": numbers[j], "estimate": est, "ci": [_finite(low), _finite(high)]})
    return out


def _adjusted(hyp: Hypothesis, zs: list[Any], infos: list[Any], bounds: Any, direction: int,
              level: float, run: LookRun, notes: list[Note]) -> dict[str, Any] | None:
    """The stage-wise inference on the scale oriented so that the crossing is upward: the
    direction of benefit for a one-sided test, the sign of the last z for a two-sided one
    (its boundaries are symmetric), turned back to the first-minus-second scale."""
    from prespec.stats.sequential import stagewise_inference

    if sides(hyp) == 2:
        direction = -1 if float(zs[-1]) < 0 else 1
    try:
        got = stagewise_inference([direction * float(v) for v in zs], [float(v) for v in infos],
                                  bounds, level=level)
    except ValueError as exc:
        notes.append(Note("no-adjusted-inference", f"{hyp.id}: no adjusted inference at look "
                          f"{run.look}: {exc}"))
        return None
    ci = sorted((direction * got.ci[0], direction * got.ci[1]))
    return {"measure": "risk-difference", "ordering": "stage-wise",
            "p_value": _finite(got.p_value), "estimate": _finite(direction * got.estimate),
            "ci": [_finite(ci[0]), _finite(ci[1])], "level": level, "look": run.look}


def _check_fractions(hid: str, numbers: list[int], used: list[float], run: LookRun) -> None:
    for j in range(1, len(used)):
        if used[j] <= used[j - 1]:
            raise BadInput(f"{hid}: look {numbers[j]}: the observed information fraction "
                           f"{_fmt(used[j])} is not above look {numbers[j - 1]}'s "
                           f"{_fmt(used[j - 1])}: the data of a later look hold fewer analysed "
                           "units")
    if not run.final and not 0 < used[-1] < 1:
        raise BadInput(f"{hid}: look {run.look} of {run.of}: the observed information fraction "
                       f"is {_fmt(used[-1])}, not below 1 (the planned total); run it as the "
                       f"final analysis (--look {run.of})")


def family(plan: Plan) -> list[Any] | None:
    """The hypotheses of the multiplicity family when the procedure must run over the looks
    (a method other than ``none``, more than one member, some with looks); else None."""
    method = plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical"
    members = [h for h in plan.hypotheses if not h.outside_multiplicity]
    if method == "none" or len(members) < 2 or all(h.looks is None for h in members):
        return None
    return members


def _graph_of(plan: Plan, members: list[Any]) -> tuple[str, list[float], list[list[float]]]:
    from prespec.stats.graphlooks import family_graph

    mult = plan.multiplicity
    if isinstance(mult, str):
        return (mult, *family_graph(mult, len(members)))
    ids = [h.id for h in members]
    weights = [float(mult.weights.get(i, 0.0)) for i in ids]
    transitions = [[float(mult.transitions.get(a, {}).get(b, 0.0)) for b in ids] for a in ids]
    return "graphical", weights, transitions


def _series(
    plan: Any, hyp: Hypothesis, entry: dict[str, Any], run: LookRun
) -> tuple[list[int], list[float], list[float | None]]:
    """The look numbers observed, the fractions the boundaries use, and the z statistics."""
    total = planned_total(plan, hyp)
    table = entry["table"]
    fraction = int(sum(table["totals"])) / total if total else math.nan
    past = [(p.look, p.hypotheses[hyp.id]) for p in run.history if hyp.id in p.hypotheses]
    numbers = [k for k, _ in past] + [run.look]
    used = [float(h.get("fraction")) for _, h in past] + [1.0 if run.final else fraction]
    zs = [h.get("z") for _, h in past] + [
        observe(list(table["events"]), list(table["totals"]))["z"]
    ]
    if hyp.looks.efficacy not in CLASSICAL:
        _check_fractions(hyp.id, numbers, used, run)
    return numbers, used, zs


def graph_decisions(
    plan: Plan, members: list[Any], entries: dict[str, dict[str, Any]], run: LookRun
) -> dict[str, dict[str, Any]]:
    """The graphical procedure over the looks so far (Maurer & Bretz 2013): per member, its
    level at the end of this look (at rejection, for a rejected one) and the look of its
    rejection. A member without looks is tested once, at the final analysis, by its p-value."""
    from prespec.stats.graphlooks import graph_over_looks
    from prespec.stats.sequential import boundaries

    method, weights, transitions = _graph_of(plan, members)
    series = {h.id: _series(plan, h, entries[h.id], run) for h in members if h.looks is not None}
    cache: dict[tuple[int, float, int], bool] = {}

    def crosses(i: int, level: float, k: int) -> bool:
        key = (i, level, k)
        if key not in cache:
            cache[key] = _crosses(members[i], level, k)
        return cache[key]

    def _crosses(hyp: Hypothesis, level: float, k: int) -> bool:
        if hyp.looks is None:
            p = entries[hyp.id].get("p_value")
            return run.final and k == run.look and p is not None and p <= level
        numbers, used, zs = series[hyp.id]
        upto = len([n for n in numbers if n <= k])
        if upto == 0:
            return False
        looks = hyp.looks
        common = {"alpha": level, "sides": sides(hyp), "efficacy": looks.efficacy}
        if looks.efficacy in CLASSICAL:
            planned = boundaries(looks.planned_fractions(), **common)
            bz = [planned.z[n - 1] for n in numbers[:upto]]
        else:
            final = run.final and numbers[upto - 1] == run.look
            bz = list(boundaries(used[:upto], gamma=looks.gamma, final=final, **common).z)
        direction = _direction(plan, hyp)
        return any(
            z is not None and (abs(z) >= b if sides(hyp) == 2 else direction * z >= b)
            for z, b in zip(zs[:upto], bz, strict=True)
        )

    result = graph_over_looks(weights, transitions, float(plan.alpha), run.look, crosses)
    initial = dict(zip([h.id for h in members], weights, strict=True))
    return {
        h.id: {
            "method": method,
            "initial_level": initial[h.id] * float(plan.alpha),
            "level": result.levels[i],
            "rejected_at": result.rejected_at(i),
            "order": next(
                (n + 1 for n, r in enumerate(result.rejections) if r.hypothesis == i), None
            ),
        }
        for i, h in enumerate(members)
    }


def apply_looks(
    plan: Plan, hypotheses: list[dict[str, Any]], run: LookRun, notes: list[Note]
) -> list[Departure]:
    """Add the ``looks`` block to every hypothesis with looks; at an interim look, the
    hypotheses without looks are shown but not tested. With a multiplicity family, the
    graphical procedure runs over the looks (:func:`graph_decisions`). Returns the
    departures of this look."""
    departures = order_departures(run)
    by_id = {h.id: h for h in plan.hypotheses}
    members = family(plan)
    graph: dict[str, dict[str, Any]] = {}
    if members is not None:
        main = {e["id"]: e for e in hypotheses if e.get("parent") is None}
        graph = graph_decisions(plan, members, main, run)
        notes.append(
            Note(
                "graph-over-looks",
                f"{graph[members[0].id]['method']} over the "
                "interim looks (Maurer and Bretz 2013): each hypothesis is tested "
                "with its boundaries at its current level in the graph; decisions "
                "come from the boundaries, so p_adjusted is null",
            )
        )
    untested = []
    for entry in hypotheses:
        hyp = by_id.get(entry["id"]) if entry.get("parent") is None else None
        if hyp is not None and hyp.looks is not None and hyp.test in BAYESIAN_TESTS:
            entry["looks"] = bayes_look(plan, hyp, entry, run, notes)  # no departures of its own
        elif hyp is not None and hyp.looks is not None:
            block, found = hypothesis_look(plan, hyp, entry, run, notes, graph.get(hyp.id))
            entry["looks"] = block
            departures.extend(found)
        elif hyp is not None and hyp.id in graph and run.final:
            entry["p_adjusted"] = None
            entry["reject"] = graph[hyp.id]["rejected_at"] is not None
            entry["graph"] = graph[hyp.id]
        elif not run.final and entry.get("role") != "exploratory":
            entry["p_adjusted"] = None
            entry["reject"] = None
            if isinstance(entry.get("bayesian"), dict):  # its sentence would decide the rule
                entry["bayesian"]["statement"] = (
                    f"At look {run.look} of {run.of} the posterior probability is shown "
                    f"({float(entry['posterior_probability']):.4f}), not held against the "
                    "threshold: the rule has no interim looks and is decided at the final "
                    "analysis.")
            untested.append(str(entry["id"]))
    if untested:
        notes.append(Note("not-tested-at-interim", f"{', '.join(untested)}: no interim looks are "
                          f"planned, so at look {run.look} of {run.of} the result is shown but not "
                          "tested (no adjusted p-value, no decision); it is tested at the final "
                          "analysis"))
    return departures


def look_details(results: dict[str, Any]) -> dict[str, Any] | None:
    """What a look's log entry records: the look, and per hypothesis with looks its analysed
    total, observed fraction, z, information, estimate and whether it crossed."""
    hyps = [h for h in results.get("hypotheses", []) if isinstance(h.get("looks"), dict)]
    if not hyps:
        return None
    first = hyps[0]["looks"]
    return {"look": first["look"], "of": first["of"],
            "hypotheses": [_recorded(h) for h in hyps]}


def _recorded(hyp: dict[str, Any]) -> dict[str, Any]:
    """What a look's log entry records of one hypothesis: a Bayesian rule's posterior and
    predictive probabilities, else the z statistic and its information."""
    block = hyp["looks"]
    keys = BAYES_HISTORY_KEYS if is_bayesian(block) else HISTORY_KEYS
    named = {"id": hyp["id"], "fraction": block["observed_fraction"]}
    return {key: named[key] if key in named else block[key] for key in keys}


def look_problem(entries: list[dict[str, Any]], entry: dict[str, Any],
                 results: dict[str, Any]) -> str | None:
    """Whether a report's looks agree with its log entry and with the earlier looks the log
    records (the history the report used); a description of the first mismatch, else None."""
    details = entry.get("details") if isinstance(entry.get("details"), dict) else {}
    logged = {k: details[k] for k in ("look", "of", "hypotheses") if k in details}
    shown = look_details(results) or {}
    if logged != shown:
        return "its interim look (look number, observed fractions, z) differs from its log entry"
    if not logged:
        return None
    before = [e for e in entries if e["seq"] < entry["seq"]]
    first: dict[int, PastLook] = {}
    for p in past_looks(before, str(entry.get("plan"))):
        first.setdefault(p.look, p)
    for hyp in results.get("hypotheses", []):
        block = hyp.get("looks")
        if not isinstance(block, dict):
            continue
        keys = BAYES_HISTORY_KEYS if is_bayesian(block) else HISTORY_KEYS
        expected = [{"look": k, **{key: first[k].hypotheses[hyp["id"]].get(key)
                                   for key in keys if key != "id"}}
                    for k in sorted(first) if k < int(logged["look"])
                    and hyp["id"] in first[k].hypotheses]
        if block.get("history") != expected:
            return (f"{hyp['id']}: the history of earlier looks differs from the look entries "
                    "of the log")
    return None
