"""What every figure of the report shares: the canvas, the plain style, safe names, saving.

Figures are built on ``matplotlib.figure.Figure`` with an explicit Agg canvas (no pyplot
state, no global backend) under matplotlib's default style with the settings of :data:`RC`,
and saved without a time stamp or creator, so that the same results give the same bytes.
"""

from __future__ import annotations

import hashlib
import os
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prespec.common.shown import visible

if TYPE_CHECKING:
    from matplotlib.figure import Figure

FIGURES = "figures"
DPI = 100
WIDTH = 8.0  # inches
INK = "#222222"
LINE = "#555555"
GUIDE = "#999999"
LABEL_CHARS = 48

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


def save_png(fig: Figure, path: Path) -> None:
    """Save as PNG under a temporary name, then rename into place; no metadata stamp."""
    tmp = path.with_name(f".{path.name}.partial")
    try:
        fig.savefig(tmp, format="png", dpi=DPI, metadata={"Software": None})
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def shorten(label: str, limit: int = LABEL_CHARS) -> str:
    """A label on one line, control characters visible, cut with ``…`` past ``limit``."""
    label = " ".join(visible(label).split())
    return label if len(label) <= limit else label[: limit - 1] + "…"
