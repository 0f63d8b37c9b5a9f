"""What every figure of the report shares: the canvas, the plain style, safe names, saving.

Figures are built on ``matplotlib.figure.Figure`` with an explicit Agg canvas (no pyplot
state, no global backend) under matplotlib's default style with the settings of :data:`RC`,
and saved without a time stamp or creator, so that the same results give the same bytes.
"""

from __future__ import annotations

import hashlib
import io
import os
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.common.shown import visible

if TYPE_CHECKING:
    from collections.abc import Sequence

    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

FIGURES = "figures"
DPI = 100  # the figure's own resolution, in which its layout is computed
PNG_DPI = 200  # the resolution of the PNG written (fit for paper); an SVG is written beside it
WIDTH = 8.0  # inches
INK = "#222222"
LINE = "#555555"
GUIDE = "#999999"
LABEL_CHARS = 48
LABEL_WIDTH = 30  # characters per line of a wrapped label

_SAFE_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,79}")

RC: dict[str, Any] = {
    "text.parse_math": False,  # titles come from user plans: a "$" is a dollar sign
    "font.family": "DejaVu Sans",
    "font.size": 10,
    "axes.edgecolor": LINE,
    "axes.labelcolor": INK,
    "xtick.color": INK,
    "ytick.color": INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "svg.hashsalt": "prespec",  # the SVG's element ids from this salt: the same bytes each time
    "svg.fonttype": "path",  # text as outlines: the SVG looks the same without the fonts
}


def safe_stem(name: str, fallback: str) -> str:
    """``name`` as a file-name stem: as it is when plain, else cleaned plus 8 hex digits.

    A name made of letters, digits, ``_``, ``.`` and ``-`` (not ``..``, not ending in ``.``)
    is used as it is; any other is reduced to those characters and followed by 8 hex digits
    of its SHA-256, so that two names never share a file.
    """
    if _SAFE_NAME.fullmatch(name) and ".." not in name and not name.endswith("."):
        return name
    cleaned = re.sub(r"[^A-Za-z0-9_-]+", "-", name).strip("-")[:60] or fallback
    digest = hashlib.sha256(name.encode("utf-8")).hexdigest()[:8]
    return f"{cleaned}-{digest}"


def new_figure(height: float, width: float = WIDTH) -> Figure:
    """A white figure with the constrained layout on its own Agg canvas."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=DPI, layout="constrained", facecolor="white")
    FigureCanvasAgg(fig)
    return fig


def svg_name(png: str | Path) -> str:
    """The SVG written beside a PNG figure: the same name with ``.svg``."""
    name = str(png)
    return (name.removesuffix(".png")) + ".svg"


_HASHED_ID = re.compile(r"\b([mph])([0-9a-f]{10})\b")


def stable_ids(svg: str) -> str:
    """The SVG with matplotlib's hashed element ids (markers ``m…``, clip paths ``p…``,
    hatches ``h…``; some hash an object's address, so they change from run to run) renamed
    in order of first appearance, ``p1``, ``m2`` …: the same figure gives the same bytes."""
    names: dict[str, str] = {}

    def rename(match: re.Match[str]) -> str:
        return names.setdefault(match.group(0), f"{match.group(1)}{len(names) + 1}")

    return _HASHED_ID.sub(rename, svg)


def write_png(fig: Figure, path: Path) -> None:
    """Save the figure as a PNG at :data:`PNG_DPI`, under a temporary name renamed into place,
    without a time stamp or creator; its layout is then fixed (the SVG written beside it by
    :func:`write_svg` is drawn with the layout of the PNG, not one computed again)."""
    tmp_png = path.with_name(f".{path.name}.partial")
    try:
        _fix_layout(fig, PNG_DPI)
        fig.savefig(tmp_png, format="png", dpi=PNG_DPI, metadata={"Software": None})
        os.replace(tmp_png, path)
    except BaseException:
        tmp_png.unlink(missing_ok=True)
        raise


def _fix_layout(fig: Figure, dpi: float) -> None:
    """Compute the figure's constrained layout once, at ``dpi``, and keep it.

    Given a layout engine, ``savefig`` computes the layout twice at the resolution it saves
    at (a draw that paints nothing, then the draw), and again for every later save; this is
    the same computation at the same resolution, made once, after which no save changes the
    layout (the SVG beside the PNG is drawn with the PNG's)."""
    engine = fig.get_layout_engine()
    if engine is None:
        return
    own = fig.dpi
    fig.dpi = dpi  # as savefig sets it while it draws
    try:
        engine.execute(fig)
    finally:
        fig.dpi = own
    fig.set_layout_engine("none")


def write_svg(fig: Figure, path: Path) -> None:
    """Save the figure, after :func:`write_png`, as an SVG beside the PNG (``svg_name``), under
    a temporary name renamed into place, without a date or creator and with stable ids."""
    svg = Path(svg_name(path))
    tmp_svg = svg.with_name(f".{svg.name}.partial")
    try:
        buffer = io.StringIO()
        fig.savefig(buffer, format="svg", metadata={"Date": None, "Creator": None})
        tmp_svg.write_text(stable_ids(buffer.getvalue()), encoding="utf-8")
        os.replace(tmp_svg, svg)
    except BaseException:
        tmp_svg.unlink(missing_ok=True)
        raise


def shorten(label: str, limit: int = LABEL_CHARS) -> str:
    """A label on one line, control characters visible, cut with ``…`` past ``limit``."""
    label = " ".join(visible(label).split())
    return label if len(label) <= limit else label[: limit - 1] + "…"


def wrapped(label: str, width: int = LABEL_WIDTH) -> str:
    """A label in full over as many lines as it needs: control characters visible, words kept
    whole where they fit, a word longer than a line broken across lines (nothing is cut)."""
    import textwrap

    flat = " ".join(visible(label).split())
    return "\n".join(textwrap.wrap(flat, width, break_long_words=True,
                                    break_on_hyphens=False)) or flat


def right_labels(ax: Axes, ticks: Sequence[float], labels: Sequence[str]) -> None:
    """Numbers beside each row, as tick labels of a right-hand axis (kept inside the layout)."""
    right = ax.secondary_yaxis("right")
    right.set_yticks(list(ticks), list(labels))
    right.tick_params(length=0)
    right.spines["right"].set_visible(False)
