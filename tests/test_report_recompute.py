"""The notebook shows the work (report/template.py ``filled``): each hypothesis of
plans/methods-tour.yaml gets a cell that computes it again from tables/ with prespec.stats and
asserts equality with results.json; a changed count or setting in a cell makes it fail.

The values themselves are checked against published examples and scipy/statsmodels in
tests/reference/; here the cells must reach the same function with the same inputs as the run.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

from prespec import api
from prespec.demo.wound import demo_data
from prespec.report import render, template

TOUR = Path(__file__).parent.parent / "plans" / "methods-tour.yaml"

#: the function each hypothesis's cell must call (the test, then the interval)
CALLS = {
    "H1": ["stats.cochran_mantel_haenszel(strata, continuity=False, alternative='two-sided')",
           "stats.mantel_haenszel_risk_ratio(strata, 0.95)"],
    "H2": [("stats.farrington_manning(events[0], totals[0], events[1], totals[1], margin=0.05, "
           "measure='risk-difference', alternative='less')"),
           "stats.miettinen_nurminen_difference(events[0], totals[0], events[1], totals[1], 0.9)"],
    "H3": ["stats.binomial_exact(events[0], totals[0], 0.15, alternative='less')",
           "stats.clopper_pearson(events[0], totals[0], 0.9)"],
    "H4": [("stats.cochran_armitage(events, totals, scores=[0.0, 1.0, 2.0], "
           "alternative='two-sided')")],
    "H5": ["stats.fisher_exact_k(events, totals, monte_carlo=None).result"],
    "H5:alginate-vs-gauze": ["stats.fisher_exact(", "stats.newcombe_difference("],
    "H5:negative-pressure-vs-gauze": ["stats.fisher_exact(", "stats.newcombe_difference("],
    "H5:negative-pressure-vs-alginate": ["stats.fisher_exact(", "stats.newcombe_difference("],
    "H6": ["stats.boschloo_exact(", "stats.exact_conditional_odds_ratio("],
    "H7": ["stats.tost(", "margin=0.8, measure='risk-ratio', alternative='greater'",
           "margin=1.25, measure='risk-ratio', alternative='less'", "stats.katz_ratio("],
    "H8": ["stats.barnard_exact(", "stats.agresti_caffo_difference("],
    "H9": ["stats.likelihood_ratio(events, totals, alternative='two-sided')"],
    "H10": [("stats.two_proportion_z(events[0], totals[0], events[1], totals[1], "
            "alternative='less')"), "stats.woolf_odds_ratio("],
}


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("tour")
    plan = folder / "tour.yaml"
    shutil.copy(TOUR, plan)
    (folder / "data.csv").write_text(demo_data())
    api.lock(plan, actor="tour")
    return api.run(plan, folder / "data.csv", out=folder / "report").folder


def checks(nb: nbformat.NotebookNode) -> dict[str, nbformat.NotebookNode]:
    out = {}
    for cell in nb.cells:
        if "recompute" in cell.metadata.get("tags", []):
            first = cell.source.splitlines()[0]
            assert first.startswith("hypothesis = ")
            out[first.removeprefix("hypothesis = ").strip("'")] = cell
    return out


def run_again(nb: nbformat.NotebookNode, folder: Path) -> dict[str, str]:
    """Execute the notebook again in ``folder`` as a reviewer would (errors kept in the
    outputs); the error each check cell raised, by hypothesis ("" for none)."""
    manager = render._kernel_options(render.KERNEL)["kernel_manager_class"]  # this Python's
    NotebookClient(nb, kernel_name=render.KERNEL, allow_errors=True, timeout=300,
                   kernel_manager_class=manager,
                   resources={"metadata": {"path": str(folder)}}).execute()
    return {ident: "".join(o.get("evalue", "") for o in cell.outputs
                           if o.output_type == "error")
            for ident, cell in checks(nb).items()}


def test_every_hypothesis_is_recomputed_in_the_notebook(report: Path) -> None:
    nb = nbformat.read(report / "report.ipynb", as_version=4)
    cells = checks(nb)
    assert list(cells) == list(CALLS)
    for ident, cell in cells.items():
        for call in CALLS[ident]:
            assert call in cell.source, (ident, call)
        assert "check(hypothesis, groups, events, totals, test" in cell.source
        assert not [o for o in cell.outputs if o.output_type == "error"]
    ids = [c.id for c in nb.cells]
    assert ids.index("recompute") < ids.index("recompute-1") < ids.index("environment")
    html = (report / "report.html").read_text(encoding="utf-8")
    assert "read_counts(" not in html and "check(hypothesis" not in html  # code hidden


def test_a_changed_count_or_setting_fails_the_cell(report: Path) -> None:
    """The executed notebook run again as a reviewer would, with H2's count and H9's test
    changed in their cells and H4's table edited in tables/: those three cells fail with the
    value that differs, every other cell still passes."""
    nb = nbformat.read(report / "report.ipynb", as_version=4)
    cells = checks(nb)
    h2 = cells["H2"]
    h2.source = h2.source.replace("test = ", "events[0] += 1\ntest = ", 1)
    h9 = cells["H9"]
    h9.source = h9.source.replace("stats.likelihood_ratio(", "stats.pearson_chi_square(")
    work = report.parent / "again"
    shutil.copytree(report, work)
    table = work / "tables" / "H4.csv"
    rows = table.read_text(encoding="utf-8").splitlines()
    head, first, *rest = rows
    cells_of_first = first.split(",")
    cells_of_first[1] = str(int(cells_of_first[1]) + 1)
    table.write_text("\n".join([head, ",".join(cells_of_first), *rest]) + "\n",
                     encoding="utf-8")
    failed = run_again(nb, work)
    assert failed["H2"].startswith("H2: statistic recomputed as")
    assert failed["H9"].startswith("H9: statistic recomputed as")
    assert failed["H4"].startswith("H4: statistic recomputed as")
    assert {k for k, v in failed.items() if v} == {"H2", "H4", "H9"}
    others = [o for c in nb.cells if "recompute" not in c.metadata.get("tags", [])
              for o in c.outputs if o.output_type == "error"]
    assert others == []


def test_no_cell_for_what_the_table_does_not_give() -> None:
    """A covariate-adjusted or stratified-score hypothesis has no check cell (its units are not
    in tables/), nor a Bayesian one whose priors results.json does not give; neither has one
    without a p-value."""
    base = {"id": "H1", "kind": "pair", "alternative": "two-sided",
            "comparison": "superiority", "margin": None, "continuity": False,
            "table": {"groups": ["a", "b"], "events": [1, 2], "totals": [10, 10]},
            "strata_tables": None, "estimate": None, "statistic": 1.0, "p_value": 0.3}
    assert template.check_cell({**base, "test": "pearson-chi-square"}) is not None
    for test in ("g-computation", "stratified-score", "posterior-probability"):
        assert template.check_cell({**base, "test": test}) is None, test
    assert template.check_cell({**base, "test": "pearson-chi-square", "statistic": None,
                                "p_value": None}) is None
    strata = [{"stratum": {"s": "x"}, "events": [1, 2], "totals": [5, 5]}]
    assert template.check_cell({**base, "test": "pearson-chi-square",
                                "strata_tables": strata}) is None


def test_ids_reach_the_code_only_as_literals() -> None:
    ident = 'H"1\n__import__("os")\u202e'
    cell = template.check_cell({"id": ident, "kind": "pair", "test": "fisher-exact",
                                "alternative": "two-sided", "comparison": "superiority",
                                "margin": None, "continuity": False,
                                "table": {"groups": ["a", "b"], "events": [1, 2],
                                          "totals": [10, 10]},
                                "strata_tables": None, "estimate": None, "statistic": None,
                                "p_value": 0.5})
    assert cell is not None
    first = cell.splitlines()[0]
    assert first == f"hypothesis = {ident!r}" and "\u202e" not in cell
    assert len(cell.splitlines()) == 4
    compile(cell, "cell", "exec")


def test_a_rehearsal_gets_no_check_cells() -> None:
    hyp = {"id": "H1", "test": "pearson-chi-square", "role": "primary", "executed": True}
    base = len(template.build().cells)
    assert len(template.filled({"kind": "rehearsal", "hypotheses": [hyp]}).cells) == base
    assert template.check_cell(hyp) is None


def test_an_overridden_test_is_recomputed_as_run(tmp_path: Path) -> None:
    """A run with ``--test H1=fisher-exact``: H1's cell calls Fisher's test (the test used),
    and the run's notebook passed it (the run would have failed otherwise)."""
    from prespec.demo.wound import write_demo

    plan, data = write_demo(tmp_path / "study")
    api.lock(plan, actor="tour")
    out = api.run(plan, data, out=tmp_path / "report", actor="tour",
                  overrides={"hypotheses.H1.test": "fisher-exact"},
                  accept_deviation="a check of the recompute cells")
    cells = checks(nbformat.read(out.folder / "report.ipynb", as_version=4))
    assert "stats.fisher_exact(events[0], totals[0], events[1], totals[1], " \
           "alternative='two-sided')" in cells["H1"].source
    assert "stats.pearson_chi_square(" in cells["H2"].source
    assert not [o for c in cells.values() for o in c.outputs if o.output_type == "error"]


def test_a_bayesian_rule_is_recomputed_from_its_table_and_priors(tmp_path: Path) -> None:
    """plans/bayesian-secondary.yaml: H2's cell calls prespec.stats.bayes with the priors
    results.json records and passes; run again with a count changed, it fails alone."""
    plan = tmp_path / "bayes.yaml"
    shutil.copy(TOUR.with_name("bayesian-secondary.yaml"), plan)
    (tmp_path / "data.csv").write_text(demo_data())
    api.lock(plan, actor="tour")
    folder = api.run(plan, tmp_path / "data.csv", out=tmp_path / "report").folder
    nb = nbformat.read(folder / "report.ipynb", as_version=4)
    cells = checks(nb)
    assert list(cells) == ["H1", "H2"]
    h2 = cells["H2"].source
    assert "from prespec.stats.bayes import posterior_difference" in h2
    assert ("(0.8, 3.2), (0.8, 3.2), margin=0.0, alternative='less', credible=0.95)"
            in h2)
    assert not [o for o in cells["H2"].outputs if o.output_type == "error"]
    cells["H2"].source = h2.replace("posterior = ", "events[1] += 1\nposterior = ", 1)
    failed = run_again(nb, folder)
    assert failed["H2"].startswith("H2: posterior probability recomputed as")
    assert not failed["H1"]
