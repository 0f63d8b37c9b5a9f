"""A covariate-adjusted (g-computation) or stratified-score hypothesis, as the report shows it.

A g-computation hypothesis (``adjusted`` in its results.json entry) shows, around the usual
result rows: the covariates with the reference level of each categorical one, the units left
out for a missing covariate, the two marginal (standardised) risks with their standard errors,
one line naming the variance and why it stays valid when the working model is wrong, and the
working model itself (term, coefficient, standard error) with the group's odds ratio labelled
as conditional on the covariates: it comes from the working model and is not the effect
tested. When the model failed and the plan's fallback test ran instead, a box says so first.

A stratified-score hypothesis (``stratified``) shows each stratum's weight beside its table
and names the weighting in words. The report computes nothing: every number is read from
results.json through the checked readers of :mod:`prespec.report.values`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from prespec.errors import PrespecError
from prespec.report.markup import ASIDE_STYLE, BOX, esc, fields, table
from prespec.report.values import (
    NULL,
    fmt_count,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_weight,
    items,
    mapping,
    number,
    pair,
    plain,
    text,
)

#: Tests whose statistic is a standard normal deviate, shown as ``Statistic (z)``.
Z_TESTS = frozenset({"g-computation", "stratified-score"})

#: The weightings of a stratified-score test, in words.
WEIGHTINGS = {
    "cmh": ("Cochran–Mantel–Haenszel weights: stratum h weighs n₁ₕ·n₂ₕ / (n₁ₕ + n₂ₕ), so larger "
            "and more balanced strata count more"),
    "miettinen-nurminen": ("Miettinen–Nurminen weights (Miettinen and Nurminen 1985): each "
                           "stratum weighs the inverse of the variance of its risk difference"),
}

ADJUSTED_STYLE = ASIDE_STYLE.format(c="#4d6b4d")
#: The box of a fallback: plain, and impossible to miss.
FALLBACK_STYLE = BOX.format(c="#3c3c3c", b="#f2f2f2")

CONDITIONAL_LABEL = "conditional on the covariates"


def statistic_label(hyp: Mapping[str, Any], where: str) -> str:
    """``Statistic (z)`` for a g-computation or stratified-score test (and for the
    two-proportion z test a failed working model fell back to); ``Statistic`` otherwise."""
    test = text(hyp.get("test"), f"{where}.test", default="")
    if test in Z_TESTS:
        return "Statistic (z)"
    if test == "two-proportion-z" and hyp.get("adjusted") is not None:
        return "Statistic (z)"
    return "Statistic"


def _adjusted(hyp: Mapping[str, Any], where: str) -> Mapping[str, Any] | None:
    if hyp.get("adjusted") is None:
        return None
    return mapping(hyp["adjusted"], f"{where}.adjusted")


def _groups(hyp: Mapping[str, Any], where: str) -> list[str]:
    if hyp.get("table") is None:
        return []
    tab = mapping(hyp["table"], f"{where}.table")
    return [text(g, f"{where}.table.groups[{j}]")
            for j, g in enumerate(items(tab.get("groups"), f"{where}.table.groups"))]


def fallback_box(hyp: Mapping[str, Any], where: str) -> str:
    """The box saying the working model failed, why, and which pre-specified test ran, or
    ``""`` when the model fitted (or the hypothesis is not adjusted)."""
    adj = _adjusted(hyp, where)
    if adj is None or adj.get("fallback") is None:
        return ""
    at = f"{where}.adjusted.fallback"
    fb = mapping(adj["fallback"], at)
    test = text(fb.get("test"), f"{at}.test", default=NULL)
    reason = text(fb.get("reason"), f"{at}.reason", default="no reason given").strip()
    words = (f"The working model could not be used: {reason.rstrip('.')}. As the plan "
             f"pre-specified, the fallback test {test} ran instead, without covariate "
             "adjustment; the estimate, interval and p-value below are that test's, not an "
             "adjusted effect.")
    return (f'<div class="prespec-fallback" style="{FALLBACK_STYLE}">'
            f"<strong>The covariate-adjusted analysis did not run.</strong> {esc(words)}</div>")


def _covariate_rows(adj: Mapping[str, Any], at: str) -> list[list[str]]:
    rows = []
    for k, raw in enumerate(items(adj.get("covariates"), f"{at}.covariates")):
        c_at = f"{at}.covariates[{k}]"
        cov = mapping(raw, c_at)
        kind = text(cov.get("kind"), f"{c_at}.kind", default=NULL)
        levels = [plain(v) for v in items(cov.get("levels"), f"{c_at}.levels")]
        reference = cov.get("reference")
        rows.append([
            text(cov.get("column"), f"{c_at}.column"),
            kind,
            ", ".join(levels) or NULL,
            NULL if reference is None else plain(reference),
        ])
    return rows


def left_out_sentence(adj: Mapping[str, Any], at: str) -> str:
    """The units left out for a missing covariate, per group and in all."""
    per_group = mapping(adj.get("missing_covariate") or {}, f"{at}.missing_covariate")
    counts = [(str(g), number(n, f"{at}.missing_covariate.{g}")) for g, n in per_group.items()]
    total = sum(int(n) for _, n in counts if n is not None)
    if not total:
        return "No unit was left out for a missing covariate."
    listed = ", ".join(f"{g} {fmt_count(n)}" for g, n in counts)
    unit = "unit" if total == 1 else "units"
    return (f"Left out for a missing covariate: {listed} ({total:,} {unit} in all). The "
            "counts above are of the units analysed.")


def inputs_block(hyp: Mapping[str, Any], where: str) -> str:
    """The covariates (with each categorical one's reference level) and the units left out
    for a missing covariate, or ``""`` for a hypothesis that is not adjusted."""
    adj = _adjusted(hyp, where)
    if adj is None:
        return ""
    at = f"{where}.adjusted"
    rows = _covariate_rows(adj, at)
    parts = [f'<div class="prespec-adjusted" style="{ADJUSTED_STYLE}">']
    words = []
    if rows:
        parts.append(table(["Covariate", "Kind", "Levels", "Reference level"], rows,
                           cls="prespec-covariates", caption="Covariates of the working model"))
        words.append("A categorical covariate enters the model by one indicator per level "
                     "but the reference.")
    else:
        words.append("The working model has no covariates.")
    strata = [text(s, f"{at}.randomisation_strata[{k}]")
              for k, s in enumerate(items(adj.get("randomisation_strata"),
                                          f"{at}.randomisation_strata"))]
    words.append(f"Randomisation stratified by {', '.join(strata)}." if strata
                 else "Simple randomisation (not stratified).")
    words.append(left_out_sentence(adj, at))
    parts.append(f'<p class="prespec-adjusted-inputs">{esc(" ".join(words))}</p>')
    parts.append(risks_table(adj, at))
    parts.append("</div>")
    return "".join(parts)


def risks_table(adj: Mapping[str, Any], at: str) -> str:
    """The two marginal (standardised) risks with their standard errors, or ``""`` after a
    fallback (there are none)."""
    if adj.get("risks") is None:
        return ""
    rows = []
    for k, raw in enumerate(items(adj.get("risks"), f"{at}.risks")):
        r_at = f"{at}.risks[{k}]"
        risk = mapping(raw, r_at)
        rows.append([text(risk.get("group"), f"{r_at}.group"),
                     fmt_estimate(number(risk.get("risk"), f"{r_at}.risk")),
                     fmt_estimate(number(risk.get("standard_error"), f"{r_at}.standard_error"))])
    words = ("Marginal (standardised) risks: each analysed unit's risk predicted by the "
             "working model under the group, averaged over all analysed units.")
    return (f"<p>{esc(words)}</p>"
            + table(["Group", "Marginal risk", "Standard error"], rows, numeric=(1, 2),
                    cls="prespec-marginal-risks"))


#: How each variance is named in the report, and what it holds when the working model is wrong.
VARIANCE_WORDS = {
    "ye": ("Ye et al. (2023)",
           ("It is built from each group's residuals and predictions without assuming that the "
           "working model is true, so the interval and the test keep their level for the "
           "population-level effect when the model is wrong; randomisation is all it relies "
           "on.")),
    "ge": ("Ge et al. (2011), the delta method over the HC0 sandwich covariance",
           ("The sandwich covariance of the coefficients does not rely on the working model "
           "being true, but the delta method holds the observed covariates fixed: it leaves "
           "out their sampling variation and can understate the variance of the "
           "population-level effect when the effect differs between covariate patterns "
           "(variance ye does not).")),
}


def variance_line(hyp: Mapping[str, Any], where: str) -> str:
    """One line naming the variance of the adjusted effect (with the randomisation it assumes)
    and what it holds when the working model is wrong, or ``""`` when not adjusted or after a
    fallback."""
    adj = _adjusted(hyp, where)
    if adj is None or adj.get("fallback") is not None:
        return ""
    at = f"{where}.adjusted"
    key = text(adj.get("variance"), f"{at}.variance", default="")
    name, why = VARIANCE_WORDS.get(key, (NULL, ""))
    if key == "ye":
        strata = [text(s, f"{at}.randomisation_strata[{k}]")
                  for k, s in enumerate(items(adj.get("randomisation_strata"),
                                              f"{at}.randomisation_strata"))]
        name += (", stratified randomisation by " + ", ".join(strata) if strata
                 else ", simple randomisation")
    line = (f"Variance ({key}): " if key else "Variance: ") + f"{name}. {why}".rstrip()
    return f'<p class="prespec-variance">{esc(line)}</p>'


def model_block(hyp: Mapping[str, Any], where: str) -> str:
    """The working model's terms and the group's odds ratio conditional on the covariates,
    or ``""`` when not adjusted or after a fallback (there is no model)."""
    adj = _adjusted(hyp, where)
    if adj is None or adj.get("model") is None:
        return ""
    at = f"{where}.adjusted.model"
    model = mapping(adj["model"], at)
    rows = []
    for k, raw in enumerate(items(model.get("terms"), f"{at}.terms")):
        t_at = f"{at}.terms[{k}]"
        term = mapping(raw, t_at)
        rows.append([text(term.get("term"), f"{t_at}.term"),
                     fmt_estimate(number(term.get("coefficient"), f"{t_at}.coefficient")),
                     fmt_estimate(number(term.get("standard_error"), f"{t_at}.standard_error"))])
    iterations = number(model.get("iterations"), f"{at}.iterations")
    fitted = ("maximum likelihood" if iterations is None
              else f"maximum likelihood, {fmt_count(iterations)} iterations")
    outcome = text(hyp.get("outcome"), f"{where}.outcome", default="the outcome")
    words = (f"Working model: logistic regression of {outcome} on the group indicator and the "
             f"covariates ({fitted}); coefficients on the log-odds scale.")
    parts = [f'<div class="prespec-working-model" style="{ADJUSTED_STYLE}">',
             f"<p>{esc(words)}</p>",
             table(["Term", "Coefficient", "Standard error"], rows, numeric=(1, 2),
                   cls="prespec-model-terms")]
    if model.get("conditional_odds_ratio") is not None:
        parts.append(_conditional(hyp, where, model["conditional_odds_ratio"]))
    parts.append("</div>")
    return "".join(parts)


def _conditional(hyp: Mapping[str, Any], where: str, raw: object) -> str:
    at = f"{where}.adjusted.model.conditional_odds_ratio"
    cor = mapping(raw, at)
    low, high = pair(cor.get("ci"), f"{at}.ci")
    level = number(cor.get("level"), f"{at}.level")
    groups = _groups(hyp, where)
    whom = f", {groups[0]} against {groups[1]}" if len(groups) == 2 else ""
    interval = "Interval" if level is None else f"{fmt_level(level)} interval"
    rows = [
        (f"Odds ratio of the group{whom}, {CONDITIONAL_LABEL}",
         fmt_estimate(number(cor.get("value"), f"{at}.value"))),
        (f"{interval} (conditional odds ratio)", fmt_interval(low, high)),
    ]
    note = ("This odds ratio is conditional on the covariates: it compares units with the same "
            "covariate values, from the working model. It is not the effect tested above, "
            "which is marginal (averaged over the analysed population).")
    return fields(rows) + f'<p class="prespec-conditional-note">{esc(note)}</p>'


def stratum_weights(hyp: Mapping[str, Any], where: str) -> list[float | None] | None:
    """Each stratum's weight, aligned with ``strata_tables``; None without ``stratified``."""
    if hyp.get("stratified") is None:
        return None
    at = f"{where}.stratified"
    strat = mapping(hyp["stratified"], at)
    weights = [number(w, f"{at}.stratum_weights[{k}]")
               for k, w in enumerate(items(strat.get("stratum_weights"),
                                           f"{at}.stratum_weights"))]
    tables = items(hyp.get("strata_tables"), f"{where}.strata_tables")
    if len(weights) != len(tables):
        raise PrespecError(f"results.json: {at}.stratum_weights: expected {len(tables)} "
                           f"weights, one per stratum table, found {len(weights)}")
    return weights


def weighting_line(hyp: Mapping[str, Any], where: str) -> str:
    """The weighting of a stratified-score test in words, or ``""``."""
    if hyp.get("stratified") is None:
        return ""
    at = f"{where}.stratified"
    key = text(mapping(hyp["stratified"], at).get("weights"), f"{at}.weights", default=NULL)
    words = WEIGHTINGS.get(key, f"weights {key}")
    line = (f"The common risk difference combines the strata's differences. {words}. Each "
            "stratum's weight stands beside its table.")
    return f'<p class="prespec-weighting">{esc(line)}</p>'


def weight_caption(weight: float | None) -> str:
    """`` — weight 0.4`` for a stratum's caption."""
    return f" — weight {fmt_weight(weight)}"

