"""The design document: per hypothesis the alpha it is sized at, the sample size per group for
the target power, the power at the planned sizes; and, on request, the operating
characteristics of the whole decision rule by simulation.

Which alpha each hypothesis gets: alpha / m over the m non-exploratory hypotheses for the
Bonferroni-type and Holm-type procedures (Holm, Hochberg and Hommel reject whatever the split
rejects, and can only reject more), 1 − (1 − alpha)^(1/m) for Šidák, alpha / (m·Σ1/i) for
Benjamini–Yekutieli (its first critical value), the initial weight × alpha for the graphical
procedure, the full alpha for fixed-sequence (each is tested at alpha, but only if every
hypothesis before it was rejected) and for `none` and exploratory hypotheses. One-sided
alternatives are sized at that alpha one-sided, two-sided ones at alpha / 2 per side.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from prespec.analysis import decision
from prespec.common.caution import CAUTION
from prespec.design import exactpower, samplesize
from prespec.design.simulate import Progress, simulate
from prespec.errors import BadInput
from prespec.plan import vocabulary as v

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

DEFAULT_SEED = 1
GLOBAL_NULL = "global-null"

FLP = "Fleiss, Levin and Paik 2003, §4.2"


@dataclass(frozen=True)
class AlphaShare:
    """The alpha a hypothesis is sized at, and the rule that gives it, in words."""

    alpha: float
    rule: str


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def alpha_shares(plan: Plan) -> tuple[dict[str, AlphaShare], str]:
    """The alpha each hypothesis is sized at, by id, and the rule in one sentence."""
    alpha = float(plan.alpha)
    family = [h.id for h in plan.hypotheses if not h.outside_multiplicity]
    m = max(1, len(family))
    method = plan.multiplicity
    name = method if isinstance(method, str) else "graphical"
    shares: dict[str, AlphaShare] = {}
    if name in ("bonferroni", "holm", "hochberg", "hommel", "benjamini-hochberg"):
        rule = (f"alpha / m = {_fmt(alpha)} / {m}, the Bonferroni split over the {m} "
                "non-exploratory hypotheses")
        if name != "bonferroni":
            kind = "a false discovery rate procedure" if name == "benjamini-hochberg" \
                else "a Holm-type procedure"
            rule += (f"; {name}, {kind}, rejects whatever the split rejects, so it can only "
                     "gain power on these sizes")
        level = alpha / m
    elif name == "sidak":
        level = 1.0 - (1.0 - alpha) ** (1.0 / m)
        rule = f"1 - (1 - alpha)^(1/m), the Šidák split over the {m} non-exploratory hypotheses"
    elif name == "benjamini-yekutieli":
        c = sum(1.0 / i for i in range(1, m + 1))
        level = alpha / (m * c)
        rule = (f"alpha / (m·Σ1/i) = {_fmt(alpha)} / ({m}·{c:.4g}), the first critical value "
                "of benjamini-yekutieli: a hypothesis below it is rejected whatever the others")
    elif name == "fixed-sequence":
        level = alpha
        rule = ("the full alpha for each: fixed-sequence tests each at alpha, but only if every "
                "hypothesis before it in the plan was rejected, so the power of a later one is "
                "at most that of the sequence up to it (see --simulate)")
    elif name == "graphical":
        level = alpha
        rule = ("the initial weight × alpha of the graphical procedure; weight passed on after "
                "a rejection can only add power")
    else:
        level = alpha
        rule = "the full alpha (no multiplicity adjustment)"
    for hyp in plan.hypotheses:
        if hyp.test in v.BAYESIAN_TESTS:
            shares[hyp.id] = AlphaShare(alpha, "outside the multiplicity family (a Bayesian "
                                        "rule; its type I error is shown against alpha)")
        elif hyp.role == "exploratory":
            shares[hyp.id] = AlphaShare(alpha, "the full alpha, nominal (exploratory)")
        elif name == "graphical":
            weight = float(method.weights.get(hyp.id, 0.0))
            shares[hyp.id] = AlphaShare(weight * alpha, f"initial weight {weight:g} × alpha")
        else:
            shares[hyp.id] = AlphaShare(level, name)
    return shares, rule


@dataclass(frozen=True)
class HypothesisDesign:
    """The design figures of one hypothesis."""

    id: str
    alpha: float
    sides: str
    method: str
    n_per_group: dict[str, int] | None
    n_enrol_per_group: dict[str, int] | None
    power: float | None  # at data.planned_n, under the assumed rates
    notes: tuple[str, ...]

    def to_json(self) -> dict[str, Any]:
        return {"id": self.id, "alpha": self.alpha, "sides": self.sides, "method": self.method,
                "n_per_group": self.n_per_group, "n_enrol_per_group": self.n_enrol_per_group,
                "power": self.power, "notes": list(self.notes)}


#: The largest group an exact enumeration takes; above it the normal approximation is used
#: (and said): Fisher's test enumerates about (n + 1) × a few hundred tables per size.
FISHER_LIMIT = 5_000
BINOMIAL_LIMIT = 100_000


@dataclass(frozen=True)
class _Method:
    text: str
    size: Callable[[], tuple[int, ...] | exactpower.ExactSize]
    power: Callable[[tuple[int, ...]], float]
    notes: tuple[str, ...] = ()
    late: list[str] = field(default_factory=list)  # notes that computing a size or power adds


def _groups(plan: Plan, hyp: Hypothesis) -> list[str]:
    return list(plan.data.groups) if hyp.kind in ("all", "trend") else list(hyp.compare)


def _direction_ok(hyp: Hypothesis, rates: list[float]) -> bool:
    """Whether the assumed rates lie on the side of a one-sided superiority alternative."""
    if hyp.alternative == "two-sided" or hyp.comparison != "superiority":
        return True
    if hyp.kind == "single":
        diff = rates[0] - float(hyp.null_rate)
    elif hyp.kind == "trend":
        scores = hyp.scores if hyp.scores is not None else list(range(len(rates)))
        mean_s = sum(scores) / len(scores)
        diff = sum((s - mean_s) * p for s, p in zip(scores, rates, strict=True))
    else:
        diff = rates[0] - rates[1]
    return diff > 0 if hyp.alternative == "greater" else diff < 0


def _own_sizing_notes(hyp: Hypothesis) -> tuple[str, ...]:
    """What the sizes of a stratified or covariate-adjusted test assume."""
    if hyp.test in ("cochran-mantel-haenszel", "stratified-score"):
        return ((f"{hyp.test}: sized as an unstratified comparison, assuming the same rates "
                "in every stratum"),)
    if hyp.test == "g-computation":
        return (("g-computation: sized as the unadjusted comparison; adjustment for "
                "prognostic baseline covariates usually gains power, so this size is usually "
                "conservative"),)
    return ()


def _pair_method(plan: Plan, hyp: Hypothesis, alpha: float, rates: list[float], ratio: float,
                 both_tails: bool = True) -> _Method:
    design = plan.design
    p1, p2 = rates
    side = alpha / 2.0 if hyp.alternative == "two-sided" else alpha
    two = hyp.alternative == "two-sided" and both_tails
    if hyp.comparison != "superiority":
        score = hyp.test in ("farrington-manning", "stratified-score")
        own = _own_sizing_notes(hyp)
        name = ("Farrington–Manning score test (Farrington and Manning 1990)" if score else
                "Wald z with the unpooled variance (Blackwelder 1982)")
        if hyp.comparison == "equivalence":
            low, high = hyp.margin
            return _Method(
                f"two one-sided tests, {name}, each at alpha (Schuirmann 1987)",
                lambda: samplesize.equivalence_n(p1, p2, alpha, design.power, low=low,
                                                 high=high, measure=hyp.measure, ratio=ratio,
                                                 score=score).n,
                lambda n: samplesize.equivalence_power(p1, p2, n[0], n[1], alpha, low=low,
                                                       high=high, measure=hyp.measure,
                                                       score=score), own)
        return _Method(
            f"{name}, margin {hyp.margin:g} on the {hyp.measure} scale",
            lambda: samplesize.margin_n(p1, p2, alpha, design.power, margin=hyp.margin,
                                        measure=hyp.measure, alternative=hyp.alternative,
                                        ratio=ratio, score=score).n,
            lambda n: samplesize.margin_power(p1, p2, n[0], n[1], alpha, margin=hyp.margin,
                                              measure=hyp.measure, alternative=hyp.alternative,
                                              score=score), own)
    if hyp.test == "fisher-exact":
        late: list[str] = []
        above = (f"above {FISHER_LIMIT} per group the exact enumeration gives way to the "
                 "continuity-corrected normal approximation (Casagrande, Pike and Smith 1978)")

        def fisher_size() -> tuple[int, ...] | exactpower.ExactSize:
            normal = samplesize.two_proportion_n(p1, p2, side, design.power, ratio=ratio,
                                                 continuity=True).n
            if max(normal) > FISHER_LIMIT:
                late.append(f"sized by the normal approximation: {above}")
                return normal
            return exactpower.fisher_n(p1, p2, alpha, design.power, hyp.alternative,
                                       ratio=ratio, guess=normal[0])

        def fisher_power(n: tuple[int, ...]) -> float:
            if max(n) > FISHER_LIMIT:
                late.append(f"power by the normal approximation: {above}")
                return samplesize.two_proportion_power(p1, p2, n[0], n[1], side,
                                                       continuity=True, two_sided=two)
            return exactpower.fisher_power(p1, p2, n[0], n[1], alpha, hyp.alternative)

        return _Method(
            "exact power of Fisher's exact test by enumeration; the smallest n whose power "
            "reaches the target (exact power is saw-toothed in n)",
            fisher_size, fisher_power, late=late)
    cc = bool(design.continuity)
    notes = []
    if hyp.test in ("barnard-exact", "boschloo-exact"):
        notes.append(f"{hyp.test}: sized by the normal approximation without continuity "
                     "correction (its exact power is not enumerated); unconditional exact "
                     "tests come close to it")
        cc = False
    elif hyp.test in ("cochran-mantel-haenszel", "stratified-score", "g-computation"):
        notes.extend(_own_sizing_notes(hyp))
    elif hyp.test == "likelihood-ratio":
        notes.append("likelihood-ratio: sized by the normal approximation of the equivalent "
                     "score test (asymptotically the same power)")
    if hyp.continuity != cc and hyp.test == "pearson-chi-square":
        notes.append(f"design.continuity is {str(cc).lower()} while the test is "
                     f"{'' if hyp.continuity else 'not '}continuity-corrected")
    text = (f"normal approximation with the pooled null variance ({FLP})"
            + (", continuity-corrected (Casagrande, Pike and Smith 1978)" if cc else ""))
    return _Method(
        text,
        lambda: samplesize.two_proportion_n(p1, p2, side, design.power, ratio=ratio,
                                            continuity=cc).n,
        lambda n: samplesize.two_proportion_power(p1, p2, n[0], n[1], side, continuity=cc,
                                                  two_sided=two),
        tuple(notes))


def _method(plan: Plan, hyp: Hypothesis, alpha: float, rates: list[float],
            shares: list[float], both_tails: bool = True) -> _Method:
    """How one hypothesis is sized and its power computed. ``both_tails=False`` leaves the far
    tail out of a two-sided test's normal-approximation power, as prespec once did: only to
    recompute the design entry of a results.json written then (``verify --rerun``)."""
    design = plan.design
    side = alpha / 2.0 if hyp.alternative == "two-sided" else alpha
    two = hyp.alternative == "two-sided" and both_tails
    if hyp.kind == "pair":
        return _pair_method(plan, hyp, alpha, rates, shares[1] / shares[0], both_tails)
    if hyp.kind == "single":
        p, p0 = rates[0], float(hyp.null_rate)
        if hyp.test == "binomial-exact":
            late: list[str] = []
            above = (f"above {BINOMIAL_LIMIT} the exact enumeration gives way to the normal "
                     "approximation of the score test")

            def binomial_size() -> tuple[int, ...] | exactpower.ExactSize:
                normal = samplesize.one_proportion_n(p, p0, side, design.power).n
                if normal[0] > BINOMIAL_LIMIT:
                    late.append(f"sized by the normal approximation: {above}")
                    return normal
                return exactpower.binomial_n(p, p0, alpha, design.power, hyp.alternative,
                                             guess=normal[0])

            def binomial_power(n: tuple[int, ...]) -> float:
                if n[0] > BINOMIAL_LIMIT:
                    late.append(f"power by the normal approximation: {above}")
                    return samplesize.one_proportion_power(p, p0, n[0], side, two_sided=two)
                return exactpower.binomial_power(p, p0, n[0], alpha, hyp.alternative)

            return _Method(
                "exact power of the binomial test by enumeration; the smallest n whose power "
                "reaches the target (exact power is saw-toothed in n)",
                binomial_size, binomial_power, late=late)
        return _Method(
            "normal approximation of the score z test (Fleiss, Levin and Paik 2003, §2.5)",
            lambda: samplesize.one_proportion_n(p, p0, side, design.power).n,
            lambda n: samplesize.one_proportion_power(p, p0, n[0], side, two_sided=two))
    if hyp.kind == "trend":
        scores = hyp.scores if hyp.scores is not None else list(range(len(rates)))
        return _Method(
            "normal approximation of the Cochran–Armitage test (Nam 1987)",
            lambda: samplesize.trend_n(rates, scores, side, design.power, shares).n,
            lambda n: samplesize.trend_power(rates, n, scores, side, two_sided=two))
    notes = ()
    if hyp.test == "fisher-exact":
        notes = ("fisher-exact on k groups: sized by the chi-square approximation",)
    return _Method(
        f"noncentral chi-square with {len(rates) - 1} df (Lachin 1977)",
        lambda: samplesize.k_group_n(rates, alpha, design.power, shares).n,
        lambda n: samplesize.k_group_power(rates, n, alpha), notes)


def _sides(hyp: Hypothesis, alpha: float) -> str:
    if hyp.kind == "all":
        return "k-group chi-square"
    if hyp.comparison == "equivalence":
        return f"two one-sided tests at {_fmt(alpha)} each"
    if hyp.alternative == "two-sided":
        return f"two-sided ({_fmt(alpha / 2)} per side)"
    return f"one-sided ({hyp.alternative})"


def _bayesian_design(plan: Plan, hyp: Hypothesis, share: AlphaShare) -> HypothesisDesign:
    """A Bayesian rule is not sized: its exact operating characteristics at data.planned_n
    (the type I error maximised over the null boundary, against alpha, and the power at the
    assumed rates) are its design."""
    from prespec.analysis.bayes import operating_characteristics

    sides = f"one-sided ({hyp.alternative}), Bayesian rule"
    oc = operating_characteristics(hyp, plan)
    method = ("exact operating characteristics of the rule (posterior probability >= "
              f"{_fmt(hyp.threshold)}), by enumeration of every outcome of the binomials")
    if oc is None:
        return HypothesisDesign(hyp.id, share.alpha, sides, method, None, None, None, (
            ("not computed: the operating characteristics are taken at data.planned_n, which "
            "names no size for every compared group"),))
    where = "" if oc["at_rate"] is None else f" (reached at a rate of {_fmt(oc['at_rate'])})"
    notes = [(f"type I error at the planned sizes, maximised over the null boundary: "
             f"{oc['type_one_error']:.4f}{where}; alpha {_fmt(plan.alpha)}"),
             ("outside the frequentist multiplicity family; not sized (the rule's power at "
             "data.planned_n is shown)")]
    if oc["power"] is None:
        notes.append("no power: the design's assumed rates do not name every compared group")
    if oc.get("looks") is not None:
        notes[0:0] = _bayesian_look_notes(oc["looks"])
        method += (", with its interim looks (a stop for success at a look counts as the rule "
                   "met; futility is non-binding and does not lower the type I error)")
    if oc["exceeds_alpha"]:
        notes.insert(0, f"WARNING: the type I error {oc['type_one_error']:.4f} exceeds alpha "
                     f"{_fmt(plan.alpha)}")
    return HypothesisDesign(hyp.id, share.alpha, sides, method, None, None, oc["power"],
                            tuple(notes))


def _bayesian_look_notes(looks: dict[str, Any]) -> list[str]:
    """The planned looks of a Bayesian rule, and per look the probability of stopping for
    success (and for futility, were the bound followed) where the type I error is largest and
    at the assumed rates, with the expected analysed sizes."""
    sizes = "; ".join(f"{g} {', '.join(map(str, n))}" for g, n in looks["sizes"].items())
    rules = []
    if looks["stop_for_success"] is not None:
        rules.append(f"stop for success at posterior probability >= "
                     f"{_fmt(looks['stop_for_success'])}")
    if looks["stop_for_futility"] is not None:
        rules.append(f"futility (non-binding) at predictive probability < "
                     f"{_fmt(looks['stop_for_futility'])}")
    notes = [f"interim looks at cumulative sizes {sizes}; {'; '.join(rules)}"]
    for label, point in (("where the type I error is largest", looks["under_null"]),
                         ("at the assumed rates", looks["under_assumed"])):
        if point is None:
            continue
        rates = ", ".join(f"{g} {_fmt(r)}" for g, r in point["rates"].items())
        per_look = ", ".join(f"look {k + 1} {p:.4f}"
                             for k, p in enumerate(point["stop_for_success"]))
        text = (f"{label} ({rates}): success {point['success']:.4f}; stopping for success "
                f"{per_look}")
        if looks["stop_for_futility"] is not None:
            text += "; for futility if followed " + ", ".join(
                f"look {k + 1} {p:.4f}" for k, p in enumerate(point["futility"]))
        expected = ", ".join(f"{g} {n:.1f}" for g, n in point["expected_size"].items())
        notes.append(text + f"; expected analysed size {expected}")
    return notes


def size_hypothesis(plan: Plan, hyp: Hypothesis, share: AlphaShare) -> HypothesisDesign:
    """The sample size per group and the power at data.planned_n of one hypothesis."""
    if hyp.test in v.BAYESIAN_TESTS:
        return _bayesian_design(plan, hyp, share)
    design = plan.design
    groups = _groups(plan, hyp)
    rates = [float(design.assumed[g]) for g in groups]
    shares = [float(design.allocation[g]) for g in groups]
    sides = _sides(hyp, share.alpha)
    notes: list[str] = []
    if share.alpha <= 0.0:
        return HypothesisDesign(hyp.id, share.alpha, sides, "not sized", None, None, None,
                                (("its initial weight is 0: it is tested only after weight "
                                 "passes to it, so it has no alpha of its own to be sized at"),))
    method = _method(plan, hyp, share.alpha, rates, shares)
    notes.extend(method.notes)
    if decision.has_sparse_switch(hyp):
        notes.append(f"sized for {hyp.test}; the sparse switch to {hyp.sparse.test} (expected "
                     f"count below {hyp.sparse.min_expected:g}) is in --simulate")
    n_per_group = enrol = power = None
    if not _direction_ok(hyp, rates):
        notes.append(f"the assumed rates do not lie on the side of the alternative "
                     f"({hyp.alternative}): no sample size reaches the power")
    else:
        try:
            found = method.size()
        except ValueError as exc:
            notes.append(f"not sized: {exc}")
        else:
            if isinstance(found, exactpower.ExactSize):
                notes.append(exactpower.saw_tooth(found))
                found = found.n
            n_per_group = dict(zip(groups, found, strict=True))
            enrol = {g: math.ceil(n / (1.0 - design.dropout) - samplesize.ROUND_SLACK)
                     for g, n in n_per_group.items()}
        planned = plan.data.planned_n or {}
        if all(g in planned for g in groups):
            power = method.power(tuple(int(planned[g]) for g in groups))
    notes.extend(method.late)
    return HypothesisDesign(hyp.id, share.alpha, sides, method.text, n_per_group, enrol, power,
                            tuple(notes))


def scenarios_of(plan: Plan) -> dict[str, dict[str, float]]:
    """The assumed rates, the design's scenarios, and the global null: every group at the
    allocation-weighted mean of the assumed rates."""
    design = plan.design
    groups = list(plan.data.groups)
    weights = [float(design.allocation[g]) for g in groups]
    pooled = sum(w * float(design.assumed[g]) for w, g in zip(weights, groups, strict=True))
    pooled /= sum(weights)
    first = "assumed" if "assumed" not in design.scenarios else "design-assumed"
    out = {first: {g: float(design.assumed[g]) for g in groups}}
    for name, rates in design.scenarios.items():
        out[name] = {g: float(rates[g]) for g in groups}
    out[GLOBAL_NULL] = {g: pooled for g in groups}
    return out


def simulation_sizes(plan: Plan, sized: list[HypothesisDesign]) -> tuple[dict[str, int], str]:
    """The analysed group sizes to simulate: data.planned_n, else the largest size any
    hypothesis needs per group."""
    groups = list(plan.data.groups)
    planned = plan.data.planned_n or {}
    if all(g in planned for g in groups):
        return {g: int(planned[g]) for g in groups}, "data.planned_n"
    need: dict[str, int] = {}
    for h in sized:
        for g, n in (h.n_per_group or {}).items():
            need[g] = max(need.get(g, 0), n)
    if not need:
        raise BadInput("design: no hypothesis could be sized; give data.planned_n to simulate")
    fallback = max(need.values())
    return {g: need.get(g, fallback) for g in groups}, \
        "the largest design size per group over the hypotheses"


def _require(plan: Plan, where: str) -> Any:
    if plan.design is None:
        raise BadInput(f"{where}: the plan has no design section; add design: {{assumed: "
                       "{group: rate, ...}, power: 0.8}")
    return plan.design


def size_plan(plan: Plan) -> tuple[list[HypothesisDesign], str]:
    """Every hypothesis of the plan sized, and the alpha rule in words."""
    shares, rule = alpha_shares(plan)
    return [size_hypothesis(plan, h, shares[h.id]) for h in plan.hypotheses], rule


def design_document(plan: Plan, *, where: str = "plan", fingerprint: str | None = None,
                    simulate_trials: int | None = None, seed: int | None = None,
                    progress: Progress | None = None) -> dict[str, Any]:
    """The design document of a validated plan (docs/files.md, "Design output")."""
    design = _require(plan, where)
    sized, rule = size_plan(plan)
    doc: dict[str, Any] = {
        "title": plan.title,
        "plan": fingerprint,
        "power_target": design.power,
        "assumed": {g: float(design.assumed[g]) for g in plan.data.groups},
        "allocation": {g: float(design.allocation[g]) for g in plan.data.groups},
        "dropout": design.dropout,
        "continuity": design.continuity,
        "alpha": plan.alpha,
        "multiplicity": plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical",
        "alpha_rule": rule,
        "hypotheses": [h.to_json() for h in sized],
        "scenarios": [],
        "simulation": None,
        "notes": [],
        "caution": CAUTION,
    }
    from prespec.design.looks import add_looks

    add_looks(plan, doc)
    if any(h.test in v.BAYESIAN_TESTS for h in plan.hypotheses):
        from prespec.analysis.bayes import type_one_error_warnings

        warned = type_one_error_warnings(plan)  # the lines check and lock print as well
        if warned:
            doc["warnings"] = warned
    if any(h.then is not None for h in plan.hypotheses):
        doc["notes"].append("pairwise follow-ups (then) are gated by their k-group hypothesis "
                            "and not sized here; --simulate gives their power")
    if simulate_trials is None:
        return doc
    seed = DEFAULT_SEED if seed is None else seed
    if seed < 0:
        raise BadInput(f"--seed must be 0 or more, got {seed}")
    sizes, source = simulation_sizes(plan, sized)
    results, decider = simulate(plan, scenarios=scenarios_of(plan), sizes=sizes,
                                trials=simulate_trials, seed=seed, progress=progress)
    doc["scenarios"] = [r.to_json() for r in results]
    doc["simulation"] = {"trials": simulate_trials, "seed": seed, "n_per_group": sizes,
                         "sizes_from": source,
                         "per_table": list(decider.per_table),
                         "fdr": isinstance(plan.multiplicity, str) and plan.multiplicity in
                         ("benjamini-hochberg", "benjamini-yekutieli")}
    if decider.per_table:
        doc["notes"].append("not on arrays, so run by the pipeline's own function once per "
                            "distinct table: " + "; ".join(decider.per_table))
    doc["notes"].append("simulated trials have the analysed sizes fixed (dropout already "
                        "allowed for); outcomes are simulated independently of each other")
    if any(h.looks is not None for h in plan.hypotheses):
        doc["notes"].append("interim looks are not simulated: each simulated trial is analysed "
                            "once, at the sizes above, by the fixed-sample test without the "
                            "group-sequential boundaries (which are shown per hypothesis)")
    doc["notes"].append("fwer: the probability of rejecting at least one true null among the "
                        "non-exploratory hypotheses, follow-ups included (true_nulls lists "
                        "them); any and all: over the plan's non-exploratory hypotheses; power "
                        "of an exploratory hypothesis: at its nominal level")
    if any(h.test in v.BAYESIAN_TESTS for h in plan.hypotheses):
        doc["notes"].append("a Bayesian rule is decided in each simulated trial by its exact "
                            "region; its power is the probability that its rule is met, and it "
                            "counts in neither the fwer nor any and all")
    return doc


def _rates(rates: dict[str, float]) -> str:
    return ", ".join(f"{g} {_fmt(p)}" for g, p in rates.items())


def _pm(value: float | None, se: float | None) -> str:
    if value is None:
        return "n/a"
    return f"{value:.4f} ± {se:.4f}" if se is not None else f"{value:.4f}"


def designed_n_text(doc: dict[str, Any]) -> str | None:
    """The note on sizes put in for a missing data.planned_n (printed once, near the top)."""
    sizes = doc.get("planned_n_from_design")
    return designed_n_line(sizes) if sizes else None


def design_text(doc: dict[str, Any]) -> str:
    """The design document as text, for the terminal."""
    from prespec.design.looks import looks_lines

    ratio = ":".join(f"{a:g}" for a in doc["allocation"].values())
    lines = [f"Design: {doc['title']}",
             (f"Target power {doc['power_target']:g} at the assumed rates "
             f"{_rates(doc['assumed'])}; allocation {ratio}; dropout {doc['dropout']:g}"),
             (f"Alpha {doc['alpha']:g}, multiplicity {doc['multiplicity']}; each hypothesis is "
             f"sized at {doc['alpha_rule']}.")]
    shown_above = designed_n_text(doc)
    if shown_above:
        lines.append(f"Sizes: {shown_above}.")
    lines.append("Hypotheses:")
    for h in doc["hypotheses"]:
        lines.append(f"  {h['id']}: alpha {_fmt(h['alpha'])}, {h['sides']}; {h['method']}")
        if h["n_per_group"] is not None:
            n = ", ".join(f"{g} {v}" for g, v in h["n_per_group"].items())
            e = ", ".join(f"{g} {v}" for g, v in h["n_enrol_per_group"].items())
            lines.append(f"      analysed n per group: {n}; to enrol: {e}")
        elif "Bayesian rule" in h["sides"]:
            lines.append("      not sized: a Bayesian rule has exact operating characteristics "
                         "at data.planned_n instead")
        else:
            lines.append("      analysed n per group: not computable")
        shown = "no data.planned_n" if h["power"] is None else f"{h['power']:.4f}"
        at = "the designed sizes" if doc.get("planned_n_from_design") else "data.planned_n"
        lines.append(f"      power at {at}: {shown}")
        lines.extend(looks_lines(h))
        lines.extend(f"      note: {note}" for note in h["notes"])
    sim = doc.get("simulation")
    if sim:
        sizes = ", ".join(f"{g} {n}" for g, n in sim["n_per_group"].items())
        lines.append(f"Simulation: {sim['trials']} trials per scenario, seed {sim['seed']}, "
                     f"analysed sizes {sizes} ({sim['sizes_from']}); ± is one Monte Carlo "
                     "standard error")
        for s in doc["scenarios"]:
            se = s["mc_se"]
            lines.append(f"  {s['name']} ({_rates(s['rates'])}):")
            rate = f"      family-wise error rate {_pm(s['fwer'], se['fwer'])}"
            if s["fwer"] is None:
                rate = "      family-wise error rate: n/a (no null hypothesis holds)"
            if s["fdr"] is not None:
                rate += f"; false discovery rate {_pm(s['fdr'], se['fdr'])}"
            lines.append(rate)
            lines.append(f"      P(reject at least one) {_pm(s['any'], se['any'])}; "
                         f"P(reject all) {_pm(s['all'], se['all'])}")
            for ident, p in s["power"].items():
                lines.append(f"      reject {ident}: {_pm(p, se['power'][ident])}")
    lines.extend(f"Note: {n}" for n in doc["notes"] if n != shown_above)
    lines.append(f"Caution: {doc['caution']}")
    return "\n".join(lines)


#: The key of results.json's ``design`` saying that the power of a two-sided test counts both
#: tails. A design entry without it was written when the far tail was left out.
BOTH_TAILS_KEY = "two_sided_power"


def planned_vs_achieved(plan: Plan, achieved: dict[str, dict[str, int]] | None, *,
                        both_tails: bool = True) -> dict[str, Any] | None:
    """For results.json: per hypothesis the alpha it was sized at, the design's analysed n per
    group (``n_per_group``, before dropout) and n to enrol (after it), the achieved analysed n
    (``achieved_per_group``, from ``achieved``: per hypothesis id its table's totals; None in
    a rehearsal) and the power at the achieved sizes under the
    assumed rates (closed forms or exact enumeration; no simulation). None without a design.
    ``both_tails=False`` recomputes an entry written before the far tail was counted."""
    if plan.design is None:
        return None
    sized, rule = size_plan(plan)
    shares, _ = alpha_shares(plan)
    out = []
    for hyp, h in zip(plan.hypotheses, sized, strict=True):
        groups = _groups(plan, hyp)
        table = None if achieved is None else achieved.get(hyp.id)
        got = None if table is None else {g: int(table[g]) for g in groups}
        power = None
        if (got is not None and all(n > 0 for n in got.values()) and h.n_per_group is not None
                and _direction_ok(hyp, [float(plan.design.assumed[g]) for g in groups])):
            rates = [float(plan.design.assumed[g]) for g in groups]
            weights = [float(plan.design.allocation[g]) for g in groups]
            method = _method(plan, hyp, shares[hyp.id].alpha, rates, weights, both_tails)
            power = method.power(tuple(got[g] for g in groups))
        out.append({"id": h.id, "alpha": h.alpha, "method": h.method,
                    "n_per_group": h.n_per_group,
                    "n_enrol_per_group": h.n_enrol_per_group,
                    "achieved_per_group": got,
                    "power_at_achieved": power})
    entry = {"rule": rule, "power": plan.design.power, "dropout": plan.design.dropout,
             "assumed": {g: float(plan.design.assumed[g]) for g in plan.data.groups},
             "hypotheses": out}
    if both_tails:
        entry[BOTH_TAILS_KEY] = "both tails"
    return entry


def design_summary(plan: Plan) -> list[str]:
    """The design section and the sample sizes it gives (``prespec design`` has the detail)."""
    from prespec.plan.summary import number as _num  # the same numbers as the summary

    design = plan.design
    assert design is not None
    rates = ", ".join(f"{g} {_num(p)}" for g, p in design.assumed.items())
    allocation = ":".join(_num(design.allocation[g]) for g in plan.data.groups) \
        if design.allocation else "equal"
    lines = [f"Design:        power {_num(design.power)} at assumed rates {rates}; allocation "
             f"{allocation}; dropout {_num(design.dropout)}"
             + ("; continuity-corrected 2×2 formula" if design.continuity else "")]
    for name, scenario in design.scenarios.items():
        shown = ", ".join(f"{g} {_num(p)}" for g, p in scenario.items())
        lines.append(f"  scenario {name}: {shown}")
    lines.append("  scenario global-null: every group at the pooled assumed rate (added)")
    sized, rule = size_plan(plan)
    lines.append(f"  sample size per hypothesis, at {rule}:")
    bayesian = {h.id for h in plan.hypotheses if h.test in v.BAYESIAN_TESTS}
    for h in sized:
        if h.id in bayesian:  # not sized: its operating characteristics at planned_n
            power = "" if h.power is None else f"power at data.planned_n {h.power:.4f}; "
            lines.append(f"    {h.id}: a Bayesian rule, not sized; {power}{'; '.join(h.notes)}")
            continue
        if h.n_per_group is None:
            lines.append(f"    {h.id}: not computable ({'; '.join(h.notes) or 'no size'})")
            continue
        n = ", ".join(f"{g} {v}" for g, v in h.n_per_group.items())
        enrol = ", ".join(str(v) for v in (h.n_enrol_per_group or {}).values())
        lines.append(f"    {h.id} (alpha {h.alpha:.4g}): analysed {n}; to enrol {enrol}")
    return lines


def designed_n_line(sizes: dict[str, int]) -> str:
    """The sentence design prints when it put the designed sizes in for data.planned_n."""
    shown = ", ".join(f"{g} {n}" for g, n in sizes.items())
    return (f"data.planned_n is not in the plan: the interim looks and the power below use the "
            f"designed analysed sizes per group ({shown}), the largest any hypothesis needs; "
            "write them into data.planned_n before locking (a look's information fraction is "
            "the analysed total over this planned total)")
