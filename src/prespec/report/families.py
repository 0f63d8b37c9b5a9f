"""The report of families: a volcano figure and a sortable table per family, and its CSV.

- ``figures/family-<id>-volcano.png``: each member with a p-value as a point, its risk
  difference (first group minus second) on x and −log10 of its nominal p-value on y; flagged
  members filled and labelled with their level (labels kept off each other, the points and
  the legend; at most ``LABEL_LIMIT``, the rest counted in a corner), the others hollow; a
  vertical line at no
  difference. Under Benjamini–Hochberg a dashed horizontal line is drawn at −log10 of the
  step-up cut-off k·q/m (``threshold`` in results.json): the members on or above it are
  exactly the flagged ones. The double FDR has no single cut-off (it differs by group), so no
  line is drawn and the caption says so.
- The section: what the family is, how it was flagged, the counts, and an HTML table of every
  member with a small inline script that sorts it by a clicked header (numbers as numbers).
- ``tables/family-<id>.csv``: every member, one row each.

Nothing is computed here beyond −log10 p: the values are those of ``results.json``.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.common.shown import csv_writer
from prespec.report.canvas import FIGURES, GUIDE, INK, LINE, new_figure, safe_stem, shorten
from prespec.report.markup import QUIET_STYLE, esc, fields, plural
from prespec.report.tablenames import family_table
from prespec.report.values import (
    fmt_estimate,
    fmt_interval,
    fmt_level,
    fmt_p,
    items,
    mapping,
    number,
    text,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

FLAGGED = "#8b1a1a"
_METHODS = {"benjamini-hochberg": "Benjamini–Hochberg (1995) over the whole family",
            "double-fdr": "the double false discovery rate (Mehrotra and Heyse 2004): "
                          "Benjamini–Hochberg across the groups and within each group"}


def families(results: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    """The families of results.json (none in a rehearsal or a plan without families)."""
    if results.get("kind") == "rehearsal":
        return []
    return [mapping(f, f"families[{i}]") for i, f in
            enumerate(items(results.get("families") or [], "families"))]


def volcano_name(family_id: str) -> str:
    """The relative path of a family's volcano figure."""
    return f"{FIGURES}/family-{safe_stem(family_id, 'family')}-volcano.png"


def table_name(family_id: str) -> str:
    """The relative path of a family's CSV table."""
    return family_table(family_id)


def _neg_log10(p: float) -> float:
    import math

    return 300.0 if p <= 0 else -math.log10(p)


@dataclass(frozen=True)
class Point:
    level: str
    x: float
    y: float
    flagged: bool


def points(family: Mapping[str, Any]) -> list[Point]:
    """The members drawn: those with a p-value and a risk difference."""
    out = []
    for i, raw in enumerate(items(family.get("members"), "families.members")):
        m = mapping(raw, f"families.members[{i}]")
        p = number(m.get("p_value"), f"families.members[{i}].p_value")
        est = m.get("estimate")
        value = None if not isinstance(est, Mapping) else number(est.get("value"), "estimate")
        if p is None or value is None:
            continue
        out.append(Point(text(m.get("level"), "level"), value, _neg_log10(p),
                         m.get("flagged") is True))
    return out


@dataclass(frozen=True)
class VolcanoJob:
    """The volcano figure of one family; ``draw`` returns the figure, with the flagged
    members' labels as the axes' text objects."""

    family: Mapping[str, Any]

    def draw(self) -> Figure:
        fam = self.family
        pts = points(fam)
        fig = new_figure(5.5)
        ax = fig.add_subplot()
        plain = [p for p in pts if not p.flagged]
        marked = [p for p in pts if p.flagged]
        ax.scatter([p.x for p in plain], [p.y for p in plain], s=22, facecolors="none",
                   edgecolors=LINE, linewidths=0.9, label="not flagged")
        ax.scatter([p.x for p in marked], [p.y for p in marked], s=30, color=FLAGGED,
                   label="flagged")
        ax.axvline(0.0, color=GUIDE, linewidth=0.8)
        threshold = number(fam.get("threshold"), "families.threshold")
        if threshold is not None and threshold > 0:
            ax.axhline(_neg_log10(threshold), color=FLAGGED, linestyle="--", linewidth=0.9,
                       label=f"flagging cut-off, p = {threshold:.3g}")
        groups = fam.get("compare") or ["first", "second"]
        ax.set_xlabel(f"risk difference ({groups[0]} minus {groups[1]})")
        ax.set_ylabel("−log10 p (nominal)")
        ax.set_title(shorten(f"{fam.get('id')}: {fam.get('title') or fam.get('over')}", 70),
                     loc="left", fontsize=10)
        if pts:
            ax.legend(loc="upper left", fontsize=8, frameon=False)
        _label(fig, ax, marked, pts)
        return fig


def _label(fig: Figure, ax: Any, marked: Sequence[Point], pts: Sequence[Point]) -> None:
    """Labels for the flagged points that overlap neither each other, nor any point, nor the
    legend, and stay inside the axes. Each label takes the free place nearest its point
    among ``_PLACES`` (a thin leader line when it is not beside the point). The strongest
    signals (the smallest p, then the largest difference) are placed first; beyond
    ``LABEL_LIMIT`` the rest are left to the table, and a line in the corner says how many.
    Sizes are measured once per label and the places tried by array arithmetic in display
    units."""
    import numpy as np

    if not marked:
        return
    fig.canvas.draw()  # the layout and the limits, fixed before measuring the labels
    fig.set_layout_engine("none")
    renderer = fig.canvas.get_renderer()
    frame = ax.get_window_extent(renderer)
    per_point = fig.dpi / 72.0
    centres = ax.transData.transform([(p.x, p.y) for p in pts])
    r = _MARKER_RADIUS * per_point
    taken = [np.column_stack([centres - r, centres + r])]  # every point's marker
    if ax.get_legend() is not None:
        taken.append(np.array([ax.get_legend().get_window_extent(renderer).extents]))
    places = np.array(_PLACES, dtype=float) * per_point
    order = sorted(marked, key=lambda p: (-p.y, -abs(p.x), p.level))
    for p in order[:LABEL_LIMIT]:
        shown = shorten(p.level, 28)
        probe = ax.text(0, 0, shown, fontsize=8)
        size = probe.get_window_extent(renderer)
        probe.remove()
        px, py = ax.transData.transform((p.x, p.y))
        x0 = px + places[:, 0] - np.where(places[:, 0] < 0, size.width, 0.0)
        y0 = py + places[:, 1] - np.where(places[:, 1] < 0, size.height, 0.0)
        boxes = np.column_stack([x0, y0, x0 + size.width, y0 + size.height])
        inside = ((boxes[:, 0] >= frame.x0) & (boxes[:, 2] <= frame.x1)
                  & (boxes[:, 1] >= frame.y0) & (boxes[:, 3] <= frame.y1))
        others = np.concatenate(taken)
        hits = ((boxes[:, None, 0] < others[None, :, 2]) & (others[None, :, 0] < boxes[:, None, 2])
                & (boxes[:, None, 1] < others[None, :, 3])
                & (others[None, :, 1] < boxes[:, None, 3])).any(axis=1)
        free = np.flatnonzero(inside & ~hits)
        at = int(free[0]) if len(free) else 0  # nowhere free: beside the point
        taken.append(boxes[at:at + 1])
        dx, dy = _PLACES[at]
        ax.annotate(shown, (p.x, p.y), xytext=(dx, dy), textcoords="offset points",
                    fontsize=8, color=INK, ha="left" if dx > 0 else "right",
                    va="bottom" if dy > 0 else "top",
                    arrowprops=None if at < 4 else {"arrowstyle": "-", "color": GUIDE,
                                                    "linewidth": 0.6, "shrinkA": 0,
                                                    "shrinkB": 3})
    if len(order) > LABEL_LIMIT:
        ax.text(0.99, 0.01, f"{len(order) - LABEL_LIMIT} more flagged, not labelled "
                "(see the table)", transform=ax.transAxes, ha="right", va="bottom",
                fontsize=7, color=INK)


_MARKER_RADIUS = 3.5  # points: a marker's half width, kept clear of labels
LABEL_LIMIT = 25  # flagged points labelled at most; the table lists them all
# where a label may go, in points from its point (its corner nearest the point: right or
# left, above or below), nearest first
_PLACES = sorted({(sx * dx, sy * dy) for dx in (5, 12, 24, 40, 60, 85, 115, 150)
                  for dy in (4, *range(12, 260, 9)) for sx in (1, -1) for sy in (1, -1)},
                 key=lambda d: (d[0] ** 2 + d[1] ** 2, d))


def family_jobs(results: Mapping[str, Any]) -> list[tuple[str, VolcanoJob]]:
    """One volcano job per family, by its figure name."""
    return [(volcano_name(text(f.get("id"), "families.id")), VolcanoJob(f))
            for f in families(results)]


def write_family_tables(folder: Path, results: Mapping[str, Any]) -> list[Path]:
    """``tables/family-<id>.csv`` for every family: one row per member."""
    written = []
    for fam in families(results):
        path = folder / table_name(text(fam.get("id"), "families.id"))
        path.parent.mkdir(parents=True, exist_ok=True)
        g = list(fam.get("compare") or ["first", "second"])
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv_writer(fh)
            w.writerow(["id", "level", "group", f"events_{g[0]}", f"total_{g[0]}",
                        f"events_{g[1]}", f"total_{g[1]}", "risk_difference", "ci_low",
                        "ci_high", "ci_method", "ci_level", "test", "p_value", "p_adjusted",
                        "p_group", "flagged"])
            for m in fam.get("members") or []:
                t, est = m["table"], m.get("estimate") or {}
                ci = est.get("ci") or [None, None]
                w.writerow([m["id"], m["level"], m["group"], t["events"][0], t["totals"][0],
                            t["events"][1], t["totals"][1], est.get("value"), ci[0], ci[1],
                            est.get("ci_method"), est.get("level"), m["test"], m["p_value"],
                            m["p_adjusted"], m["p_group"], m["flagged"]])
        written.append(path)
    return written


_SORT_SCRIPT = """<script>
(function () {
  var table = document.getElementById(%s);
  if (!table || !table.tHead) { return; }
  var heads = table.tHead.rows[0].cells;
  function key(row, i) {
    var v = row.cells[i].getAttribute("data-sort");
    var n = parseFloat(v);
    return (v !== "" && !isNaN(n)) ? [0, n] : [v === "" ? 2 : 1, v];
  }
  Array.prototype.forEach.call(heads, function (head, i) {
    head.style.cursor = "pointer";
    head.title = "sort by this column";
    head.addEventListener("click", function () {
      var dir = head.getAttribute("data-dir") === "ascending" ? -1 : 1;
      Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("data-dir"); });
      head.setAttribute("data-dir", dir === 1 ? "ascending" : "descending");
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      rows.sort(function (a, b) {
        var x = key(a, i), y = key(b, i);
        if (x[0] !== y[0]) { return x[0] - y[0]; }
        if (x[0] === 0) { return dir * (x[1] - y[1]); }
        return dir * String(x[1]).localeCompare(String(y[1]));
      });
      rows.forEach(function (r) { body.appendChild(r); });
    });
  });
})();
</script>"""


def _cell(shown: str, key: object, numeric: bool = False) -> str:
    sort = "" if key is None else (repr(float(key)) if isinstance(key, (int, float))
                                   and not isinstance(key, bool) else str(key))
    klass = ' class="num"' if numeric else ""
    return f'<td{klass} data-sort="{esc(sort)}">{esc(shown)}</td>'


def member_table(fam: Mapping[str, Any], table_id: str) -> str:
    """Every member as a row of a table that sorts by a clicked header."""
    g = list(fam.get("compare") or ["first", "second"])
    double = fam.get("method") == "double-fdr"
    head = [str(fam.get("level_column") or fam.get("over") or "level"), str(fam.get("within") or "within"),
            f"{g[0]} events / n", f"{g[1]} events / n",
            "risk difference", "interval", "p-value", "p adjusted", *(
                ["adjusted p of the group"] if double else []), "flagged"]
    rows = []
    for i, raw in enumerate(items(fam.get("members"), "families.members")):
        m = mapping(raw, f"families.members[{i}]")
        t = mapping(m.get("table"), "table")
        ev, tot = list(t.get("events") or [0, 0]), list(t.get("totals") or [0, 0])
        est = m.get("estimate") if isinstance(m.get("estimate"), Mapping) else {}
        ci = list(est.get("ci") or [None, None])
        value = number(est.get("value"), "estimate.value")
        p = number(m.get("p_value"), "p_value")
        p_adj = number(m.get("p_adjusted"), "p_adjusted")
        rate = ev[0] / tot[0] if tot[0] else None
        cells = [
            _cell(text(m.get("level"), "level"), m.get("level")),
            _cell(str(m.get("group") or "—"), m.get("group")),
            _cell(f"{ev[0]} / {tot[0]}", rate, True),
            _cell(f"{ev[1]} / {tot[1]}", ev[1] / tot[1] if tot[1] else None, True),
            _cell(fmt_estimate(value), value, True),
            _cell(fmt_interval(number(ci[0], "ci"), number(ci[1], "ci")), ci[0], True),
            _cell(fmt_p(p), p, True),
            _cell(fmt_p(p_adj), p_adj, True),
        ]
        if double:
            p_grp = number(m.get("p_group"), "p_group")
            cells.append(_cell(fmt_p(p_grp), p_grp, True))
        flagged = m.get("flagged") is True
        cells.append(_cell("flagged" if flagged else "", 0 if flagged else 1))
        style = ' style="background:#fde2e2;font-weight:600;"' if flagged else ""
        rows.append(f"<tr{style}>" + "".join(cells) + "</tr>")
    header = "".join(f"<th>{esc(h)}</th>" for h in head)
    return (f'<table class="prespec prespec-family" id="{esc(table_id)}"><thead><tr>{header}'
            f"</tr></thead><tbody>{''.join(rows)}</tbody></table>"
            + _SORT_SCRIPT % json.dumps(table_id))


def _summary(fam: Mapping[str, Any]) -> list[tuple[str, str]]:
    method = str(fam.get("method"))
    level = number(fam.get("level"), "families.level")
    rows = [("runs over", f"column {fam.get('over')}"
             + (f", grouped by {fam.get('within')}" if fam.get("within") else "")),
            ("levels", "declared in the plan (fixed at lock)" if fam.get("declared")
             else "found in the data at run time"),
            ("test", f"{fam.get('planned_test')}, {fam.get('alternative')}"),
            ("estimate", (f"risk difference with the {fam.get('interval')} interval at "
                         f"{fmt_level(number(fam.get('ci_level'), 'ci_level'))}")),
            ("flagged by", _METHODS.get(method, method)),
            ("flagging level", f"{level:g}" + (
                f" within groups, {number(fam.get('group_level'), 'group_level'):g} across "
                "groups" if method == "double-fdr" and fam.get("group_level") is not None
                else ""))]
    return rows


def _groups_table(fam: Mapping[str, Any]) -> str:
    groups = fam.get("groups")
    if not isinstance(groups, Sequence) or not groups:
        return ""
    from prespec.report.markup import table

    rows = [[str(g.get("group")), str(g.get("members")), fmt_p(number(g.get("p_group"), "p")),
             "flagged" if g.get("flagged") else "", str(g.get("members_flagged"))]
            for g in groups if isinstance(g, Mapping)]
    return table([str(fam.get("within")), "members", "adjusted p of the group", "flagged",
                  "members flagged"], rows, numeric=(1, 2, 4),
                 caption="The step across groups of the double FDR")


def section(fam: Mapping[str, Any]) -> str:
    """The HTML of one family: heading, what it is, counts, groups, the sortable table."""
    fid = text(fam.get("id"), "families.id")
    total = int(number(fam.get("members_total"), "members_total") or 0)
    flagged = int(number(fam.get("members_flagged"), "members_flagged") or 0)
    without = int(number(fam.get("members_without_data"), "members_without_data") or 0)
    title = f" — {fam.get('title')}" if fam.get("title") else ""
    method = str(fam.get("method"))
    line = "no single cut-off (it differs by group), so none is drawn" if method == \
        "double-fdr" else "the dashed line is the step-up cut-off: points on or above it are " \
        "the flagged members"
    counts = (f"{plural(flagged, 'member')} of {total} flagged"
              + (f"; {without} without a p-value (no data or not computable), never flagged"
                 if without else ""))
    return (
        f'<div class="prespec-hyp"><h3>Family {esc(fid)}{esc(title)}</h3>'
        + fields(_summary(fam))
        + f'<p style="{QUIET_STYLE}">{esc(counts)}. Members are flagged as signals for review, '
        "outside the plan's multiplicity; a flag is not a rejected hypothesis.</p>"
        + _groups_table(fam)
        + f"<p>The figure plots each member's risk difference against −log10 of its nominal "
        f"p-value; flagged members are filled and labelled; {esc(line)}. Click a column "
        "heading of the table to sort by it.</p></div>"
    )


def family_blocks(results: Mapping[str, Any]) -> list[tuple[str, str, str, str]]:
    """Per family: (section HTML, figure path, figure alt text, table HTML)."""
    out = []
    for i, fam in enumerate(families(results)):
        fid = text(fam.get("id"), "families.id")
        alt = (f"Family {fid}: risk difference against -log10 p for each member, flagged "
               "members labelled")
        out.append((section(fam), volcano_name(fid), alt,
                    member_table(fam, f"prespec-family-{i + 1}")))
    return out


def rehearsed(results: Mapping[str, Any]) -> str:
    """A rehearsal's families: per member its pooled counts (all groups together) and
    whether the family's steps executed on the dummy allocation; empty outside a rehearsal."""
    if results.get("kind") != "rehearsal" or not results.get("families"):
        return ""
    from prespec.report.markup import table

    out = ["<h2>Families rehearsed</h2>"]
    for i, raw in enumerate(items(results.get("families"), "families")):
        fam = mapping(raw, f"families[{i}]")
        fid = text(fam.get("id"), "families.id")
        state = ("every step executed on the dummy allocation" if fam.get("executed") is True
                 else f"a step failed: {fam.get('problem')}")
        rows = [[text(m.get("level"), "level"), str(m.get("group") or "—"),
                 str(m.get("events")), str(m.get("total")), str(m.get("missing"))]
                for m in (mapping(x, "members") for x in items(fam.get("members"), "members"))]
        out.append(f"<h3>Family {esc(fid)}</h3><p>{esc(state)}; "
                   f"{esc(plural(len(rows), 'member'))}.</p>"
                   + table([str(fam.get("level_column") or fam.get("over") or "level"), str(fam.get("within") or "within"),
                            "events, all groups", "analysed, all groups",
                            "missing"], rows, numeric=(2, 3, 4),
                           caption="Pooled over the groups: no group is shown"))
    return "".join(out)


def families_heading(results: Mapping[str, Any]) -> str:
    """The heading of the families section, or an empty string without families."""
    fams = families(results)
    if not fams:
        return rehearsed(results)
    return (f"<h2>Families</h2><p>{esc(plural(len(fams), 'family', 'families'))}: each member "
            "is the family's comparison run on the rows of one level.</p>")
