"""The source of the report notebook, ``template.ipynb``.

The notebook shipped in the package is generated from this module and committed beside it
(a test checks that the two agree). After editing the cells, regenerate it with::

    python -m prespec.report.template

The notebook receives two parameters only, ``results_file`` and ``results_sha256``. Its first
cell after the parameters checks the hash of the results file and stops if it differs; every
other value is read from that file. The display logic lives in :mod:`prespec.report.sections`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import nbformat
from nbformat import NotebookNode

TEMPLATE = Path(__file__).with_name("template.ipynb")

PARAMETERS = '''\
# Parameters, replaced when the report is executed.
results_file = "results.json"
results_sha256 = ""
'''

#: The cell before the per-hypothesis checks: what they share. It prints nothing.
RECOMPUTE = '''\
# The work, shown: each cell after this one computes a hypothesis again from its count table
# in tables/ with prespec's public statistics functions (prespec.stats) and asserts that the
# result equals results.json (to 1e-12 relative). Change a count in a cell and run it again:
# the assertion fails.
import csv
import math

from prespec import stats  # noqa: F401 (the cells below call it)

recorded = {h["id"]: h for h in results.get("hypotheses") or []}


def read_counts(name):
    """The groups, events and totals of a hypothesis's table in tables/."""
    with open(name, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    return ([r["group"] for r in rows], [int(r["events"]) for r in rows],
            [int(r["total"]) for r in rows])


def same(found, kept):
    """Equal to 1e-12 relative; results.json holds a value that is not finite as null."""
    if found is None or kept is None:
        return kept is None and (found is None or not math.isfinite(found))
    return found == kept or math.isclose(found, kept, rel_tol=1e-12, abs_tol=0.0)


def check(hypothesis, groups, events, totals, test, estimate=None):
    """Assert that the recomputed test (and estimate) equal the hypothesis's results.json
    entry, and that the counts used are the ones it records."""
    kept = recorded[hypothesis]
    pairs = [("statistic", test.statistic, kept["statistic"]), ("df", test.df, kept["df"]),
             ("p-value", test.p_value, kept["p_value"])]
    if estimate is not None:
        pairs += [("estimate", estimate.value, kept["estimate"]["value"]),
                  ("interval, lower limit", estimate.low, kept["estimate"]["ci"][0]),
                  ("interval, upper limit", estimate.high, kept["estimate"]["ci"][1])]
    for what, found, value in pairs:
        assert same(found, value), (
            f"{hypothesis}: {what} recomputed as {found!r}, results.json has {value!r}")
    table = kept["table"]  # (the group labels in tables/ are written as shown: not compared)
    assert [len(groups), events, totals] == [len(table["groups"]), table["events"],
                                             table["totals"]], (
        f"{hypothesis}: the counts differ from those results.json records")
'''

CELLS: list[tuple[str, str]] = [
    ("check-results", '''\
# Read results.json once, and stop unless its hash is the one the report was started with.
import hashlib
import json
from pathlib import Path

results_bytes = Path(results_file).read_bytes()
found_sha256 = "sha256:" + hashlib.sha256(results_bytes).hexdigest()
if found_sha256 != results_sha256:
    raise RuntimeError(
        f"{results_file} has hash {found_sha256}, expected {results_sha256 or 'none given'}"
    )
results = json.loads(results_bytes)
if not isinstance(results, dict):
    raise TypeError(f"{results_file} does not hold a JSON object")
'''),
    ("header", '''\
from IPython.display import HTML, Image, display

from prespec.report import sections, summary

display(HTML(summary.summary(results)))
banner = sections.blinded_banner(results)
if banner:
    display(HTML(banner))
display(HTML(sections.caution(results)))
display(HTML(summary.contents(results)))
'''),
    ("departures", '''\
display(HTML(summary.anchor("departures") + sections.departures(results)))
'''),
    ("population", '''\
display(HTML(summary.anchor("population") + sections.population(results)))
'''),
    ("design", '''\
planned = sections.planned_versus_achieved(results)
if planned:
    display(HTML(summary.anchor("design") + planned))
'''),
    ("pooled", '''\
pooled = sections.pooled(results)
if pooled:
    display(HTML(summary.anchor("pooled") + pooled))
'''),
    ("dictionary", '''\
dictionary = sections.data_dictionary(results)
if dictionary:
    display(HTML(summary.anchor("dictionary") + dictionary))
'''),
    ("outcomes", '''\
outcome_parts = sections.outcomes(results)
if outcome_parts:
    display(HTML(summary.anchor("outcomes") + "<h2>Outcomes</h2>"))
for name, outcome_html, figure in outcome_parts:
    display(HTML(outcome_html))
    alt = f"Proportion with the event in each group, with intervals: {name}"
    display(Image(filename=figure, metadata={"alt": alt}))
'''),
    ("hypotheses", '''\
display(HTML(summary.anchor("hypotheses") + sections.hypotheses_heading(results)))
for hypothesis_html, figures in sections.hypothesis_blocks(results):
    display(HTML(hypothesis_html))
    for figure, alt in figures:
        display(Image(filename=figure, metadata={"alt": alt}))
forest = sections.forest_figure(results)
if forest is not None:
    display(HTML(summary.anchor("estimates") + "<h3>Estimates and intervals</h3>"))
    alt = "Estimate and interval of each hypothesis that has one"
    display(Image(filename=forest, metadata={"alt": alt}))
'''),
    ("multiplicity", '''\
display(HTML(summary.anchor("multiplicity") + sections.multiplicity(results)))
graph = sections.multiplicity_figure(results)
if graph is not None:
    alt = "Graph of the graphical procedure: initial weights and transitions"
    display(Image(filename=graph, metadata={"alt": alt}))
'''),
    ("families", '''\
from prespec.report import families as family_report

family_heading = family_report.families_heading(results)
if family_heading:
    display(HTML(summary.anchor("families") + family_heading))
for family_html, figure, alt, table_html in family_report.family_blocks(results):
    display(HTML(family_html))
    display(Image(filename=figure, metadata={"alt": alt}))
    display(HTML(table_html))
'''),
    ("recompute", RECOMPUTE),
    ("environment", '''\
display(HTML(summary.anchor("environment") + sections.environment(results)))
'''),
    ("caution-end", '''\
display(HTML(sections.caution(results)))
'''),
]


def build() -> NotebookNode:
    """The template notebook, with fixed cell ids so that it is the same on every build."""
    nb = nbformat.v4.new_notebook()
    params = nbformat.v4.new_code_cell(PARAMETERS.rstrip("\n"))
    params.id = "parameters"
    params.metadata["tags"] = ["parameters"]
    nb.cells.append(params)
    for cell_id, source in CELLS:
        cell = nbformat.v4.new_code_cell(source.rstrip("\n"))
        cell.id = cell_id
        nb.cells.append(cell)
    nb.metadata["kernelspec"] = {
        "display_name": "Python 3 (ipykernel)",
        "language": "python",
        "name": "python3",
    }
    nb.metadata["language_info"] = {"name": "python"}
    nb.metadata["title"] = "prespec report"
    nbformat.validate(nb)
    return nb


#: The test names whose function takes a pair of groups, tests at a margin, one group.
_PAIR = {"barnard-exact": "barnard_exact", "boschloo-exact": "boschloo_exact",
         "fisher-exact": "fisher_exact", "two-proportion-z": "two_proportion_z"}
_MARGIN = {"two-proportion-z": "wald_margin_z", "farrington-manning": "farrington_manning"}
_SINGLE = {"binomial-exact": "binomial_exact", "one-proportion-z": "one_proportion_z"}
_PAIR_ARGS = "events[0], totals[0], events[1], totals[1]"


def _test_call(h: dict[str, Any]) -> str | None:
    """The call of prespec.stats that computes ``h``'s test as the run did (the test used,
    after any switch), or None where the table alone does not give it."""
    test, alt = h.get("test"), h.get("alternative")
    groups = len(h["table"]["groups"])
    margin, comparison = h.get("margin"), h.get("comparison")
    measure = (h.get("estimate") or {}).get("measure")
    if h.get("strata_tables"):
        if test != "cochran-mantel-haenszel":
            return None
        return (f"stats.cochran_mantel_haenszel(strata, continuity={bool(h.get('continuity'))!r}"
                f", alternative={alt!r})")
    if test in _MARGIN and comparison in ("non-inferiority", "equivalence"):
        if measure is None:
            return None
        fn = f"stats.{_MARGIN[test]}"
        if comparison == "equivalence":
            low, high = margin
            return (f"stats.tost(\n    {fn}({_PAIR_ARGS}, margin={low!r}, measure={measure!r}, "
                    f"alternative='greater'),\n    {fn}({_PAIR_ARGS}, margin={high!r}, "
                    f"measure={measure!r}, alternative='less'))")
        return f"{fn}({_PAIR_ARGS}, margin={margin!r}, measure={measure!r}, alternative={alt!r})"
    if test == "pearson-chi-square":
        return (f"stats.pearson_chi_square(events, totals, continuity="
                f"{bool(h.get('continuity'))!r}, alternative={alt!r})")
    if test == "likelihood-ratio":
        return f"stats.likelihood_ratio(events, totals, alternative={alt!r})"
    if test == "cochran-armitage-trend":
        return (f"stats.cochran_armitage(events, totals, scores={h.get('scores')!r}, "
                f"alternative={alt!r})")
    if test == "fisher-exact" and groups > 2:
        mc = h.get("monte_carlo")
        draws = None if mc is None else (mc["tables"], mc["seed"])
        return f"stats.fisher_exact_k(events, totals, monte_carlo={draws!r}).result"
    if test in _PAIR and groups == 2:
        return f"stats.{_PAIR[test]}({_PAIR_ARGS}, alternative={alt!r})"
    if test in _SINGLE and groups == 1:
        return (f"stats.{_SINGLE[test]}(events[0], totals[0], {h.get('null_rate')!r}, "
                f"alternative={alt!r})")
    return None


def _estimate_call(h: dict[str, Any]) -> str | None:
    """The call of prespec.stats that gives ``h``'s estimate and interval (the function the
    run's method tables name), or None where it has none."""
    from prespec import stats
    from prespec.analysis import methods

    est = h.get("estimate")
    if not est or h.get("test") == "stratified-score":
        return None
    measure, name, level = est.get("measure"), est.get("ci_method"), est.get("level")
    if h.get("strata_tables"):
        fn: Any = methods.STRATIFIED_ESTIMATES.get(measure)
        args = "strata"
    elif h.get("kind") == "single":
        fn, args = methods.SINGLE_INTERVALS.get(name), "events[0], totals[0]"
    else:
        fn, args = methods.PAIR_INTERVALS.get(measure, {}).get(name), _PAIR_ARGS
    if fn is None or getattr(stats, fn.__name__, None) is not fn:
        return None
    return f"stats.{fn.__name__}({args}, {level!r})"


def _bayes_cell(h: dict[str, Any], table: str) -> str | None:
    """A Bayesian rule recomputed from its count table and the priors results.json records:
    the posterior probability, the posterior mean and the credible interval."""
    bay = h.get("bayesian") or {}
    est = h.get("estimate") or {}
    if not bay.get("prior") or h.get("posterior_probability") is None or not est:
        return None
    priors = [(float(p["a"]), float(p["b"])) for p in bay["prior"]]
    common = f"alternative={bay['alternative']!r}, credible={est['level']!r}"
    if len(priors) == 1:
        call = (f"posterior_single(events[0], totals[0], {priors[0]!r}, "
                f"null_rate={bay['null_rate']!r}, {common})")
        name = "posterior_single"
    else:
        call = (f"posterior_difference(events[0], totals[0], events[1], totals[1], "
                f"{priors[0]!r}, {priors[1]!r}, margin={bay['margin']!r}, {common})")
        name = "posterior_difference"
    return _BAYES_CELL.format(name=name, hypothesis=repr(h["id"]), table=repr(table),
                              call=call[len(name) + 1:])


#: A Bayesian rule's cell: {name} of prespec.stats.bayes on the table's counts.
_BAYES_CELL = """\
hypothesis = {hypothesis}
from prespec.stats.bayes import {name}  # noqa: E402

groups, events, totals = read_counts({table})
# the priors and the rule's event as results.json records them (bayesian.prior)
posterior = {name}(
    {call}
kept = recorded[hypothesis]
for what, found, value in [
        ("posterior probability", posterior.probability, kept["posterior_probability"]),
        ("posterior mean", posterior.mean, kept["estimate"]["value"]),
        ("credible interval, lower limit", posterior.low, kept["estimate"]["ci"][0]),
        ("credible interval, upper limit", posterior.high, kept["estimate"]["ci"][1])]:
    assert same(found, value), (
        f"{{hypothesis}}: {{what}} recomputed as {{found!r}}, results.json has {{value!r}}")
assert [events, totals] == [kept["table"]["events"], kept["table"]["totals"]], (
    f"{{hypothesis}}: the counts differ from those results.json records")"""


def check_cell(h: dict[str, Any]) -> str | None:
    """The source of the cell that recomputes one hypothesis from ``tables/``, or None."""
    from prespec.report.tablenames import hypothesis_table

    if not isinstance(h.get("table"), dict):  # a rehearsal's hypotheses have no table
        return None
    if h.get("test") == "posterior-probability":
        return _bayes_cell(h, hypothesis_table(h["id"]))
    test = _test_call(h)
    if test is None or h.get("p_value") is None and h.get("statistic") is None:
        return None
    estimate = _estimate_call(h)
    lines = [f"hypothesis = {h['id']!r}",
             f"groups, events, totals = read_counts({hypothesis_table(h['id'])!r})"]
    if h.get("strata_tables"):
        lines.append("# the strata (first group's events and total, then the second's), as "
                     "results.json lists them")
        strata = [(s["events"][0], s["totals"][0], s["events"][1], s["totals"][1])
                  for s in h["strata_tables"]]
        lines.append(f"strata = {strata!r}")
    lines.append(f"test = {test}")
    if estimate is not None:
        lines.append(f"estimate = {estimate}")
    lines.append("check(hypothesis, groups, events, totals, test"
                 + (", estimate)" if estimate is not None else ")"))
    return "\n".join(lines)


def filled(results: dict[str, Any], folder: Path | None = None) -> NotebookNode:
    """The template with one cell per hypothesis after ``recompute`` (those whose test the
    count table alone gives, a Bayesian rule's with the priors results.json records: not the
    covariate-adjusted or stratified-score ones, whose units are not in ``tables/``); a
    rehearsal's none. With ``folder``,
    only the hypotheses whose table is there (a report folder always has them)."""
    from prespec.report.tablenames import hypothesis_table

    nb = build()
    at = next(i for i, cell in enumerate(nb.cells) if cell.id == "recompute") + 1
    cells = []
    hypotheses = results.get("hypotheses") if results.get("kind") == "run" else None
    for n, h in enumerate(hypotheses or [], start=1):
        source = check_cell(h)
        if source is None or folder is not None and not (
                folder / hypothesis_table(h["id"])).is_file():
            continue
        cell = nbformat.v4.new_code_cell(source)
        cell.id = f"recompute-{n}"
        cell.metadata["tags"] = ["recompute"]
        cells.append(cell)
    nb.cells[at:at] = cells
    nbformat.validate(nb)
    return nb


def dumps() -> str:
    """The template as the text written to ``template.ipynb``."""
    return nbformat.writes(build()) + "\n"


def write(path: Path = TEMPLATE) -> Path:
    """Write the template notebook (by default into the package) and return its path."""
    path.write_text(dumps(), encoding="utf-8")
    return path


if __name__ == "__main__":
    print(write())
