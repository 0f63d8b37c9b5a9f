"""Tests of the blinded rehearsal's report and of the data dictionary
(src/prespec/report/blinded.py and the rehearsal paths of sections.py and figures.py).

The rehearsal below is invented (the wound-dressing scenario of docs/plan-format.md) in the
shape of the results.json contract. The report computes nothing; the tests check that it shows
the pooled figures, the hypotheses and the data dictionary, and that no number of any group
reaches the page or the figures folder, even when results.json wrongly carries one. The notebook is
executed once in this module.
"""

from __future__ import annotations

import html
import json
import re
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import nbformat
import pytest

from prespec.errors import PrespecError
from prespec.report import render, sections, summary
from prespec.report.blinded import leaks, role_label, shown_value
from prespec.report.figures import write_figures

try:
    from test_report_figures import CAUTION, HOSTILE, HOSTILE_SCRIPT, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_figures import CAUTION, HOSTILE, HOSTILE_SCRIPT, sample_results

GROUPS = ("gauze", "alginate", "negative-pressure")


def blinded_results() -> dict[str, Any]:
    """An invented rehearsal of the three-arm plan: pooled figures and the data dictionary."""
    base = sample_results()
    keep = ("prespec", "title", "protocol", "plan", "plan_version", "data", "data_file",
            "created", "actor", "alpha", "multiplicity", "environment", "caution")
    res: dict[str, Any] = {k: base[k] for k in keep}
    values = [{"value": f"ward-{k:02d}", "count": 12, "meaning": None} for k in range(50)]
    res.update({
        "kind": "rehearsal",
        "blinded": True,
        "title": "Dressing regimens — rehearsal",
        "population": {"rows_read": 612, "excluded_by_filter": 9, "excluded_group": 0,
                       "analysed": 603},
        "planned_total": 900,
        "analysed_total": 603,
        "pooled": {
            "infection": {"events": 97, "total": 583, "missing": 20, "rate": 0.16638,
                          "ci": [0.1382, 0.1990], "ci_method": "wilson", "level": 0.95},
            "reopening": {"events": 4, "total": 594, "missing": 9, "rate": 0.006734,
                          "ci": [0.0026, 0.0172], "ci_method": "wilson", "level": 0.95},
        },
        "hypotheses": [
            {"id": "H1", "title": "Negative-pressure vs gauze", "role": "primary",
             "outcome": "infection", "compare": ["negative-pressure", "gauze"],
             "test": "pearson-chi-square", "parent": None, "executed": True, "problem": None},
            {"id": "H2", "title": "Any difference in reopening", "role": "secondary",
             "outcome": "reopening", "compare": "all", "test": "fisher-exact", "parent": None,
             "executed": False,
             "problem": "fisher-exact: the k×2 table is too large to enumerate; set monte_carlo"},
            {"id": "H2:alginate-vs-gauze", "title": "Alginate vs gauze", "role": "secondary",
             "outcome": "reopening", "compare": ["alginate", "gauze"], "test": "fisher-exact",
             "parent": "H2", "executed": True, "problem": None},
        ],
        "data_dictionary": {
            "rows": 612, "counted_over": "all rows read",
            "group_column": {"column": "arm", "read": False},
            "columns": [
                {"column": "participant", "role": "data.id", "distinct": 612, "blank": 0,
                 "values": [], "more": 0, "more_count": 0, "duplicates": 0},
                {"column": "consented", "role": "data.include[1]", "distinct": 2, "blank": 0,
                 "values": [{"value": "yes", "count": 603, "meaning": "passes filter"},
                            {"value": "no", "count": 9, "meaning": "fails filter"}],
                 "more": 0, "more_count": 0},
                {"column": "infected_30d", "role": "outcomes.infection.column", "distinct": 3,
                 "blank": 20,
                 "values": [{"value": "1", "count": 97, "meaning": "event"},
                            {"value": "0", "count": 486, "meaning": "no-event"},
                            {"value": "2", "count": 9, "meaning": "unmapped"},
                            {"value": None, "count": 20, "meaning": "blank"}],
                 "more": 0, "more_count": 0},
                {"column": "ward", "distinct": 62, "blank": 0,
                 "role": ("hypotheses.H1.strata, "
                          "hypotheses.H2:a-vs-b.estimand.intercurrent[1].column"),
                 "values": values, "more": 12, "more_count": 12},
                {"column": "died", "role": "hypotheses.H1.estimand.intercurrent[1].column",
                 "distinct": 2, "blank": 0,
                 "values": [{"value": "yes", "count": 3, "meaning": "intercurrent event"},
                            {"value": " no", "count": 609, "meaning": None}],
                 "more": 0, "more_count": 0},
            ],
        },
        "design": {"rule": "alpha / m", "power": 0.8, "dropout": 0.1,
                   "assumed": {"gauze": 0.2, "alginate": 0.14, "negative-pressure": 0.1},
                   "hypotheses": [{"id": "H1", "alpha": 0.025, "method": "normal",
                                   "n_per_group": {"negative-pressure": 270, "gauze": 270},
                                   "n_enrol_per_group": {"negative-pressure": 300,
                                                         "gauze": 300},
                                   "achieved_per_group": None, "power_at_achieved": None}]},
        "deviations": [{"code": "unmapped-outcome-value",
                        "detail": "infected_30d: 9 rows hold '2'", "expected": "1, 0",
                        "found": "2"}],
        "notes": [{"code": "rehearsal-groups-not-read",
                   "detail": "column 'arm' (data.group) was not read"}],
    })
    return res


class _Page(HTMLParser):
    """The rows of every table (as cell texts) and every image of a page."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.rows: list[list[str]] = []
        self.images: list[dict[str, str | None]] = []
        self._row: list[str] | None = None
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "tr":
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []
        elif tag == "img":
            self.images.append(dict(attrs))

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._row is not None and self._cell is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.rows.append(self._row)
            self._row = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


def _page(page: str) -> _Page:
    parser = _Page()
    parser.feed(page)
    parser.close()
    return parser


_NUMBER = re.compile(r"[-+(]?\d[\d,.]*%?(,\s*-?\d[\d.]*\)?)?( short)?|< 0\.0001|met")


def group_numbers(rows: list[list[str]], groups: tuple[str, ...] = GROUPS) -> list[list[str]]:
    """The table rows in which a group name stands beside a number."""
    return [row for row in rows
            if any(g in cell for g in groups for cell in row)
            and any(_NUMBER.fullmatch(cell) for cell in row)]


def test_group_numbers_finds_a_run_reports_per_group_rows() -> None:
    # The check itself: on a run's hypotheses and outcomes it finds the per-group rows.
    res = sample_results()
    page = "".join([*sections.hypotheses(res), *(o[1] for o in sections.outcomes(res))])
    found = group_numbers(_page(page).rows)
    assert ["gauze", "41", "155", "196"] in found
    assert ["negative-pressure", "23", "175", "198", "32.10", "165.90"] in found


# --- fragments, without a kernel -------------------------------------------------------------


def _fragments(res: dict[str, Any]) -> str:
    return "".join([
        summary.summary(res), sections.blinded_banner(res), sections.caution(res),
        sections.departures(res), sections.population(res),
        sections.planned_versus_achieved(res), sections.pooled(res),
        sections.data_dictionary(res), *(o[1] for o in sections.outcomes(res)),
        sections.hypotheses_heading(res), *sections.hypotheses(res),
        sections.multiplicity(res), sections.environment(res),
    ])


def test_rehearsal_shows_no_group_next_to_a_number() -> None:
    page = _fragments(blinded_results())
    parsed = _page(page)
    assert parsed.rows, "no tables"
    assert group_numbers(parsed.rows) == []
    assert "<h2>Planned versus achieved</h2>" not in page  # planned n per group: not shown


def test_banner_labels_the_rehearsal_prominently() -> None:
    res = blinded_results()
    banner = sections.blinded_banner(res)
    assert banner.startswith('<div class="prespec-blinded"')
    assert "Blinded rehearsal — no group-level results</p>" in banner
    assert "without reading the group column" in banner
    assert "prespec-leak" not in banner  # the design's planned sizes are the plan's, no leak
    assert sections.blinded_banner(sample_results()) == ""


def test_pooled_table_per_outcome() -> None:
    page = sections.pooled(blinded_results())
    assert page.startswith("<h2>Pooled outcomes, all groups together</h2>")
    assert ('<tr><td>infection</td><td class="num">97</td><td class="num">583</td>'
            '<td class="num">20</td><td class="num">0.1664</td><td>(0.1382, 0.1990)</td>'
            "<td>95% wilson</td></tr>") in page
    assert "<td>reopening</td>" in page
    assert sections.pooled(sample_results()) == ""


def test_population_of_a_rehearsal_with_the_totals() -> None:
    page = sections.population(blinded_results())
    group = "Left out for the group (the group column is not read in a rehearsal)"
    for label, value in [("Rows read", "612"), (group, "0"),
                         ("Planned in total (sum of planned_n)", "900"),
                         ("Analysed in total", "603")]:
        assert f"<tr><th>{label}</th><td>{value}</td></tr>" in page
    res = blinded_results()
    res["planned_total"] = None
    assert ("<tr><th>Planned in total (sum of planned_n)</th><td>not planned</td></tr>"
            in sections.population(res))


def test_rehearsed_hypotheses_with_what_executed() -> None:
    res = blinded_results()
    assert sections.hypotheses_heading(res) == "<h2>Hypotheses rehearsed</h2>"
    [page] = sections.hypotheses(res)
    assert "2 of 3 hypotheses executed every step on the pooled data." in page
    assert "Did not execute: H2." in page
    flagged = 'style="background:#fde2e2;font-weight:600;"'
    assert (f"<tr {flagged}><td>H2</td><td>Any difference in reopening</td><td>secondary</td>"
            "<td>reopening</td><td>all groups</td><td>fisher-exact</td><td>no</td>"
            "<td>fisher-exact: the k×2 table is too large to enumerate; set monte_carlo</td>"
            "</tr>") in page
    assert ("<tr><td>H1</td><td>Negative-pressure vs gauze</td><td>primary</td>"
            "<td>infection</td><td>negative-pressure vs gauze</td><td>pearson-chi-square</td>"
            "<td>yes</td><td>—</td></tr>") in page
    assert "<td>Alginate vs gauze (follow-up of H2)</td>" in page
    for absent in ("p-value", "Statistic", "Estimate", "Decision", "Adjusted"):
        assert f"<th>{absent}" not in page, absent
    multiplicity = sections.multiplicity(res)
    assert "A rehearsal tests nothing" in multiplicity and "Adjusted" not in multiplicity


def test_data_dictionary_overview_and_columns() -> None:
    page = sections.data_dictionary(blinded_results())
    assert page.startswith("<h2>Data dictionary</h2>")
    assert "Counted over all rows read (612 rows)." in page
    assert "The group column arm is not read, so it is not counted." in page
    flagged = 'style="background:#fde2e2;font-weight:600;"'
    assert (f'<tr {flagged}><td>infected_30d</td><td>outcome “infection”</td>'
            '<td class="num">3</td><td class="num">20</td>'
            '<td class="num">9</td></tr>') in page
    assert (f'<tr {flagged}><td>2</td><td class="num">9</td>'
            "<td>UNMAPPED: neither event nor no event</td></tr>") in page
    assert ('<tr style="background:#f1f1f1;font-style:italic;"><td>(blank)</td>'
            '<td class="num">20</td><td>blank</td></tr>') in page
    assert ('<tr><td>participant</td><td>unit id</td><td class="num">612</td>'
            '<td class="num">0</td><td class="num">—</td></tr>') in page
    assert "Used for unit id (data.id); 612 distinct values; 0 blank; 0 duplicated." in page
    assert "The ids themselves are not listed." in page
    assert "… and 12 more values in 12 rows, not listed (a list stops at 50)." in page
    assert page.count("<td>ward-") == 50
    assert "<td>“ no”</td>" in page  # a value with padding is quoted
    assert "<td>the intercurrent event happened</td>" in page
    assert "<td>strata of H1; intercurrent event 1 of H2:a-vs-b</td>" in page  # overview
    assert ("Used for strata of H1 (hypotheses.H1.strata); intercurrent event 1 of H2:a-vs-b "
            "(hypotheses.H2:a-vs-b.estimand.intercurrent[1].column); 62 distinct") in page
    assert "Checked against the data specification" in page and "<th>Signature</th>" in page


def test_one_column_flagged_uses_the_right_number() -> None:
    page = sections.data_dictionary(blinded_results())
    assert "1 column holds values that the plan does not map" in page


def test_role_labels_and_shown_values() -> None:
    assert role_label("data.include[2]") == "population filter 2 (data.include[2])"
    assert role_label("hypotheses.H3.estimand.intercurrent[1].outcome_column") == (
        "outcome while on treatment, event 1 of H3 "
        "(hypotheses.H3.estimand.intercurrent[1].outcome_column)")
    assert role_label("something.new") == "something.new"
    assert shown_value(None, "x") == "(blank)" and shown_value("", "x") == "(blank)"
    assert shown_value(1, "x") == "1" and shown_value("a b", "x") == "a b"
    with pytest.raises(PrespecError, match=r"^results.json: x: expected text, found \[1\]$"):
        shown_value([1], "x")


def test_data_dictionary_absent_or_empty() -> None:
    assert sections.data_dictionary(sample_results()) == ""
    res = blinded_results()
    res["data_dictionary"] = {"columns": []}
    assert "results.json lists no columns." in sections.data_dictionary(res)
    res["data_dictionary"] = {"columns": [{"column": "x", "role": "r", "distinct": "many"}]}
    with pytest.raises(PrespecError, match=r"data_dictionary.x.distinct: expected a number"):
        sections.data_dictionary(res)


def test_group_level_fields_in_a_rehearsal_are_named_and_never_shown(tmp_path: Path) -> None:
    res = blinded_results()
    run = sample_results()
    res["groups"] = run["groups"]
    res["hypotheses"][0].update({k: run["hypotheses"][0][k] for k in
                                 ("table", "expected", "statistic", "p_value", "estimate")})
    res["design"]["hypotheses"][0]["achieved_per_group"] = {"negative-pressure": 198,
                                                            "gauze": 196}
    assert leaks(res) == ["groups", "design.hypotheses.H1.achieved_per_group",
                          "hypotheses.H1.statistic", "hypotheses.H1.p_value",
                          "hypotheses.H1.estimate", "hypotheses.H1.table",
                          "hypotheses.H1.expected"]
    page = _fragments(res)
    assert "<strong>Not blinded.</strong> results.json carries group-level fields" in page
    assert "groups, design.hypotheses.H1.achieved_per_group, hypotheses.H1.statistic" in page
    assert group_numbers(_page(page).rows) == []
    for number in ("0.01340", "6.120", "-0.0940", "196", "198"):
        assert f">{number}<" not in page, number
    assert write_figures(res, tmp_path) == []
    assert not (tmp_path / "figures").exists()
    assert sections.forest_figure(res) is None and sections.outcomes(res) == []


def test_hostile_labels_in_the_rehearsal_are_escaped() -> None:
    for label in HOSTILE:
        res = blinded_results()
        res["pooled"] = {label: res["pooled"]["infection"]}
        res["hypotheses"][1]["problem"] = label
        res["data_dictionary"]["columns"][2]["column"] = label
        res["data_dictionary"]["columns"][2]["values"][2]["value"] = label
        res["data_dictionary"]["group_column"]["column"] = label
        page = _fragments(res)
        assert sections.esc(label) in page
        if "<" in label:
            assert label not in page


# --- the executed notebook -------------------------------------------------------------------


@pytest.fixture(scope="module")
def rehearsal_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("blinded") / "report"
    folder.mkdir()
    res = blinded_results()
    res["data_dictionary"]["columns"][3]["values"][0]["value"] = HOSTILE_SCRIPT
    (folder / "results.json").write_text(json.dumps(res, indent=2, ensure_ascii=False) + "\n",
                                         encoding="utf-8")
    write_figures(res, folder)
    render.render_notebook(folder)
    return folder


def test_rehearsal_report_has_no_group_level_number_anywhere(rehearsal_report: Path) -> None:
    page = (rehearsal_report / "report.html").read_text(encoding="utf-8")
    parsed = _page(page)
    assert len(parsed.rows) > 40
    assert group_numbers(parsed.rows) == []
    assert parsed.images == []
    assert not (rehearsal_report / "figures").exists()  # no figure at all, so none per group
    nb = nbformat.read(rehearsal_report / "report.ipynb", as_version=4)
    outputs = [o for c in nb.cells for o in c.get("outputs", [])]
    assert not [o for o in outputs if o.output_type in ("error", "stream")]
    assert not [o for o in outputs if "image/png" in o.get("data", {})]


def test_rehearsal_report_sections_in_order(rehearsal_report: Path) -> None:
    page = (rehearsal_report / "report.html").read_text(encoding="utf-8")
    marks = ['class="prespec-title"', "Blinded rehearsal — no group-level results",
             html.escape(CAUTION), "Departures from the plan", "unmapped-outcome-value",
             "<h2>Population</h2>", "<h2>Pooled outcomes, all groups together</h2>",
             "<h2>Data dictionary</h2>", "UNMAPPED", "Checked against the data specification",
             "<h2>Hypotheses rehearsed</h2>", "<h2>Multiplicity</h2>", "<h2>Environment</h2>"]
    positions = [page.index(m) for m in marks]
    assert positions == sorted(positions)
    assert page.count(html.escape(CAUTION)) == 2
    assert html.escape(HOSTILE_SCRIPT, quote=False) in page and HOSTILE_SCRIPT not in page
    for absent in ("<h2>Outcomes</h2>", "<h2>Planned versus achieved</h2>",
                   "Estimates and intervals", "prespec-leak"):
        assert absent not in page, absent
