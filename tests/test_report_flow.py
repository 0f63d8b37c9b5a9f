"""The participant flow by group (src/prespec/report/flow.py): the steps from results.json's
flow block, tables/flow.csv, the report's section and figures/flow.png with its SVG. The flow
block's counts are the invented sample's (tests/test_report_figures.py), made to agree with
its groups: each group's rows read less those left out are its population, and the
population less the missing outcomes (left out) is its analysed total."""

from __future__ import annotations

import copy
import csv
from pathlib import Path
from typing import Any

import matplotlib
import pytest

from prespec.errors import PrespecError
from prespec.report.canvas import RC
from prespec.report.figures import write_figures
from prespec.report.flow import (
    FLOW_FIGURE,
    OTHER,
    FlowJob,
    flow_groups,
    flow_html,
    flow_section,
    flow_steps,
    write_flow_csv,
)

try:
    from test_report_figures import HOSTILE_SCRIPT, sample_results
except ImportError:  # tests collected as a package
    from tests.test_report_figures import HOSTILE_SCRIPT, sample_results


def with_flow() -> dict[str, Any]:
    res = sample_results()
    # groups (infection): gauze 196 analysed + 4 missing, alginate 200 + 0,
    # negative-pressure 198 + 2: populations 200, 200, 200
    res["flow"] = {
        "read": {"groups": {"gauze": 207, "alginate": 203, "negative-pressure": 201},
                 "other": 4},
        "conditions": [
            {"column": "consented", "condition": "is one of: yes",
             "excluded": {"groups": {"gauze": 5, "alginate": 3, "negative-pressure": 1},
                          "other": 1}},
            {"column": "age", "condition": "between 18 and 90",
             "excluded": {"groups": {"gauze": 2, "alginate": 0, "negative-pressure": 0},
                          "other": 0}},
        ],
        "outside_groups": 3,
        "analysed": {"gauze": 200, "alginate": 200, "negative-pressure": 200},
        "outcomes": {"infection": {"missing": "exclude", "favourable": "no-event"},
                     "reopening": {"missing": "exclude", "favourable": None}},
    }
    return res


def test_the_steps_add_up_per_group() -> None:
    steps = flow_steps(with_flow())
    assert [s.step for s in steps] == [
        "rows read", "left out by condition 1", "left out by condition 2",
        "left out: group value not in the plan", "in the analysis population",
        "outcome infection: missing", "outcome infection: analysed",
        "outcome reopening: missing", "outcome reopening: analysed"]
    read, c1, c2, outside, population, missing, analysed = steps[:7]
    assert read.counts == (207, 203, 201, 4)
    for i in range(4):  # read = left out + outside + population, group by group
        assert read.counts[i] == (c1.counts[i] + c2.counts[i] + outside.counts[i]
                                  + population.counts[i])
    for i in range(3):  # under "exclude": population = missing + analysed
        assert population.counts[i] == missing.counts[i] + analysed.counts[i]
    assert missing.counts == (4, 0, 2, None) and analysed.counts == (196, 200, 198, None)
    assert c1.detail == "kept when consented is one of: yes"
    assert missing.detail == "left out (missing: exclude)"


def test_flow_csv(tmp_path: Path) -> None:
    (tmp_path / "tables").mkdir()
    write_flow_csv(tmp_path, with_flow())
    with open(tmp_path / "tables" / "flow.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == ["step", "detail", "gauze", "alginate", "negative-pressure", OTHER,
                       "total"]
    assert rows[1] == ["rows read", "", "207", "203", "201", "4", "615"]
    assert rows[4] == ["left out: group value not in the plan", "blank, or none of data.groups",
                       "0", "0", "0", "3", "3"]
    assert rows[5] == ["in the analysis population", "", "200", "200", "200", "0", "600"]
    assert rows[7] == ["outcome infection: analysed", "", "196", "200", "198", "", "594"]


def test_the_section_escapes_user_text_and_says_how_rows_are_counted() -> None:
    res = with_flow()
    res["flow"]["conditions"][0]["condition"] = f"is one of: {HOSTILE_SCRIPT}"
    html = flow_section(res)
    assert '<h3 id="flow">Participant flow by group</h3>' in html  # the contents link to it
    assert HOSTILE_SCRIPT not in html and "&lt;script&gt;" in html
    assert "first population condition it fails" in html
    assert html.count("<tr") == 1 + 9
    assert flow_section(sample_results()) == ""  # no flow block: no section
    assert flow_section({**with_flow(), "kind": "rehearsal"}) == ""


def test_the_figure_is_written_with_its_svg_and_embedded_in_the_section(
        tmp_path: Path) -> None:
    paths = write_figures(with_flow(), tmp_path)
    assert tmp_path / FLOW_FIGURE in paths
    assert (tmp_path / FLOW_FIGURE).with_suffix(".svg").is_file()
    html = flow_html(with_flow(), tmp_path)
    assert html.count('<img src="data:image/png;base64,') == 1
    assert FLOW_FIGURE not in [p.relative_to(tmp_path).as_posix()
                               for p in write_figures(sample_results(), tmp_path / "b")]


def test_the_figure_shows_each_group_and_the_other_values_whole() -> None:
    res = with_flow()
    long = "standard sterile gauze dressing changed daily by ward nursing staff"
    for part in (res["flow"]["read"], *(c["excluded"] for c in res["flow"]["conditions"])):
        part["groups"][long] = part["groups"].pop("gauze")
    res["flow"]["analysed"][long] = res["flow"]["analysed"].pop("gauze")
    res["groups"]["infection"][0]["group"] = res["groups"]["reopening"][0]["group"] = long
    job = FlowJob(tuple(flow_groups(res)), tuple(flow_steps(res)))
    with matplotlib.style.context("default"), matplotlib.rc_context(RC):
        fig = job.draw()
        fig.draw_without_rendering()
    renderer = fig.canvas.get_renderer()
    texts = []
    for artist in fig.findobj(matplotlib.text.Text):
        if artist.get_visible() and artist.get_text():
            box = artist.get_window_extent(renderer)
            assert box.x0 >= -0.5 and box.x1 <= fig.bbox.x1 + 0.5, artist.get_text()
            assert box.y0 >= -0.5 and box.y1 <= fig.bbox.y1 + 0.5, artist.get_text()
            texts.append(" ".join(artist.get_text().split()))
    assert long in texts and OTHER in texts  # wrapped, never cut; the other values shown
    assert "read 207, left out 7 analysed: infection 196, reopening 196" in texts
    assert "read 4, left out 4" in texts
    legend = [t.get_text().replace("\n", " ") for leg in fig.legends for t in leg.get_texts()]
    assert legend[0] == "analysis population"  # two outcomes: the population is not split
    assert "left out by condition 1: kept when consented is one of: yes" in legend
    (ax,) = [a for a in fig.axes if a.get_xlabel()]
    widths = sorted(round(p.get_width()) for p in ax.patches)
    assert widths.count(200) == 3 and 4 not in widths  # the three populations


def test_malformed_flow_names_the_key() -> None:
    res = with_flow()
    res["flow"]["read"]["groups"]["gauze"] = "many"
    with pytest.raises(PrespecError, match=r"flow.read.groups.gauze: expected a number"):
        flow_steps(res)
    res = copy.deepcopy(with_flow())
    del res["flow"]["conditions"][0]["column"]
    with pytest.raises(PrespecError, match=r"flow.conditions\[0\].column"):
        flow_steps(res)


def test_the_contents_link_to_the_flow_only_when_there_is_one() -> None:
    import re

    from prespec.report import summary

    res = with_flow()
    links = re.findall(r'href="#([^"]+)"', summary.contents(res))
    assert links[:3] == ["departures", "population", "flow"]
    del res["flow"]  # a report of an earlier prespec, or a rehearsal
    assert "flow" not in re.findall(r'href="#([^"]+)"', summary.contents(res))
