"""The participant flow by group, from the ``flow`` block of results.json (written since
issue 18; a report of an earlier run has none and shows none).

One table of steps by group, in three forms: ``tables/flow.csv``, a section of the report, and
the figure ``figures/flow.png`` (with its SVG). The steps: the rows read; the rows each
condition of ``data.include`` left out (a row under the first condition it fails, in the
plan's order, so the counts add up); the rows whose group value is none of the plan's groups;
the rows in the analysis population; then per outcome the missing outcomes and how the plan
handles them (left out, counted as events, counted as no event, or decided by the estimand)
and the rows analysed. The column ``other group value`` holds rows whose group cell is blank or
none of the plan's groups. Nothing is computed here but sums of the counts shown.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.common.shown import csv_writer
from prespec.report.canvas import FIGURES, INK, LINE, new_figure, right_labels, wrapped
from prespec.report.markup import esc, table
from prespec.report.tablenames import FLOW_TABLE
from prespec.report.values import fmt_count, items, mapping, number, text

if TYPE_CHECKING:
    from matplotlib.figure import Figure

FLOW_FIGURE = f"{FIGURES}/flow.png"
OTHER = "other group value"

#: How the plan's missing rule handles a blank or unmapped outcome, in words.
HANDLED = {
    "exclude": "left out",
    "event": "counted as events",
    "no-event": "counted as no event",
    "error": "decided by each hypothesis's estimand",
}


@dataclass(frozen=True)
class Step:
    """One row of the flow: what happened, and the rows per group (None: not applicable)."""

    step: str
    detail: str
    counts: tuple[int | None, ...]  # per plan group, then the other group values
    kind: str  # read | excluded | outside | population | missing | analysed


def has_flow(results: Mapping[str, Any]) -> bool:
    return isinstance(results.get("flow"), Mapping) and results.get("kind") == "run"


def _count(value: Any, where: str) -> int | None:
    """A count from results.json (a whole number, or None)."""
    found = number(value, where)
    return None if found is None else int(found)


def _counts(value: Any, groups: list[str], where: str) -> tuple[int | None, ...]:
    block = mapping(value, where)
    by = mapping(block.get("groups"), f"{where}.groups")
    return (*(_count(by.get(g), f"{where}.groups.{g}") for g in groups),
            _count(block.get("other"), f"{where}.other"))


def flow_groups(results: Mapping[str, Any]) -> list[str]:
    flow = mapping(results["flow"], "flow")
    return [str(g) for g in mapping(mapping(flow.get("read"), "flow.read").get("groups"),
                                    "flow.read.groups")]


def flow_steps(results: Mapping[str, Any]) -> list[Step]:
    """The rows of the flow table, from results.json (``flow`` and ``groups``)."""
    flow = mapping(results["flow"], "flow")
    groups = flow_groups(results)
    steps = [Step("rows read", "", _counts(flow.get("read"), groups, "flow.read"), "read")]
    for i, raw in enumerate(items(flow.get("conditions"), "flow.conditions")):
        cond = mapping(raw, f"flow.conditions[{i}]")
        column = text(cond.get("column"), f"flow.conditions[{i}].column")
        words = text(cond.get("condition"), f"flow.conditions[{i}].condition")
        steps.append(Step(f"left out by condition {i + 1}",
                          f"kept when {column} {words}",
                          _counts(cond.get("excluded"), groups,
                                  f"flow.conditions[{i}].excluded"), "excluded"))
    outside = _count(flow.get("outside_groups"), "flow.outside_groups")
    steps.append(Step("left out: group value not in the plan", "blank, or none of data.groups",
                      (*([0] * len(groups)), outside), "outside"))
    analysed = mapping(flow.get("analysed"), "flow.analysed")
    population = tuple(_count(analysed.get(g), f"flow.analysed.{g}") for g in groups)
    steps.append(Step("in the analysis population", "", (*population, 0), "population"))
    rules = mapping(flow.get("outcomes") or {}, "flow.outcomes")
    for name, rows in mapping(results.get("groups") or {}, "groups").items():
        by = {}
        for j, raw in enumerate(items(rows, f"groups.{name}")):
            row = mapping(raw, f"groups.{name}[{j}]")
            by[str(row.get("group"))] = row
        rule = text(mapping(rules.get(name) or {}, f"flow.outcomes.{name}").get("missing"),
                    f"flow.outcomes.{name}.missing", default="")
        handled = HANDLED.get(rule, rule or "as the plan says")
        missing = tuple(_count(by[g].get("missing"), f"groups.{name}.missing") if g in by
                        else None for g in groups)
        total = tuple(_count(by[g].get("total"), f"groups.{name}.total") if g in by else None
                      for g in groups)
        steps.append(Step(f"outcome {name}: missing", f"{handled} (missing: {rule})"
                          if rule else handled, (*missing, None), "missing"))
        steps.append(Step(f"outcome {name}: analysed", "", (*total, None), "analysed"))
    return steps


def _total(counts: tuple[int | None, ...]) -> int | None:
    known = [c for c in counts if c is not None]
    return sum(known) if known else None


def write_flow_csv(folder: Path, results: Mapping[str, Any]) -> None:
    """``tables/flow.csv``: step, detail, one column per plan group, the other group values,
    the total."""
    groups = flow_groups(results)
    with open(folder / FLOW_TABLE, "w", newline="", encoding="utf-8") as fh:
        w = csv_writer(fh)
        w.writerow(["step", "detail", *groups, OTHER, "total"])
        for s in flow_steps(results):
            w.writerow([s.step, s.detail, *s.counts, _total(s.counts)])


def flow_section(results: Mapping[str, Any]) -> str:
    """The flow table as HTML (empty for a report without a flow block)."""
    if not has_flow(results):
        return ""
    groups = flow_groups(results)
    rows = [[s.step, s.detail, *("" if c is None else fmt_count(c) for c in s.counts),
             fmt_count(_total(s.counts))] for s in flow_steps(results)]
    numeric = range(2, 2 + len(groups) + 2)
    note = ("<p>Each row left out is counted under the first population condition it fails, "
            "in the plan's order, so the rows of each group add up: rows read, less those "
            "left out, are the analysis population. "
            f"&ldquo;{esc(OTHER)}&rdquo; counts rows whose group cell is blank or none of "
            "the plan's groups.</p>")
    return ('<h3 id="flow">Participant flow by group</h3>'  # the contents link here
            + table(["Step", "Detail", *groups, OTHER, "Total"], rows, numeric=numeric,
                    cls="prespec-flow")
            + note)


def flow_html(results: Mapping[str, Any], folder: Path = Path()) -> str:
    """The flow section: the table, then the figure (embedded, when ``folder`` holds it)."""
    html = flow_section(results)
    figure = folder / FLOW_FIGURE
    if html and figure.is_file():
        import base64

        data = base64.b64encode(figure.read_bytes()).decode("ascii")
        html += (f'<img src="data:image/png;base64,{data}" style="max-width:100%;height:auto" '
                 'alt="Participant flow by group: rows read, left out by each population '
                 'condition, analysed">')
    return html


@dataclass(frozen=True)
class FlowJob:
    """The flow figure: per group a bar of the rows read, divided into the rows each condition
    left out, and the analysis population; the analysed counts of each outcome on the right."""

    groups: tuple[str, ...]
    steps: tuple[Step, ...]

    def draw(self) -> Figure:
        reads = next(s for s in self.steps if s.kind == "read").counts
        bars = list(range(len(self.groups)))  # the plan's groups, then any other value read
        if reads[-1]:
            bars.append(len(self.groups))
        labels = [wrapped(g, 24) for g in (*self.groups, OTHER)]
        lines = max([labels[i].count("\n") + 1 for i in bars], default=1)
        step = max(1.0, 0.55 * lines)
        fig = new_figure(1.9 + 0.5 * step * max(len(bars), 1))
        ax = fig.add_subplot()
        ys = [step * i for i in range(len(bars))][::-1]
        for k, (part, name, shade, hatch) in enumerate(self._parts()):
            lefts = [sum(p.counts[i] or 0 for p, *_ in self._parts()[:k]) for i in bars]
            ax.barh(ys, [part.counts[i] or 0 for i in bars], left=lefts, height=0.6 * step,
                    color=shade, hatch=hatch, edgecolor="white", linewidth=0.6,
                    label=wrapped(name, 60))
        analysed = [s for s in self.steps if s.kind == "analysed"]
        right = []
        population = next(s for s in self.steps if s.kind == "population").counts
        for i in bars:
            out = (reads[i] or 0) - (population[i] or 0)
            shown = [f"read {fmt_count(reads[i])}, left out {fmt_count(out)}"]
            if i < len(self.groups) and analysed:
                shown.append("analysed: " + ", ".join(
                    f"{s.step.split(':')[0].removeprefix('outcome ')} {fmt_count(s.counts[i])}"
                    for s in analysed))
            right.append("\n".join(wrapped(line, 40) for line in shown))
        ax.set_yticks(ys, [labels[i] for i in bars])
        ax.tick_params(axis="y", length=0)
        right_labels(ax, ys, right)
        most = max([reads[i] or 0 for i in bars], default=0)
        ax.set_xlim(0, max(most, 1) * 1.02)
        ax.set_ylim(-0.6 * step, step * (len(bars) - 1) + 0.6 * step)
        ax.grid(axis="x", color="#dddddd", linewidth=0.8)
        ax.set_axisbelow(True)
        ax.set_xlabel("rows of the data")
        ax.set_title("Participant flow by group", loc="left", color=INK)
        fig.legend(loc="outside lower center", ncols=1, frameon=False, fontsize=8.5,
                   labelcolor=LINE)
        return fig

    def _parts(self) -> list[tuple[Step, str, str, str]]:
        """The segments of each bar from the left: the analysis population (with one
        outcome: split into outcome known and missing), then each condition's rows left out,
        then the rows outside the groups; each with its legend label, colour and hatch."""
        population = next(s for s in self.steps if s.kind == "population")
        parts = [(population, "analysis population", "#3b6ea5", "")]
        missing = [s for s in self.steps if s.kind == "missing"]
        if len(missing) == 1:  # one outcome: the population split by a known outcome or not
            gap = missing[0]
            known = tuple(None if p is None or m is None else p - m
                          for p, m in zip(population.counts, gap.counts, strict=True))
            parts = [(Step("outcome known", "", known, "known"),
                      "analysis population, outcome known", "#3b6ea5", ""),
                     (gap, f"analysis population, outcome missing: {gap.detail}", "#9db7d5",
                      "..")]
        left_out = [("#c98b2b", "//"), ("#b04a4a", "\\\\"), ("#7c5aa6", "xx"),
                    ("#5c8a5c", "oo"), ("#999999", "--")]
        dropped = [s for s in self.steps if s.kind in ("excluded", "outside")]
        for j, part in enumerate(dropped):
            shade, hatch = left_out[j % len(left_out)]
            if part.kind == "outside":
                shade, hatch = "#6b6b6b", "++"
            parts.append((part, f"{part.step}: {part.detail}", shade, hatch))
        return parts


def flow_jobs(results: Mapping[str, Any]) -> list[tuple[str, Any]]:
    """The flow figure's job, for a run whose results.json has a flow block."""
    if not has_flow(results):
        return []
    groups = tuple(flow_groups(results))
    return [(FLOW_FIGURE, FlowJob(groups, tuple(flow_steps(results))))]
