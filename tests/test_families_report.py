"""The report of a family: the volcano figure's labels and cut-off, the sortable table, the CSV."""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import Any

import pytest

from prespec.analysis.families import analyse_family, prepare_run
from prespec.demo.safety import PLAN_TEXT, safety_frame
from prespec.plan import load_plan
from prespec.report import families as report
from prespec.report.figures import write_figures


def family(tmp_path: Path, method: str = "double-fdr") -> dict[str, Any]:
    text = PLAN_TEXT if method == "double-fdr" else PLAN_TEXT.replace(
        "flag_method: double-fdr", "flag_method: benjamini-hochberg")
    path = tmp_path / "plan.yaml"
    path.write_text(text)
    plan = load_plan(path).model
    _, data = prepare_run(safety_frame(per_group=120, seed=2), plan, "data.csv")
    return analyse_family(plan, plan.hypotheses[0], data[0], [])


def test_flagged_members_and_only_they_are_labelled(tmp_path: Path) -> None:
    for method in ("double-fdr", "benjamini-hochberg"):
        fam = family(tmp_path, method)
        flagged = sorted(m["level"] for m in fam["members"] if m["flagged"])
        assert flagged, method  # the invented data give the figure something to label
        fig = report.VolcanoJob(fam).draw()
        (ax,) = fig.axes
        assert sorted(t.get_text() for t in ax.texts) == flagged
        for t in ax.texts:
            member = next(m for m in fam["members"] if m["level"] == t.get_text())
            x, y = t.xy
            assert x == member["estimate"]["value"]
            assert y == pytest.approx(-math.log10(member["p_value"]))
        horizontal = [line for line in ax.get_lines()
                      if len(set(line.get_ydata())) == 1 and line.get_linestyle() == "--"]
        if method == "benjamini-hochberg":
            (cut,) = horizontal
            assert cut.get_ydata()[0] == pytest.approx(-math.log10(fam["threshold"]))
            above = sorted(m["level"] for m in fam["members"]
                           if -math.log10(m["p_value"]) >= cut.get_ydata()[0] - 1e-12)
            assert above == flagged
        else:
            assert horizontal == []  # the double FDR has no single cut-off


def test_the_volcano_file_is_written_with_the_report_figures(tmp_path: Path) -> None:
    fam = family(tmp_path)
    results = {"kind": "run", "groups": {}, "hypotheses": [], "multiplicity": "holm",
               "families": [fam]}
    written = write_figures(results, tmp_path)
    assert tmp_path / "figures" / "family-AE-volcano.png" in written
    assert (tmp_path / "figures" / "family-AE-volcano.png").read_bytes()[:8] == \
        b"\x89PNG\r\n\x1a\n"
    assert write_figures({**results, "kind": "rehearsal"}, tmp_path / "r") == []


def test_odd_ids_get_safe_file_names() -> None:
    assert report.volcano_name("AE") == "figures/family-AE-volcano.png"
    odd = report.volcano_name("AE/../x y")
    assert odd.startswith("figures/family-AE-x-y-") and "/.." not in odd


def test_the_member_table_sorts_by_numbers_and_names(tmp_path: Path) -> None:
    fam = family(tmp_path)
    html = report.member_table(fam, "t1")
    assert html.count("<tr") == 1 + len(fam["members"])
    assert '<table class="prespec prespec-family" id="t1">' in html
    assert html.count("<script>") == 1 and 'document.getElementById("t1")' in html
    first = fam["members"][0]
    assert f'data-sort="{first["p_value"]!r}"' in html
    assert f'data-sort="{first["level"]}"' in html
    assert html.count(">flagged</td>") == fam["members_flagged"]
    assert "<th>adjusted p of the group</th>" in html
    section = report.section(fam)
    assert "a flag is not a rejected hypothesis" in section
    assert f"{fam['members_flagged']} members of 30 flagged" in section


def test_user_text_in_the_table_is_escaped(tmp_path: Path) -> None:
    fam = family(tmp_path)
    fam = {**fam, "members": [{**fam["members"][0], "level": "<b>rash</b>"}]}
    html = report.member_table(fam, "t2")
    assert "<b>rash</b>" not in html and "&lt;b&gt;rash&lt;/b&gt;" in html


def test_the_csv_lists_every_member(tmp_path: Path) -> None:
    fam = family(tmp_path)
    (path,) = report.write_family_tables(tmp_path, {"kind": "run", "families": [fam]})
    assert path == tmp_path / "tables" / "family-AE.csv"
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["id"] for r in rows] == [m["id"] for m in fam["members"]]
    first, member = rows[0], fam["members"][0]
    assert (int(first["events_new"]), int(first["total_new"])) == (
        member["table"]["events"][0], member["table"]["totals"][0])
    assert float(first["p_value"]) == member["p_value"]
    assert float(first["p_group"]) == member["p_group"]
    assert [r["flagged"] == "True" for r in rows] == [m["flagged"] for m in fam["members"]]


def test_every_fragment_closes_what_it_opens(tmp_path: Path) -> None:
    """An unclosed element would swallow the figure and the table that follow it in the
    exported page (they were there but not drawn, in headless Chromium)."""
    from html.parser import HTMLParser

    class Balance(HTMLParser):
        def __init__(self) -> None:
            super().__init__()
            self.open: list[str] = []

        def handle_starttag(self, tag: str, attrs: object) -> None:
            if tag not in ("br", "img", "meta"):
                self.open.append(tag)

        def handle_endtag(self, tag: str) -> None:
            assert self.open and self.open.pop() == tag, tag

    fam = family(tmp_path)
    rehearsal = {"kind": "rehearsal", "families": [{
        "id": "AE", "over": "event_term", "within": "body_system", "executed": True,
        "problem": None, "members": [{"level": "dryness", "group": "skin", "events": 3,
                                      "total": 10, "missing": 0}]}]}
    for fragment in (report.section(fam), report.member_table(fam, "t"),
                     report.families_heading({"kind": "run", "families": [fam]}),
                     report.families_heading(rehearsal)):
        checker = Balance()
        checker.feed(fragment)
        checker.close()
        assert checker.open == [], fragment[:80]


def _crowded(n: int) -> dict[str, Any]:
    """An invented family of ``n`` flagged members bunched in one corner of the figure, and
    a few hollow ones spread out."""
    members = [{"level": f"term {i:02d}", "flagged": True, "p_value": 1e-6 * (1 + i % 4),
                "estimate": {"value": 0.10 + 0.002 * (i % 5)}} for i in range(n)]
    members += [{"level": f"quiet {i}", "flagged": False, "p_value": 0.1 + 0.1 * i,
                 "estimate": {"value": -0.05 + 0.02 * i}} for i in range(5)]
    return {"id": "AE", "over": "term", "compare": ["new", "old"], "threshold": 1e-4,
            "members": members}


@pytest.mark.parametrize("n", [12, 40])
def test_labels_of_a_crowded_volcano_do_not_overlap(n: int) -> None:
    fig = report.VolcanoJob(_crowded(n)).draw()
    fig.canvas.draw()  # the annotations' places are worked out as they are drawn
    (ax,) = fig.axes
    renderer = fig.canvas.get_renderer()
    labels = [t for t in ax.texts if t.get_text().startswith("term")]
    assert len(labels) == min(n, report.LABEL_LIMIT)
    from matplotlib.text import Text

    boxes = [Text.get_window_extent(t, renderer) for t in labels]  # without the leader
    frame = ax.get_window_extent(renderer)
    legend = ax.get_legend().get_window_extent(renderer)
    from matplotlib.transforms import Bbox

    fam = _crowded(n)
    at = ax.transData.transform([(m["estimate"]["value"], -math.log10(m["p_value"]))
                                 for m in fam["members"]])
    radius = 2.5 * fig.dpi / 72  # a marker of s=30 square points is about 5.5 points wide
    markers = [Bbox.from_extents(x - radius, y - radius, x + radius, y + radius) for x, y in at]
    for i, box in enumerate(boxes):
        assert not box.overlaps(legend), labels[i].get_text()
        assert not any(box.overlaps(m) for m in markers), labels[i].get_text()
        assert frame.x0 <= box.x0 and box.x1 <= frame.x1, labels[i].get_text()
        for other in boxes[i + 1:]:
            assert not box.overlaps(other), labels[i].get_text()
    # the smallest p-values are labelled first: with 40, the 10 of p = 1e-6 and the next
    # 15 by p, then by the larger difference
    notes = [t.get_text() for t in ax.texts if not t.get_text().startswith("term")]
    if n > report.LABEL_LIMIT:
        assert notes == [f"{n - report.LABEL_LIMIT} more flagged, not labelled (see the table)"]
        shown = {t.get_text() for t in labels}
        assert {f"term {i:02d}" for i in range(0, n, 4)} <= shown  # every p = 1e-6 member
    else:
        assert notes == []
