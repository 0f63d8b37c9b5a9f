"""Tests of the report's estimands, sensitivity analyses, tipping-point figure and design
section (src/prespec/report/estimand.py, sensitivity.py, tipping.py, design.py).

The results are invented (the wound-dressing scenario of docs/plan-format.md). The report
computes no statistic, so the tests check that what is shown and drawn is what results.json
holds; the invented tipping-point p-values are computed here with a vectorised Pearson
chi-square that is first checked against ``scipy.stats.chi2_contingency``, so that the grids
look like real ones.
The notebook is executed once in this module, on a run that carries every new field.
"""

from __future__ import annotations

import copy
import html
import json
import re
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from matplotlib.image import imread
from scipy.stats import chi2, chi2_contingency

from prespec.errors import PrespecError
from prespec.report import render, sections
from prespec.report.design import planned_versus_achieved
from prespec.report.estimand import estimand_block
from prespec.report.figures import write_figures
from prespec.report.sensitivity import sensitivity_block, tipping_sentence
from prespec.report.tipping import (
    KEEP_COLOUR,
    REJECT_COLOUR,
    TippingJob,
    boundary_segments,
    read_grid,
    tipping_grids,
    tipping_name,
)

try:
    from test_report_figures import HOSTILE, HOSTILE_ATTR, HOSTILE_SCRIPT, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_figures import HOSTILE, HOSTILE_ATTR, HOSTILE_SCRIPT, sample_results


# --- invented fixtures -------------------------------------------------------------------------


def pearson_p(events: tuple[int, int], totals: tuple[int, int],
              missing: tuple[int, int]) -> np.ndarray:
    """Pearson X² p-values (no correction) of every completed 2x2 table, vectorised."""
    i = np.arange(missing[0] + 1)[:, None]
    j = np.arange(missing[1] + 1)[None, :]
    a, b = events[0] + i, events[1] + j
    na, nb = totals[0] + missing[0], totals[1] + missing[1]
    pooled = (a + b) / (na + nb)
    with np.errstate(divide="ignore", invalid="ignore"):
        x2 = (a / na - b / nb) ** 2 / (pooled * (1 - pooled) * (1 / na + 1 / nb))
    return chi2.sf(x2, 1)


def tipping_entry(groups: list[str], events: tuple[int, int], totals: tuple[int, int],
                  missing: tuple[int, int], primary: bool | None,
                  alpha: float = 0.05) -> dict[str, Any]:
    """An invented tipping-point entry in the shape of the results.json contract."""
    p = pearson_p(events, totals, missing)
    values: list[list[float | None]] = [[None if np.isnan(v) else float(v) for v in row]
                                        for row in p]
    reject = p <= alpha
    boundary = []
    changing = None
    if primary is not None:
        changing = int((reject != primary).sum())
        for i in range(missing[0] + 1):
            flips = [j for j in range(missing[1] + 1) if reject[i, j] != primary]
            boundary.append([i, flips[0] if flips else None])
    return {
        "analysis": "tipping-point", "groups": groups, "missing": list(missing),
        "complete": {"events": list(events), "totals": list(totals)}, "alpha": alpha,
        "test": "pearson-chi-square", "p_values": values,
        "observed_point": [missing[0] * events[0] / totals[0],
                           missing[1] * events[1] / totals[1]],
        "primary_rejects": primary, "cells_changing": changing, "boundary": boundary,
    }


H1_TEXT = (
    "The difference in the risk of wound infection within 30 days between negative-pressure "
    "and gauze dressings, in adults who consented, whatever dressing they went on to use, with "
    "death before day 30 counted as an infection."
)


def extended_results() -> dict[str, Any]:
    """An invented run with estimands, sensitivity analyses and a design."""
    res = sample_results()
    h1, h2, h3 = res["hypotheses"][0], res["hypotheses"][1], res["hypotheses"][2]
    h1["estimand"] = {
        "population": "adults with a surgical wound who consented",
        "variable": "wound infection within 30 days",
        "intercurrent": [
            {"event": "dressing changed early", "column": "changed_early",
             "strategy": "treatment-policy", "counts_as": None, "outcome_column": None,
             "affected": 17},
            {"event": "death before day 30", "column": "died", "strategy": "composite",
             "counts_as": "event", "outcome_column": None, "affected": 3},
        ],
        "summary": "risk-difference",
        "text": H1_TEXT,
    }
    h3["estimand"] = {
        "population": "adults who consented", "variable": "infection while dressed",
        "intercurrent": [
            {"event": "dressing stopped", "column": "stopped", "strategy": "while-on-treatment",
             "counts_as": None, "outcome_column": "infected_on_dressing", "affected": 12},
        ],
        "summary": "risk-difference",
        "text": "Infection while on the allocated dressing, negative-pressure against alginate.",
    }
    # Worst and best case: the values are those of the completed tables, from
    # scipy.stats.chi2_contingency(correction=False) and prespec.stats.newcombe_difference.
    h1["sensitivity"] = [
        {"analysis": "worst-case", "imputed": {"negative-pressure": "event", "gauze": "no-event"},
         "table": {"groups": ["negative-pressure", "gauze"], "events": [25, 41],
                   "totals": [200, 200]},
         "test": "pearson-chi-square", "statistic": 4.645, "p_value": 0.031139511408591673,
         "estimate": {"measure": "risk-difference", "value": -0.08,
                      "ci": [-0.15255406198619273, -0.007031831517446241],
                      "ci_method": "newcombe", "level": 0.95},
         "reject_nominal": True},
        {"analysis": "best-case", "imputed": {"negative-pressure": "no-event", "gauze": "event"},
         "table": {"groups": ["negative-pressure", "gauze"], "events": [23, 45],
                   "totals": [200, 200]},
         "test": "pearson-chi-square", "statistic": 8.575, "p_value": 0.0034072042593876494,
         "estimate": {"measure": "risk-difference", "value": -0.11,
                      "ci": [-0.18290791873595605, -0.036442490768828606],
                      "ci_method": "newcombe", "level": 0.95},
         "reject_nominal": True},
        tipping_entry(["negative-pressure", "gauze"], (23, 41), (198, 196), (2, 4), True),
    ]
    # A 13 x 11 grid whose conclusion changes, with one cell not computable.
    h2_grid = tipping_entry(["alginate", "gauze"], (1, 3), (200, 196), (12, 10), False)
    h2_grid["p_values"][0][0] = None
    h2["sensitivity"] = [h2_grid]
    res["design"] = {
        "rule": "alpha / m = 0.05 / 2, the Bonferroni split", "power": 0.8, "dropout": 0.1,
        "assumed": {"gauze": 0.2, "alginate": 0.14, "negative-pressure": 0.1},
        "hypotheses": [
            {"id": "H1", "alpha": 0.025, "method": "normal approximation, pooled variance",
             "n_per_group": {"negative-pressure": 270, "gauze": 270},
             "n_enrol_per_group": {"negative-pressure": 300, "gauze": 300},
             "achieved_per_group": {"negative-pressure": 198, "gauze": 196},
             "power_at_achieved": 0.6612},
            {"id": "H3", "alpha": 0.025, "method": "Farrington-Manning score test",
             "n_per_group": {"negative-pressure": 180, "alginate": 180},
             "n_enrol_per_group": {"negative-pressure": 200, "alginate": 200},
             "achieved_per_group": {"negative-pressure": 198, "alginate": 200},
             "power_at_achieved": None},
            {"id": "H4", "alpha": 0.025, "method": "the assumed rates lie on the wrong side",
             "n_per_group": None, "n_enrol_per_group": None, "achieved_per_group": None,
             "power_at_achieved": None},
        ],
    }
    return res


def big_grid() -> dict[str, Any]:
    """A 201 x 201 grid: 200 missing outcomes in each group, the conclusion changing twice."""
    return tipping_entry(["negative-pressure", "gauze"], (60, 95), (400, 400), (200, 200), True)


def test_fixture_p_values_agree_with_scipy() -> None:
    p = pearson_p((23, 41), (198, 196), (2, 4))
    for i, j in [(0, 0), (2, 4), (1, 3)]:
        table = [[23 + i, 200 - 23 - i], [41 + j, 200 - 41 - j]]
        expected = chi2_contingency(table, correction=False)[1]  # scipy.stats.chi2_contingency
        assert p[i, j] == pytest.approx(expected, rel=1e-12)


# --- the estimand --------------------------------------------------------------------------


def _h(res: dict[str, Any], hid: str) -> dict[str, Any]:
    return next(h for h in res["hypotheses"] if h["id"] == hid)


def test_estimand_block_states_it_in_words_with_its_intercurrent_events() -> None:
    block = estimand_block(_h(extended_results(), "H1"), "hypotheses.H1")
    assert block.startswith('<div class="prespec-estimand"')
    assert f"<strong>Estimand.</strong> {html.escape(H1_TEXT)}</p>" in block
    assert "<th>Population</th>" not in block  # the statement names the attributes
    assert ("<tr><td>dressing changed early</td><td>changed_early</td><td>treatment policy</td>"
            "<td>the outcome is used as observed, whether or not the event happened</td>"
            '<td class="num">17</td></tr>') in block
    assert ("<td>composite</td><td>the intercurrent event counts as an event</td>"
            '<td class="num">3</td>') in block
    h3 = estimand_block(_h(extended_results(), "H3"), "hypotheses.H3")
    assert ("<td>while on treatment</td><td>the outcome observed before the event is used "
            "(column infected_on_dressing)</td>") in h3


def test_estimand_absent_gives_nothing_and_sits_before_the_result() -> None:
    res = extended_results()
    assert estimand_block(_h(res, "H2"), "hypotheses.H2") == ""
    page = sections.hypothesis(_h(res, "H1"), "hypotheses[0]", results=res)
    order = [page.index(m) for m in ("<th>Test used</th>", "prespec-estimand",
                                     "prespec-counts", "<th>Decision</th>",
                                     "prespec-sensitivity")]
    assert order == sorted(order)


def test_estimand_without_text_or_events_says_so() -> None:
    hyp = {"id": "H1", "estimand": {"population": None, "variable": "infection",
                                    "intercurrent": [], "summary": None, "text": None}}
    block = estimand_block(hyp, "hypotheses.H1")
    assert "results.json gives no statement of the estimand." in block
    assert "<tr><th>Population</th><td>—</td></tr>" in block
    assert "<tr><th>Variable</th><td>infection</td></tr>" in block
    assert "<tr><th>Summary measure</th><td>—</td></tr>" in block
    assert "No intercurrent events are named." in block


# --- worst case, best case ------------------------------------------------------------------


def test_worst_and_best_case_rows_beside_the_primary_result() -> None:
    res = extended_results()
    html_block, figures = sensitivity_block(_h(res, "H1"), "hypotheses.H1")
    assert "<h4>Sensitivity analyses</h4>" in html_block
    assert "which they do not replace: the decision of H1 is the primary one" in html_block
    assert ("<tr><td>worst case</td><td>negative-pressure: event; gauze: no event</td>"
            "<td>negative-pressure 25/200; gauze 41/200</td><td>pearson-chi-square</td>"
            '<td class="num">0.03114</td>'
            "<td>risk difference -0.0800 (-0.1526, -0.0070), 95% newcombe</td>"
            "<td>reject H0</td></tr>") in html_block
    assert ("<td>best case</td><td>negative-pressure: no event; gauze: event</td>"
            "<td>negative-pressure 23/200; gauze 45/200</td>") in html_block
    assert '<td class="num">0.003407</td>' in html_block
    assert figures == [("figures/tipping-H1.png", figures[0][1])]
    # The primary result is still there, unchanged, before the sensitivity analyses.
    page = sections.hypothesis(_h(res, "H1"), "hypotheses[0]", results=res)
    assert page.count("<tr><th>Decision</th><td>reject H0</td></tr>") == 1
    assert page.index("<th>p-value</th><td>0.01340</td>") < page.index("Sensitivity analyses")


def test_nominal_decision_null_and_wrong_type() -> None:
    res = extended_results()
    hyp = _h(res, "H1")
    hyp["sensitivity"][0]["reject_nominal"] = None
    assert "<td>—</td></tr>" in sensitivity_block(hyp, "hypotheses.H1")[0]
    hyp["sensitivity"][0]["reject_nominal"] = "yes"
    with pytest.raises(PrespecError, match=r"^results.json: hypotheses.H1.sensitivity\[0\]"
                       r".reject_nominal: expected true, false or null, found 'yes'$"):
        sensitivity_block(hyp, "hypotheses.H1")


def test_no_sensitivity_gives_nothing() -> None:
    res = sample_results()
    assert sensitivity_block(res["hypotheses"][0], "hypotheses.H1") == ("", [])
    assert "Sensitivity" not in "".join(sections.hypotheses(res))
    assert "Estimand" not in "".join(sections.hypotheses(res))


# --- the tipping-point grid ------------------------------------------------------------------


def test_tipping_sentence_counts_with_thousands_separators() -> None:
    grid = read_grid(big_grid(), "hypotheses.H1.sensitivity[0]", "H1")
    changing = grid.cells_changing
    assert grid.cells == 40401 and changing is not None and 0 < changing < 40401
    sentence = tipping_sentence(grid)
    assert f"The conclusion (reject H0) changes in {changing:,} of 40,401 combinations." in sentence
    assert "0 to 200 events among the 200 missing of negative-pressure" in sentence
    small = read_grid(_h(extended_results(), "H1")["sensitivity"][2], "x", "H1")
    assert small.cells_changing == 0  # the 3 x 5 grid of H1 never changes the conclusion
    assert "The conclusion (reject H0) holds in all 15 combinations." in tipping_sentence(small)


def test_tipping_block_sentences_for_a_small_grid() -> None:
    res = extended_results()
    block, figures = sensitivity_block(_h(res, "H2"), "hypotheses.H2")
    grid = read_grid(_h(res, "H2")["sensitivity"][0], "x", "H2")
    assert grid.cells == 143 and grid.cells_changing
    assert (f"The conclusion (do not reject H0) changes in {grid.cells_changing} of "
            "143 combinations.") in block
    assert "about 0.1 events would be expected among the missing of alginate and 0.2" in block
    # The boundary as results.json lists it, rows with the same j run together.
    assert grid.boundary == ((0, 4), (1, 5), (2, 7), (3, 9), (4, 10), (5, None), (6, None),
                             (7, None), (8, None), (9, None), (10, 0), (11, 0), (12, 0))
    assert ("Where the decision first changes along each row: i = 0: from j = 4; i = 1: from "
            "j = 5; i = 2: from j = 7; i = 3: from j = 9; i = 4: from j = 10; i = 5 to 9: "
            "nowhere; i = 10 to 12: from j = 0.") in block
    assert figures[0][0] == "figures/tipping-H2.png"
    assert "primary decision: do not reject H0" in figures[0][1]


def test_tipping_primary_without_decision_and_no_missing() -> None:
    entry = tipping_entry(["a", "b"], (5, 9), (50, 52), (3, 2), None)
    grid = read_grid(entry, "x", "H8")
    assert "The primary result carries no decision" in tipping_sentence(grid)
    none_missing = tipping_entry(["a", "b"], (5, 9), (50, 52), (0, 0), True)
    block, figures = sensitivity_block({"id": "H9", "sensitivity": [none_missing]}, "h.H9")
    assert "no outcome of a or b is missing" in block and figures == []
    assert tipping_grids({"kind": "run", "hypotheses": [
        {"id": "H9", "sensitivity": [none_missing]}]})[0].cells == 1


def test_decisions_follow_p_at_alpha() -> None:
    grid = read_grid(tipping_entry(["a", "b"], (23, 41), (198, 196), (2, 4), True), "x", "H1")
    p = pearson_p((23, 41), (198, 196), (2, 4))
    assert grid.decisions() == (p <= 0.05).tolist()
    edge = read_grid({**tipping_entry(["a", "b"], (1, 1), (9, 9), (1, 1), True),
                      "p_values": [[0.05, 0.0500001], [None, 0.01]]}, "x", "H1")
    assert edge.decisions() == [[True, False], [None, True]]  # reject when p <= alpha


def test_boundary_segments_by_hand() -> None:
    # Decisions (row i, column j), True = reject:
    #   i=1: F F T
    #   i=0: F T T
    decisions: list[list[bool | None]] = [[False, True, True], [False, False, True]]
    segments = boundary_segments(decisions)
    assert sorted(segments) == sorted([
        ((0.5, -0.5), (0.5, 0.5)),   # between (0,0) and (0,1)
        ((1.5, 0.5), (1.5, 1.5)),    # between (1,1) and (1,2)
        ((0.5, 0.5), (1.5, 0.5)),    # between (0,1) and (1,1)
    ])
    assert boundary_segments([[True, None], [None, False]]) == []  # nothing next to a null


def test_tipping_figure_draws_the_grid_as_given() -> None:
    import matplotlib
    import matplotlib.style

    from prespec.report.canvas import RC

    entry = _h(extended_results(), "H2")["sensitivity"][0]
    grid = read_grid(entry, "x", "H2")
    with matplotlib.style.context("default"), matplotlib.rc_context(RC):
        fig = TippingJob(grid).draw()
    ax = fig.axes[0]
    codes = np.asarray(ax.images[0].get_array())
    expected = [[2 if d is None else int(d) for d in row] for row in grid.decisions()]
    assert codes.tolist() == expected and codes.shape == (13, 11)
    assert ax.images[0].origin == "lower"
    assert ax.get_xlim() == (-0.5, 10.5) and ax.get_ylim() == (-0.5, 12.5)
    ring = [line for line in ax.lines if line.get_marker() == "o"]
    assert len(ring) == 1
    assert ring[0].get_xdata()[0] == pytest.approx(10 * 3 / 196)  # j: among gauze's missing
    assert ring[0].get_ydata()[0] == pytest.approx(12 * 1 / 200)  # i: among alginate's
    labels = [t.get_text() for t in ax.texts]
    assert len(labels) == 143 and "—" in labels  # every cell's p-value; the null one shown
    assert "Primary decision: do not reject H0." in fig.get_supxlabel()
    assert ax.get_xlabel() == "j: events among the 10 missing outcomes of gauze"
    assert ax.get_ylabel() == "i: events among the 12 missing of alginate"
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert legend[:3] == ["reject H0 at alpha 0.05", "do not reject H0", "not computable"]


def test_big_grid_figure_is_readable_and_deterministic(tmp_path: Path) -> None:
    res = {"kind": "run", "hypotheses": [{"id": "H1", "sensitivity": [big_grid()]}]}
    first = write_figures(res, tmp_path / "one")
    second = write_figures(res, tmp_path / "two")
    assert [p.name for p in first] == ["tipping-H1.png"]
    assert first[0].read_bytes() == second[0].read_bytes()
    assert b"tIME" not in first[0].read_bytes() and b"Software" not in first[0].read_bytes()
    img = imread(first[0])
    height, width = img.shape[:2]
    assert width == 1600 and 1200 <= height <= 1600  # 200 dpi
    pixels = np.unique((img[..., :3] * 255).round().astype(int).reshape(-1, 3), axis=0)
    colours = {tuple(int(c) for c in px) for px in pixels}
    for colour in (REJECT_COLOUR, KEEP_COLOUR):
        rgb = tuple(int(colour[k:k + 2], 16) for k in (1, 3, 5))
        assert rgb in colours, colour
    grid = read_grid(big_grid(), "x", "H1")
    job = TippingJob(grid)
    import matplotlib.style

    with matplotlib.style.context("default"):
        fig = job.draw()
    assert len(fig.axes[0].texts) == 0  # no p-value labels on 40,401 cells
    assert len(fig.axes[0].get_xticks()) <= 12


def test_tipping_figure_names_are_safe_and_unique(tmp_path: Path) -> None:
    assert tipping_name("H1") == "figures/tipping-H1.png"
    odd = tipping_name("H5:alginate-vs-gauze")
    assert re.fullmatch(r"figures/tipping-H5-alginate-vs-gauze-[0-9a-f]{8}\.png", odd)
    assert tipping_name(HOSTILE_SCRIPT).startswith("figures/tipping-script-alert-t-script-")
    res = {"kind": "run", "hypotheses": [
        {"id": "H1", "sensitivity": [big_grid(), big_grid()]}]}
    with pytest.raises(PrespecError, match="two tipping-point analyses of one hypothesis"):
        write_figures(res, tmp_path)
    assert not (tmp_path / "figures").exists()


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda e: e["p_values"].pop(), r"sensitivity\[0\].p_values: expected 3 rows"),
        (lambda e: e["p_values"][1].pop(), r"sensitivity\[0\].p_values\[1\]: expected 5 numbers"),
        (lambda e: e.update(missing=[2]), r"sensitivity\[0\].missing: expected two values"),
        (lambda e: e.update(missing=[2, -1]), r"missing\[1\]: expected a whole number"),
        (lambda e: e["p_values"][0].__setitem__(0, "0.2"),
         r"p_values\[0\]\[0\]: expected a number or null, found '0.2'"),
        (lambda e: e.update(boundary=[[0, 9]]), r"boundary\[0\]: \[0, 9\] lies outside"),
        (lambda e: e.update(primary_rejects="no"), r"primary_rejects: expected true, false"),
    ],
)
def test_malformed_tipping_grid_names_the_key(change: Any, message: str,
                                              tmp_path: Path) -> None:
    res = extended_results()
    entry = _h(res, "H1")["sensitivity"][2]
    change(entry)
    res["hypotheses"][0]["sensitivity"] = [entry]
    with pytest.raises(PrespecError, match=message) as err:
        write_figures(res, tmp_path)
    assert "\n" not in str(err.value) and "hypotheses.H1.sensitivity[0]" in str(err.value)


# --- planned versus achieved -----------------------------------------------------------------


def test_planned_versus_achieved_rows() -> None:
    page = planned_versus_achieved(extended_results())
    assert page.startswith("<h2>Planned versus achieved</h2>")
    for label, value in [
        ("How alpha is shared out", "alpha / m = 0.05 / 2, the Bonferroni split"),
        ("Target power", "80%"), ("Dropout allowed for", "10%"),
    ]:
        assert f"<tr><th>{label}</th><td>{value}</td></tr>" in page
    shaded = 'style="background:#fff1d6;"'
    assert (f'<tr {shaded}><td>H1</td><td class="num">0.025</td><td>negative-pressure</td>'
            '<td class="num">0.10</td><td class="num">270</td><td class="num">300</td>'
            '<td class="num">198</td><td>72 short</td><td class="num">0.661</td></tr>') in page
    assert (f'<tr {shaded}><td></td><td class="num"></td><td>gauze</td><td class="num">0.20</td>'
            '<td class="num">270</td><td class="num">300</td><td class="num">196</td>'
            "<td>74 short</td>") in page
    assert ('<tr><td>H3</td><td class="num">0.025</td><td>negative-pressure</td>'
            '<td class="num">0.10</td><td class="num">180</td><td class="num">200</td>'
            '<td class="num">198</td><td>met</td><td class="num">—</td></tr>') in page
    assert ('<tr><td>H4</td><td class="num">0.025</td><td>not sized</td><td class="num">—</td>'
            '<td class="num">—</td><td class="num">—</td><td class="num">—</td><td>—</td>') in page
    assert "<tr><td>H1</td><td>normal approximation, pooled variance</td></tr>" in page
    assert ("<tr><td>H4</td><td>not sized: the assumed rates lie on the wrong side</td></tr>"
            in page)
    assert "Shaded rows: a group analysed with fewer than the planned n" in page


def test_planned_versus_achieved_absent_without_design_or_in_a_rehearsal() -> None:
    assert planned_versus_achieved(sample_results()) == ""
    res = extended_results()
    res["kind"] = "rehearsal"
    assert planned_versus_achieved(res) == ""
    res = extended_results()
    res["design"]["hypotheses"][0]["n_per_group"] = {"gauze": "many"}
    with pytest.raises(PrespecError, match=r"design.hypotheses.H1.n_per_group.gauze: expected"):
        planned_versus_achieved(res)


def test_hostile_labels_in_the_new_fields_are_escaped() -> None:
    for label in HOSTILE:
        res = extended_results()
        h1 = _h(res, "H1")
        h1["estimand"]["text"] = label
        h1["estimand"]["intercurrent"][0]["event"] = label
        h1["sensitivity"][0]["imputed"] = {label: "event"}
        h1["sensitivity"][0]["table"]["groups"][0] = label
        h1["sensitivity"][2]["groups"][0] = label
        res["design"]["hypotheses"][0]["n_per_group"] = {label: 270}
        page = "".join([*sections.hypotheses(res), planned_versus_achieved(res)])
        escaped = sections.esc(label)
        assert escaped in page
        if "<" in label:
            assert label not in page


# --- the executed notebook of a run with every new field -------------------------------------


class _Tables(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.images: list[dict[str, str | None]] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "img":
            self.images.append(dict(attrs))


@pytest.fixture(scope="module")
def extended_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("extended") / "report"
    folder.mkdir()
    res = extended_results()
    _h(res, "H1")["estimand"]["intercurrent"][0]["event"] = HOSTILE_ATTR
    _h(res, "H2")["sensitivity"][0]["groups"][0] = HOSTILE_ATTR  # in a figure's alt text
    (folder / "results.json").write_text(json.dumps(res, indent=2) + "\n", encoding="utf-8")
    write_figures(res, folder)
    render.render_notebook(folder)
    return folder


def test_extended_report_shows_every_new_part_in_order(extended_report: Path) -> None:
    page = (extended_report / "report.html").read_text(encoding="utf-8")
    marks = ["<h2>Population</h2>", "<h2>Planned versus achieved</h2>", "<h2>Outcomes</h2>",
             '<h3 class="prespec-hypothesis">H1 — ', "<strong>Estimand.</strong>",
             "<tr><th>Decision</th>", "<h4>Sensitivity analyses</h4>", "holds in all 15",
             '<h3 class="prespec-hypothesis">H2 — ', "changes in", "<h2>Multiplicity</h2>"]
    positions = [page.index(m) for m in marks]
    assert positions == sorted(positions)
    assert html.escape(HOSTILE_ATTR, quote=False) in page and HOSTILE_ATTR not in page
    assert sorted(p.name for p in (extended_report / "figures").iterdir()) == sorted(
        f"{stem}.{kind}" for kind in ("png", "svg") for stem in (
            "differences", "proportions-infection", "proportions-reopening", "tipping-H1",
            "tipping-H2"))


def test_extended_report_embeds_the_tipping_figures_after_their_hypothesis(
    extended_report: Path,
) -> None:
    import base64

    page = (extended_report / "report.html").read_text(encoding="utf-8")
    parser = _Tables()
    parser.feed(page)
    alts = [img.get("alt") or "" for img in parser.images]
    assert len(alts) == 5
    assert all(set(img) == {"src", "alt"} for img in parser.images)  # the alt stayed whole
    tipping = [a for a in alts if a.startswith("Tipping-point grid of")]
    assert tipping == [
        ("Tipping-point grid of H1: the decision for each number of events among the missing "
        "outcomes of negative-pressure and gauze; primary decision: reject H0"),
        ("Tipping-point grid of H2: the decision for each number of events among the missing "
        f"outcomes of {HOSTILE_ATTR} and gauze; primary decision: do not reject H0"),
    ]
    for name, before, after in [("tipping-H1.png", "holds in all 15", "H2 — "),
                                ("tipping-H2.png", "changes in", "H3 — ")]:
        data = base64.b64encode((extended_report / "figures" / name).read_bytes()).decode()
        at = page.index(data)
        assert page.index(before) < at < page.index(after), name


def test_extended_report_code_cells_hold_no_value(extended_report: Path) -> None:
    import nbformat

    nb = nbformat.read(extended_report / "report.ipynb", as_version=4)
    outputs = [o for c in nb.cells for o in c.get("outputs", [])]
    assert not [o for o in outputs if o.output_type in ("error", "stream")]
    sources = "\n".join(c.source for c in nb.cells if c.cell_type == "code")
    for value in ("dressing changed early", "bonferroni split", "negative-pressure", "0.6612"):
        assert value not in sources, value


def test_results_untouched_by_the_report() -> None:
    res = extended_results()
    before = copy.deepcopy(res)
    sections.hypotheses(res)
    planned_versus_achieved(res)
    assert res == before
