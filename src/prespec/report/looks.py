"""The report's section on interim looks: boundaries, the z of each look, the decision, the
adjusted inference and the repeated confidence intervals, with the boundary figure.

Nothing is computed here: every number is the one ``results.json`` holds in a hypothesis's
``looks`` block (written by :mod:`prespec.analysis.looks`). The figure ``figures/looks-<id>.png`` plots
the efficacy boundary (both sides for a two-sided test) and the futility boundary against the
information fraction, with the observed z of this and of the earlier looks.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from prespec.report.canvas import FIGURES, GUIDE, INK, LINE, new_figure, safe_stem
from prespec.report.markup import ASIDE_STYLE, esc, fields, table
from prespec.report.values import (
    NULL,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_p,
    fmt_statistic,
    items,
    mapping,
    number,
    text,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure as MplFigure

Figure = tuple[str, str]

DECISION_WORDS: dict[str, str] = {
    "continue": "continue: no boundary crossed",
    "stop-for-efficacy": "stop for efficacy: the efficacy boundary is crossed (H0 rejected)",
    "futility-may-be-considered": "futility may be considered: the z is below the "
                                  "non-binding futility boundary",
    "reject-at-final": "final analysis: the efficacy boundary is crossed (H0 rejected)",
    "not-rejected-at-final": "final analysis: the efficacy boundary is not crossed (H0 not "
    "rejected)",
    "rejected-earlier": "rejected at an earlier look (the graph passed its level on)",
    "not-computable": "no decision: the z statistic is not defined",
}
LOOKS_STYLE = ASIDE_STYLE.format(c="#1f4e79")
_EFFICACY = "#1f4e79"
_FUTILITY = "#8a5a00"
_OBSERVED = "#b22222"


def looks_name(hid: str) -> str:
    """The relative path of a hypothesis's boundary figure."""
    return f"{FIGURES}/looks-{safe_stem(hid, 'hypothesis')}.png"


#: A look's decision in a few words, for the summary's results table at an interim look.
SHORT_WORDS: dict[str, str] = {
    "continue": "continue",
    "stop-for-efficacy": "stop for efficacy (reject H0)",
    "futility-may-be-considered": "continue; futility may be considered",
    "rejected-earlier": "rejected at an earlier look",
    "not-computable": "no decision",
    "stop-for-success": "stop for success (rule met)",
}


def interim_look(results: Mapping[str, Any]) -> tuple[int, int] | None:
    """(look, of) when the results are those of an interim look, else None."""
    for raw in items(results.get("hypotheses"), "hypotheses"):
        lk = raw.get("looks") if isinstance(raw, Mapping) else None
        if isinstance(lk, Mapping) and lk.get("look") != lk.get("of"):
            return int(lk["look"]), int(lk["of"])
    return None


def interim_words(hyp: Mapping[str, Any], look: tuple[int, int]) -> str | None:
    """The decision of a hypothesis at an interim look, in a few words: its look's decision,
    or ``not tested at this look`` for one without looks; None when the usual words hold
    (exploratory, or a follow-up)."""
    lk = hyp.get("looks")
    if isinstance(lk, Mapping):
        code = text(lk.get("decision"), "looks.decision")
        return f"look {look[0]} of {look[1]}: {SHORT_WORDS.get(code, code)}"
    if hyp.get("reject") is None and hyp.get("role") != "exploratory" \
            and hyp.get("parent") is None:
        return f"not tested at look {look[0]} of {look[1]}"
    return None


def decision_words(code: str) -> str:
    """The decision of a look in words."""
    return DECISION_WORDS.get(code, code)


def look_line(hyp: Mapping[str, Any]) -> str:
    """One line for the terminal: ``look 2 of 3: z = 1.234, boundary 2.963: continue``."""
    lk = mapping(hyp["looks"], "looks")
    if lk.get("rule") == "bayesian":
        return _bayes_look_line(lk)
    z = number(lk.get("z"), "looks.z")
    bound = number(lk.get("boundary"), "looks.boundary")
    shown = "z not defined" if z is None else f"z = {z:.3f}"
    side = "±" if lk.get("sides") == 2 else ""
    words = decision_words(text(lk.get("decision"), "looks.decision"))
    edge = "none (level 0)" if bound is None else f"{side}{bound:.3f}"
    graph = lk.get("graph")
    at = (
        f" at level {number(graph.get('level'), 'looks.graph.level'):.4g}"
        if isinstance(graph, Mapping)
        else ""
    )
    line = (
        f"look {lk.get('look')} of {lk.get('of')} (information fraction "
        f"{number(lk.get('observed_fraction'), 'looks.observed_fraction'):.3f}): {shown}, "
        f"efficacy boundary{at} {edge}: {words}"
    )
    adj = lk.get("adjusted")
    if isinstance(adj, Mapping):
        line += (f"; adjusted p = {fmt_p(number(adj.get('p_value'), 'adjusted.p_value'))}, "
                 f"estimate {fmt_estimate(number(adj.get('estimate'), 'adjusted.estimate'))} "
                 f"{fmt_interval(*[number(c, 'adjusted.ci') for c in adj.get('ci') or []])}")
    return line


BAYES_DECISION_WORDS: dict[str, str] = {
    "continue": "continue: neither threshold reached",
    "stop-for-success": "stop for success: the posterior probability reaches the interim "
                        "success threshold (the rule met at this look)",
    "futility-may-be-considered": "futility may be considered: the predictive probability of "
                                  "success at the final analysis is below the non-binding "
                                  "futility threshold",
    "rule-met-at-final": "final analysis: the posterior probability reaches the threshold (the "
                         "rule met)",
    "rule-not-met-at-final": "final analysis: the posterior probability does not reach the "
                             "threshold (the rule not met)",
}


def _bayes_look_line(lk: Mapping[str, Any]) -> str:
    """``look 1 of 2 (sizes a 90, b 90): posterior probability 0.9812 (stop for success at
    0.995), predictive probability 0.8310 (futility below 0.05): continue``."""
    sizes = ", ".join(f"{g} {n}" for g, n in mapping(lk.get("sizes"), "looks.sizes").items())
    line = (f"look {lk.get('look')} of {lk.get('of')} ({sizes}): posterior probability "
            f"{number(lk.get('posterior_probability'), 'looks.posterior_probability'):.4f}")
    final = lk.get("look") == lk.get("of")
    success = number(lk.get("threshold" if final else "stop_for_success"), "looks")
    if success is not None:
        line += f" ({'threshold' if final else 'stop for success at'} {success:g})"
    predictive = number(lk.get("predictive_probability"), "looks.predictive_probability")
    if predictive is not None:
        line += f", predictive probability of final success {predictive:.4f}"
        futility = number(lk.get("stop_for_futility"), "looks.stop_for_futility")
        if futility is not None:
            line += f" (futility below {futility:g}, non-binding)"
    code = text(lk.get("decision"), "looks.decision")
    return f"{line}: {BAYES_DECISION_WORDS.get(code, code)}"


def _bayes_looks_block(hyp: Mapping[str, Any], lk: Mapping[str, Any], at: str,
                       hid: str) -> tuple[str, list[Figure]]:
    """The looks section of a Bayesian rule: the look's probabilities against its thresholds,
    and the table of every look so far."""
    sizes = mapping(lk.get("sizes"), f"{at}.sizes")
    planned = mapping(lk.get("planned_sizes"), f"{at}.planned_sizes")
    look = int(lk["look"])
    final = look == lk.get("of")
    rules = []
    success = number(lk.get("stop_for_success"), f"{at}.stop_for_success")
    futility = number(lk.get("stop_for_futility"), f"{at}.stop_for_futility")
    if success is not None:
        rules.append(f"stop for success where the posterior probability reaches {success:g}")
    if futility is not None:
        rules.append(f"futility may be considered where the predictive probability of final "
                     f"success falls below {futility:g} (non-binding)")
    threshold = number(lk.get("threshold"), f"{at}.threshold")
    rules.append(f"at the final analysis the rule: posterior probability at least "
                 f"{threshold:g}")
    rows = [
        ("Look", f"{look} of {lk.get('of')}"),
        ("Stopping rules", "; ".join(rules)),
        ("Analysed (planned at this look)", ", ".join(
            f"{esc(g)} {n} ({items(planned.get(g), at)[look - 1]})" for g, n in sizes.items())),
        ("Posterior probability", f"{number(lk.get('posterior_probability'), at):.4f}"),
    ]
    predictive = number(lk.get("predictive_probability"), f"{at}.predictive_probability")
    if not final:
        rows.append(("Predictive probability of success at the final analysis",
                     NULL if predictive is None else f"{predictive:.4f}"))
    code = text(lk.get("decision"), f"{at}.decision")
    rows.append(("Decision", BAYES_DECISION_WORDS.get(code, code)))
    head = ["Look", "Analysed", "Information fraction", "Posterior mean difference"
            if hyp.get("kind") != "single" else "Posterior mean",
            "Posterior probability", "Predictive probability", "Stopped for success"]
    past = [mapping(h, f"{at}.history") for h in items(lk.get("history"), f"{at}.history")]
    now = {"look": look, "analysed": lk.get("analysed"),
           "fraction": lk.get("observed_fraction"), "estimate": lk.get("estimate"),
           "posterior_probability": lk.get("posterior_probability"),
           "predictive_probability": predictive, "crossed": lk.get("crossed")}
    body = []
    for h in [*past, now]:
        fraction = number(h.get("fraction"), at)
        pred = number(h.get("predictive_probability"), at)
        body.append([
            str(h.get("look")), str(h.get("analysed")),
            NULL if fraction is None else f"{fraction:.4f}",
            fmt_estimate(number(h.get("estimate"), at)),
            f"{number(h.get('posterior_probability'), at):.4f}",
            NULL if pred is None else f"{pred:.4f}",
            NULL if int(h["look"]) == lk.get("of") else ("yes" if h.get("crossed") else "no"),
        ])
    parts = [
        f'<div class="prespec-looks" style="{LOOKS_STYLE}">',
        f"<h4>Interim looks of {esc(hid)} (a Bayesian rule)</h4>",
        fields(rows),
        table(head, body, numeric=range(1, 6), cls="prespec-boundaries",
              caption="Every look so far: the posterior probability of the rule's event and "
              "the predictive probability of meeting the rule at the final sizes"),
        ("<p><em>The interim thresholds and the final threshold are held exactly as the "
         "design's operating characteristics count them; the futility threshold is "
         "non-binding: continuing past it does not raise the type I error.</em></p>"),
        "</div>",
    ]
    alt = (f"Posterior probability and predictive probability of success of {hid} at each "
           "look, with the stopping thresholds")
    return "".join(parts), [(looks_name(hid), alt)]


def _edge(side: str, value: float | None) -> str:
    """A boundary with its sign (``±`` two-sided), or ``—`` when there is none (level 0)."""
    return NULL if value is None else side + fmt_statistic(value)


def _spending_words(lk: Mapping[str, Any], where: str) -> str:
    eff = text(lk.get("efficacy"), f"{where}.efficacy")
    gamma = number(lk.get("gamma"), f"{where}.gamma")
    words = eff + (f" (gamma {gamma:g})" if gamma is not None else "")
    fut = lk.get("futility")
    if isinstance(fut, Mapping):
        fg = number(fut.get("gamma"), f"{where}.futility.gamma")
        words += (f"; non-binding futility by {text(fut.get('spending'), where)}"
                  + (f" (gamma {fg:g})" if fg is not None else ""))
    return words


def looks_block(hyp: Mapping[str, Any], where: str) -> tuple[str, list[Figure]]:
    """The looks section of one hypothesis (HTML and its figure), or ``("", [])``."""
    raw = hyp.get("looks")
    if raw is None:
        return "", []
    at = f"{where}.looks"
    lk = mapping(raw, at)
    hid = text(hyp.get("id"), f"{where}.id")
    if lk.get("rule") == "bayesian":
        return _bayes_looks_block(hyp, lk, at, hid)
    two = lk.get("sides") == 2
    side = "±" if two else ""
    rows = [
        ("Look", f"{lk.get('look')} of {lk.get('of')}"),
        ("Boundaries", _spending_words(lk, at)),
        ("Information fraction observed",
         (f"{number(lk.get('observed_fraction'), at):.4f} ({lk.get('analysed')} of "
         f"{lk.get('planned_total')} planned)")),
        ("z statistic (pooled)", fmt_statistic(number(lk.get("z"), f"{at}.z"))),
        ("Efficacy boundary at this look",
         _edge(side, number(lk.get("boundary"), f"{at}.boundary"))),
    ]
    if lk.get("futility_boundary") is not None:
        rows.append(
            (
                "Futility boundary (non-binding)",
                fmt_statistic(number(lk.get("futility_boundary"), at)),
            )
        )
    graph = lk.get("graph")
    if isinstance(graph, Mapping):
        rejected = graph.get("rejected_at")
        rows.append(
            (
                "Multiplicity over the looks",
                f"{text(graph.get('method'), at)} as a graph (Maurer and Bretz 2013): "
                f"initial level {number(graph.get('initial_level'), at):.4g}, level now "
                f"{number(graph.get('level'), at):.4g}"
                + (f"; rejected at look {rejected}" if rejected is not None else ""),
            )
        )
    rows.append(("Decision", decision_words(text(lk.get("decision"), f"{at}.decision"))))
    adj = lk.get("adjusted")
    if isinstance(adj, Mapping):
        low, high = (number(c, f"{at}.adjusted.ci") for c in items(adj.get("ci"), at))
        rows += [
            ("Adjusted p-value (stage-wise ordering)",
             fmt_p(number(adj.get("p_value"), f"{at}.adjusted.p_value"))),
            ("Median-unbiased estimate (risk difference)",
             fmt_estimate(number(adj.get("estimate"), f"{at}.adjusted.estimate"))),
            (f"Adjusted interval ({fmt_level(number(adj.get('level'), at))})",
             fmt_interval(low, high)),
        ]
    else:
        rows.append(("Adjusted inference", ("none until a boundary is crossed or the final "
                     "analysis")))
    head = ["Look", "Planned fraction", "Fraction used", "Observed fraction", "Efficacy z",
            "Nominal p", "Alpha spent", "Futility z", "Observed z", "Repeated CI"]
    observed_z = {int(h["look"]): h.get("z") for h in items(lk.get("history"), at)}
    observed_z[int(lk["look"])] = lk.get("z")
    planned = [number(x, at) for x in items(lk.get("planned_fractions"), at)]
    rci = {int(r["look"]): r for r in items(lk.get("repeated_ci"), at)}
    body = []
    for b in items(lk.get("boundaries"), f"{at}.boundaries"):
        k = int(b["look"])
        ci = rci.get(k, {}).get("ci") or [None, None]
        body.append([
            str(k), f"{planned[k - 1]:.4f}" if 0 < k <= len(planned) else NULL,
            f"{number(b.get('fraction'), at):.4f}",
            f"{number(b.get('observed_fraction'), at):.4f}",
            _edge(side, number(b.get("z"), at)),
            fmt_p(number(b.get("nominal_p"), at)),
            f"{number(b.get('alpha_spent'), at):.5f}",
            fmt_statistic(number(b.get("futility_z"), at)),
            fmt_statistic(number(observed_z.get(k), at)),
            fmt_interval(number(ci[0], at), number(ci[1], at)),
        ])
    level = next(iter(rci.values()), {}).get("level")
    caption = (
        f"Boundaries at the information observed (the final look spends all that is "
        f"left); repeated confidence intervals at {fmt_level(number(level, at))}, risk "
        "difference (first group minus second)"
    )
    if isinstance(graph, Mapping):
        caption += ("; the efficacy z are at the hypothesis's level in the graph, the repeated "
                    "intervals and the adjusted inference at the plan's alpha (intervals are "
                    "not adjusted for multiplicity)")
    parts = [
        f'<div class="prespec-looks" style="{LOOKS_STYLE}">',
        f"<h4>Interim looks of {esc(hid)}</h4>",
        fields(rows),
        table(head, body, numeric=range(1, 10), cls="prespec-boundaries", caption=caption),
        (
            "<p><em>The efficacy boundaries control the type I error over all looks; the "
            "naive p-value above is not adjusted for the looks. The futility boundary is "
            "non-binding: ignoring it does not inflate the error rate.</em></p>"
        ),
        "</div>",
    ]
    alt = (
        f"Efficacy and futility boundaries of {hid} against the information fraction, "
        "with the observed z statistics"
    )
    drawn = any(b.get("z") is not None for b in items(lk.get("boundaries"), at))
    return "".join(parts), [(looks_name(hid), alt)] if drawn else []


@dataclass(frozen=True)
class LooksJob:
    """The boundary figure of one hypothesis."""

    hid: str
    fractions: Sequence[float]
    upper: Sequence[float]
    futility: Sequence[float | None]
    two_sided: bool
    observed: Sequence[tuple[float, float]]
    direction: int

    def draw(self) -> MplFigure:
        fig = new_figure(4.2)
        ax = fig.add_subplot()
        t = list(self.fractions)
        side = 1 if self.two_sided else self.direction
        ax.plot(t, [side * b for b in self.upper], marker="o", color=_EFFICACY,
                label="efficacy boundary")
        if self.two_sided:
            ax.plot(t, [-b for b in self.upper], marker="o", color=_EFFICACY)
        fut = [(x, self.direction * a) for x, a in zip(t, self.futility, strict=True)
               if a is not None]
        if fut:
            ax.plot([x for x, _ in fut], [a for _, a in fut], marker="s", linestyle="--",
                    color=_FUTILITY, label="futility boundary (non-binding)")
        if self.observed:
            ax.plot([x for x, _ in self.observed], [z for _, z in self.observed], marker="D",
                    color=_OBSERVED, label="observed z")
        ax.axhline(0.0, color=GUIDE, linewidth=0.8)
        ax.set_xlim(0.0, 1.05)
        ax.set_xlabel("information fraction")
        ax.set_ylabel("z statistic (first group minus second)")
        ax.set_title(f"Boundaries and observed z: {self.hid}", color=INK, loc="left")
        ax.legend(loc="best", frameon=False, labelcolor=LINE)
        return fig


def looks_jobs(results: Mapping[str, Any]) -> list[tuple[str, LooksJob]]:
    """One boundary figure per hypothesis with a ``looks`` block (none in a rehearsal)."""
    if results.get("kind") == "rehearsal":
        return []
    out = []
    for n, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{n}]")
        if hyp.get("looks") is None:
            continue
        hid = text(hyp.get("id"), f"hypotheses[{n}].id")
        at = f"hypotheses.{hid}.looks"
        lk = mapping(hyp["looks"], at)
        if lk.get("rule") == "bayesian":
            out.append((looks_name(hid), _bayes_job(hid, lk, at)))
            continue
        rows = [
            mapping(b, f"{at}.boundaries")
            for b in items(lk.get("boundaries"), at)
            if b.get("z") is not None
        ]
        zs = {int(h["look"]): h.get("z") for h in items(lk.get("history"), at)}
        zs[int(lk["look"])] = lk.get("z")
        observed = [
            (float(b["fraction"]), float(zs[int(b["look"])]))
            for b in rows
            if zs.get(int(b["look"])) is not None
        ]
        if not rows:
            continue
        out.append(
            (
                looks_name(hid),
                LooksJob(
                    hid,
                    [float(b["fraction"]) for b in rows],
                    [float(b["z"]) for b in rows],
                    [None if b.get("futility_z") is None else float(b["futility_z"]) for b in rows],
                    lk.get("sides") == 2,
                    observed,
                    int(lk.get("direction") or 1),
                ),
            )
        )
    return out


@dataclass(frozen=True)
class BayesLooksJob:
    """The figure of a Bayesian rule's looks: the posterior and the predictive probability at
    each look so far against the information fraction, with the thresholds."""

    hid: str
    posterior: Sequence[tuple[float, float]]
    predictive: Sequence[tuple[float, float]]
    success: float | None
    futility: float | None
    threshold: float

    def draw(self) -> MplFigure:
        fig = new_figure(4.2)
        ax = fig.add_subplot()
        ax.plot([x for x, _ in self.posterior], [p for _, p in self.posterior], marker="D",
                color=_OBSERVED, label="posterior probability")
        if self.predictive:
            ax.plot([x for x, _ in self.predictive], [p for _, p in self.predictive],
                    marker="s", linestyle="--", color=_FUTILITY,
                    label="predictive probability of final success")
        if self.success is not None:
            ax.axhline(self.success, color=_EFFICACY, linewidth=1.0, linestyle=":",
                       label=f"stop for success ({self.success:g})")
        ax.axhline(self.threshold, color=_EFFICACY, linewidth=1.0,
                   label=f"final threshold ({self.threshold:g})")
        if self.futility is not None:
            ax.axhline(self.futility, color=_FUTILITY, linewidth=1.0, linestyle=":",
                       label=f"futility, non-binding ({self.futility:g})")
        ax.set_xlim(0.0, 1.05)
        ax.set_ylim(-0.02, 1.02)
        ax.set_xlabel("information fraction")
        ax.set_ylabel("probability")
        ax.set_title(f"Posterior and predictive probabilities: {self.hid}", color=INK,
                     loc="left")
        ax.legend(loc="best", frameon=False, labelcolor=LINE, fontsize="small")
        return fig


def _bayes_job(hid: str, lk: Mapping[str, Any], at: str) -> BayesLooksJob:
    rows = [mapping(h, f"{at}.history") for h in items(lk.get("history"), f"{at}.history")]
    rows.append({"fraction": lk.get("observed_fraction"),
                 "posterior_probability": lk.get("posterior_probability"),
                 "predictive_probability": lk.get("predictive_probability")})
    posterior, predictive = [], []
    for h in rows:
        x = number(h.get("fraction"), at)
        if x is None:
            continue
        posterior.append((x, float(number(h.get("posterior_probability"), at))))
        pred = number(h.get("predictive_probability"), at)
        if pred is not None:
            predictive.append((x, pred))
    return BayesLooksJob(hid, posterior, predictive,
                         number(lk.get("stop_for_success"), at),
                         number(lk.get("stop_for_futility"), at),
                         float(number(lk.get("threshold"), at)))
