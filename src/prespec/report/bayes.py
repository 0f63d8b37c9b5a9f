"""A Bayesian hypothesis (test ``posterior-probability``), as the report shows it.

Around the count table, a Bayesian hypothesis shows: each group's Beta prior (and how the plan
gave it: as Beta parameters, or as a mean and an effective sample size) beside its conjugate
posterior; the posterior mean with its equal-tailed *credible* interval; the posterior
probability of the rule's event against the plan's threshold, and whether the rule is met
(never "reject H0": the decision is the plan's rule on a posterior probability, not a test);
the sentence the analysis wrote; a line saying that the hypothesis lies outside the frequentist
multiplicity adjustment and that its operating characteristics are shown instead; the
prior-sensitivity table (the same data under a flat prior, a sceptical prior and the plan's);
and the rule's exact operating characteristics at the planned sizes (the type I error
maximised over the null boundary, plainly flagged when it exceeds alpha, and the power at the
assumed rates).

Two figures per hypothesis: ``figures/bayes-<id>.png`` (the posterior densities of the groups
and of the difference, the region of the rule's event shaded and the margin marked) and, with
operating characteristics, ``figures/oc-<id>.png`` (the probability that the rule is met along
the null boundary, with a line at alpha). The table ``tables/bayes-<id>.csv`` holds the priors,
posteriors, probability, threshold and the sensitivity rows.

The report computes nothing: every number, and every point of every curve, is read from
results.json through the checked readers of :mod:`prespec.report.values`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.common.shown import csv_writer
from prespec.errors import PrespecError
from prespec.report.canvas import FIGURES, GUIDE, INK, LINE, new_figure, safe_stem, shorten
from prespec.report.markup import ASIDE_STYLE, BOX, esc, fields, table
from prespec.report.values import (
    NULL,
    fmt_count,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_rate,
    items,
    mapping,
    measure_label,
    number,
    pair,
    text,
)

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure as MplFigure

#: The test name of a Bayesian hypothesis.
TEST = "posterior-probability"

BAYES_STYLE = ASIDE_STYLE.format(c="#5a3d8a")
#: The box of a type I error above alpha: plain, and impossible to miss.
EXCEEDS_STYLE = BOX.format(c="#8a5a00", b="#fff3dc")

RULE_MET = "rule met"
RULE_NOT_MET = "rule not met"

#: How the prior-sensitivity analyses are named in the report.
PRIOR_NAMES = {
    "flat": "flat",
    "sceptical": "sceptical, centred on no difference",
    "plan": "the plan's prior",
}

_GROUP_COLOURS = ("#1f4e79", "#c26a00")  # blue and orange: apart under colour blindness
_REGION = "#4a90d0"
_MARGIN = "#8a5a00"
_ALPHA = "#b22222"

#: A figure of the report: (relative path, alternative text).
Figure = tuple[str, str]


def bayes_name(hid: str) -> str:
    """The relative path of a Bayesian hypothesis's density figure."""
    return f"{FIGURES}/bayes-{safe_stem(hid, 'hypothesis')}.png"


def oc_name(hid: str) -> str:
    """The relative path of a Bayesian hypothesis's operating-characteristics figure."""
    return f"{FIGURES}/oc-{safe_stem(hid, 'hypothesis')}.png"


def is_bayesian(hyp: Mapping[str, Any]) -> bool:
    """Whether the hypothesis was decided by a Bayesian rule (test posterior-probability)."""
    return hyp.get("test") == TEST


def decision_words(hyp: Mapping[str, Any], where: str) -> str:
    """``rule met``, ``rule not met``, or ``—`` when results.json gives no decision."""
    reject = hyp.get("reject")
    if reject is None:
        return NULL
    if not isinstance(reject, bool):
        raise PrespecError(
            f"results.json: {where}.reject: expected true, false or null, found {reject!r}")
    return RULE_MET if reject else RULE_NOT_MET


def fmt_probability(value: float | None, threshold: float | None = None) -> str:
    """A posterior probability: 4 decimals, ``> 0.9999`` / ``< 0.0001`` at the ends, and more
    decimals (up to 8) where 4 would print it equal to a threshold it is not equal to."""
    if value is None:
        return NULL
    for decimals in range(4, 9):
        shown = f"{value:.{decimals}f}"
        if threshold is None or value == threshold or shown != f"{threshold:.{decimals}f}":
            break
    if 0.0 < value and float(shown) == 0.0:
        return f"< {10.0 ** -decimals:.{decimals}f}"
    if value < 1.0 and float(shown) == 1.0:
        return f"> {1.0 - 10.0 ** -decimals:.{decimals}f}"
    return shown


def fmt_beta(a: float | None, b: float | None) -> str:
    """``Beta(20, 160)``; parameters with up to 6 significant digits."""
    def one(v: float | None) -> str:
        return NULL if v is None else f"{v:.6g}"
    return f"Beta({one(a)}, {one(b)})"


# --- reading the bayesian block -------------------------------------------------------------


@dataclass(frozen=True)
class Prior:
    group: str
    a: float | None
    b: float | None
    mean: float | None
    n: float | None


@dataclass(frozen=True)
class Posterior:
    group: str
    a: float | None
    b: float | None
    mean: float | None


@dataclass(frozen=True)
class SensitivityRow:
    name: str
    priors: tuple[tuple[str, float | None, float | None], ...]
    probability: float | None
    rule_met: bool | None
    value: float | None
    ci: tuple[float | None, float | None]
    centre: float | None
    n: float | None


@dataclass(frozen=True)
class Operating:
    sizes: tuple[tuple[str, float | None], ...]
    alpha: float | None
    type_one_error: float | None
    at_rate: float | None
    exceeds_alpha: bool | None
    power: float | None
    assumed: tuple[tuple[str, float | None], ...]
    curve: tuple[tuple[float | None, float | None, float | None], ...]  # rate_a, rate_b, prob
    looks: tuple[tuple[str, str], ...] = ()  # a rule with interim looks: its rows, in words


@dataclass(frozen=True)
class Densities:
    x: tuple[float | None, ...]
    groups: tuple[tuple[str, tuple[float | None, ...]], ...]
    difference_x: tuple[float | None, ...]
    difference: tuple[float | None, ...]
    region: tuple[float | None, float | None]


@dataclass(frozen=True)
class Bayes:
    """One Bayesian hypothesis as results.json gives it (nothing recomputed)."""

    hid: str
    single: bool
    alternative: str
    margin: float | None
    null_rate: float | None
    prior: tuple[Prior, ...]
    posterior: tuple[Posterior, ...]
    statement: str
    probability: float | None
    threshold: float | None
    rule_met: bool | None
    level: float | None
    densities: Densities | None
    sensitivity: tuple[SensitivityRow, ...]
    operating: Operating | None

    @property
    def groups(self) -> list[str]:
        return [p.group for p in self.prior] or [p.group for p in self.posterior]


def _flag(value: object, path: str) -> bool | None:
    if value is not None and not isinstance(value, bool):
        raise PrespecError(f"results.json: {path}: expected true, false or null, found {value!r}")
    return value


def _numbers(value: object, path: str) -> tuple[float | None, ...]:
    return tuple(number(v, f"{path}[{k}]") for k, v in enumerate(items(value, path)))


def _read_densities(raw: object, at: str) -> Densities:
    d = mapping(raw, at)
    x = _numbers(d.get("x"), f"{at}.x")
    groups = []
    for name, values in mapping(d.get("groups") or {}, f"{at}.groups").items():
        ys = _numbers(values, f"{at}.groups.{name}")
        if len(ys) != len(x):
            raise PrespecError(f"results.json: {at}.groups.{name}: expected {len(x)} values, "
                               f"one per point of x, found {len(ys)}")
        groups.append((str(name), ys))
    dx = _numbers(d.get("difference_x"), f"{at}.difference_x")
    dy = _numbers(d.get("difference"), f"{at}.difference")
    if len(dx) != len(dy):
        raise PrespecError(f"results.json: {at}.difference: expected {len(dx)} values, one "
                           f"per point of difference_x, found {len(dy)}")
    return Densities(x, tuple(groups), dx, dy, pair(d.get("region"), f"{at}.region"))


def _read_sensitivity(raw: object, at: str) -> SensitivityRow:
    s = mapping(raw, at)
    priors = []
    for k, p in enumerate(items(s.get("priors"), f"{at}.priors")):
        p_at = f"{at}.priors[{k}]"
        prior = mapping(p, p_at)
        priors.append((text(prior.get("group"), f"{p_at}.group"),
                       number(prior.get("a"), f"{p_at}.a"), number(prior.get("b"), f"{p_at}.b")))
    value: float | None = None
    ci: tuple[float | None, float | None] = (None, None)
    if s.get("estimate") is not None:
        est = mapping(s["estimate"], f"{at}.estimate")
        value = number(est.get("value"), f"{at}.estimate.value")
        ci = pair(est.get("ci"), f"{at}.estimate.ci")
    return SensitivityRow(
        name=text(s.get("prior"), f"{at}.prior"),
        priors=tuple(priors),
        probability=number(s.get("posterior_probability"), f"{at}.posterior_probability"),
        rule_met=_flag(s.get("rule_met"), f"{at}.rule_met"),
        value=value,
        ci=ci,
        centre=number(s.get("centre"), f"{at}.centre"),
        n=number(s.get("n"), f"{at}.n"),
    )


def _read_operating(raw: object, at: str) -> Operating:
    oc = mapping(raw, at)
    sizes = tuple((str(g), number(n, f"{at}.sizes.{g}"))
                  for g, n in mapping(oc.get("sizes") or {}, f"{at}.sizes").items())
    assumed = tuple((str(g), number(r, f"{at}.assumed.{g}"))
                    for g, r in mapping(oc.get("assumed") or {}, f"{at}.assumed").items())
    curve = []
    for k, p in enumerate(items(oc.get("curve"), f"{at}.curve")):
        p_at = f"{at}.curve[{k}]"
        point = mapping(p, p_at)
        curve.append((number(point.get("rate_a"), f"{p_at}.rate_a"),
                      number(point.get("rate_b"), f"{p_at}.rate_b"),
                      number(point.get("probability"), f"{p_at}.probability")))
    return Operating(
        looks=() if oc.get("looks") is None else _read_look_design(oc["looks"],
                                                                   f"{at}.looks"),
        sizes=sizes,
        alpha=number(oc.get("alpha"), f"{at}.alpha"),
        type_one_error=number(oc.get("type_one_error"), f"{at}.type_one_error"),
        at_rate=number(oc.get("at_rate"), f"{at}.at_rate"),
        exceeds_alpha=_flag(oc.get("exceeds_alpha"), f"{at}.exceeds_alpha"),
        power=number(oc.get("power"), f"{at}.power"),
        assumed=assumed,
        curve=tuple(curve),
    )


def _per_look(values: object, at: str) -> str:
    return ", ".join(f"look {k + 1} {fmt_probability(v)}"
                     for k, v in enumerate(_numbers(values, at))) or NULL


def _read_look_design(raw: object, at: str) -> tuple[tuple[str, str], ...]:
    """The planned looks of a rule and their stopping probabilities, as rows in words."""
    lk = mapping(raw, at)
    sizes = "; ".join(f"{g} {', '.join(fmt_count(n) for n in _numbers(v, f'{at}.sizes.{g}'))}"
                      for g, v in mapping(lk.get("sizes") or {}, f"{at}.sizes").items())
    success = number(lk.get("stop_for_success"), f"{at}.stop_for_success")
    futility = number(lk.get("stop_for_futility"), f"{at}.stop_for_futility")
    rules = []
    if success is not None:
        rules.append(f"stop for success at posterior probability ≥ {fmt_rate(success)}")
    if futility is not None:
        rules.append(f"futility (non-binding) at predictive probability < {fmt_rate(futility)}")
    rows = [("Interim looks (cumulative sizes)", sizes or NULL),
            ("Stopping rules", "; ".join(rules) or NULL)]
    for key, label in (("under_null", "where the type I error is largest"),
                       ("under_assumed", "at the assumed rates")):
        if lk.get(key) is None:
            continue
        point = mapping(lk[key], f"{at}.{key}")
        here = f"{at}.{key}"
        rows.append((f"Stopping for success, {label}",
                     _per_look(point.get("stop_for_success"), f"{here}.stop_for_success")))
        if futility is not None:
            rows.append((f"Stopping for futility if followed, {label}",
                         _per_look(point.get("futility"), f"{here}.futility")))
        expected = ", ".join(f"{g} {number(n, f'{here}.expected_size.{g}'):.1f}" for g, n in
                             mapping(point.get("expected_size") or {}, here).items())
        rows.append((f"Expected analysed size, {label}", expected or NULL))
    return tuple(rows)


def read_bayes(hyp: Mapping[str, Any], where: str) -> Bayes | None:
    """The hypothesis's Bayesian block, read and checked, or None without one."""
    if hyp.get("bayesian") is None:
        return None
    at = f"{where}.bayesian"
    bay = mapping(hyp["bayesian"], at)
    priors = []
    for k, raw in enumerate(items(bay.get("prior"), f"{at}.prior")):
        p_at = f"{at}.prior[{k}]"
        p = mapping(raw, p_at)
        priors.append(Prior(text(p.get("group"), f"{p_at}.group"),
                            number(p.get("a"), f"{p_at}.a"), number(p.get("b"), f"{p_at}.b"),
                            number(p.get("mean"), f"{p_at}.mean"), number(p.get("n"), f"{p_at}.n")))
    posteriors = []
    for k, raw in enumerate(items(bay.get("posterior"), f"{at}.posterior")):
        p_at = f"{at}.posterior[{k}]"
        p = mapping(raw, p_at)
        posteriors.append(Posterior(text(p.get("group"), f"{p_at}.group"),
                                    number(p.get("a"), f"{p_at}.a"),
                                    number(p.get("b"), f"{p_at}.b"),
                                    number(p.get("mean"), f"{p_at}.mean")))
    if priors and posteriors and len(priors) != len(posteriors):
        raise PrespecError(f"results.json: {at}.posterior: expected {len(priors)} entries, one "
                           f"per prior, found {len(posteriors)}")
    level = None
    if hyp.get("estimate") is not None:
        level = number(mapping(hyp["estimate"], f"{where}.estimate").get("level"),
                       f"{where}.estimate.level")
    kind = text(hyp.get("kind"), f"{where}.kind", default="")
    return Bayes(
        hid=text(hyp.get("id"), f"{where}.id"),
        single=kind == "single" or len(priors) == 1,
        alternative=text(bay.get("alternative"), f"{at}.alternative", default=NULL),
        margin=number(bay.get("margin"), f"{at}.margin"),
        null_rate=number(bay.get("null_rate"), f"{at}.null_rate"),
        prior=tuple(priors),
        posterior=tuple(posteriors),
        statement=text(bay.get("statement"), f"{at}.statement", default="").strip(),
        probability=number(hyp.get("posterior_probability"), f"{where}.posterior_probability"),
        threshold=number(hyp.get("threshold"), f"{where}.threshold"),
        rule_met=_flag(hyp.get("reject"), f"{where}.reject"),
        level=level,
        densities=(None if bay.get("densities") is None
                   else _read_densities(bay["densities"], f"{at}.densities")),
        sensitivity=tuple(_read_sensitivity(raw, f"{at}.sensitivity[{k}]")
                          for k, raw in enumerate(items(bay.get("sensitivity"),
                                                        f"{at}.sensitivity"))),
        operating=(None if bay.get("operating_characteristics") is None
                   else _read_operating(bay["operating_characteristics"],
                                        f"{at}.operating_characteristics")),
    )


# --- words ------------------------------------------------------------------------------------


def event_words(b: Bayes) -> str:
    """The rule's event: ``p(a) − p(b) > 0.00`` or ``p(a) < 0.30``."""
    sign = {"greater": ">", "less": "<"}.get(b.alternative, b.alternative)
    groups = b.groups
    if b.single:
        name = groups[0] if groups else "the group"
        return f"p({name}) {sign} {fmt_rate(b.null_rate)}"
    first, second = (groups + [NULL, NULL])[:2]
    return f"p({first}) − p({second}) {sign} {fmt_rate(b.margin if b.margin is not None else 0.0)}"


def result_rows(hyp: Mapping[str, Any], where: str) -> list[tuple[str, str]]:
    """The result rows of a Bayesian hypothesis: the posterior mean and its credible interval,
    the posterior probability of the rule's event, the threshold and whether the rule is met."""
    rows: list[tuple[str, str]] = []
    if hyp.get("estimate") is not None:
        at = f"{where}.estimate"
        est = mapping(hyp["estimate"], at)
        measure = text(est.get("measure"), f"{at}.measure", default="estimate")
        low, high = pair(est.get("ci"), f"{at}.ci")
        level = number(est.get("level"), f"{at}.level")
        method = text(est.get("ci_method"), f"{at}.ci_method", default="")
        rows.append((f"Estimate ({measure_label(measure)}, posterior mean)",
                     fmt_estimate(number(est.get("value"), f"{at}.value"))))
        label = "Credible interval"
        shown = [fmt_level(level) if level is not None else "",
                 "equal-tailed" if method == "equal-tailed-credible" else method]
        shown = [s for s in shown if s]
        if shown:
            label += f" ({', '.join(shown)})"
        rows.append((label, fmt_interval(low, high)))
        if est.get("note") is not None:
            rows.append(("Estimate note", text(est.get("note"), f"{at}.note")))
    b = read_bayes(hyp, where)
    threshold = number(hyp.get("threshold"), f"{where}.threshold")
    probability = number(hyp.get("posterior_probability"), f"{where}.posterior_probability")
    if b is not None:
        rows.append(("Rule's event", event_words(b)))
    rows.append(("Posterior probability", fmt_probability(probability, threshold)))
    looks = hyp.get("looks")
    interim = isinstance(looks, Mapping) and looks.get("look") != looks.get("of")
    rows.append(("Interim success threshold (stop_for_success)" if interim else "Threshold",
                 NULL if threshold is None else fmt_rate(threshold)))
    label = "Rule (exploratory)" if hyp.get("role") == "exploratory" else "Decision"
    decision = decision_words(hyp, where)
    if interim:
        decision = {RULE_MET: "stop for success (the rule met at this look)",
                    RULE_NOT_MET: "no stop for success at this look"}.get(decision, decision)
    rows.append((label, decision))
    return rows


def _given_as(p: Prior) -> str:
    if p.mean is not None or p.n is not None:
        mean = NULL if p.mean is None else f"{p.mean:.6g}"
        n = NULL if p.n is None else f"{p.n:.6g}"
        return f"mean {mean}, effective sample size {n}"
    return "Beta parameters"


def priors_table(b: Bayes) -> str:
    """Each group's prior (and how the plan gave it) beside its posterior."""
    body = []
    for k, group in enumerate(b.groups):
        prior = b.prior[k] if k < len(b.prior) else None
        post = b.posterior[k] if k < len(b.posterior) else None
        body.append([
            group,
            NULL if prior is None else fmt_beta(prior.a, prior.b),
            NULL if prior is None else _given_as(prior),
            NULL if post is None else fmt_beta(post.a, post.b),
            NULL if post is None else fmt_estimate(post.mean),
        ])
    words = ("Conjugate analysis: each group's rate has a Beta prior, and its posterior is "
             "Beta(a + events, b + non-events).")
    return (f"<p>{esc(words)}</p>"
            + table(["Group", "Prior", "Prior given as", "Posterior", "Posterior mean"], body,
                    numeric=(4,), cls="prespec-bayes-priors"))


def multiplicity_line(b: Bayes) -> str:
    """The plain line that the hypothesis is outside the frequentist multiplicity adjustment."""
    words = (f"{b.hid} is decided by a pre-specified Bayesian rule, not by a test: it lies "
             "outside the frequentist multiplicity adjustment (no p-value, no adjusted "
             "p-value, no family).")
    if b.operating is not None:
        words += (" Its frequentist operating characteristics at the planned sizes are shown "
                  "instead, below.")
    else:
        words += (" Its operating characteristics would be shown instead, but the plan has no "
                  "design or no planned sizes, so none were computed.")
    return f'<p class="prespec-bayes-multiplicity">{esc(words)}</p>'


def _sensitivity_name(row: SensitivityRow) -> str:
    name = PRIOR_NAMES.get(row.name, row.name)
    if row.centre is not None or row.n is not None:
        centre = NULL if row.centre is None else f"{row.centre:.6g}"
        n = NULL if row.n is None else f"{row.n:.6g}"
        name += f" (centre {centre}, effective sample size {n})"
    return name


def sensitivity_table(b: Bayes) -> str:
    """The prior-sensitivity table: the same data under each prior, or ``""`` without one."""
    if not b.sensitivity:
        return ""
    body = []
    for row in b.sensitivity:
        priors = "; ".join(f"{g} {fmt_beta(a, c)}" for g, a, c in row.priors) or NULL
        rule = NULL if row.rule_met is None else (RULE_MET if row.rule_met else RULE_NOT_MET)
        body.append([_sensitivity_name(row), priors,
                     fmt_probability(row.probability, b.threshold), rule,
                     fmt_estimate(row.value), fmt_interval(*row.ci)])
    level = f"{fmt_level(b.level)} " if b.level is not None else ""
    caption = (f"Prior sensitivity: the same data under other priors, each against the "
               f"threshold {NULL if b.threshold is None else fmt_rate(b.threshold)}")
    words = ("So that a reader sees how much the conclusion rests on the prior. The decision "
             f"of {b.hid} is the one under the plan's prior, above.")
    return ("<h4>Prior sensitivity</h4>" + f"<p>{esc(words)}</p>"
            + table(["Prior", "Priors by group", "Posterior probability", "Rule",
                     "Posterior mean", f"{level}credible interval"], body, numeric=(2, 4, 5),
                    cls="prespec-bayes-sensitivity", caption=caption))


def _where_words(b: Bayes, oc: Operating) -> str:
    if oc.at_rate is None:
        return ""
    groups = b.groups
    if b.single:
        return f", at the true rate {oc.at_rate:.4g}"
    if (b.margin or 0.0) == 0.0:
        return f", where both groups' true rates are {oc.at_rate:.4g}"
    second = groups[1] if len(groups) > 1 else "the second group"
    return f", where the true rate of {second} is {oc.at_rate:.4g}"


def _boundary_words(b: Bayes) -> str:
    groups = b.groups
    if b.single:
        name = groups[0] if groups else "the group"
        return f"the null hypothesis p({name}) = {fmt_rate(b.null_rate)}"
    first, second = (groups + [NULL, NULL])[:2]
    margin = fmt_rate(b.margin if b.margin is not None else 0.0)
    return f"the null boundary p({first}) = p({second}) + {margin}"


def operating_block(b: Bayes) -> str:
    """The rule's operating characteristics, with a box when the type I error exceeds alpha."""
    oc = b.operating
    if oc is None:
        return ""
    alpha = NULL if oc.alpha is None else fmt_rate(oc.alpha)
    sizes = ", ".join(f"{g} {fmt_count(n)}" for g, n in oc.sizes) or NULL
    assumed = ", ".join(f"{g} {fmt_rate(r)}" for g, r in oc.assumed)
    t1e = fmt_probability(oc.type_one_error, oc.alpha)
    rows = [
        ("Planned sizes", sizes),
        ("Type I error (maximised)", t1e + _where_words(b, oc)),
        ("Alpha", alpha),
        ("Against alpha", NULL if oc.exceeds_alpha is None
         else ("exceeds alpha" if oc.exceeds_alpha else "within alpha")),
        ("Power at the assumed rates",
         fmt_probability(oc.power) + (f" ({assumed})" if assumed else "")),
    ]
    words = (f"The probability that the rule is met, computed exactly over every outcome at "
             f"the planned sizes: its largest value along {_boundary_words(b)} is the type I "
             "error; its value at the design's assumed rates is the power.")
    if oc.looks:
        rows += list(oc.looks)
        words += (" With the interim looks: a stop for success at a look counts as the rule "
                  "met; the futility threshold is non-binding, so it does not lower the type I "
                  "error (stopping for futility is shown as if followed); the expected sizes "
                  "count stopping for success only.")
    parts = [f"<h4>Operating characteristics of the rule</h4><p>{esc(words)}</p>",
             fields(rows)]
    if oc.exceeds_alpha:
        warn = (f"The rule's maximised type I error {t1e} exceeds alpha {alpha}: where the "
                "null hypothesis holds, the rule can be met more often than alpha allows. The "
                "plan may intend it; a reader should know it.")
        parts.append(f'<div class="prespec-bayes-exceeds" style="{EXCEEDS_STYLE}">'
                     f"<strong>Type I error above alpha.</strong> {esc(warn)}</div>")
    return "".join(parts)


def inputs_block(hyp: Mapping[str, Any], where: str) -> str:
    """The priors and posteriors of a Bayesian hypothesis, or ``""`` for any other."""
    b = read_bayes(hyp, where)
    if b is None:
        return ""
    return f'<div class="prespec-bayes" style="{BAYES_STYLE}">{priors_table(b)}</div>'


def after_block(hyp: Mapping[str, Any], where: str) -> tuple[str, list[Figure]]:
    """What follows a Bayesian hypothesis's result rows: the sentence, the multiplicity line,
    the prior sensitivity and the operating characteristics (HTML), and its figures."""
    b = read_bayes(hyp, where)
    if b is None:
        return "", []
    parts = [f'<div class="prespec-bayes" style="{BAYES_STYLE}">']
    if b.statement:
        parts.append(f'<p class="prespec-bayes-statement">{esc(b.statement)}</p>')
    parts.append(multiplicity_line(b))
    parts.append(sensitivity_table(b))
    parts.append(operating_block(b))
    parts.append("</div>")
    figures: list[Figure] = []
    if drawn_densities(b):
        alt = (f"Posterior densities of {b.hid}, the region of the rule's event shaded "
               f"({event_words(b)}); posterior probability "
               f"{fmt_probability(b.probability, b.threshold)}")
        figures.append((bayes_name(b.hid), alt))
    if drawn_operating(b):
        alt = (f"Probability that the rule of {b.hid} is met along {_boundary_words(b)}, "
               "against alpha")
        figures.append((oc_name(b.hid), alt))
    return "".join(parts), figures


# --- figures ----------------------------------------------------------------------------------


def drawn_densities(b: Bayes) -> bool:
    """Whether the density figure is drawn: results.json gives density points."""
    d = b.densities
    return d is not None and bool(d.x) and bool(d.groups)


def drawn_operating(b: Bayes) -> bool:
    """Whether the operating-characteristics figure is drawn: there is a curve."""
    return b.operating is not None and any(p is not None for _, _, p in b.operating.curve)


def _nan(values: Sequence[float | None]) -> list[float]:
    return [float("nan") if v is None else v for v in values]


def _view(xs: Sequence[float | None], ys: Sequence[float | None],
          marks: Sequence[float]) -> tuple[float, float] | None:
    """The x-range where a density is visible (above 0.1% of its peak), with the marks."""
    shown = [(x, y) for x, y in zip(xs, ys, strict=True) if x is not None and y is not None]
    if not shown:
        return None
    top = max(y for _, y in shown)
    inside = [x for x, y in shown if y >= top * 1e-3] or [x for x, _ in shown]
    lo, hi = min([*inside, *marks]), max([*inside, *marks])
    pad = (hi - lo) * 0.06 or 0.05
    return lo - pad, hi + pad


def _shade(ax: Axes, xs: Sequence[float | None], ys: Sequence[float | None],
           region: tuple[float | None, float | None], label: str) -> None:
    lo, hi = region
    if lo is None and hi is None:
        return
    lo = -float("inf") if lo is None else lo
    hi = float("inf") if hi is None else hi
    where = [x is not None and lo <= x <= hi for x in xs]
    ax.fill_between(_nan(xs), 0.0, _nan(ys), where=where, color=_REGION, alpha=0.35,
                    linewidth=0, label=label, interpolate=False)


def _headroom(ax: Axes, ys: Sequence[float | None], entries: int) -> None:
    """From 0 to above the highest point drawn, so that a legend of ``entries`` lines finds
    room."""
    top = max((y for y in ys if y is not None), default=0.0)
    ax.set_ylim(0.0, top * (1.15 + 0.12 * entries) if top > 0 else 1.0)


def _legend(ax: Axes) -> None:
    ax.legend(loc="best", fontsize=9, labelcolor=LINE, frameon=True, facecolor="white",
              edgecolor="none", framealpha=0.9)


@dataclass(frozen=True)
class BayesJob:
    """The posterior densities of one Bayesian hypothesis (and of its difference)."""

    bayes: Bayes

    def draw(self) -> MplFigure:
        b = self.bayes
        d = b.densities
        assert d is not None
        pair_ = not b.single and bool(d.difference_x)
        fig = new_figure(6.4 if pair_ else 3.8)
        axes = fig.subplots(2 if pair_ else 1, 1, squeeze=False)[:, 0]
        ax = axes[0]
        marks: list[float] = []
        for k, (group, ys) in enumerate(d.groups):
            post = next((p for p in b.posterior if p.group == group), None)
            label = shorten(group, 30) + (f": {fmt_beta(post.a, post.b)}" if post else "")
            ax.plot(_nan(d.x), _nan(ys), color=_GROUP_COLOURS[k % 2], linewidth=1.8,
                    label=label)
        if b.single:
            _shade(ax, d.x, d.groups[0][1], d.region, f"rule's event: {event_words(b)}")
            if b.null_rate is not None:
                ax.axvline(b.null_rate, color=_MARGIN, linestyle="--", linewidth=1.2,
                           label=f"null rate {fmt_rate(b.null_rate)}")
                marks.append(b.null_rate)
        views = [_view(d.x, ys, marks) for _, ys in d.groups]
        spans = [v for v in views if v is not None]
        if spans:
            ax.set_xlim(max(0.0, min(v[0] for v in spans)), min(1.0, max(v[1] for v in spans)))
        _headroom(ax, [y for _, ys in d.groups for y in ys],
                  len(ax.get_legend_handles_labels()[0]))
        ax.set_xlabel("rate with the event")
        ax.set_ylabel("posterior density")
        ax.set_title(shorten(f"Posterior of each group: {b.hid}", 70), loc="left", color=INK)
        _legend(ax)
        if pair_:
            self._difference(axes[1])
        verdict = NULL if b.rule_met is None else (RULE_MET if b.rule_met else RULE_NOT_MET)
        threshold = NULL if b.threshold is None else fmt_rate(b.threshold)
        fig.supxlabel(
            f"Shaded: {event_words(b)}, posterior probability "
            f"{fmt_probability(b.probability, b.threshold)}; threshold {threshold}: {verdict}.",
            x=0.01, ha="left", fontsize=8, color=LINE)
        return fig

    def _difference(self, ax: Axes) -> None:
        b = self.bayes
        d = b.densities
        assert d is not None
        groups = b.groups
        first, second = (groups + [NULL, NULL])[:2]
        ax.plot(_nan(d.difference_x), _nan(d.difference), color=INK, linewidth=1.8,
                label="posterior of the difference")
        _shade(ax, d.difference_x, d.difference, d.region, f"rule's event: {event_words(b)}")
        margin = b.margin if b.margin is not None else 0.0
        ax.axvline(margin, color=_MARGIN, linestyle="--", linewidth=1.2,
                   label=f"margin {fmt_rate(margin)}")
        if margin != 0.0:
            ax.axvline(0.0, color=GUIDE, linewidth=0.8, zorder=0)
        view = _view(d.difference_x, d.difference, [margin])
        if view is not None:
            ax.set_xlim(max(-1.0, view[0]), min(1.0, view[1]))
        _headroom(ax, d.difference, len(ax.get_legend_handles_labels()[0]))
        ax.set_xlabel(shorten(f"difference p({first}) − p({second})", 70))
        ax.set_ylabel("posterior density")
        ax.set_title("Posterior of the difference", loc="left", color=INK)
        _legend(ax)


@dataclass(frozen=True)
class OperatingJob:
    """The probability that the rule is met along the null boundary, against alpha."""

    bayes: Bayes

    def draw(self) -> MplFigure:
        b = self.bayes
        oc = b.operating
        assert oc is not None
        fig = new_figure(3.8)
        ax = fig.add_subplot()
        use_b = not b.single and any(rb is not None for _, rb, _ in oc.curve)
        points = [((rb if use_b else ra), p) for ra, rb, p in oc.curve]
        points = [(x, p) for x, p in points if x is not None]
        ax.plot([x for x, _ in points], _nan([p for _, p in points]), color=_GROUP_COLOURS[0],
                linewidth=1.8, label="probability that the rule is met")
        if oc.alpha is not None:
            ax.axhline(oc.alpha, color=_ALPHA, linestyle="--", linewidth=1.2,
                       label=f"alpha {fmt_rate(oc.alpha)}")
        if oc.at_rate is not None and oc.type_one_error is not None:
            ax.plot([oc.at_rate], [oc.type_one_error], marker="o", markersize=7,
                    color=_ALPHA if oc.exceeds_alpha else INK, linestyle="none",
                    label=f"maximum {fmt_probability(oc.type_one_error, oc.alpha)}")
        tops = [p for _, p in points if p is not None]
        tops += [v for v in (oc.alpha, oc.type_one_error) if v is not None]
        ax.set_ylim(0.0, max(tops, default=0.05) * 1.2 or 0.05)
        if points:
            ax.set_xlim(min(x for x, _ in points), max(x for x, _ in points))
        groups = b.groups
        if b.single:
            ax.set_xlabel(shorten(f"true rate of {groups[0] if groups else 'the group'}", 70))
        else:
            first, second = (groups + [NULL, NULL])[:2]
            margin = fmt_rate(b.margin if b.margin is not None else 0.0)
            ax.set_xlabel(shorten(f"true rate of {second}, with p({first}) = p({second}) "
                                  f"+ {margin}", 90))
        ax.set_ylabel("probability (type I error)")
        ax.set_title(shorten(f"Type I error along the null boundary: {b.hid}", 70), loc="left",
                     color=INK)
        ax.grid(color="#eeeeee", linewidth=0.8)
        ax.set_axisbelow(True)
        ax.legend(loc="best", frameon=False, fontsize=9, labelcolor=LINE)
        sizes = ", ".join(f"{shorten(g, 24)} {fmt_count(n)}" for g, n in oc.sizes)
        looked = ", with the interim looks" if oc.looks else ""
        fig.supxlabel(f"Exact, at the planned sizes ({sizes or NULL}){looked}.", x=0.01,
                      ha="left",
                      fontsize=8, color=LINE)
        return fig


def bayes_jobs(results: Mapping[str, Any]) -> list[tuple[str, BayesJob | OperatingJob]]:
    """The figures of every Bayesian hypothesis (none in a rehearsal)."""
    if results.get("kind") == "rehearsal":
        return []
    out: list[tuple[str, BayesJob | OperatingJob]] = []
    for n, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{n}]")
        hid = text(hyp.get("id"), f"hypotheses[{n}].id")
        b = read_bayes(hyp, f"hypotheses.{hid}")
        if b is None:
            continue
        if drawn_densities(b):
            out.append((bayes_name(hid), BayesJob(b)))
        if drawn_operating(b):
            out.append((oc_name(hid), OperatingJob(b)))
    names = [name for name, _ in out]
    if len(set(names)) != len(names):
        raise PrespecError("results.json: hypotheses: two Bayesian hypotheses whose ids map to "
                           "the same figure name")
    return out


# --- tables/ ----------------------------------------------------------------------------------

BAYES_HEADER = ["part", "analysis", "group", "a", "b", "mean", "n", "probability",
                "threshold", "rule_met", "estimate", "ci_low", "ci_high", "level"]


def write_bayes_csv(path: Path, hyp: Mapping[str, Any]) -> None:
    """A Bayesian hypothesis in rows: ``prior`` and ``posterior`` per group (analysis
    ``plan``), the ``decision`` (posterior probability, threshold, rule met, posterior mean
    and credible interval), then per prior-sensitivity analysis its ``sensitivity-prior`` rows
    (one per group) and its ``sensitivity`` row (``mean`` and ``n``: a sceptical prior's
    centre and effective sample size)."""
    bay = hyp["bayesian"]
    est = hyp.get("estimate") or {}
    ci = est.get("ci") or [None, None]
    level = est.get("level")
    threshold = hyp.get("threshold")

    def flag(value: object) -> object:
        return "" if value is None else ("true" if value else "false")

    def cell(value: object) -> object:
        return "" if value is None else value

    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv_writer(fh)
        w.writerow(BAYES_HEADER)
        for p in bay["prior"]:
            w.writerow(["prior", "plan", p["group"], p["a"], p["b"], cell(p.get("mean")),
                        cell(p.get("n")), "", "", "", "", "", "", ""])
        for p in bay["posterior"]:
            w.writerow(["posterior", "plan", p["group"], p["a"], p["b"], cell(p.get("mean")),
                        "", "", "", "", "", "", "", ""])
        w.writerow(["decision", "plan", "", "", "", "", "", cell(hyp.get("posterior_probability")),
                    cell(threshold), flag(hyp.get("reject")), cell(est.get("value")),
                    cell(ci[0]), cell(ci[1]), cell(level)])
        for s in bay.get("sensitivity") or []:
            for p in s["priors"]:
                w.writerow(["sensitivity-prior", s["prior"], p["group"], p["a"], p["b"], "", "",
                            "", "", "", "", "", "", ""])
            s_est = s.get("estimate") or {}
            s_ci = s_est.get("ci") or [None, None]
            w.writerow(["sensitivity", s["prior"], "", "", "", cell(s.get("centre")),
                        cell(s.get("n")), cell(s.get("posterior_probability")), cell(threshold),
                        flag(s.get("rule_met")), cell(s_est.get("value")), cell(s_ci[0]),
                        cell(s_ci[1]), cell(level)])
