"""Tests of the report notebook, its execution and its HTML (src/prespec/report/render.py,
sections.py, template.py).

Executing the notebook starts a kernel and costs seconds, so it runs four times in this module
(and nowhere else among the report's tests): once for an analysis run, once for a blinded
rehearsal, once on a results file edited after its hash was taken, and once for a run that
carries every field of the full statistical engine and of overrides, with hostile labels.
Everything else is checked on the HTML fragments directly.
"""

from __future__ import annotations

import base64
import hashlib
import html
import json
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import nbformat
import pytest

from prespec.errors import PrespecError
from prespec.report import render, sections, summary, template
from prespec.report.figures import write_figures

try:
    from test_report_figures import (
        CAUTION,
        HOSTILE,
        HOSTILE_ATTR,
        HOSTILE_NOTEBOOK,
        HOSTILE_SCRIPT,
        TITLE,
        full_results,
        rehearsal_results,
        sample_results,
    )
except ImportError:  # tests collected as a package
    from tests.test_report_figures import (
        CAUTION,
        HOSTILE,
        HOSTILE_ATTR,
        HOSTILE_NOTEBOOK,
        HOSTILE_SCRIPT,
        TITLE,
        full_results,
        rehearsal_results,
        sample_results,
    )


def _prepare(folder: Path, results: dict[str, Any]) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    text = json.dumps(results, indent=2, ensure_ascii=False) + "\n"
    (folder / "results.json").write_text(text, encoding="utf-8")
    write_figures(results, folder)
    return folder


def _digest(folder: Path) -> str:
    return "sha256:" + hashlib.sha256((folder / "results.json").read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def run_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = _prepare(tmp_path_factory.mktemp("run") / "report", sample_results())
    render.render_notebook(folder)
    return folder


@pytest.fixture(scope="module")
def run_html(run_report: Path) -> str:
    return (run_report / "report.html").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def rehearsal_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A rehearsal report, rendered while a user-level ``python3`` kernelspec points elsewhere.

    The report must still run on this interpreter's kernel, not on the one that spec names.
    """
    folder = _prepare(tmp_path_factory.mktemp("rehearsal") / "report", rehearsal_results())
    data_dir = tmp_path_factory.mktemp("jupyter-data")
    spec = data_dir / "kernels" / "python3"
    spec.mkdir(parents=True)
    argv = [str(data_dir / "no-such-python"), "-m", "ipykernel_launcher", "-f",
            "{connection_file}"]
    (spec / "kernel.json").write_text(json.dumps(
        {"argv": argv, "display_name": "elsewhere", "language": "python"}
    ))
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("JUPYTER_DATA_DIR", str(data_dir))
        mp.setenv("JUPYTER_PREFER_ENV_PATH", "0")  # the user's data dir first, as outside a venv
        render.render_notebook(folder, kernel_name="python3")
    return folder


@pytest.fixture(scope="module")
def full_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = _prepare(tmp_path_factory.mktemp("full") / "report", full_results())
    render.render_notebook(folder)
    return folder


@pytest.fixture(scope="module")
def full_html(full_report: Path) -> str:
    return (full_report / "report.html").read_text(encoding="utf-8")


class _Markup(HTMLParser):
    """Every element and attribute of a page, as a browser's parser would see them."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, list[tuple[str, str | None]]]] = []
        self.comments: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, attrs))

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, attrs))

    def handle_comment(self, data: str) -> None:
        self.comments.append(data)


def _markup(page: str) -> _Markup:
    parser = _Markup()
    parser.feed(page)
    parser.close()
    return parser


def _assert_inert(page: str) -> None:
    """No script element, no event attribute, no script URL, no image from elsewhere."""
    markup = _markup(page)
    assert not [t for t, _ in markup.tags if t == "script"]
    events = [(t, a) for t, attrs in markup.tags for a, _ in attrs if a.lower().startswith("on")]
    assert not events, events
    for tag, attrs in markup.tags:
        for name, value in attrs:
            if name in ("href", "src", "action", "formaction") and value:
                assert not value.strip().lower().startswith("javascript:"), (tag, name, value)
            if tag == "img" and name == "src":
                assert value is not None and value.startswith("data:image/png;base64,")
    assert not [c for c in markup.comments if "--" in c or "\\u003c" in c]


# --- the template --------------------------------------------------------------------------


def test_committed_template_matches_its_source() -> None:
    # Regenerate with `python -m prespec.report.template` after changing template.py.
    assert template.TEMPLATE.read_text(encoding="utf-8") == template.dumps()


def test_template_takes_only_the_two_parameters() -> None:
    nb = nbformat.read(template.TEMPLATE, as_version=4)
    params = [c for c in nb.cells if "parameters" in c.metadata.get("tags", [])]
    assert len(params) == 1 and nb.cells[0] is params[0]
    names = {line.split("=")[0].strip() for line in params[0].source.splitlines()
             if "=" in line and not line.startswith("#")}
    assert names == {"results_file", "results_sha256"}
    assert "results_sha256" in nb.cells[1].source and "raise" in nb.cells[1].source


# --- the executed analysis run -------------------------------------------------------------


def test_folder_holds_exactly_the_report_files(run_report: Path) -> None:
    assert sorted(p.name for p in run_report.iterdir()) == [
        "figures", "report.html", "report.ipynb", "results.json",
    ]


def test_executed_notebook_has_no_errors_and_only_the_two_parameters(run_report: Path) -> None:
    nb = nbformat.read(run_report / "report.ipynb", as_version=4)
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])]
    assert outputs, "the notebook shows nothing"
    assert not [o for o in outputs if o.output_type == "error"]
    assert not [o for o in outputs if o.output_type == "stream" and o.name == "stderr"]
    meta = nb.metadata["papermill"]
    assert meta["parameters"] == {"results_file": "results.json",
                                  "results_sha256": _digest(run_report)}
    injected = [c for c in nb.cells if "injected-parameters" in c.metadata.get("tags", [])]
    assert len(injected) == 1 and injected[0].id == "injected-parameters"
    assert _digest(run_report) in injected[0].source


def test_executed_notebook_carries_no_times_or_temporary_paths(run_report: Path) -> None:
    raw = (run_report / "report.ipynb").read_text(encoding="utf-8")
    nb = json.loads(raw)
    assert "start_time" not in raw and "end_time" not in raw and "iopub." not in raw
    assert nb["metadata"]["papermill"]["input_path"] == "template.ipynb"
    assert nb["metadata"]["papermill"]["output_path"] == "report.ipynb"
    assert str(run_report) not in raw
    assert [c["id"] for c in nb["cells"]][:3] == ["parameters", "injected-parameters",
                                                  "check-results"]


def test_html_title_is_escaped(run_html: str) -> None:
    escaped = html.escape(TITLE)  # Dressing &lt;b&gt;regimens&lt;/b&gt; &amp; ...
    assert f'<h1 class="prespec-title">{escaped}</h1>' in run_html
    assert "<b>regimens</b>" not in run_html
    assert f"<title>{escaped} — prespec report</title>" in run_html


def test_html_shows_fingerprint_data_and_provenance(run_html: str) -> None:
    res = sample_results()
    for value in (res["plan"], res["data"], "data/wounds.csv", "2026-12-01T23:10:00Z", "jdoe",
                  "WD-2027-01", "Analysis run"):
        assert value in run_html, value


def test_html_shows_every_hypothesis_and_formatted_p_values(run_html: str) -> None:
    for hyp in sample_results()["hypotheses"]:
        assert f'<h3 class="prespec-hypothesis">{hyp["id"]} — ' in run_html
    # p_value 0.0134 and p_adjusted 0.0268 at 4 significant digits; 3.21e-5 below 1e-4.
    for shown in ("<td>0.01340</td>", "<td>0.02680</td>", "<td>0.3712</td>",
                  "<td>&lt; 0.0001</td>", "<td>0.04494</td>", "<td>0.1224</td>"):
        assert shown in run_html, shown
    assert "<td>-0.0940</td>" in run_html
    assert "<td>(-0.1700, -0.0190)</td>" in run_html
    assert "Interval (90% miettinen-nurminen)" in run_html
    assert "<td>6.120 (df 1)</td>" in run_html
    assert "<td>reject H0</td>" in run_html and "<td>do not reject H0</td>" in run_html


def test_html_marks_exploratory_hypotheses_without_decision(run_html: str) -> None:
    start = run_html.index('<h3 class="prespec-hypothesis">H4 — ')
    h4 = run_html[start:run_html.index('<h3 class="prespec-hypothesis">H5 — ')]
    assert "(exploratory)" in h4
    assert "Nominal p-value (exploratory)" in h4
    assert "Decision" not in h4 and "Adjusted p-value" not in h4


def test_html_shows_caution_at_start_and_end(run_html: str) -> None:
    assert run_html.count(html.escape(CAUTION)) == 2
    first = run_html.index(html.escape(CAUTION))
    assert first < run_html.index("Departures from the plan")
    assert run_html.rindex(html.escape(CAUTION)) > run_html.index("<h2>Environment</h2>")


def test_html_shows_departures_and_notes(run_html: str) -> None:
    assert "2 departures from the plan recorded." in run_html
    for shown in ("<td>sample-size-shortfall</td>", "<td>unexpected-group</td>",
                  "<td>foam &lt;x&gt;</td>", "<td>missing-excluded</td>"):
        assert shown in run_html, shown


def test_html_sections_in_order(run_html: str) -> None:
    marks = ['class="prespec-title"', "prespec-caution", "Departures from the plan",
             "<h2>Population</h2>", "<h3>Outcome: infection</h3>", "<h3>Outcome: reopening</h3>",
             "<h2>Hypotheses</h2>", "H1 — ", "Estimates and intervals", "<h2>Multiplicity</h2>",
             "<h2>Environment</h2>"]
    positions = [run_html.index(m) for m in marks]
    assert positions == sorted(positions)


def test_html_hides_code_and_prompts(run_html: str) -> None:
    for code in ("import json", "import hashlib", "display(HTML", "results_sha256 =",
                 "summary.summary("):
        assert code not in run_html, code
    body = run_html[run_html.index("<body"):]  # the stylesheet names these classes too
    assert 'class="jp-InputArea' not in body and "jp-Cell-inputWrapper" not in body
    assert 'class="jp-InputPrompt' not in body and 'class="jp-OutputPrompt' not in body


def test_html_embeds_every_figure_and_loads_nothing(run_report: Path, run_html: str) -> None:
    figures = sorted((run_report / "figures").glob("*.png"))
    assert len(figures) == 3
    for png in figures:
        data = base64.b64encode(png.read_bytes()).decode("ascii")
        assert f'src="data:image/png;base64,{data}"' in run_html, png.name
    assert run_html.count("<img ") == 3
    assert "<script src" not in run_html and "cdnjs" not in run_html
    assert '<img src="figures/' not in run_html


def test_html_images_have_alt_text(run_html: str) -> None:
    assert 'alt="Proportion with the event in each group, with intervals: infection"' in run_html
    assert 'alt="Estimate and interval of each hypothesis that has one"' in run_html
    assert "No description has been provided" not in run_html


def test_html_environment_table(run_html: str) -> None:
    env = run_html[run_html.index("<h2>Environment</h2>"):]
    # results.json without the lock's versions (an older report): this run's, and why alone
    assert "This report does not carry the versions recorded at lock time" in env
    assert "<th>Component</th><th>This run</th>" in env
    for key, value in sample_results()["environment"].items():
        label = {"python": "Python"}.get(key, key)
        assert f"<tr><td>{label}</td><td>{value}</td></tr>" in env


# --- rehearsal, tampering, failures ---------------------------------------------------------


def test_rehearsal_without_groups_or_hypotheses(rehearsal_report: Path) -> None:
    page = (rehearsal_report / "report.html").read_text(encoding="utf-8")
    assert "Blinded rehearsal" in page
    assert "No departures from the plan were recorded." in page
    assert "results.json holds no tested hypotheses." in page
    assert "results.json gives no population counts." in page
    assert "<h2>Outcomes</h2>" not in page
    assert "<img " not in page
    assert not (rehearsal_report / "figures").exists()
    assert page.count(html.escape(CAUTION)) == 2
    nb = nbformat.read(rehearsal_report / "report.ipynb", as_version=4)
    assert not [o for c in nb.cells for o in c.get("outputs", []) if o.output_type == "error"]


def test_results_edited_after_hash_stops_the_report(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    folder = _prepare(tmp_path / "report", sample_results())
    original = render.results_digest

    def digest_then_edit(path: Path) -> str:
        digest = original(path)
        edited = json.loads(path.read_text(encoding="utf-8"))
        edited["hypotheses"][0]["p_value"] = 0.0001  # changed after the hash was taken
        path.write_text(json.dumps(edited, indent=2), encoding="utf-8")
        return digest

    monkeypatch.setattr(render, "results_digest", digest_then_edit)
    with pytest.raises(PrespecError) as err:
        render.render_notebook(folder)
    message = str(err.value)
    assert "\n" not in message
    assert "report notebook failed in cell" in message
    assert "results.json has hash sha256:" in message and "expected sha256:" in message
    assert sorted(p.name for p in folder.iterdir()) == ["figures", "results.json"]


def test_missing_results_file_is_a_one_line_error(tmp_path: Path) -> None:
    with pytest.raises(PrespecError, match=r"results.json: no results file to report on$"):
        render.render_notebook(tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_unknown_kernel_is_a_one_line_error(tmp_path: Path) -> None:
    folder = _prepare(tmp_path / "report", rehearsal_results())
    with pytest.raises(PrespecError) as err:
        render.render_notebook(folder, kernel_name="no-such-kernel-here")
    assert "\n" not in str(err.value) and "no-such-kernel-here" in str(err.value)
    assert sorted(p.name for p in folder.iterdir()) == ["results.json"]


# --- the HTML sections, without a kernel ----------------------------------------------------


def test_header_escapes_every_value() -> None:
    res = sample_results()
    res["actor"] = "<script>x</script>"
    page = summary.summary(res)
    assert "<script>" not in page and "&lt;script&gt;x&lt;/script&gt;" in page


def test_kind_labels() -> None:
    assert sections.kind_label({"kind": "run"}) == "Analysis run"
    assert sections.kind_label({"kind": "rehearsal"}) == "Blinded rehearsal"
    assert sections.kind_label({"kind": "look"}) == "look"


def test_departures_none_recorded() -> None:
    page = sections.departures({"deviations": [], "notes": []})
    assert "No departures from the plan were recorded." in page
    assert "No notes were recorded." in page


def test_hypothesis_with_sparse_switch_shows_planned_test_and_rule() -> None:
    hyp = sample_results()["hypotheses"][1]
    page = sections.hypothesis(hyp, "hypotheses[1]")
    assert "<tr><th>Test used</th><td>fisher-exact</td></tr>" in page
    assert "<tr><th>Planned test</th><td>pearson-chi-square</td></tr>" in page
    assert "smallest expected count 1.98 is below 5" in page
    # an exact test has no statistic of its own, and the row says so
    assert ("<tr><th>Statistic</th><td>none: an exact test sums the probabilities of the "
            "tables</td></tr>") in page
    # Non-events are total minus events (3 of 196 -> 193); expected counts beside them.
    assert "<td>gauze</td><td class=\"num\">3</td><td class=\"num\">193</td>" in page
    assert "<td class=\"num\">194.02</td>" in page


def test_hypothesis_non_inferiority_shows_margin() -> None:
    page = sections.hypothesis(sample_results()["hypotheses"][2], "hypotheses[2]")
    assert "<tr><th>Type</th><td>non-inferiority</td></tr>" in page
    assert "<tr><th>Margin</th><td>0.0500 (risk difference)</td></tr>" in page


def test_hypothesis_wrong_type_names_the_key() -> None:
    hyp = sample_results()["hypotheses"][0]
    hyp["p_value"] = "0.01"
    with pytest.raises(PrespecError, match=r"^results.json: hypotheses.H1.p_value: expected a "):
        sections.hypothesis(hyp, "hypotheses[0]")
    hyp = sample_results()["hypotheses"][0]
    hyp["reject"] = "yes"
    with pytest.raises(PrespecError, match=r"hypotheses.H1.reject: expected true, false or null"):
        sections.hypothesis(hyp, "hypotheses[0]")


def test_multiplicity_table_and_graphical_settings() -> None:
    page = sections.multiplicity(sample_results())
    assert "<tr><td>H4</td><td>exploratory</td><td class=\"num\">0.04494</td>" in page
    assert "not adjusted" in page
    graphical = {"multiplicity": {"method": "graphical", "weights": {"H1": 0.5, "H2": 0.5}},
                 "hypotheses": []}
    page = sections.multiplicity(graphical)
    assert "<tr><th>Method</th><td>graphical</td></tr>" in page
    assert '<tr><td>H1</td><td class="num">0.5</td></tr>' in page  # weights as a table
    assert "No transitions: the alpha of a rejected hypothesis is not passed on." in page
    assert "No hypotheses were tested." in page
    # Keys other than the graph's own are still shown, as JSON.
    graphical["multiplicity"]["extra"] = {"b": 1}
    assert html.escape('{"extra": {"b": 1}}') in sections.multiplicity(graphical)


def test_caution_falls_back_when_missing() -> None:
    from prespec.common.caution import CAUTION as PACKAGE_CAUTION

    assert html.escape(PACKAGE_CAUTION) in sections.caution({})


# --- every field of the full engine and of overrides, executed once ------------------------


def _shown(label: str) -> str:
    """A label as the page's text shows it: nbconvert re-serialises the page (BeautifulSoup),
    which escapes ``&``, ``<`` and ``>`` in text and leaves quotes as they are there."""
    return html.escape(label, quote=False)


def _section(page: str, start: str, end: str) -> str:
    return page[page.index(start):page.index(end, page.index(start))]


def _heading(hid: str, title: str, level: int = 3) -> str:
    return f'<h{level} class="prespec-hypothesis">{_shown(hid)} — {_shown(title)}'


def test_full_report_executes_without_errors(full_report: Path) -> None:
    nb = nbformat.read(full_report / "report.ipynb", as_version=4)
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])]
    assert not [o for o in outputs if o.output_type in ("error", "stream")]
    assert sorted(p.name for p in (full_report / "figures").iterdir()) == sorted(
        f"{stem}.{kind}" for kind in ("png", "svg") for stem in (
            "differences", "multiplicity-graph",
            "proportions-img-src-x-onerror-alert-1-4c79c325",
            "proportions-infection", "proportions-reopening"))


def test_full_report_single_group_against_null_rate(full_html: str) -> None:
    h4 = _section(full_html, _heading("H4", "Negative-pressure infection below 30%"),
                  _heading("H5", "Any difference among the arms"))
    assert "<tr><th>Null hypothesis</th><td>H0: p = 0.30</td></tr>" in h4
    assert "negative-pressure against the fixed rate 0.30" in h4
    counts = h4[h4.index('class="prespec prespec-counts"'):]
    counts = counts[:counts.index("</table>")]
    assert counts.count("<tr>") == 2  # the header and one group
    assert "<td class=\"num\">59.40</td><td class=\"num\">138.60</td>" in counts
    assert "<tr><th>Estimate (proportion)</th><td>0.1162</td></tr>" in h4


def test_full_report_trend_scores_and_k_group_without_estimate(full_html: str) -> None:
    h6 = _section(full_html, _heading("H6", "Infection falls across the arms"),
                  _heading("H7", "Any difference in reopening"))
    assert "<th>Group</th><th>Score</th><th>Events</th>" in h6
    assert ('<tr><td>negative-pressure</td><td class="num">2.5</td><td class="num">23</td>'
            in h6)
    assert "<tr><th>Estimate</th><td>none: a trend test has no single estimate</td></tr>" in h6
    h5 = _section(full_html, _heading("H5", "Any difference among the arms"),
                  "Follow-up comparisons of H5")
    assert h5.count("<tr><td>") == 3  # three groups in the count table
    assert "none: a test across all groups has no single estimate" in h5


def test_full_report_monte_carlo_line(full_html: str) -> None:
    assert ('<p class="prespec-monte-carlo">Monte Carlo p-value from 100,000 tables (seed 1), '
            "standard error 0.00064.</p>") in full_html


def test_full_report_estimate_note_and_null_limit(full_html: str) -> None:
    child = _section(full_html, _heading("H7:gauze-vs-negative-pressure",
                                         "Reopening, gauze vs negative-pressure", 4),
                     '<div class="prespec-hyp"')  # up to the next hypothesis
    assert "<tr><th>Estimate (risk ratio)</th><td>7.0711</td></tr>" in child
    # The note stands directly under the estimate and its interval.
    assert ("<tr><th>Interval (95% katz)</th><td>(0.3681, 135.8300)</td></tr>"
            "<tr><th>Estimate note</th><td>0.5 added to every cell because a cell is zero"
            "</td></tr>") in child
    h9 = _heading("H9", "Odds of reopening, gauze vs negative-pressure")
    h9 = full_html[full_html.index(h9):]
    assert "<tr><th>Estimate (odds ratio)</th><td>—</td></tr>" in h9
    assert "<tr><th>Interval (95% exact-conditional)</th><td>(0.6179, —)</td></tr>" in h9


def test_full_report_margins_and_disagreement(full_html: str) -> None:
    h2 = _section(full_html, _heading("H2", "Alginate not worse than gauze"),
                  _heading("H3", "Healing equivalent, alginate vs gauze"))
    assert "<tr><th>Margin</th><td>0.0500 (risk difference)</td></tr>" in h2
    assert ("<tr><th>Interval against the margin</th><td>the 90% interval (-0.1301, 0.0512) "
            "does not exclude the margin 0.0500 (risk difference)</td></tr>") in h2
    box = _section(h2, 'class="prespec-disagree"', "</div>")
    assert "<strong>The test decides.</strong>" in box
    assert "the interval does not exclude the margin, but the test rejects H0" in box
    assert "different statistics" in box
    h3 = _section(full_html, _heading("H3", "Healing equivalent, alginate vs gauze"),
                  _heading("H4", "Negative-pressure infection below 30%"))
    assert "<tr><th>Type</th><td>equivalence</td></tr>" in h3
    assert "<tr><th>Margin</th><td>0.8000 to 1.2500 (risk ratio)</td></tr>" in h3
    assert "lies inside the margins 0.8000 to 1.2500 (risk ratio)" in h3
    assert "<tr><th>Interval and test</th><td>agree</td></tr>" in h3
    assert "prespec-disagree" not in h3
    assert full_html.count('class="prespec-disagree"') == 1


def test_full_report_strata_tables_and_homogeneity(full_html: str) -> None:
    h1 = _section(full_html, _heading("H1", "Negative-pressure vs gauze, by site"),
                  _heading("H2", "Alginate not worse than gauze"))
    assert "<tr><th>Strata</th><td>site</td></tr>" in h1
    assert '<caption style="text-align:left">Stratum: site = north</caption>' in h1
    assert ('<tr><td>negative-pressure</td><td class="num">11</td><td class="num">90</td>'
            '<td class="num">101</td></tr>') in h1
    assert f"Stratum: site = {_shown(HOSTILE_SCRIPT)}</caption>" in h1
    assert h1.count('class="prespec prespec-stratum"') == 2
    assert ("Breslow–Day test with Tarone's correction: statistic 0.412 (df 1), "
            "p-value 0.5210.") in h1


def test_full_report_follow_ups_grouped_under_their_parent(full_html: str) -> None:
    marks = [_heading("H5", "Any difference among the arms"), "Follow-up comparisons of H5",
             _heading("H5:alginate-vs-gauze", "Alginate vs gauze", 4),
             _heading("H5:negative-pressure-vs-gauze", "Negative-pressure vs gauze", 4),
             _heading("H6", "Infection falls across the arms"),
             _heading("H7", "Any difference in reopening"), "Follow-up comparisons of H7",
             _heading("H7:gauze-vs-negative-pressure", "Reopening, gauze vs negative-pressure",
                      4)]
    positions = [full_html.index(m) for m in marks]
    assert positions == sorted(positions)
    opened = _section(full_html, "Follow-up comparisons of H5", _heading("H6", "Infection"))
    assert ("H5 was rejected, so its follow-up comparisons below were tested. This is "
            "gatekeeping") in opened
    assert "adjusted within the family “H5 pairwise”" in opened
    assert "<tr><th>Gate</th><td>open: tested because H5 was rejected</td></tr>" in opened
    closed = full_html[full_html.index("Follow-up comparisons of H7"):]
    assert "H7 was not rejected, so its follow-up comparisons below were not tested." in closed
    assert "nominal, with no adjusted p-value, and none of them is rejected" in closed
    assert "<tr><th>Nominal p-value (not tested)</th><td>0.1224</td></tr>" in closed
    assert "<tr><th>Decision</th><td>not tested (gate closed)</td></tr>" in closed


def test_full_report_not_pre_specified_and_overrides_box(full_html: str) -> None:
    badge = 'class="prespec-badge-override"'
    assert full_html.count(badge) == 2  # H2 and H8, nothing else
    h2 = _section(full_html, _heading("H2", "Alginate not worse than gauze"), "prespec-counts")
    assert ">not pre-specified</span></h3>" in h2
    assert "<strong>Not pre-specified.</strong>" in h2
    assert ("<tr><td>hypotheses.H2.test</td><td>farrington-manning</td>"
            "<td>two-proportion-z</td></tr>") in h2
    assert "hypotheses.H8" not in h2  # only the overrides of H2 itself
    # The overrides box stands with the departures, before the notes.
    box = _section(full_html, 'class="prespec-overrides"', "<h3>Notes</h3>")
    assert full_html.index("Departures from the plan") < full_html.index(box)
    assert "<strong>2 command-line overrides of the locked analysis.</strong>" in box
    assert (f"<tr><td>hypotheses.H8.interval</td><td>wald</td>"
            f"<td>{_shown(HOSTILE_ATTR)}</td></tr>") in box


def test_full_report_multiplicity_graph_and_families(full_report: Path, full_html: str) -> None:
    mult = full_html[full_html.index("<h2>Multiplicity</h2>"):full_html.index("<h2>Environment")]
    assert "Bretz et al. (Statistics in Medicine 2009)" in mult
    assert '<tr><td>H1</td><td class="num">0.5</td></tr>' in mult
    assert '<tr><td>H1</td><td>H3</td><td class="num">0.5</td></tr>' in mult
    graph = (full_report / "figures" / "multiplicity-graph.png").read_bytes()
    assert f'src="data:image/png;base64,{base64.b64encode(graph).decode("ascii")}"' in mult
    assert 'alt="Graph of the graphical procedure: initial weights and transitions"' in mult
    assert "<th>Family</th>" in mult
    assert ("<tr><td>H5:negative-pressure-vs-gauze</td><td>primary</td><td>H5 pairwise</td>"
            '<td class="num">0.01430</td><td class="num">0.02860</td><td>reject H0</td></tr>'
            in mult)
    assert ('<tr><td>H7:gauze-vs-negative-pressure</td><td>secondary</td><td>H7 pairwise</td>'
            '<td class="num">0.1224</td><td class="num">—</td><td>not tested (gate closed)</td>'
            in mult)
    assert "<tr><td>H2</td><td>secondary, not pre-specified</td><td>main (graphical)</td>" in mult


def test_full_report_hostile_labels_stay_text(full_report: Path, full_html: str) -> None:
    _assert_inert(full_html)
    for label in (HOSTILE_SCRIPT, HOSTILE_ATTR):
        assert _shown(label) in full_html, label
    # The page title, the plan title, an outcome name, a group, a departure, an override.
    assert f"<title>Dressing trial {html.escape(HOSTILE_SCRIPT, quote=False)}" in full_html
    assert f"<h3>Outcome: {_shown(HOSTILE_ATTR)}</h3>" in full_html
    assert f"<tr><td>{_shown(HOSTILE_SCRIPT)}</td><td class=\"num\">5</td>" in full_html
    assert "javascript:alert(2)" in full_html  # as text, never as a link
    # Terminal escape sequences are shown, not sent; template and notebook syntax stay literal.
    shown = _shown(HOSTILE_NOTEBOOK.replace("\x1b", "\\x1b"))
    assert shown in full_html and "\x1b" not in full_html
    assert "{{ 7*7 }} ${x} %%bash !ls &lt;/div&gt;&lt;!-- \\u003c" in full_html
    # The outcome's alt text is escaped inside its attribute, which the parser reads whole.
    alts = [dict(a).get("alt") for t, a in _markup(full_html).tags if t == "img"]
    assert f"Proportion with the event in each group, with intervals: {HOSTILE_ATTR}" in alts


def test_full_report_no_value_from_results_in_code(full_report: Path) -> None:
    executed = nbformat.read(full_report / "report.ipynb", as_version=4)
    tmpl = nbformat.read(template.TEMPLATE, as_version=4)
    code = {c.id: c.source for c in executed.cells if c.cell_type == "code"}
    expected = {c.id: c.source for c in tmpl.cells}
    injected = code.pop("injected-parameters")
    # the cells that recompute each hypothesis hold its id and the plan's method settings as
    # Python literals (repr), never a label, title or group name
    checks = {k: code.pop(k) for k in list(code) if k.startswith("recompute-")}
    assert code == expected  # every other code cell is the template's, unchanged
    assert injected.splitlines()[1:] == [
        'results_file = "results.json"', f'results_sha256 = "{_digest(full_report)}"'
    ]
    sources = "\n".join([injected, *code.values(), *checks.values()])
    for label in (*HOSTILE, "Dressing trial", "H5 pairwise", "north"):
        assert label not in sources, label


# --- the new fields on fragments, without a kernel -------------------------------------------


def test_old_results_show_none_of_the_new_parts() -> None:
    res = sample_results()
    page = "".join([*sections.hypotheses(res), sections.multiplicity(res),
                    sections.departures(res)])
    for absent in ("Follow-up", "not pre-specified", "Monte Carlo", "Stratum", "Breslow",
                   "overrides", "<th>Family</th>", "Bretz", "Null hypothesis", "Score"):
        assert absent not in page, absent
    assert sections.multiplicity_figure(res) is None


def test_every_fragment_starts_with_a_tag() -> None:
    # IPython's HTML() treats a string that starts with "http" or names a file as a location.
    res = full_results()
    fragments = [summary.summary(res), sections.caution(res), sections.departures(res),
                 sections.population(res), sections.hypotheses_heading(res),
                 *sections.hypotheses(res), sections.multiplicity(res),
                 sections.environment(res), *(o[1] for o in sections.outcomes(res))]
    assert all(f.startswith("<") for f in fragments)
    for fragment in fragments:
        _assert_inert(fragment)


@pytest.mark.parametrize("label", HOSTILE)
def test_hostile_label_in_every_text_field_is_escaped(label: str) -> None:
    res = full_results()
    res["title"] = label
    res["protocol"] = label
    res["groups"] = {label: [dict(res["groups"]["infection"][0], group=label)]}
    res["deviations"][0].update(detail=label, expected=label, found=label)
    res["notes"][0]["detail"] = label
    res["overrides"][0].update(key=f"hypotheses.H2.{label}", locked=label, used=label)
    for hyp in res["hypotheses"]:
        hyp["title"] = label
        hyp["outcome"] = label
        if hyp.get("family"):
            hyp["family"] = label
        if hyp.get("estimate"):
            hyp["estimate"]["note"] = label
    res["hypotheses"][0]["strata_tables"][0]["stratum"] = {label: label}
    res["hypotheses"][0]["table"]["groups"][0] = label
    pages = [summary.summary(res), sections.departures(res), *sections.hypotheses(res),
             sections.multiplicity(res), *(o[1] for o in sections.outcomes(res))]
    page = "".join(pages)
    _assert_inert(page)
    escaped = sections.esc(label)
    assert page.count(escaped) >= 10
    if "<" in label or '"' in label:
        assert label not in page


def test_followups_without_their_parent_and_with_mixed_gates() -> None:
    res = full_results()
    res["hypotheses"] = [h for h in res["hypotheses"] if h["id"] != "H5"]
    pages = sections.hypotheses(res)
    orphan = [p for p in pages if "Follow-up comparisons of H5" in p]
    assert len(orphan) == 1 and "(not in results.json)" in orphan[0]
    assert pages.index(orphan[0]) == len(pages) - 1  # after every other hypothesis
    kids = [(h, f"hypotheses[{i}]") for i, h in enumerate(full_results()["hypotheses"])
            if h.get("parent") is not None]
    sentence = sections.gate_sentence("H5", kids)  # one open, one closed: each says its own
    assert sentence.endswith("Each follow-up comparison below shows its own gate.")


def test_closed_gate_hides_an_adjusted_p_value_even_if_given() -> None:
    hyp = next(h for h in full_results()["hypotheses"] if h.get("gate") == "closed")
    hyp["p_adjusted"] = 0.5
    rows = dict(sections.result_rows(hyp, "hypotheses.x"))
    assert rows["Adjusted p-value"] == "—" and rows["Decision"] == "not tested (gate closed)"


def test_overrides_for_one_hypothesis_include_global_settings() -> None:
    res = full_results()
    res["overrides"].append({"key": "alpha", "locked": 0.05, "used": 0.025})
    assert sections.override_rows(res, "H2") == [
        ["hypotheses.H2.test", "farrington-manning", "two-proportion-z"],
        ["alpha", "0.05", "0.025"],
    ]
    assert [r[0] for r in sections.override_rows(res, "H1")] == ["alpha"]
    assert sections.overrides({"overrides": []}) == ""


def test_margin_sentences_for_every_case() -> None:
    hyp = next(h for h in full_results()["hypotheses"] if h["id"] == "H3")
    hyp["margin_check"] = {"interval_excludes_margin": False, "agrees_with_test": False}
    assert sections.margin_sentence(hyp, "h").startswith(
        "the 90% interval (0.8602, 1.0373) does not lie inside the margins 0.8000 to 1.2500")
    page = sections.hypothesis(hyp, "hypotheses[2]")
    assert "the interval does not exclude the margin, but the test rejects H0" in page
    hyp.update(margin=1.25, comparison="non-inferiority", reject=False)
    hyp["margin_check"] = {"interval_excludes_margin": True, "agrees_with_test": False}
    assert sections.margin_sentence(hyp, "h").endswith("excludes the margin 1.2500 (risk ratio)")
    assert "the interval excludes the margin, but the test does not reject H0" in (
        sections.hypothesis(hyp, "hypotheses[2]"))


@pytest.mark.parametrize(
    ("field", "value", "message"),
    [
        ("pre_specified", "no", r"hypotheses.H1.pre_specified: expected true, false or null"),
        ("margin_check", {"interval_excludes_margin": "yes"},
         r"hypotheses.H1.margin_check.interval_excludes_margin: expected true, false or null"),
        ("scores", [0, 1], r"hypotheses.H1.scores: expected 2 numbers"),
        ("strata_tables", [{"stratum": {"site": "a"}, "events": [1], "totals": [2]}],
         r"hypotheses.H1.strata_tables\[0\]: expected events and totals for the 2 groups"),
        ("monte_carlo", {"tables": "many"}, r"hypotheses.H1.monte_carlo.tables: expected a "),
        ("null_rate", "0.3", r"hypotheses.H1.null_rate: expected a number"),
        ("homogeneity", [1], r"hypotheses.H1.homogeneity: expected an object"),
    ],
)
def test_malformed_new_fields_name_the_key(field: str, value: object, message: str) -> None:
    hyp = full_results()["hypotheses"][0]
    if field == "scores":
        hyp["table"]["groups"].append("alginate")
        hyp["table"]["events"].append(1)
        hyp["table"]["totals"].append(2)
        value = [0, 1]
        message = r"hypotheses.H1.scores: expected 3 numbers"
    hyp[field] = value
    with pytest.raises(PrespecError, match=f"^results.json: {message}"):
        sections.hypothesis(hyp, "hypotheses[0]")


def test_main_family_names_the_plans_method() -> None:
    res = sample_results()  # as the pipeline writes it: family "main", null for exploratory
    for hyp in res["hypotheses"]:
        hyp["family"] = None if hyp["role"] == "exploratory" else "main"
    page = sections.multiplicity(res)
    assert ('<tr><td>H1</td><td>primary</td><td>main (holm)</td><td class="num">0.01340</td>'
            in page)
    assert "<tr><td>H4</td><td>exploratory</td><td>none (exploratory)</td>" in page
    h1 = sections.hypotheses(res)[0]
    assert "<tr><th>Multiplicity family</th><td>main (holm)</td></tr>" in h1


def test_a_kernel_that_dies_while_starting_is_started_again(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Seen with eight runs starting at once: a kernel dies before its first reply (no cell
    has run), and the notebook is executed again, up to KERNEL_STARTS tries; any other
    failure is not retried."""
    import papermill

    calls: list[int] = []
    died = RuntimeError("Kernel died before replying to kernel_info")

    def flaky(fails: int, error: Exception = died) -> Any:
        def execute(*args: Any, **kwargs: Any) -> str:
            calls.append(1)
            if len(calls) <= fails:
                raise error
            return "executed"
        return execute

    out = tmp_path / "partial.ipynb"
    monkeypatch.setattr(papermill, "execute_notebook", flaky(2))
    assert render._execute(tmp_path, out, "sha256:0", render.KERNEL) == "executed"
    assert len(calls) == 3 == render.KERNEL_STARTS
    calls.clear()
    monkeypatch.setattr(papermill, "execute_notebook", flaky(render.KERNEL_STARTS))
    with pytest.raises(RuntimeError, match="Kernel died before replying"):
        render._execute(tmp_path, out, "sha256:0", render.KERNEL)
    assert len(calls) == render.KERNEL_STARTS
    calls.clear()
    monkeypatch.setattr(papermill, "execute_notebook", flaky(1, RuntimeError("disk full")))
    with pytest.raises(RuntimeError, match="disk full"):
        render._execute(tmp_path, out, "sha256:0", render.KERNEL)
    assert len(calls) == 1


def test_the_kernel_writes_nothing_to_the_terminal_and_is_not_interrupted_at_shutdown(
        capfd: pytest.CaptureFixture[str]) -> None:
    # The kernel process used to inherit prespec's stdout and stderr, and jupyter_client
    # interrupts (SIGINT) a kernel before asking it to shut down: "KeyboardInterrupt caught in
    # kernel" then reached the terminal after the command's own output.
    import asyncio
    import signal

    from prespec.report.render import KERNEL, _kernel_options

    options = _kernel_options(KERNEL)
    manager = options["kernel_manager_class"](kernel_name=KERNEL, config=options.get("config"))
    signals: list[int] = []
    sent = manager._async_signal_kernel

    async def spy(signum: int) -> None:
        signals.append(signum)
        await sent(signum)

    manager._async_signal_kernel = spy

    async def session() -> None:
        await manager.start_kernel()
        client = manager.client()
        client.start_channels()
        try:
            await client.wait_for_ready(timeout=60)
            reply = await client.execute_interactive(
                "import os, sys\n"
                "print('to the inherited stdout', file=sys.__stdout__, flush=True)\n"
                "print('to the inherited stderr', file=sys.__stderr__, flush=True)\n"
                "_ = os.write(1, b'fd 1\\n'), os.write(2, b'fd 2\\n')\n", timeout=60,
                output_hook=lambda message: None)
            assert reply["content"]["status"] == "ok"
        finally:
            client.stop_channels()
            await manager.shutdown_kernel()

    asyncio.run(session())
    out, err = capfd.readouterr()
    assert (out, err) == ("", "")
    assert signal.SIGINT not in signals
    assert not manager.has_kernel
