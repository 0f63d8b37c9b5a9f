"""The report's figures, drawn from ``results.json`` with matplotlib's Agg canvas.

Two kinds of figure, both plain dot-and-interval charts:

- ``figures/proportions-<outcome>.png``: the proportion with the event in each group, with its
  interval, for one outcome;
- ``figures/differences.png``: every estimate of the hypotheses that have one, with its
  interval, one panel per measure; a vertical line at the value of no difference (0 for a risk
  difference, 1 for a ratio, drawn on a log scale); exploratory hypotheses drawn hollow and
  labelled as such.

Nothing is computed here: the points and limits are the ones in ``results.json``. The figures
are built on ``matplotlib.figure.Figure`` with an explicit Agg canvas (no pyplot state, no
global backend) under matplotlib's default style, and saved without a time stamp, so the same
results give the same bytes.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.errors import PrespecError
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

FIGURES = "figures"
DIFFERENCES = f"{FIGURES}/differences.png"

_SAFE_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,79}")
_DPI = 100
_WIDTH = 8.0  # inches
_INK = "#222222"
_LINE = "#555555"
_GUIDE = "#999999"
_MARGIN = "#8a5a00"
_LABEL_CHARS = 48

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
    if _SAFE_NAME.fullmatch(outcome) and ".." not in outcome and not outcome.endswith("."):
        stem = outcome
    else:
        cleaned = re.sub(r"[^A-Za-z0-9_-]+", "-", outcome).strip("-")[:60] or "outcome"
        digest = hashlib.sha256(outcome.encode("utf-8")).hexdigest()[:8]
        stem = f"{cleaned}-{digest}"
    return f"{FIGURES}/proportions-{stem}.png"


def has_estimates(results: Mapping[str, Any]) -> bool:
    """Whether any hypothesis has an estimate, i.e. whether ``differences.png`` is drawn."""
    return bool(_estimate_rows(results))


def write_figures(results: dict[str, Any], folder: Path) -> list[Path]:
    """Write the report's PNG figures into ``folder / "figures"`` and return their paths.

    One ``proportions-<outcome>.png`` per outcome in ``results["groups"]`` (in that order), then
    ``differences.png`` if any hypothesis has an estimate. A malformed ``results`` raises
    :class:`prespec.errors.PrespecError` naming the key; files are written under a temporary
    name and renamed into place, so none is left half-written.
    """
    import matplotlib
    import matplotlib.style

    results = dict(mapping(results, ""))
    groups = mapping(results.get("groups") or {}, "groups")
    jobs: list[tuple[str, Any]] = [
        (proportions_name(text(name, "groups")), _ProportionsJob(str(name), rows))
        for name, rows in groups.items()
    ]
    names = [name for name, _ in jobs]
    if len(set(names)) != len(names):
        raise PrespecError("results.json: groups: two outcomes map to the same figure name")
    rows = _estimate_rows(results)
    if rows:
        jobs.append((DIFFERENCES, _DifferencesJob(rows)))

    written: list[Path] = []
    out_dir = Path(folder) / FIGURES
    with matplotlib.style.context("default"), matplotlib.rc_context(_RC):
        figures = [(name, job.draw()) for name, job in jobs]
        if figures:
            out_dir.mkdir(parents=True, exist_ok=True)
        for name, fig in figures:
            path = Path(folder) / name
            _save(fig, path)
            written.append(path)
    return written


_RC: dict[str, Any] = {
    "text.parse_math": False,  # titles come from user plans: a "$" is a dollar sign
    "font.family": "DejaVu Sans",
    "font.size": 10,
    "axes.edgecolor": _LINE,
    "axes.labelcolor": _INK,
    "xtick.color": _INK,
    "ytick.color": _INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
}


def _save(fig: Figure, path: Path) -> None:
    tmp = path.with_name(f".{path.name}.partial")
    try:
        fig.savefig(tmp, format="png", dpi=_DPI, metadata={"Software": None})
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _new_figure(height: float) -> Figure:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(_WIDTH, height), dpi=_DPI, layout="constrained", facecolor="white")
    FigureCanvasAgg(fig)
    return fig


def _shorten(label: str, limit: int = _LABEL_CHARS) -> str:
    label = " ".join(label.split())
    return label if len(label) <= limit else label[: limit - 1] + "…"


def _right_labels(ax: Axes, ticks: Sequence[float], labels: Sequence[str]) -> None:
    """Numbers beside each row, as tick labels of a right-hand axis (kept inside the layout)."""
    right = ax.secondary_yaxis("right")
    right.set_yticks(list(ticks), list(labels))
    right.tick_params(length=0)
    right.spines["right"].set_visible(False)


def _interval_line(
    ax: Axes, y: float, low: float | None, high: float | None, value: float | None
) -> None:
    """Draw an interval; a missing limit is drawn as far as the estimate only."""
    lo = low if low is not None else value
    hi = high if high is not None else value
    if lo is not None and hi is not None:
        ax.hlines(y, lo, hi, color=_LINE, linewidth=1.6)
        for end in (low, high):
            if end is not None:
                ax.vlines(end, y - 0.12, y + 0.12, color=_LINE, linewidth=1.2)


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
        fig = _new_figure(1.4 + 0.42 * max(len(entries), 1))
        ax = fig.add_subplot()
        ys = list(range(len(entries)))[::-1]
        right: list[str] = []
        methods: set[str] = set()
        for y, (_, events, total, prop, low, high, level, method) in zip(ys, entries, strict=True):
            _interval_line(ax, y, low, high, prop)
            if prop is not None:
                ax.plot([prop], [y], marker="o", markersize=7, color=_INK, linestyle="none",
                        clip_on=False, zorder=3)
            right.append(
                f"{fmt_count(events)}/{fmt_count(total)}   {fmt_estimate(prop)} "
                f"{fmt_interval(low, high)}"
            )
            if method or level is not None:
                methods.add(f"{fmt_level(level)} {method}".strip())
        ax.set_yticks(ys, [_shorten(e[0]) for e in entries])
        ax.tick_params(axis="y", length=0)
        _right_labels(ax, ys, right)
        upper = max([v for e in entries for v in (e[3], e[5]) if v is not None], default=1.0)
        ax.set_xlim(0.0, min(1.0, max(0.02, upper * 1.15)))
        ax.set_ylim(-0.7, len(entries) - 0.3)
        ax.grid(axis="x", color="#dddddd", linewidth=0.8)
        ax.set_axisbelow(True)
        ax.set_xlabel("proportion with the event")
        ax.set_title(_shorten(f"Outcome: {self.outcome}", 70), loc="left", color=_INK)
        intervals = ", ".join(sorted(methods)) or "interval method not given"
        fig.supxlabel(f"Intervals: {intervals}. Right: events/total, proportion (limits).",
                      x=0.01, ha="left", fontsize=8, color=_LINE)
        if not entries:
            ax.text(0.5, 0.5, "no groups in results.json", transform=ax.transAxes,
                    ha="center", va="center", color=_LINE)
        return fig


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
        head = f"{hid} (exploratory)" if role == "exploratory" else hid
        rows.append(
            _EstimateRow(
                label=f"{_shorten(head, 34)}\n{_shorten(title, 34)}" if title else head,
                measure=text(est.get("measure"), f"{where}.estimate.measure", default="estimate"),
                value=number(est.get("value"), f"{where}.estimate.value"),
                low=low,
                high=high,
                level=number(est.get("level"), f"{where}.estimate.level"),
                exploratory=role == "exploratory",
                margins=margins,
            )
        )
    return rows


def _estimate_label(row: _EstimateRow) -> str:
    if row.value is None:
        return "not computable"
    limits = fmt_interval(row.low, row.high)
    if row.level is not None:
        limits = f"{limits} {fmt_level(row.level)}"
    return f"{fmt_estimate(row.value)}\n{limits}"


@dataclass(frozen=True)
class _DifferencesJob:
    """The forest plot of every hypothesis's estimate, one panel per measure."""

    rows: list[_EstimateRow]

    def draw(self) -> Figure:
        from matplotlib.lines import Line2D

        measures = list(dict.fromkeys(r.measure for r in self.rows))
        panels = [[r for r in self.rows if r.measure == m] for m in measures]
        heights = [1.4 * len(p) + 1.6 for p in panels]
        fig = _new_figure(0.7 + 0.4 * sum(heights))
        axes = fig.subplots(len(panels), 1, squeeze=False, height_ratios=heights)[:, 0]
        any_margin = False
        for ax, measure, rows in zip(axes, measures, panels, strict=True):
            any_margin |= self._panel(ax, measure, rows)
        handles = [
            Line2D([], [], marker="s", color=_INK, linestyle="none", label="primary or secondary"),
            Line2D([], [], marker="o", color=_INK, markerfacecolor="white", linestyle="none",
                   label="exploratory (nominal)"),
        ]
        if any_margin:
            handles.append(Line2D([], [], color=_MARGIN, linestyle="--", label="margin"))
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles),
                   frameon=False, fontsize=9)
        return fig

    @staticmethod
    def _panel(ax: Axes, measure: str, rows: list[_EstimateRow]) -> bool:
        label, null, log = _MEASURES.get(measure, (measure, None, False))
        ys = [1.4 * i for i in range(len(rows))][::-1]
        values: list[float] = []
        drew_margin = False
        for y, row in zip(ys, rows, strict=True):
            shown = [v for v in (row.value, row.low, row.high) if v is not None]
            if log and any(v <= 0 for v in shown):
                continue  # not drawable on a log scale; the numbers are still given on the right
            values.extend(shown)
            _interval_line(ax, y, row.low, row.high, row.value)
            if row.value is not None:
                face = "white" if row.exploratory else _INK
                marker = "o" if row.exploratory else "s"
                ax.plot([row.value], [y], marker=marker, markersize=7, color=_INK,
                        markerfacecolor=face, linestyle="none")
            for m in row.margins:
                if not log or m > 0:
                    ax.vlines(m, y - 0.35, y + 0.35, color=_MARGIN, linestyle="--", linewidth=1.2)
                    values.append(m)
                    drew_margin = True
        if null is not None:
            ax.axvline(null, color=_GUIDE, linewidth=1.0, zorder=0)
            values.append(null)
        if log and values:
            from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

            ax.set_xscale("log")
            decades = math.log10(max(values) / min(values))
            subs = (1.0,) if decades > 2.5 else (1.0, 2.0, 5.0)
            ax.xaxis.set_major_locator(LogLocator(base=10, subs=subs))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
            ax.xaxis.set_minor_formatter(NullFormatter())
        if values:
            lo, hi = min(values), max(values)
            if log:
                factor = max((hi / lo) ** 0.08, 1.25)
                ax.set_xlim(lo / factor, hi * factor)
            else:
                pad = (hi - lo) * 0.08 or 0.05
                ax.set_xlim(lo - pad, hi + pad)
        ax.set_yticks(ys, [r.label for r in rows])
        ax.tick_params(axis="y", length=0)
        ax.set_ylim(-0.8, 1.4 * (len(rows) - 1) + 0.8)
        _right_labels(ax, ys, [_estimate_label(r) for r in rows])
        ax.grid(axis="x", color="#eeeeee", linewidth=0.8)
        ax.set_axisbelow(True)
        ax.set_xlabel(label)
        return drew_margin
