"""The report's figures, drawn from ``results.json`` with matplotlib's Agg canvas.

The report's figures:

- ``figures/proportions-<outcome>.png``: the proportion with the event in each group, with its
  interval, for one outcome;
- ``figures/differences.png``: every estimate of the hypotheses that have one, with its
  interval, one panel per measure; a vertical line at the value of no difference (0 for a risk
  difference, 1 for a ratio, drawn on a log scale); margins (one, or low and high for
  equivalence) as dashed lines; the proportion of a single-group hypothesis in its own panel
  with a dotted line at its null rate; exploratory hypotheses drawn hollow and labelled as such;
  a Bayesian hypothesis (test posterior-probability) drawn as a diamond, labelled "Bayesian",
  its interval marked "credible" (the posterior mean and the equal-tailed credible interval,
  not a confidence interval);
- ``figures/tipping-<id>.png``: the decision map of a tipping-point analysis (drawn by
  :mod:`prespec.report.tipping`);
- ``figures/bayes-<id>.png`` and ``figures/oc-<id>.png``: the posterior densities and the
  operating characteristics of a Bayesian hypothesis (drawn by :mod:`prespec.report.bayes`);
- ``figures/flow.png``: the participant flow by group (drawn by :mod:`prespec.report.flow`);
- ``figures/multiplicity-graph.png``: for the graphical procedure (Bretz et al., Statistics in
  Medicine 2009), the hypotheses as nodes on a circle with their initial weights, and an
  arrow with its weight for each transition.

Every figure is written as a PNG at 200 dpi with an SVG of the same name beside it
(``canvas.write_png``, then ``canvas.write_svg``). The estimates figure draws confirmatory results, tested follow-ups,
follow-ups behind a closed gate (not tested) and exploratory results each in its own marker
and line (``KINDS``), with a legend; labels are wrapped in full, never cut; under each axis a
line says which side favours which group (by the outcome's ``favourable`` value in the
``flow`` block when results.json has it, else by which side has fewer events); and the tick
labels are thinned until none touches another (``spread_ticks``).

Nothing is computed here: the points and limits are the ones in ``results.json``. The figures
are built on ``matplotlib.figure.Figure`` with an explicit Agg canvas (no pyplot state, no
global backend) under matplotlib's default style, and saved without a time stamp, so the same
results give the same bytes.
"""

from __future__ import annotations

import contextlib
import functools
import itertools
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.errors import PrespecError
from prespec.report.canvas import (
    FIGURES,
    GUIDE,
    INK,
    LINE,
    RC,
    new_figure,
    right_labels,
    safe_stem,
    shorten,
    wrapped,
    write_png,
    write_svg,
)
from prespec.report.tipping import (
    TippingJob,
    drawn,
    is_rehearsal,
    tipping_grids,
    tipping_name,
)
from prespec.report.values import (
    fmt_count,
    fmt_estimate,
    fmt_interval,
    fmt_level,
    items,
    mapping,
    number,
    pair,
    text,
)

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

DIFFERENCES = f"{FIGURES}/differences.png"
MULTIPLICITY_GRAPH = f"{FIGURES}/multiplicity-graph.png"

_MARGIN = "#8a5a00"
_NULL_RATE = "#1f4e79"

# Measure -> (axis label, value of no difference or None, log scale).
_MEASURES: dict[str, tuple[str, float | None, bool]] = {
    "risk-difference": ("risk difference (first group minus second)", 0.0, False),
    "risk-ratio": ("risk ratio (first group over second), log scale", 1.0, True),
    "odds-ratio": ("odds ratio (first group over second), log scale", 1.0, True),
    "proportion": ("proportion with the event", None, False),
}


def proportions_name(outcome: str) -> str:
    """The relative path of an outcome's proportions figure, safe as a file name.

    An outcome name made of letters, digits, ``_``, ``.`` and ``-`` is used as it is; any other
    name is reduced to those characters and followed by 8 hex digits of its SHA-256, so that two
    names never share a file.
    """
    return f"{FIGURES}/proportions-{safe_stem(outcome, 'outcome')}.png"


def has_estimates(results: Mapping[str, Any]) -> bool:
    """Whether any hypothesis has an estimate, i.e. whether ``differences.png`` is drawn."""
    return bool(_estimate_rows(results))


def has_graph(results: Mapping[str, Any]) -> bool:
    """Whether results.json holds a graphical procedure, i.e. whether its graph is drawn."""
    value = results.get("multiplicity")
    return isinstance(value, Mapping) and value.get("method") == "graphical"


def write_figures(results: dict[str, Any], folder: Path, *,
                  svgs_later: list[Callable[[], None]] | None = None) -> list[Path]:
    """Write the report's PNG figures into ``folder / "figures"`` and return their paths.

    One ``proportions-<outcome>.png`` per outcome in ``results["groups"]`` (in that order), then
    ``differences.png`` if any hypothesis has an estimate, one ``tipping-<id>.png`` per
    tipping-point analysis with a missing outcome, then ``multiplicity-graph.png`` for the
    graphical procedure. A blinded rehearsal gets none of the group-level figures. A
    malformed ``results`` raises :class:`prespec.errors.PrespecError` naming the key; files
    are written under a temporary name and renamed into place, so none is left half-written.

    ``svgs_later``: the SVGs are not written here; a call that writes them (each from its
    figure, in the same style, to the same bytes) is appended to the list instead. A report
    writes them while its notebook runs, which reads only the PNGs.
    """
    results = dict(mapping(results, ""))
    blinded = is_rehearsal(results)  # a rehearsal draws no group-level figure
    groups = {} if blinded else mapping(results.get("groups") or {}, "groups")
    jobs: list[tuple[str, Any]] = [
        (proportions_name(text(name, "groups")), _ProportionsJob(str(name), rows))
        for name, rows in groups.items()
    ]
    names = [name for name, _ in jobs]
    if len(set(names)) != len(names):
        raise PrespecError("results.json: groups: two outcomes map to the same figure name")
    rows = [] if blinded else _estimate_rows(results)
    if rows:
        jobs.append((DIFFERENCES, _DifferencesJob(rows)))
    tipping = [(tipping_name(g.hid), TippingJob(g)) for g in tipping_grids(results) if drawn(g)]
    if len({name for name, _ in tipping}) != len(tipping):
        raise PrespecError("results.json: hypotheses: two tipping-point analyses of one "
                           "hypothesis, or two ids that map to the same figure name")
    jobs += tipping
    from prespec.report.looks import looks_jobs

    jobs += looks_jobs(results)
    from prespec.report.bayes import bayes_jobs

    jobs += bayes_jobs(results)
    if not blinded:
        from prespec.report.flow import flow_jobs

        jobs += flow_jobs(results)
        from prespec.report.families import family_jobs

        jobs += family_jobs(results)
    if has_graph(results):
        jobs.append((MULTIPLICITY_GRAPH, _graph_job(mapping(results["multiplicity"],
                                                            "multiplicity"))))

    written: list[Path] = []
    out_dir = Path(folder) / FIGURES
    with _figure_style():
        figures = [(name, job.draw()) for name, job in jobs]
        if figures:
            out_dir.mkdir(parents=True, exist_ok=True)
        for name, fig in figures:
            path = Path(folder) / name
            write_png(fig, path)
            if svgs_later is None:
                write_svg(fig, path)
            else:
                svgs_later.append(functools.partial(_svg_in_style, fig, path))
            written.append(path)
    return written


def _figure_style() -> contextlib.ExitStack:
    """matplotlib's default style with the report's settings (:data:`canvas.RC`)."""
    import matplotlib
    import matplotlib.style

    stack = contextlib.ExitStack()
    stack.enter_context(matplotlib.style.context("default"))
    stack.enter_context(matplotlib.rc_context(RC))
    return stack


def _svg_in_style(fig: Figure, path: Path) -> None:
    with _figure_style():  # the SVG reads its settings (fonts as paths, ids) as it is saved
        write_svg(fig, path)


def _interval_line(
    ax: Axes, y: float, low: float | None, high: float | None, value: float | None
) -> None:
    """Draw an interval; a missing limit is drawn as far as the estimate only."""
    lo = low if low is not None else value
    hi = high if high is not None else value
    if lo is not None and hi is not None:
        ax.hlines(y, lo, hi, color=LINE, linewidth=1.6)
        for end in (low, high):
            if end is not None:
                ax.vlines(end, y - 0.12, y + 0.12, color=LINE, linewidth=1.2)


@dataclass(frozen=True)
class _ProportionsJob:
    """One outcome's proportions per group."""

    outcome: str
    rows: object

    def draw(self) -> Figure:
        base = f"groups.{self.outcome}"
        entries = []
        for i, raw in enumerate(items(self.rows, base)):
            row = mapping(raw, f"{base}[{i}]")
            where = f"{base}[{i}]"
            low, high = pair(row.get("ci"), f"{where}.ci")
            entries.append(
                (
                    text(row.get("group"), f"{where}.group"),
                    number(row.get("events"), f"{where}.events"),
                    number(row.get("total"), f"{where}.total"),
                    number(row.get("proportion"), f"{where}.proportion"),
                    low,
                    high,
                    number(row.get("level"), f"{where}.level"),
                    text(row.get("ci_method"), f"{where}.ci_method", default=""),
                )
            )
        names = [wrapped(e[0], 24) for e in entries]
        lines = max([n.count("\n") + 1 for n in names], default=1)
        step = max(1.0, 0.6 * lines)  # a group whose name takes several lines gets room
        fig = new_figure(1.4 + 0.42 * step * max(len(entries), 1))
        ax = fig.add_subplot()
        ys = [step * i for i in range(len(entries))][::-1]
        right: list[str] = []
        methods: set[str] = set()
        for y, (_, events, total, prop, low, high, level, method) in zip(ys, entries, strict=True):
            _interval_line(ax, y, low, high, prop)
            if prop is not None:
                ax.plot([prop], [y], marker="o", markersize=7, color=INK, linestyle="none",
                        clip_on=False, zorder=3)
            right.append(
                f"{fmt_count(events)}/{fmt_count(total)}   {fmt_estimate(prop)} "
                f"{fmt_interval(low, high)}"
            )
            if method or level is not None:
                methods.add(f"{fmt_level(level)} {method}".strip())
        ax.set_yticks(ys, names)
        ax.tick_params(axis="y", length=0)
        right_labels(ax, ys, right)
        upper = max([v for e in entries for v in (e[3], e[5]) if v is not None], default=1.0)
        ax.set_xlim(0.0, min(1.0, max(0.02, upper * 1.15)))
        ax.set_ylim(-0.7 * step, step * (len(entries) - 1) + 0.7 * step)
        ax.grid(axis="x", color="#dddddd", linewidth=0.8)
        ax.set_axisbelow(True)
        ax.set_xlabel("proportion with the event")
        ax.set_title(wrapped(f"Outcome: {self.outcome}", 70), loc="left", color=INK)
        intervals = ", ".join(sorted(methods)) or "interval method not given"
        fig.supxlabel(f"Intervals: {intervals}. Right: events/total, proportion (limits).",
                      x=0.01, ha="left", fontsize=8, color=LINE)
        if not entries:
            ax.text(0.5, 0.5, "no groups in results.json", transform=ax.transAxes,
                    ha="center", va="center", color=LINE)
        return fig


#: How the estimates figure draws each kind of result: (legend label, marker, face colour,
#: line colour, interval line style). Bayesian results are drawn as a diamond in their kind's
#: colours.
KINDS: dict[str, tuple[str, str, str, str, str]] = {
    "confirmatory": ("confirmatory (primary or secondary)", "s", INK, INK, "solid"),
    "follow-up": ("follow-up, tested (gate open)", "^", INK, INK, "solid"),
    "not-tested": ("follow-up, not tested (gate closed)", "x", GUIDE, GUIDE, "dashed"),
    "exploratory": ("exploratory (nominal p, no claim)", "o", "white", LINE, "solid"),
}
@dataclass(frozen=True)
class _EstimateRow:
    label: str
    measure: str
    value: float | None
    low: float | None
    high: float | None
    level: float | None
    exploratory: bool
    margins: tuple[float, ...]
    null_rate: float | None = None
    bayesian: bool = False  # a posterior mean with a credible interval
    kind: str = "confirmatory"  # a key of KINDS
    favourable: str | None = None  # the outcome's favourable value (event, no-event), if known


def result_kind(hyp: Mapping[str, Any]) -> str:
    """``confirmatory``, ``follow-up`` (tested), ``not-tested`` (behind a closed gate) or
    ``exploratory``: how a result is drawn and named in the estimates figure."""
    if hyp.get("gate") == "closed":
        return "not-tested"
    if hyp.get("role") == "exploratory":
        return "exploratory"
    return "follow-up" if hyp.get("parent") is not None else "confirmatory"


def _favourable(results: Mapping[str, Any], outcome: Any) -> str | None:
    """The outcome's favourable value from the flow block (None before it was written)."""
    flow = results.get("flow")
    if not isinstance(flow, Mapping) or not isinstance(flow.get("outcomes"), Mapping):
        return None
    entry = flow["outcomes"].get(outcome)
    value = entry.get("favourable") if isinstance(entry, Mapping) else None
    return value if value in ("event", "no-event") else None


def _estimate_rows(results: Mapping[str, Any]) -> list[_EstimateRow]:
    rows: list[_EstimateRow] = []
    for i, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{i}]")
        hid = text(hyp.get("id"), f"hypotheses[{i}].id")
        where = f"hypotheses.{hid}"
        if hyp.get("estimate") is None:
            continue
        est = mapping(hyp["estimate"], f"{where}.estimate")
        low, high = pair(est.get("ci"), f"{where}.estimate.ci")
        role = text(hyp.get("role"), f"{where}.role", default="")
        title = text(hyp.get("title"), f"{where}.title", default="")
        margin = hyp.get("margin")
        margins = tuple(
            m for m in (
                (number(margin, f"{where}.margin"),) if not isinstance(margin, list)
                else [number(v, f"{where}.margin[{j}]") for j, v in enumerate(margin)]
            ) if m is not None
        )
        bayesian = hyp.get("test") == "posterior-probability"
        kind = result_kind(hyp)
        kinds = [k for k, on in (("exploratory", kind == "exploratory"),
                                 ("follow-up", kind == "follow-up"),
                                 ("not tested: gate closed", kind == "not-tested"),
                                 ("Bayesian", bayesian)) if on]
        head = f"{hid} ({', '.join(kinds)})" if kinds else hid
        rows.append(
            _EstimateRow(
                label="\n".join(wrapped(part) for part in (head, title) if part),
                measure=text(est.get("measure"), f"{where}.estimate.measure", default="estimate"),
                value=number(est.get("value"), f"{where}.estimate.value"),
                low=low,
                high=high,
                level=number(est.get("level"), f"{where}.estimate.level"),
                exploratory=role == "exploratory",
                margins=margins,
                null_rate=number(hyp.get("null_rate"), f"{where}.null_rate"),
                bayesian=bayesian,
                kind=kind,
                favourable=_favourable(results, hyp.get("outcome")),
            )
        )
    return rows


def _log_ticks(lo: float, hi: float, marks: Sequence[float]) -> list[float]:
    """Tick positions on a log axis from ``lo`` to ``hi``: the marks first, then round values.

    The marks (the value of no difference, then the margins) are placed first; round values
    (1, 2 and 5 per decade; only 1 over many decades, finer steps over less than one) fill
    in. A tick closer than 8% of the axis to one already placed is left out, so that no two
    labels overlap.
    """
    decades = math.log10(hi / lo)
    if decades > 2.5:
        steps: tuple[float, ...] = (1.0,)
    elif decades > 1.0:
        steps = (1.0, 2.0, 5.0)
    else:
        steps = (1.0, 1.5, 2.0, 3.0, 5.0, 7.0)
    rounds = sorted(
        round(step * 10.0**k, 12)
        for k in range(math.floor(math.log10(lo)) - 1, math.ceil(math.log10(hi)) + 1)
        for step in steps
    )
    placed: list[float] = []
    for tick in [*marks, *rounds]:
        if lo <= tick <= hi and all(
            abs(math.log10(tick / p)) >= 0.08 * decades for p in placed
        ):
            placed.append(tick)
    return sorted(placed)


def _estimate_label(row: _EstimateRow) -> str:
    if row.value is None and row.low is None and row.high is None:
        return "not computable"
    limits = fmt_interval(row.low, row.high)
    if row.level is not None:
        limits = f"{limits} {fmt_level(row.level)}"
    if row.bayesian:
        limits += " credible"
    return f"{fmt_estimate(row.value)}\n{limits}"


def direction(measure: str, rows: Sequence[_EstimateRow]) -> str:
    """The line under a panel's axis saying which side favours whom: by the outcomes'
    favourable value when every row of the panel knows it and they agree, else by the
    events alone (which side has fewer events in the first group named)."""
    if measure not in _MEASURES:
        return ""  # a measure whose sign this figure does not know: no direction claimed
    known = {r.favourable for r in rows}
    favourable = known.pop() if len(known) == 1 else None
    if measure == "proportion":
        if favourable is None:
            return ("\u2190 fewer events than the null rate   |   "
                    "more events than the null rate \u2192")
        better = "fewer" if favourable == "no-event" else "more"
        left, right = ("favourable", "unfavourable") if better == "fewer" else (
            "unfavourable", "favourable")
        return (f"\u2190 {left} (fewer events than the null rate)   |   "
                f"{right} (more events) \u2192")
    if favourable is None:
        return ("\u2190 fewer events in the first group named   |   "
                "more events in the first group named \u2192")
    first, second = "favours the first group named", "favours the second group named"
    left, right = (first, second) if favourable == "no-event" else (second, first)
    return f"\u2190 {left}   |   {right} \u2192"


def spread_ticks(fig: Figure, axes: Sequence[Axes]) -> None:
    """Thin the x-axis ticks of ``axes`` until no two labels overlap (nor come within six
    points), measured with the figure's renderer at its final layout: at any data range,
    including a tiny difference whose labels (−0.10, −0.05) would otherwise touch. One layout
    per round for all the axes; every other tick is dropped from an axis whose labels touch."""
    from matplotlib.ticker import FixedLocator

    renderer = fig.canvas.get_renderer()
    gap = 6.0 * fig.dpi / 72.0
    for _ in range(8):
        fig.draw_without_rendering()
        crowded = False
        for ax in axes:
            lo, hi = sorted(ax.get_xlim())
            boxes = sorted(((t.label1.get_window_extent(renderer), t.get_loc())
                            for t in ax.xaxis.get_major_ticks()
                            if lo <= t.get_loc() <= hi and t.label1.get_visible()
                            and t.label1.get_text()), key=lambda b: b[0].x0)
            if all(a.x1 + gap <= b.x0 for (a, _), (b, _) in itertools.pairwise(boxes)):
                continue
            crowded = True
            locs = [loc for _, loc in boxes]
            ax.xaxis.set_major_locator(FixedLocator(locs[::2] if len(locs) > 2 else locs[:1]))
        if not crowded:
            return


@dataclass(frozen=True)
class _DifferencesJob:
    """The forest plot of every hypothesis's estimate, one panel per measure."""

    rows: list[_EstimateRow]

    def draw(self) -> Figure:
        from matplotlib.lines import Line2D

        measures = list(dict.fromkeys(r.measure for r in self.rows))
        panels = [[r for r in self.rows if r.measure == m] for m in measures]
        spans = [_row_positions(p)[1] for p in panels]
        heights = [0.17 * span + 1.3 for span in spans]  # 0.17 in a line of text
        fig = new_figure(0.9 + sum(heights))
        axes = fig.subplots(len(panels), 1, squeeze=False, height_ratios=heights)[:, 0]
        any_margin = any_rate = any_null = False
        for ax, measure, rows in zip(axes, measures, panels, strict=True):
            drew_margin, drew_rate, drew_null = self._panel(ax, measure, rows)
            any_margin |= drew_margin
            any_rate |= drew_rate
            any_null |= drew_null
        handles = []
        for kind, (label, marker, face, line, style) in KINDS.items():
            if any(r.kind == kind for r in self.rows):
                handles.append(Line2D([], [], marker=marker, color=line, markerfacecolor=face,
                                      markeredgecolor=line, linestyle=style, linewidth=1.4,
                                      markersize=7, label=label))
        if any_null:
            handles.append(Line2D([], [], color=GUIDE, linewidth=1.0,
                                  label="no difference (0, or 1 for a ratio)"))
        if any_margin:
            handles.append(Line2D([], [], color=_MARGIN, linestyle="--", label="margin"))
        if any_rate:
            handles.append(Line2D([], [], color=_NULL_RATE, linestyle=":", linewidth=1.6,
                                  label="null rate (H0)"))
        if any(r.bayesian for r in self.rows):  # a diamond: a credible interval
            handles.append(Line2D([], [], marker="D", color=INK, linestyle="none",
                                  label="Bayesian: posterior mean, credible interval"))
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False,
                   fontsize=9)
        spread_ticks(fig, list(axes))
        return fig

    @staticmethod
    def _panel(ax: Axes, measure: str, rows: list[_EstimateRow]) -> tuple[bool, bool, bool]:
        """Draw one measure's panel; whether it drew a margin, a null rate, a null line."""
        label, null, log = _MEASURES.get(measure, (measure, None, False))
        ys, span = _row_positions(rows)
        values: list[float] = []
        drew_margin = drew_rate = False
        for y, row in zip(ys, rows, strict=True):
            shown = [v for v in (row.value, row.low, row.high) if v is not None]
            if log and any(v <= 0 for v in shown):
                continue  # not drawable on a log scale; the numbers are still given on the right
            values.extend(shown)
            _, marker, face, line, style = KINDS[row.kind]
            _kind_interval(ax, y, row, line, style)
            if row.value is not None:
                ax.plot([row.value], [y], marker="D" if row.bayesian else marker, markersize=7,
                        color=line, markerfacecolor=face, markeredgecolor=line,
                        linestyle="none", zorder=3)
            for m in row.margins:
                if not log or m > 0:
                    ax.vlines(m, y - 0.9, y + 0.9, color=_MARGIN, linestyle="--", linewidth=1.2)
                    values.append(m)
                    drew_margin = True
            if row.null_rate is not None and (not log or row.null_rate > 0):
                ax.vlines(row.null_rate, y - 1.0, y + 1.0, color=_NULL_RATE, linestyle=":",
                          linewidth=1.6)
                values.append(row.null_rate)
                drew_rate = True
        if null is not None:
            ax.axvline(null, color=GUIDE, linewidth=1.0, zorder=0)
            values.append(null)
        if log and values:
            from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

            lo, hi = min(values), max(values)
            factor = max((hi / lo) ** 0.08, 1.25)
            lo, hi = lo / factor, hi * factor
            ax.set_xscale("log")
            marks = [m for r in rows for m in r.margins if m > 0]
            ticks = _log_ticks(lo, hi, [*([null] if null is not None else []), *marks])
            ax.xaxis.set_major_locator(FixedLocator(ticks))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
            ax.xaxis.set_minor_formatter(NullFormatter())
            ax.set_xlim(lo, hi)
        elif values:
            from matplotlib.ticker import MaxNLocator

            lo, hi = min(values), max(values)
            pad = (hi - lo) * 0.08 or 0.05
            lo, hi = lo - pad, hi + pad
            if measure == "proportion":  # a proportion lies in [0, 1]
                lo, hi = max(lo, 0.0), min(hi, 1.0)
            ax.set_xlim(lo, hi)
            ax.xaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]))
        ax.set_yticks(ys, [r.label for r in rows])
        ax.tick_params(axis="y", length=0)
        ax.set_ylim(-0.5, span - 0.5)
        right_labels(ax, ys, [_estimate_label(r) for r in rows])
        ax.grid(axis="x", color="#eeeeee", linewidth=0.8)
        ax.set_axisbelow(True)
        ax.set_xlabel("\n".join(line for line in (label, direction(measure, rows)) if line))
        return drew_margin, drew_rate, null is not None


def _row_positions(rows: Sequence[_EstimateRow]) -> tuple[list[float], float]:
    """Each row's centre, in lines of text from the bottom (the first row on top), and the
    panel's height in lines: a row takes as many lines as its label (at least two), plus one."""
    sizes = [max(r.label.count("\n") + 1, 2) + 1 for r in rows]
    total = float(sum(sizes))
    ys, top = [], total
    for size in sizes:
        ys.append(top - size / 2.0 - 0.5)
        top -= size
    return ys, total


def _kind_interval(ax: Axes, y: float, row: _EstimateRow, color: str, style: str) -> None:
    """An interval in its kind's colour and line style; a missing limit drawn as far as the
    estimate only."""
    lo = row.low if row.low is not None else row.value
    hi = row.high if row.high is not None else row.value
    if lo is not None and hi is not None:
        ax.hlines(y, lo, hi, color=color, linewidth=1.6, linestyles=style)
        for end in (row.low, row.high):
            if end is not None:
                ax.vlines(end, y - 0.3, y + 0.3, color=color, linewidth=1.2)


def _graph_job(value: Mapping[str, Any]) -> _GraphJob:
    """The nodes (weights order, then any node only a transition names) and the arrows."""
    weights = mapping(value.get("weights") or {}, "multiplicity.weights")
    transitions = mapping(value.get("transitions") or {}, "multiplicity.transitions")
    nodes: dict[str, float | None] = {
        str(k): number(w, f"multiplicity.weights.{k}") for k, w in weights.items()
    }
    edges: list[tuple[str, str, float]] = []
    for source, targets in transitions.items():
        at = f"multiplicity.transitions.{source}"
        for target, w in mapping(targets, at).items():
            weight = number(w, f"{at}.{target}")
            nodes.setdefault(str(source), None)
            nodes.setdefault(str(target), None)
            if weight:  # a zero weight is no transition
                edges.append((str(source), str(target), weight))
    return _GraphJob(tuple(nodes.items()), tuple(edges))


@dataclass(frozen=True)
class _GraphJob:
    """The graph of the graphical procedure: nodes on a circle, arrows with their weights."""

    nodes: tuple[tuple[str, float | None], ...]
    edges: tuple[tuple[str, str, float], ...]

    def positions(self) -> dict[str, tuple[float, float]]:
        """Node centres on the unit circle, the first at the top, then clockwise."""
        n = len(self.nodes)
        if n == 1:
            return {self.nodes[0][0]: (0.0, 0.0)}
        return {
            name: (math.cos(math.pi / 2 - 2 * math.pi * i / n),
                   math.sin(math.pi / 2 - 2 * math.pi * i / n))
            for i, (name, _) in enumerate(self.nodes)
        }

    def draw(self) -> Figure:
        from matplotlib.patches import Circle, FancyArrowPatch

        from prespec.report.values import fmt_weight

        n = len(self.nodes)
        fig = new_figure(6.0)
        ax = fig.add_subplot()
        ax.set_aspect("equal")
        ax.set_xlim(-1.9, 1.9)
        ax.set_ylim(-1.35, 1.35)
        ax.axis("off")
        pos = self.positions()
        radius = 0.26 if n <= 2 else min(0.26, 0.8 * math.sin(math.pi / n))
        for name, weight in self.nodes:
            x, y = pos[name]
            ax.add_patch(Circle((x, y), radius, facecolor="#f3f3f3", edgecolor=INK,
                                linewidth=1.4, zorder=2))
            ax.text(x, y + radius * 0.22, shorten(name, 12), ha="center", va="center",
                    fontsize=10, fontweight="bold", color=INK, zorder=3)
            ax.text(x, y - radius * 0.38, f"w = {fmt_weight(weight)}", ha="center",
                    va="center", fontsize=9, color=INK, zorder=3)
        offset = radius * 0.32
        for source, target, weight in self.edges:
            (x1, y1), (x2, y2) = pos[source], pos[target]
            length = math.hypot(x2 - x1, y2 - y1)
            if length == 0:
                continue  # a self-transition cannot be drawn (and the plan forbids it)
            ux, uy = (x2 - x1) / length, (y2 - y1) / length
            nx, ny = uy, -ux  # to the right of the direction of travel
            start = (x1 + ux * radius + nx * offset, y1 + uy * radius + ny * offset)
            end = (x2 - ux * radius + nx * offset, y2 - uy * radius + ny * offset)
            ax.add_patch(FancyArrowPatch(start, end, arrowstyle="-|>", mutation_scale=16,
                                         color=LINE, linewidth=1.4, shrinkA=0, shrinkB=0,
                                         zorder=1))
            t = 0.35  # near the source, so that labels of crossing arrows do not meet
            lx = start[0] + (end[0] - start[0]) * t + nx * 0.09
            ly = start[1] + (end[1] - start[1]) * t + ny * 0.09
            ax.text(lx, ly, fmt_weight(weight), ha="center", va="center", fontsize=9,
                    color=INK, zorder=4,
                    bbox={"boxstyle": "round,pad=0.15", "facecolor": "white",
                          "edgecolor": "none"})
        ax.set_title("Graphical procedure: initial weights (w) and transition weights (arrows)",
                     loc="left", color=INK)
        fig.supxlabel("After Bretz et al. (Statistics in Medicine 2009). When a hypothesis is "
                      "rejected, its alpha passes along its arrows.",
                      x=0.01, ha="left", fontsize=8, color=LINE)
        if not self.nodes:
            ax.text(0.0, 0.0, "no weights in results.json", ha="center", va="center",
                    color=LINE)
        return fig
