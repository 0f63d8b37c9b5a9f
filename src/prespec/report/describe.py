"""The plan document: a locked version of the analysis plan, in words, to register.

``prespec describe`` writes it and ``prespec verify --document`` regenerates it; both build it
here from the resolved plan that a lock version holds (never from the working YAML), so that
the registered words and the analysis that runs cannot differ. The words follow the plan's own
structure: the population, the outcomes and their missing-data rules, alpha and the
multiplicity procedure, each hypothesis with every key that changes its analysis, the sample
size from ``design``, and each method with its reference. Each plan term is also shown as the
plan writes it (``cochran-mantel-haenszel``), so a reader can put the words beside the file.

The document is a function of the lock version and its log entry alone (no generation time,
no prespec version in the text): regenerated later it gives the same words, which is what
``verify --document`` compares. So the words of format 1 must never change: a document
registered today must verify under every later prespec. A new wording is a new ``FORMAT``,
written beside the old one, which stays in :data:`FORMATS` for verification. The words also
use a few sentences and numbers of other rooms (the caution, the alpha rule and the sizes of
``design``, the sequential boundaries); a change there changes format 1 as well, and
tests/test_describe.py holds a golden document of the tour to catch it.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from html.parser import HTMLParser
from typing import Any

from prespec.analysis.hypotheses import interval_level
from prespec.common.caution import CAUTION
from prespec.plan import Hypothesis, Plan, plan_from_resolved
from prespec.plan import vocabulary as v
from prespec.plan.followups import follow_ups
from prespec.plan.summary import number
from prespec.report.markup import esc

#: The wording ``describe`` writes, and every wording verify can write again to compare.
FORMAT = 1
FORMATS = frozenset({1})
FORMAT_LINE = "plan document format {}"

#: Shown on the first page when a version carries no RFC 3161 token.
NO_TIMESTAMP = "no trusted time-stamp"


@dataclass(frozen=True)
class LockedVersion:
    """What the first page states of one locked version (from the lock and its log entry)."""

    plan_name: str  # the plan file's name, e.g. wound-dressing.yaml
    lock_name: str  # the lock file's name
    version: int
    fingerprint: str
    resolved: dict[str, Any]  # the resolved plan the lock version holds
    locked_at: str  # the log entry's time, by the clock of the machine that locked it
    actor: str
    previous: str | None = None  # the fingerprint of the version it amends
    reason: str | None = None  # the reason of an amend
    timestamp: str | None = None  # the trusted time of its RFC 3161 token, if it has one


# --- methods and their references --------------------------------------------------------
# Each reference is one the code already cites: the module named beside it holds it in a
# References section (tests/test_describe.py checks the author and year are there). None was
# looked up again here; where the citing module says it cites from memory, so does a comment.

#: plan name → (the method in words, the references (``; `` between two), the modules citing
#: them)
METHODS: dict[str, tuple[str, str, str]] = {
    "pearson-chi-square": (
        "Pearson's chi-square test",
        ("Pearson K. Philosophical Magazine, Series 5, 1900;50:157–175; Yates F. Supplement to "
        "the Journal of the Royal Statistical Society 1934;1:217–235 (continuity correction)"),
        "stats/proportions.py"),
    "likelihood-ratio": (
        "the likelihood-ratio (G²) test",
        ("Wilks SS. Annals of Mathematical Statistics 1938;9:60–62; Agresti A. Categorical Data "
        "Analysis, 3rd ed. Wiley, 2013, chapter 3"),
        "stats/proportions.py"),
    "two-proportion-z": (
        "the two-sample z-test of proportions",
        ("Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 3; Fleiss JL, Levin "
        "B, Paik MC. Statistical Methods for Rates and Proportions, 3rd ed. Wiley, 2003"),
        "stats/proportions.py"),
    "fisher-exact": (
        "Fisher's exact test (two-sided by probability ordering; for k groups, Freeman–Halton)",
        ("Fisher RA. Journal of the Royal Statistical Society 1922;85:87–94; Freeman GH, Halton "
        "JH. Biometrika 1951;38:141–149"),
        "stats/proportions.py stats/exact.py"),
    "barnard-exact": (
        "Barnard's unconditional exact test",
        ("Barnard GA. Biometrika 1947;34:123–138; Suissa S, Shuster JJ. Journal of the Royal "
        "Statistical Society, Series A 1985;148:317–327"),
        "stats/exact.py"),
    "boschloo-exact": (
        "Boschloo's unconditional exact test",
        ("Boschloo RD. Statistica Neerlandica 1970;24:1–9; Lydersen S, Fagerland MW, Laake P. "
        "Statistics in Medicine 2009;28:1159–1175"),
        "stats/exact.py"),
    "cochran-mantel-haenszel": (
        "the Cochran–Mantel–Haenszel test over strata",
        ("Cochran WG. Biometrics 1954;10:417–451; Mantel N, Haenszel W. Journal of the National "
        "Cancer Institute 1959;22:719–748"),
        "stats/stratified.py"),
    "farrington-manning": (
        "the Farrington–Manning score test at a margin",
        ("Farrington CP, Manning G. Statistics in Medicine 1990;9:1447–1454; Miettinen O, "
        "Nurminen M. Statistics in Medicine 1985;4:213–226"),
        "stats/margins.py"),
    "stratified-score": (
        "the stratified score test of a common risk difference",
        "Miettinen O, Nurminen M. Statistics in Medicine 1985;4:213–226",
        "stats/stratified_difference.py"),
    # from memory: stats/adjusted.py cites these with titles, authors and pages from memory
    "g-computation": (
        "g-computation (standardisation over a logistic working model)",
        ("Ge M et al. Drug Information Journal 2011;45:481–493; Ye T, Shao J, Yi Y, Zhao Q. "
        "Journal of the American Statistical Association 2023;118"),
        "stats/adjusted.py"),
    "posterior-probability": (
        "a Bayesian rule on the posterior probability (conjugate beta-binomial)",
        ("Spiegelhalter DJ, Abrams KR, Myles JP. Bayesian Approaches to Clinical Trials and "
        "Health-Care Evaluation. Wiley, 2004; Thall PF, Simon R. Biometrics 1994;50:337-349"),
        "stats/bayes.py"),
    "cochran-armitage-trend": (
        "the Cochran–Armitage test for trend",
        "Cochran WG. Biometrics 1954;10:417–451; Armitage P. Biometrics 1955;11:375–386",
        "stats/trend.py"),
    "binomial-exact": (
        "the exact binomial test",
        ("Clopper CJ, Pearson ES. Biometrika 1934;26:404–413; Agresti A. Categorical Data "
        "Analysis, 3rd ed. Wiley, 2013, chapter 1"),
        "stats/single.py"),
    "one-proportion-z": (
        "the one-sample score z-test of a proportion",
        "Wilson EB. Journal of the American Statistical Association 1927;22:209–212",
        "stats/single.py"),
    # intervals
    "newcombe": (
        "Newcombe's hybrid score interval",
        "Newcombe RG. Statistics in Medicine 1998;17:873–890 (method 10)",
        "stats/intervals.py"),
    "wald": (
        "the Wald interval",
        "Newcombe RG. Statistics in Medicine 1998;17:873–890 (method 1)",
        "stats/intervals.py"),
    "agresti-caffo": (
        "the Agresti–Caffo interval",
        "Agresti A, Caffo B. The American Statistician 2000;54:280–288",
        "stats/intervals.py"),
    "miettinen-nurminen": (
        "the Miettinen–Nurminen score interval",
        "Miettinen O, Nurminen M. Statistics in Medicine 1985;4:213–226",
        "stats/intervals.py"),
    "katz": (
        "the Katz log interval",
        "Katz D, Baptista J, Azen SP, Pike MC. Biometrics 1978;34:469–474",
        "stats/ratios.py"),
    "koopman": (
        "Koopman's score interval",
        "Koopman PAR. Biometrics 1984;40:513–517",
        "stats/ratios.py"),
    "woolf": (
        "Woolf's logit interval",
        "Woolf B. Annals of Human Genetics 1955;19:251–253",
        "stats/ratios.py"),
    "exact-conditional": (
        "the exact conditional interval",
        ("Cornfield J. Proceedings of the Third Berkeley Symposium on Mathematical Statistics "
        "and Probability 1956;4:135–148"),
        "stats/ratios.py"),
    "wilson": (
        "the Wilson score interval",
        "Wilson EB. Journal of the American Statistical Association 1927;22:209–212",
        "stats/intervals.py"),
    "clopper-pearson": (
        "the Clopper–Pearson exact interval",
        "Clopper CJ, Pearson ES. Biometrika 1934;26:404–413",
        "stats/single.py"),
    "jeffreys": (
        "the Jeffreys interval",
        "Brown LD, Cai TT, DasGupta A. Statistical Science 2001;16:101–133",
        "stats/single.py"),
    "robins-breslow-greenland": (
        "the Mantel–Haenszel odds ratio with the Robins–Breslow–Greenland interval",
        "Robins J, Breslow N, Greenland S. Biometrics 1986;42:311–323",
        "stats/stratified.py"),
    "greenland-robins": (
        "the Mantel–Haenszel risk ratio with the Greenland–Robins interval",
        "Greenland S, Robins JM. Biometrics 1985;41:55–68",
        "stats/stratified.py"),
    "sato": (
        "the Mantel–Haenszel risk difference with Sato's interval",
        "Sato T. Biometrics 1989;45:1323–1324",
        "stats/stratified.py"),
    "stratified-miettinen-nurminen": (
        "the stratified Miettinen–Nurminen interval",
        "Miettinen O, Nurminen M. Statistics in Medicine 1985;4:213–226",
        "stats/stratified_difference.py"),
    "stratified-newcombe": (
        "the stratified Newcombe interval",
        "Yan X, Su XG. Statistics in Biopharmaceutical Research 2010;2:329–335",
        "stats/stratified_difference.py"),
    "equal-tailed-credible": (
        "the equal-tailed credible interval of the beta posterior",
        ("Spiegelhalter DJ, Abrams KR, Myles JP. Bayesian Approaches to Clinical Trials and "
        "Health-Care Evaluation. Wiley, 2004"),
        "stats/bayes.py"),
    # multiplicity and families
    "bonferroni": ("the Bonferroni procedure", "Dunn OJ. JASA 1961;56:52–64",
                   "stats/multiplicity.py"),
    "sidak": ("the Šidák procedure", "Šidák Z. JASA 1967;62:626–633",
              "stats/multiplicity.py"),
    "holm": ("Holm's step-down procedure",
             "Holm S. Scandinavian Journal of Statistics 1979;6:65–70", "stats/multiplicity.py"),
    "hochberg": ("Hochberg's step-up procedure", "Hochberg Y. Biometrika 1988;75:800–802",
                 "stats/multiplicity.py"),
    "hommel": ("Hommel's procedure", "Hommel G. Biometrika 1988;75:383–386",
               "stats/multiplicity.py"),
    "fixed-sequence": ("the fixed-sequence procedure",
                       ("Maurer W, Hothorn LA, Lehmacher W. 1995; Westfall PH, Krishen A. "
                       "Journal of Statistical Planning and Inference 2001"),
                       "stats/multiplicity.py"),
    "benjamini-hochberg": ("the Benjamini–Hochberg false discovery rate procedure",
                           "Benjamini Y, Hochberg Y. JRSS B 1995;57:289–300",
                           "stats/multiplicity.py"),
    "benjamini-yekutieli": ("the Benjamini–Yekutieli false discovery rate procedure",
                            "Benjamini Y, Yekutieli D. Annals of Statistics 2001;29:1165–1188",
                            "stats/multiplicity.py"),
    "graphical": ("the graphical procedure",
                  ("Bretz F, Maurer W, Brannath W, Posch M. Statistics in Medicine "
                  "2009;28:586–604"), "stats/graphical.py"),
    # from memory: stats/doublefdr.py cites it from memory
    "double-fdr": ("the double false discovery rate procedure",
                   ("Mehrotra DV, Heyse JF. Statistical Methods in Medical Research "
                   "2004;13:227–238"), "stats/doublefdr.py"),
    # interim looks
    "lan-demets-obrien-fleming": ("the Lan–DeMets spending function of O'Brien–Fleming type",
                                  "Lan KKG, DeMets DL. Biometrika 1983;70:659–663",
                                  "stats/sequential.py"),
    "lan-demets-pocock": ("the Lan–DeMets spending function of Pocock type",
                          "Lan KKG, DeMets DL. Biometrika 1983;70:659–663",
                          "stats/sequential.py"),
    "hwang-shih-decani": ("the Hwang–Shih–DeCani spending function",
                          ("Hwang IK, Shih WJ, DeCani JS. Statistics in Medicine 1990;9:"
                          "1439–1445"), "stats/sequential.py"),
    "obrien-fleming": ("the O'Brien–Fleming boundary",
                       "O'Brien PC, Fleming TR. Biometrics 1979;35:549–556",
                       "stats/sequential.py"),
    "pocock": ("Pocock's boundary", "Pocock SJ. Biometrika 1977;64:191–199",
               "stats/sequential.py"),
    # sensitivity analyses of missing outcomes
    "worst-case": ("the worst-case imputation of missing outcomes",
                   "Gould AL. Biometrics 1980;36:721–727", "analysis/sensitivity.py"),
    "best-case": ("the best-case imputation of missing outcomes",
                  "Gould AL. Biometrics 1980;36:721–727", "analysis/sensitivity.py"),
    "tipping-point": ("the tipping-point analysis of missing outcomes",
                      ("Yan X, Lee S, Li N. Journal of Biopharmaceutical Statistics "
                      "2009;19:1085–1098"), "analysis/sensitivity.py"),
}

_MEASURES = {"risk-difference": "risk difference", "risk-ratio": "risk ratio",
             "odds-ratio": "odds ratio", "proportion": "proportion"}
_MISSING = {
    "exclude": "left out of the analysis of this outcome",
    "event": "counted as an event",
    "no-event": "counted as no event",
    "error": "bad input: the run stops",
}
_ROLES = {
    "primary": "primary: confirmatory, inside the multiplicity family",
    "secondary": "secondary: confirmatory, inside the multiplicity family",
    "exploratory": "exploratory: outside the multiplicity family, reported with its nominal "
                   "p-value and no decision",
}
_STRATEGIES = {
    "treatment-policy": "treatment policy: the outcome as observed, whatever happened",
    "composite": "composite: the intercurrent event decides the outcome",
    "while-on-treatment": "while on treatment: the outcome observed before the event",
}


def code(name: object) -> str:
    """A plan term as the plan writes it, in the document's code style (already escaped)."""
    return f"<code>{esc(name)}</code>"


def _named(words: str, name: object) -> str:
    """Words with the plan's own term beside them: ``risk ratio (risk-ratio)``."""
    return f"{esc(words)} ({code(name)})"


def _values(values: Iterable[object]) -> str:
    return ", ".join(code(x) for x in values)


# --- the sections ---------------------------------------------------------------------------


def _rows(rows: Iterable[tuple[str, str]]) -> str:
    """A two-column table; the labels are plain text, the values HTML built here."""
    body = "".join(f"<tr><th>{esc(k)}</th><td>{val}</td></tr>" for k, val in rows)
    return f'<table class="fields"><tbody>{body}</tbody></table>'


def _condition(cond: Any) -> str:
    name, operand = cond.op()
    col = code(cond.column)
    if name == "in":
        return f"{col} is one of {_values(cond.in_ or [])}"
    if name == "not_in":
        return f"{col} is none of {_values(cond.not_in or [])}"
    if name == "equals":
        return f"{col} equals {code(operand)}"
    if name == "between":
        low, high = cond.between or [0.0, 0.0]
        return f"{col} from {code(number(low))} to {code(number(high))} inclusive"
    return f"{col} {'is blank' if operand else 'is not blank'} ({code('is_missing')})"


def _population(plan: Plan) -> str:
    data = plan.data
    groups = ", ".join(code(g) + (" (the reference)" if g == data.reference else "")
                       for g in data.groups)
    rows = [("Unit", f"one row per unit, identified by the column {code(data.id)}"),
            ("Groups", f"{groups}, read from the column {code(data.group)}")]
    if data.include:
        rows.append(("Population", "the rows where " + "; and ".join(
            _condition(c) for c in data.include) + "; a blank value fails every condition "
            f"except a test for blanks ({code('is_missing')})"))
    else:
        rows.append(("Population", "every row of the data"))
    if data.planned_n:
        rows.append(("Planned analysed size", ", ".join(
            f"{code(g)} {code(n)}" for g, n in data.planned_n.items())
            + "; an analysed total below it is recorded as a departure"))
    if data.source is not None:
        where = f"{code(data.source)}" + (f", table {code(data.table)}" if data.table else "")
        if data.password_from:
            where += f", its password from the environment variable {code(data.password_from)}"
        rows.append(("Data", f"read from {where}"))
    return "<h2>Population and data</h2>" + _rows(rows)


def _outcomes(plan: Plan) -> str:
    parts = ["<h2>Outcomes and missing data</h2>"]
    for name, out in plan.outcomes.items():
        rows = [("Column", code(out.column)),
                ("Event", _values(out.event)),
                ("No event", _values(out.no_event)),
                ("A blank outcome", _named(_MISSING[out.missing], out.missing)),
                ("Any other value", "not mapped: recorded as a departure")]
        if out.favourable is not None:
            rows.append(("Favourable", (f"{code(out.favourable)} is the good result (used by "
                         "the worst-case and best-case analyses)")))
        parts.append(f"<h3>Outcome {code(name)}</h3>" + _rows(rows))
    return "".join(parts)


def _multiplicity(plan: Plan) -> str:
    from prespec.design.document import alpha_shares

    method = plan.multiplicity
    name = method if isinstance(method, str) else "graphical"
    family = [h.id for h in plan.hypotheses if not h.outside_multiplicity]
    outside = [h.id for h in plan.hypotheses if h.outside_multiplicity]
    rows = [("Alpha", (f"{code(number(plan.alpha))}, the significance level; "
             "intervals at 1 − alpha (two-sided superiority) or 1 − 2·alpha (one-sided, and "
             "at a margin)"))]
    words = "no adjustment" if name == "none" else METHODS[name][0]
    rows.append(("Multiplicity", f"{_named(words, name)} over "
                 + (", ".join(code(i) for i in family)
                    or "no hypothesis (every one is outside the family)")))
    if outside:
        rows.append(("Outside the family", ", ".join(code(i) for i in outside)
                     + " (exploratory, or a Bayesian rule)"))
    _, rule = alpha_shares(plan)
    rows.append(("Alpha per hypothesis at planning", esc(rule)))
    parts = ["<h2>Error rate and multiplicity</h2>", _rows(rows)]
    if not isinstance(method, str):
        weights = ", ".join(f"{code(h)} {code(number(w))}" for h, w in method.weights.items())
        parts.append(f"<p>Initial weights (shares of alpha): {weights}.</p>")
        if method.transitions:
            lines = "".join(
                f"<li>when {code(src)} is rejected, its level passes on: " + ", ".join(
                    f"{code(number(w))} to {code(dst)}" for dst, w in row.items()) + "</li>"
                for src, row in method.transitions.items())
            parts.append(f"<p>Transitions:</p><ul>{lines}</ul>")
        else:
            parts.append("<p>Transitions: none (a rejected hypothesis passes nothing on).</p>")
    return "".join(parts)


def _what(plan: Plan, hyp: Hypothesis) -> str:
    outcome = f"outcome {code(hyp.outcome)}"
    if hyp.kind == "all":
        return (f"the proportions of all {len(plan.data.groups)} groups compared at once "
                f"({code('compare: all')}); {outcome}")
    if hyp.kind == "trend":
        return (f"a trend in the proportion over the ordered groups "
                f"{_values(plan.data.groups)} ({code('compare: trend')}); {outcome}")
    if hyp.kind == "single":
        return (f"the proportion of {code(hyp.compare[0])} against the rate "
                f"{code(number(hyp.null_rate))} under the null hypothesis; {outcome}")
    return f"{code(hyp.compare[0])} against {code(hyp.compare[1])}; {outcome}"


def _direction(plan: Plan, hyp: Hypothesis) -> str:
    alt = hyp.alternative
    if hyp.kind == "all":
        return f"any difference among the groups, no direction ({code(alt)})"
    if hyp.kind == "trend":
        scores = (hyp.scores if hyp.scores is not None
                  else list(range(len(plan.data.groups))))
        shown = ", ".join(code(number(float(s))) for s in scores)
        side = {"two-sided": "a rising or a falling trend",
                "greater": "one-sided: the proportion rises with the score",
                "less": "one-sided: the proportion falls with the score"}[alt]
        return (f"{esc(side)} ({code(alt)}); scores {shown}"
                + (" (the default)" if hyp.scores is None else ""))
    first = code(hyp.compare[0])
    second = code(hyp.compare[1]) if hyp.kind == "pair" else \
        f"the rate {code(number(hyp.null_rate))}"
    if hyp.comparison == "equivalence":
        return (f"both sides at once ({code(alt)}): one one-sided test at each margin, each at "
                "alpha")
    if alt == "two-sided":
        return f"two-sided: {first} differs from {second} in either direction ({code(alt)})"
    word = "greater" if alt == "greater" else "smaller"
    return f"one-sided: the proportion of {first} is {word} than {second} ({code(alt)})"


def _question(hyp: Hypothesis) -> str:
    scale = _MEASURES.get(hyp.measure or "", "the measure")
    if hyp.comparison == "non-inferiority":
        return (f"non-inferiority ({code(hyp.comparison)}) at the margin "
                f"{code(number(hyp.margin))} on the {esc(scale)} scale")
    if hyp.comparison == "equivalence":
        low, high = hyp.margin
        return (f"equivalence ({code(hyp.comparison)}) within the margins "
                f"{code(number(low))} to {code(number(high))} on the {esc(scale)} scale, by two "
                "one-sided tests (Schuirmann DJ. Journal of Pharmacokinetics and "
                "Biopharmaceutics 1987;15:657–680)")
    return f"superiority ({code(hyp.comparison)})"


def _test_words(name: str, hyp: Hypothesis) -> str:
    """A test in words as it runs for this hypothesis (its comparison and kind), with its
    plan name: the main test, the sparse switch's and the fallback's."""
    words = METHODS[name][0]
    if name == "two-proportion-z":
        words = ("the two-sample z-test of proportions, pooled variance"
                 if hyp.comparison == "superiority" else
                 "the z-test of proportions at a margin, unpooled (Wald) variance")
    elif name == "fisher-exact":
        words = ("Fisher's exact test" if hyp.kind == "pair" else
                 "the Freeman–Halton extension of Fisher's exact test to k groups")
    return _named(words, name)


def _test(hyp: Hypothesis) -> str:
    out = _test_words(hyp.test, hyp)
    if hyp.continuity:
        out += f", continuity-corrected ({code('continuity: true')})"
    elif hyp.test in v.CONTINUITY_TESTS_BY_KIND.get(hyp.kind, ()):
        out += f", without continuity correction ({code('continuity: false')})"
    if hyp.monte_carlo is not None:
        out += (f"; the p-value by Monte Carlo from {code(hyp.monte_carlo.tables)} random "
                f"tables with seed {code(hyp.monte_carlo.seed)}")
    return out


def _estimate(plan: Plan, hyp: Hypothesis) -> str | None:
    if hyp.measure is None:
        return None
    level = (hyp.credible if hyp.test in v.BAYESIAN_TESTS and hyp.credible is not None
             else interval_level(plan.alpha, hyp.alternative, hyp.comparison))
    interval = METHODS[hyp.interval][0] if hyp.interval in METHODS else str(hyp.interval)
    return (f"the {_named(_MEASURES[hyp.measure], hyp.measure)} with "
            f"{_named(interval, hyp.interval)} at the {code(number(round(level, 10)))} level")


def _estimand(hyp: Hypothesis) -> list[tuple[str, str]]:
    est = hyp.estimand
    if est is None:
        return []
    rows = []
    if est.population:
        rows.append(("Estimand: population", esc(est.population)))
    if est.variable:
        rows.append(("Estimand: variable", esc(est.variable)))
    for ie in est.intercurrent:
        how = _named(_STRATEGIES[ie.strategy], ie.strategy)
        if ie.counts_as is not None:
            how += f", counted as {code(ie.counts_as)}"
        if ie.outcome_column is not None:
            how += f", the outcome from the column {code(ie.outcome_column)}"
        rows.append(("Intercurrent event", (f"{esc(ie.event)}: when {code(ie.column)} is one "
                     f"of {_values(ie.happened)}; {how}")))
    return rows


def _adjusted(hyp: Hypothesis) -> list[tuple[str, str]]:
    rows: list[tuple[str, str]] = []
    if hyp.strata:
        rows.append(("Strata", "the columns " + _values(hyp.strata)))
    if hyp.weights is not None:
        words = {"cmh": "Cochran–Mantel–Haenszel weights n1·n2/(n1 + n2)",
                 "miettinen-nurminen": "inverse-variance weights at the restricted estimates"}
        rows.append(("Stratum weights", _named(words[hyp.weights], hyp.weights)))
    if hyp.covariates is not None:
        shown = ", ".join(f"{code(c)} ({code(k)})" for c, k in hyp.covariates.items())
        rows.append(("Covariates", shown or "none"))
    if hyp.variance is not None:
        words = {"ye": "the variance of Ye et al. (2023)",
                 "ge": "the delta-method variance of Ge et al. (2011)"}
        text = _named(words[hyp.variance], hyp.variance)
        if hyp.randomisation_strata:
            text += ("; randomisation stratified by " + _values(hyp.randomisation_strata))
        rows.append(("Variance", text))
    if hyp.covariate_missing is not None:
        words = {"exclude": "the unit is left out, recorded as a departure",
                 "error": "bad input: the run stops"}
        rows.append(("A blank covariate", _named(words[hyp.covariate_missing],
                                                  hyp.covariate_missing)))
    if hyp.fallback is not None:
        rows.append(("Fallback", (f"if the working model fails, "
                                  f"{_test_words(hyp.fallback, hyp)} is run instead, with a "
                                  "note")))
    return rows


def _bayes(hyp: Hypothesis) -> list[tuple[str, str]]:
    if hyp.prior is None:
        return []
    priors = ", ".join(f"{code(g)} Beta({code(number(float(a)))}, {code(number(float(b)))})"
                       for g, (a, b) in hyp.prior.items())
    rows = [("Prior", priors)]
    if hyp.threshold is not None:
        sign = "<" if hyp.alternative == "less" else ">"
        if hyp.kind == "single":
            event = f"p({code(hyp.compare[0])}) {sign} {code(number(hyp.null_rate))}"
        else:
            margin = number(float(hyp.margin or 0.0))
            event = (f"p({code(hyp.compare[0])}) − p({code(hyp.compare[1])}) {sign} "
                     f"{code(margin)}" + (" (the margin)" if hyp.margin is not None else ""))
        rows.append(("Rule", (f"met when the posterior probability Pr({event} | data) reaches "
                     f"{code(number(hyp.threshold))}")))
    if hyp.credible is not None:
        rows.append(("Credible interval", f"equal-tailed, at {code(number(hyp.credible))}"))
    if hyp.sceptical_prior is not None:
        sp = hyp.sceptical_prior
        rows.append(("Sceptical prior", (f"mean {code(number(sp.mean))}, effective size "
                     f"{code(number(sp.n))}, for every compared group")))
    else:
        rows.append(("Sceptical prior", "chosen as docs/bayes.md describes"))
    return rows


def _family(hyp: Hypothesis) -> list[tuple[str, str]]:
    if hyp.over is None:
        return []
    levels = hyp.levels
    if levels is None:
        found = "the levels found in the data at run time"
    elif isinstance(levels, dict):
        found = "; ".join(f"{code(k)}: {_values(vs)}" for k, vs in levels.items())
    else:
        found = _values(levels)
    rows = [("Family over", f"the column {code(hyp.over)}"
             + (f", grouped within {code(hyp.within)}" if hyp.within else "")
             + f"; levels {found}")]
    level = f"{code(number(hyp.flag_level))}"
    if hyp.group_level is not None:
        level += f" within groups, {code(number(hyp.group_level))} across groups"
    rows.append(("Flagged by", (f"{_named(METHODS[hyp.flag_method][0], hyp.flag_method)} at "
                 f"{level}")))
    if hyp.members:
        rows.append(("Members", _values(hyp.members)))
    return rows


def _looks(plan: Plan, hyp: Hypothesis, share: float) -> list[tuple[str, str]]:
    looks = hyp.looks
    if looks is None:
        return []
    when = ", ".join(code(number(float(t))) for t in (looks.fractions or []))
    if looks.sizes:
        when = "cumulative total sizes " + ", ".join(code(s) for s in looks.sizes)
    else:
        when = "information fractions " + when
    if looks.efficacy is None:  # a Bayesian rule's looks (docs/bayes.md, "Interim looks")
        return _bayes_looks(plan, hyp, when)
    text = f"{len(looks.planned_fractions())} looks at {when}; efficacy by " + _named(
        METHODS[looks.efficacy][0], looks.efficacy)
    if looks.gamma is not None:
        text += f" (gamma {code(number(looks.gamma))})"
    if looks.futility is not None:
        fut = looks.futility
        text += ("; a non-binding futility boundary by "
                 + _named(METHODS[fut.spending][0], fut.spending))
        if fut.gamma is not None:
            text += f" (gamma {code(number(fut.gamma))})"
    rows = [("Interim looks", text)]
    bounds = _boundaries(plan, hyp, share)
    if bounds:
        rows.append(("Planned boundaries", bounds))
    return rows


def _bayes_looks(plan: Plan, hyp: Hypothesis, when: str) -> list[tuple[str, str]]:
    """A Bayesian rule's looks: the stopping thresholds and the planned sizes per group."""
    from prespec.plan.looks import bayes_look_sizes

    looks = hyp.looks
    assert looks is not None
    text = f"{len(looks.planned_fractions())} looks at {when}"
    if looks.stop_for_success is not None:
        text += (f"; an interim look stops for success where the posterior probability reaches "
                 f"{code(number(looks.stop_for_success))}")
    if looks.stop_for_futility is not None:
        text += (f"; futility may be considered (non-binding) where the predictive probability "
                 f"of meeting the rule at the final sizes, exact under the beta-binomial "
                 f"predictive distribution, falls below {code(number(looks.stop_for_futility))}")
    text += "; the final look is the rule itself"
    rows = [("Interim looks", text)]
    sizes = bayes_look_sizes(plan, hyp)
    if sizes:
        rows.append(("Planned sizes at the looks", "; ".join(
            f"{code(g)} {', '.join(code(n) for n in per)}"
            for g, per in zip(hyp.compare, sizes, strict=True))))
    return rows


def _boundaries(plan: Plan, hyp: Hypothesis, share: float) -> str:
    """The boundaries at the planned fractions and the hypothesis's planned alpha share."""
    from prespec.plan.looks import sides
    from prespec.stats.sequential import boundaries

    looks = hyp.looks
    assert looks is not None
    fut = looks.futility
    power = float(plan.design.power) if plan.design is not None else None
    try:
        b = boundaries(looks.planned_fractions(), alpha=share, sides=sides(hyp),
                       efficacy=looks.efficacy, gamma=looks.gamma,
                       futility=fut.spending if fut and power else None,
                       futility_gamma=fut.gamma if fut and power else None, power=power)
    except ValueError as exc:
        return esc(f"not computable at alpha {share:.6g}: {exc}")
    header = ["look", "fraction", "efficacy z", "nominal p", "cumulative alpha"]
    if b.futility_z is not None:
        header.append("futility z")
    rows = []
    for k in range(len(b.z)):
        row = [str(k + 1), f"{b.fractions[k]:.4f}", f"{b.z[k]:.4f}", f"{b.nominal_p[k]:.5f}",
               f"{b.alpha_spent[k]:.5f}"]
        if b.futility_z is not None:
            row.append(f"{b.futility_z[k]:.4f}")
        rows.append(row)
    head = "".join(f"<th>{esc(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f'<td class="num">{esc(c)}</td>' for c in r) + "</tr>"
                   for r in rows)
    return (f"at alpha {esc(f'{share:.6g}')} (its planned share), z in the direction of "
            f'benefit:<table class="grid"><tbody><tr class="head">{head}</tr>{body}'
            "</tbody></table>The run recomputes them at the observed information.")


def _then(plan: Plan, hyp: Hypothesis) -> list[tuple[str, str]]:
    if hyp.then is None:
        return []
    subs = follow_ups(hyp, plan)
    pairs = ", ".join(f"{code(f.compare[0])} against {code(f.compare[1])}" for f in subs)
    which = ("each group against the reference" if hyp.then.pairwise == "reference"
             else "every pair of groups")
    first = subs[0]
    level = interval_level(plan.alpha, first.alternative, first.comparison)
    method = hyp.then.multiplicity
    adjusted = _named(METHODS[method][0] if method in METHODS else "no adjustment", method)
    return [("Follow-ups", (f"only if {code(hyp.id)} is rejected: "
             f"{_named(which, hyp.then.pairwise)} ({pairs}), each by {code(first.test)}, "
             f"{code(first.alternative)}, the {code(first.measure)} with "
             f"{code(first.interval)} at the {code(number(round(level, 10)))} level, adjusted "
             f"among themselves by {adjusted}"))]


def _hypothesis(plan: Plan, hyp: Hypothesis, share: Any) -> str:
    role = _ROLES[hyp.role].split(":", 1)[1].strip()
    if hyp.test in v.BAYESIAN_TESTS:
        role = "a Bayesian rule, decided by its posterior probability, outside the multiplicity "\
            "family"
    rows = [("Role", _named(role, hyp.role)),
            ("Compares", _what(plan, hyp)),
            ("Question", _question(hyp)),
            ("Direction", _direction(plan, hyp)),
            ("Test", _test(hyp))]
    estimate = _estimate(plan, hyp)
    if estimate:
        rows.append(("Estimate", estimate))
    if hyp.sparse is not None:
        rows.append(("Sparse tables", (f"if the smallest expected count (row total × column "
                     f"total / grand total) is below {code(number(hyp.sparse.min_expected))}, "
                     f"{_test_words(hyp.sparse.test, hyp)} is used instead, "
                     "with the same alternative, and a note says so")))
    rows.extend(_adjusted(hyp))
    rows.extend(_bayes(hyp))
    rows.extend(_family(hyp))
    rows.extend(_estimand(hyp))
    if hyp.sensitivity:
        rows.append(("Sensitivity", "for the missing outcomes: " + "; ".join(
            _named(METHODS[s][0], s) for s in hyp.sensitivity)))
    rows.extend(_looks(plan, hyp, share.alpha))
    rows.extend(_then(plan, hyp))
    rule = share.rule
    if rule == "none":
        rule = "the full alpha, no multiplicity adjustment"
    elif rule == (plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical"):
        rule = f"its share under {rule}"
    rows.append(("Alpha at planning", f"{esc(f'{share.alpha:.6g}')} ({esc(rule)})"))
    title = f": {esc(hyp.title)}" if hyp.title else ""
    return f"<h3>{code(hyp.id)}{title}</h3>" + _rows(rows)


def _hypotheses(plan: Plan) -> str:
    from prespec.design.document import alpha_shares

    shares, _ = alpha_shares(plan)
    return (f"<h2>Hypotheses ({len(plan.hypotheses)}, tested in this order)</h2>"
            + "".join(_hypothesis(plan, h, shares[h.id]) for h in plan.hypotheses))


def _design(plan: Plan) -> str:
    design = plan.design
    if design is None:
        return ("<h2>Sample size</h2><p>The plan has no <code>design</code> section: no "
                "sample size is stated in it.</p>")
    from prespec.design.document import size_plan

    rates = ", ".join(f"{code(g)} {code(number(p))}" for g, p in design.assumed.items())
    allocation = ", ".join(f"{code(g)} {code(number(float(a)))}"
                           for g, a in (design.allocation or {}).items())
    rows = [("Assumed rates", rates), ("Power", code(number(design.power))),
            ("Allocation", allocation or "equal"),
            ("Dropout", (f"{code(number(design.dropout))}; the sizes to enrol are the analysed "
             "ones divided by 1 − dropout")),
            ("2×2 formula", "continuity-corrected" if design.continuity else
             "without continuity correction")]
    for name, scenario in design.scenarios.items():
        rows.append(("Scenario", f"{code(name)} (for the simulation): " + ", ".join(
            f"{code(g)} {code(number(p))}" for g, p in scenario.items())))
    sized, rule = size_plan(plan)
    lines = []
    for h in sized:
        if h.n_per_group is None:
            lines.append(f"<li>{code(h.id)}: not sized ({esc('; '.join(h.notes) or 'none')})"
                         "</li>")
            continue
        n = ", ".join(f"{code(g)} {code(k)}" for g, k in h.n_per_group.items())
        enrol = ", ".join(f"{code(g)} {code(k)}"
                          for g, k in (h.n_enrol_per_group or {}).items())
        lines.append(f"<li>{code(h.id)} at alpha {esc(f'{h.alpha:.4g}')}, by "
                     f"{esc(h.method)}: analysed {n}; to enrol {enrol}</li>")
    return ("<h2>Sample size</h2>" + _rows(rows)
            + f"<p>Sizes per hypothesis at {esc(rule)}:</p><ul>{''.join(lines)}</ul>")


def methods_used(plan: Plan) -> list[str]:
    """Every method name of :data:`METHODS` the plan uses, in first-use order."""
    names: list[str] = []

    def add(name: object) -> None:
        if isinstance(name, str) and name in METHODS and name not in names:
            names.append(name)

    add(plan.multiplicity if isinstance(plan.multiplicity, str) else "graphical")
    for hyp in plan.hypotheses:
        for name in (hyp.test, hyp.interval, hyp.fallback, hyp.flag_method,
                     hyp.sparse.test if hyp.sparse else None,
                     hyp.then.multiplicity if hyp.then else None, *(hyp.sensitivity or [])):
            add(name)
        if hyp.then is not None:
            add(follow_ups(hyp, plan)[0].interval)
        if hyp.looks is not None:
            add(hyp.looks.efficacy)
            add(hyp.looks.futility.spending if hyp.looks.futility else None)
    return names


def _references(plan: Plan) -> str:
    rows = "".join(f"<tr><td>{code(n)}</td><td>{esc(METHODS[n][0])}</td>"
                   f"<td>{esc(METHODS[n][1])}</td></tr>" for n in methods_used(plan))
    return ('<h2>Methods and references</h2><table class="grid refs"><tbody><tr class="head">'
            "<th>plan name</th><th>method</th><th>reference</th></tr>"
            f"{rows}</tbody></table>")


def _first_page(plan: Plan, locked: LockedVersion) -> str:
    stamp = (esc(locked.timestamp) if locked.timestamp else esc(NO_TIMESTAMP)
             + " (the lock time is that of the machine's clock)")
    rows = [("Plan fingerprint", code(locked.fingerprint)),
            ("Lock version", (f"version {code(locked.version)} in {code(locked.lock_name)}, "
             f"of the plan {code(locked.plan_name)}")),
            ("Locked at", (f"{esc(locked.locked_at)} by {esc(locked.actor)} (the locking "
             "machine's clock, from the audit log)")),
            ("Trusted time-stamp", stamp)]
    if locked.previous is not None:
        rows.append(("Amends", (f"the version with fingerprint {code(locked.previous)}; "
                     f"reason: {esc(locked.reason or '(none given)')}")))
    protocol = f"<p class=\"sub\">Protocol: {esc(plan.protocol)}</p>" if plan.protocol else ""
    return (f"<h1>Statistical analysis plan: {esc(plan.title)}</h1>{protocol}"
            + _rows(rows)
            + f"<p>This document is written by prespec from lock version {code(locked.version)}"
            " alone, so its words are those of the analysis that runs. Anyone can check it "
            f"against the lock and the audit log with <code>prespec verify {esc(locked.plan_name)}"
            " --document FILE</code>.</p>"
            f'<p class="caution">{esc(CAUTION)}</p>'
            f'<p class="format">{esc(FORMAT_LINE.format(FORMAT))}</p>')


_STYLE = """
body { font-family: Georgia, 'DejaVu Serif', serif; max-width: 48rem; margin: 0 auto;
       padding: 1.5rem; color: #1b1b1b; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.25em; border-bottom: 1px solid #9a9a9a; margin-top: 1.6em; }
h3 { font-size: 1.05em; margin-top: 1.2em; }
code { font-family: 'DejaVu Sans Mono', monospace; font-size: 0.88em; background: #f2f2f2;
       padding: 0 0.15em; overflow-wrap: anywhere; }
table { border-collapse: collapse; margin: 0.4em 0 0.8em; width: 100%; }
th, td { border: 1px solid #c8c8c8; padding: 0.25em 0.55em; text-align: left;
         vertical-align: top; }
table.fields th { width: 13em; background: #f5f5f5; font-weight: 600; }
table.grid tr.head th { background: #ececec; }
table.refs td:first-child { white-space: nowrap; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.sub { color: #444; margin-top: 0; }
.caution { border: 2px solid #7a4b00; background: #fff6e0; padding: 0.5em 0.8em; }
.format { color: #666; font-size: 0.85em; }
section.first { page-break-after: always; break-after: page; }
@page { size: A4; margin: 18mm 16mm; }
"""


def plan_document(locked: LockedVersion) -> str:
    """The whole HTML document of one locked version."""
    plan = plan_from_resolved(locked.resolved, source=locked.lock_name)
    title = esc(f"Statistical analysis plan: {plan.title}")
    body = "".join([
        f'<section class="first">{_first_page(plan, locked)}</section>',
        _population(plan), _outcomes(plan), _multiplicity(plan), _hypotheses(plan),
        _design(plan), _references(plan),
    ])
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{title}</title><style>{_STYLE}</style></head>"
            f"<body>{body}</body></html>\n")


# --- the text a document carries, for verify --document -------------------------------------


class _Text(HTMLParser):
    """The text of an HTML document's body, in reading order (no style, script or head)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.parts: list[str] = []
        self._skip = 0

    def handle_starttag(self, tag: str, attrs: Any) -> None:
        if tag in ("style", "script", "title", "head"):
            self._skip += 1
        elif tag in ("p", "li", "tr", "td", "th", "h1", "h2", "h3", "br", "section", "table"):
            self.parts.append(" ")

    def handle_endtag(self, tag: str) -> None:
        if tag in ("style", "script", "title", "head"):
            self._skip = max(0, self._skip - 1)
        elif tag in ("p", "li", "tr", "td", "th", "h1", "h2", "h3", "section", "table"):
            self.parts.append(" ")

    def handle_data(self, data: str) -> None:
        if not self._skip:
            self.parts.append(data)


def html_text(document: str) -> str:
    """The words of an HTML document, whitespace collapsed to single spaces."""
    parser = _Text()
    parser.feed(document)
    parser.close()
    return " ".join("".join(parser.parts).split())


FINGERPRINT = re.compile(r"sha256:[0-9a-f]{64}")
#: The fingerprint the first page names (whitespace may be gone, as in a PDF's text).
NAMED_FINGERPRINT = re.compile(r"Plan\s*fingerprint\s*(sha256:[0-9a-f]{64})")
_FORMAT = re.compile(r"plan\s*document\s*format\s*(\d+)")


def format_of(text: str) -> int | None:
    """The wording format a document's text names, or None."""
    found = _FORMAT.search(text)
    return int(found.group(1)) if found else None

