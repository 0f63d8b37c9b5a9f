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


def decision_words(code: str) -> str:
    """The decision of a look in words."""
    return DECISION_WORDS.get(code, code)


def look_line(hyp: Mapping[str, Any]) -> str:
    """One line for the terminal: ``look 2 of 3: z = 1.234, boundary 2.963: continue``."""
    lk = mapping(hyp["looks"], "looks")
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
