"""Tests of the report notebook, its execution and its HTML (src/prespec/report/render.py,
sections.py, template.py).

Executing the notebook starts a kernel and costs seconds, so it runs three times in this module:
once for an analysis run, once for a blinded rehearsal, once on a results file edited after
its hash was taken. Everything else is checked on the HTML fragments directly.
"""

from __future__ import annotations

import base64
import hashlib
import html
import json
from pathlib import Path
from typing import Any

import nbformat
import pytest

from prespec.errors import PrespecError
from prespec.report import render, sections, template
from prespec.report.figures import write_figures

try:
    from test_report_figures import CAUTION, TITLE, rehearsal_results, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_figures import CAUTION, TITLE, rehearsal_results, sample_results


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
                 "sections.header"):
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
    for key, value in sample_results()["environment"].items():
        assert f"<tr><th>{key}</th><td>{value}</td></tr>" in env


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
    page = sections.header(res)
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
    assert "<tr><th>Statistic</th><td>—</td></tr>" in page
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
    from prespec.caution import CAUTION as PACKAGE_CAUTION

    assert html.escape(PACKAGE_CAUTION) in sections.caution({})
