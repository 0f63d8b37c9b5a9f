"""The tipping-point grid of a hypothesis: read from ``results.json``, drawn as a decision map.

A tipping-point analysis (Yan, Lee and Li, Journal of Biopharmaceutical Statistics 2009,
"Missing data handling methods in medical device clinical trials"; cited from memory) completes the two groups'
missing outcomes in every possible way: i events among the m1 missing outcomes of the first
group and j among the m2 of the second, each completed table tested as the plan says. The
statistics room computes the p-value of every cell; this module only reads them, decides each
cell at the level ``alpha`` that results.json gives (reject when p ≤ alpha, as every decision
of the report), and draws ``figures/tipping-<id>.png``: a heat map of the two decisions in a
colour-blind-safe blue and orange, the boundary where the decision changes as a line along the
cell edges between the two, and the point of the complete-case rates marked with a cross.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from prespec.errors import PrespecError
from prespec.report.canvas import FIGURES, INK, LINE, new_figure, safe_stem, shorten
from prespec.report.values import fmt_count, fmt_weight, items, mapping, number, text

if TYPE_CHECKING:
    from matplotlib.figure import Figure

#: Blue for "reject H0", orange for "do not reject H0": a pair that stays apart under the
#: common forms of colour blindness (blue against orange; different lightness too).
REJECT_COLOUR = "#4a90d0"
KEEP_COLOUR = "#f5b35c"
#: A cell whose p-value is not computable.
NONE_COLOUR = "#ffffff"
BOUNDARY_COLOUR = "#111111"

#: Up to these many rows and columns each cell carries its p-value; up to 40, a white edge.
_LABELLED_ROWS = 16
_LABELLED_COLUMNS = 12
_GRIDDED_CELLS = 40
#: The point of the complete-case rates: a ring, so that a cell's p-value shows through.
_OBSERVED: dict[str, Any] = {"marker": "o", "markersize": 13, "markerfacecolor": "none",
                             "markeredgecolor": INK, "markeredgewidth": 2.2}


def tipping_name(hid: str) -> str:
    """The relative path of a hypothesis's tipping-point figure, safe as a file name."""
    return f"{FIGURES}/tipping-{safe_stem(hid, 'hypothesis')}.png"


@dataclass(frozen=True)
class TippingGrid:
    """One tipping-point analysis as results.json gives it (nothing recomputed)."""

    hid: str
    groups: tuple[str, str]
    missing: tuple[int, int]
    complete_events: tuple[float | None, float | None]
    complete_totals: tuple[float | None, float | None]
    alpha: float | None
    test: str
    p_values: tuple[tuple[float | None, ...], ...]
    observed: tuple[float | None, float | None]
    primary_rejects: bool | None
    cells_changing: int | None
    boundary: tuple[tuple[int, int | None], ...]
    cells_not_computable: int | None = None
    cells_switched: int | None = None

    @property
    def cells(self) -> int:
        """The number of combinations, (m1 + 1)(m2 + 1)."""
        return (self.missing[0] + 1) * (self.missing[1] + 1)

    def decisions(self) -> list[list[bool | None]]:
        """Each cell's decision at ``alpha``: True to reject H0, None where p is not given."""
        alpha = self.alpha
        return [
            [None if p is None or alpha is None else p <= alpha for p in row]
            for row in self.p_values
        ]


def _whole(value: object, path: str) -> int:
    found = number(value, path)
    if found is None or found < 0 or found != int(found):
        raise PrespecError(f"results.json: {path}: expected a whole number ≥ 0, found {value!r}")
    return int(found)


def _two(value: object, path: str) -> Sequence[Any]:
    seq = items(value, path)
    if len(seq) != 2:
        raise PrespecError(f"results.json: {path}: expected two values, found {value!r}"[:200])
    return seq


def _flag(value: object, path: str) -> bool | None:
    if value is not None and not isinstance(value, bool):
        raise PrespecError(f"results.json: {path}: expected true, false or null, found {value!r}")
    return value


def read_grid(entry: Mapping[str, Any], where: str, hid: str) -> TippingGrid:
    """A tipping-point entry of ``hypotheses.<id>.sensitivity``, checked for shape.

    ``p_values`` must hold m1 + 1 rows of m2 + 1 numbers or nulls; anything else is a one-line
    error naming the key.
    """
    groups = _two(entry.get("groups"), f"{where}.groups")
    missing = _two(entry.get("missing"), f"{where}.missing")
    m1, m2 = _whole(missing[0], f"{where}.missing[0]"), _whole(missing[1], f"{where}.missing[1]")
    complete = mapping(entry.get("complete") or {}, f"{where}.complete")
    events = _two(complete.get("events"), f"{where}.complete.events")
    totals = _two(complete.get("totals"), f"{where}.complete.totals")
    raw_rows = items(entry.get("p_values"), f"{where}.p_values")
    if len(raw_rows) != m1 + 1:
        raise PrespecError(
            f"results.json: {where}.p_values: expected {m1 + 1} rows (0 to {m1} events among "
            f"the missing of the first group), found {len(raw_rows)}"
        )
    rows: list[tuple[float | None, ...]] = []
    for i, raw in enumerate(raw_rows):
        row = items(raw, f"{where}.p_values[{i}]")
        if len(row) != m2 + 1:
            raise PrespecError(
                f"results.json: {where}.p_values[{i}]: expected {m2 + 1} numbers, "
                f"found {len(row)}"
            )
        rows.append(tuple(number(p, f"{where}.p_values[{i}][{j}]") for j, p in enumerate(row)))
    point = entry.get("observed_point")
    observed = (None, None) if point is None else tuple(
        number(v, f"{where}.observed_point[{k}]")
        for k, v in enumerate(_two(point, f"{where}.observed_point"))
    )
    boundary: list[tuple[int, int | None]] = []
    for k, raw in enumerate(items(entry.get("boundary"), f"{where}.boundary")):
        cell = _two(raw, f"{where}.boundary[{k}]")
        i = _whole(cell[0], f"{where}.boundary[{k}][0]")
        j = None if cell[1] is None else _whole(cell[1], f"{where}.boundary[{k}][1]")
        if i > m1 or (j is not None and j > m2):
            raise PrespecError(
                f"results.json: {where}.boundary[{k}]: [{i}, {j}] lies outside the grid "
                f"0..{m1} × 0..{m2}"
            )
        boundary.append((i, j))
    changing = entry.get("cells_changing")
    return TippingGrid(
        hid=hid,
        groups=(text(groups[0], f"{where}.groups[0]"), text(groups[1], f"{where}.groups[1]")),
        missing=(m1, m2),
        complete_events=(number(events[0], f"{where}.complete.events[0]"),
                         number(events[1], f"{where}.complete.events[1]")),
        complete_totals=(number(totals[0], f"{where}.complete.totals[0]"),
                         number(totals[1], f"{where}.complete.totals[1]")),
        alpha=number(entry.get("alpha"), f"{where}.alpha"),
        test=text(entry.get("test"), f"{where}.test", default="the planned test"),
        p_values=tuple(rows),
        observed=(observed[0], observed[1]),
        primary_rejects=_flag(entry.get("primary_rejects"), f"{where}.primary_rejects"),
        cells_changing=None if changing is None else _whole(changing, f"{where}.cells_changing"),
        boundary=tuple(boundary),
        cells_not_computable=_count(entry, "cells_not_computable", where),
        cells_switched=_count(entry, "cells_switched", where),
    )


def _count(entry: Mapping[str, Any], key: str, where: str) -> int | None:
    value = entry.get(key)
    return None if value is None else _whole(value, f"{where}.{key}")


def is_rehearsal(results: Mapping[str, Any]) -> bool:
    """Whether results.json is a blinded rehearsal (which shows no group-level figure)."""
    return results.get("kind") == "rehearsal"


def tipping_grids(results: Mapping[str, Any]) -> list[TippingGrid]:
    """Every tipping-point analysis of a run, in hypothesis order (none in a rehearsal)."""
    if is_rehearsal(results):
        return []
    out = []
    for n, raw in enumerate(items(results.get("hypotheses"), "hypotheses")):
        hyp = mapping(raw, f"hypotheses[{n}]")
        hid = text(hyp.get("id"), f"hypotheses[{n}].id")
        where = f"hypotheses.{hid}.sensitivity"
        for k, entry in enumerate(items(hyp.get("sensitivity"), where)):
            entry = mapping(entry, f"{where}[{k}]")
            if entry.get("analysis") == "tipping-point":
                out.append(read_grid(entry, f"{where}[{k}]", hid))
    return out


def drawn(grid: TippingGrid) -> bool:
    """Whether the grid gets a figure: only when some outcome is missing (more than one cell)."""
    return grid.cells > 1


def decision_words(rejects: bool | None) -> str:
    """``reject H0``, ``do not reject H0`` or ``no decision``."""
    if rejects is None:
        return "no decision"
    return "reject H0" if rejects else "do not reject H0"


@dataclass(frozen=True)
class TippingJob:
    """The decision map of one tipping-point grid."""

    grid: TippingGrid

    def draw(self) -> Figure:
        import numpy as np
        from matplotlib.collections import LineCollection
        from matplotlib.colors import ListedColormap
        from matplotlib.lines import Line2D
        from matplotlib.patches import Patch
        from matplotlib.ticker import MaxNLocator

        g = self.grid
        m1, m2 = g.missing
        codes = np.array(
            [[2 if d is None else (1 if d else 0) for d in row] for row in g.decisions()],
            dtype=float,
        )
        rows, cols = m1 + 1, m2 + 1
        fig = new_figure(3.0 + min(3.4, 3.4 * rows / cols))
        ax = fig.add_subplot()
        cmap = ListedColormap([KEEP_COLOUR, REJECT_COLOUR, NONE_COLOUR])
        ax.imshow(codes, cmap=cmap, vmin=0, vmax=2, origin="lower", aspect="auto",
                  interpolation="nearest", extent=(-0.5, m2 + 0.5, -0.5, m1 + 0.5))
        if rows <= _GRIDDED_CELLS and cols <= _GRIDDED_CELLS:
            for x in range(cols + 1):
                ax.axvline(x - 0.5, color="white", linewidth=0.8)
            for y in range(rows + 1):
                ax.axhline(y - 0.5, color="white", linewidth=0.8)
        if rows <= _LABELLED_ROWS and cols <= _LABELLED_COLUMNS:
            for i, row in enumerate(g.p_values):
                for j, p in enumerate(row):
                    ax.text(j, i, cell_p(p), ha="center", va="center", fontsize=8, color=INK)
        segments = boundary_segments(g.decisions())
        if segments:
            ax.add_collection(LineCollection(segments, colors=BOUNDARY_COLOUR, linewidths=2.2,
                                             capstyle="projecting", zorder=4))
        oi, oj = g.observed
        if oi is not None and oj is not None:
            ax.plot([oj], [oi], **_OBSERVED, linestyle="none", zorder=5)
        ax.set_xlim(-0.5, m2 + 0.5)
        ax.set_ylim(-0.5, m1 + 0.5)
        for axis in (ax.xaxis, ax.yaxis):
            axis.set_major_locator(MaxNLocator(nbins=10, integer=True, min_n_ticks=1))
        ax.tick_params(length=3)
        a, b = (shorten(name, 30) for name in g.groups)
        ax.set_xlabel(f"j: events among the {m2:,} missing outcomes of {b}")
        ax.set_ylabel(f"i: events among the {m1:,} missing of {a}")
        ax.set_title(shorten(f"{g.hid}: tipping-point analysis, {g.test}", 80), loc="left",
                     color=INK)
        alpha = "alpha not given" if g.alpha is None else f"alpha {fmt_weight(g.alpha)}"
        handles: list[Any] = [
            Patch(facecolor=REJECT_COLOUR, edgecolor=LINE, label=f"reject H0 at {alpha}"),
            Patch(facecolor=KEEP_COLOUR, edgecolor=LINE, label="do not reject H0"),
        ]
        if (codes == 2).any():
            handles.append(Patch(facecolor=NONE_COLOUR, edgecolor=LINE, label="not computable"))
        if segments:
            handles.append(Line2D([], [], color=BOUNDARY_COLOUR, linewidth=2.2,
                                  label="where the decision\nchanges"))
        if oi is not None and oj is not None:
            handles.append(Line2D([], [], **_OBSERVED, linestyle="none",
                                  label="events expected at the\ncomplete-case rates"))
        fig.legend(handles=handles, loc="outside right upper", frameon=False, fontsize=9,
                   labelspacing=1.0)
        fig.supxlabel(self.caption(), x=0.01, ha="left", fontsize=8.5, color=INK)
        return fig

    def caption(self) -> str:
        """The caption: the primary decision, and what a cell is."""
        g = self.grid
        m1, m2 = g.missing
        changed = ""
        if g.cells_changing is not None and g.primary_rejects is not None:
            changed = (f" The decision differs from it in {g.cells_changing:,} of "
                       f"{g.cells:,} combinations.")
        lines = [
            f"Primary decision: {decision_words(g.primary_rejects)}.{changed}",
            (f"Each cell: the complete cases ({_counts(g, 0)}, {_counts(g, 1)}) with i of the "
             f"{m1:,} and j of the {m2:,} missing outcomes set to events, the rest to no event."),
        ]
        return "\n".join(textwrap.fill(line, 120) for line in lines)


def cell_p(p: float | None) -> str:
    """A p-value inside a cell: 3 decimals, ``<0.001`` below 0.001, ``—`` when null."""
    if p is None:
        return "—"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def _counts(g: TippingGrid, k: int) -> str:
    name = shorten(g.groups[k], 24)
    return f"{name} {fmt_count(g.complete_events[k])}/{fmt_count(g.complete_totals[k])}"


def boundary_segments(
    decisions: Sequence[Sequence[bool | None]],
) -> list[tuple[tuple[float, float], tuple[float, float]]]:
    """The cell edges between a cell that rejects H0 and a neighbour that does not.

    Cell (i, j) is centred on x = j, y = i; an edge is a pair of end points. Edges next to a
    cell whose p-value is not computable are left out. Drawn together they are the boundary
    where the conclusion changes, however many times it changes along a row or a column.
    """
    out: list[tuple[tuple[float, float], tuple[float, float]]] = []
    for i, row in enumerate(decisions):
        for j, here in enumerate(row):
            if here is None:
                continue
            right = row[j + 1] if j + 1 < len(row) else None
            if right is not None and right != here:
                out.append(((j + 0.5, i - 0.5), (j + 0.5, i + 0.5)))
            above = decisions[i + 1][j] if i + 1 < len(decisions) else None
            if above is not None and above != here:
                out.append(((j - 0.5, i + 0.5), (j + 0.5, i + 0.5)))
    return out
