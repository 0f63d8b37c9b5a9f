"""The report's HTML building blocks: escaping, tables, labelled fields and box styles.

Every string shown in the report passes through :func:`esc`: labels come from user plans and
data, so they are shown as text and never become markup, with control characters visible.
The section modules (:mod:`prespec.report.sections`, :mod:`prespec.report.blinded`,
:mod:`prespec.report.estimand`, :mod:`prespec.report.sensitivity`,
:mod:`prespec.report.design`) build their fragments from these.
"""

from __future__ import annotations

import html
import re
from collections.abc import Iterable, Mapping, Sequence

from prespec.common.shown import visible

BOX = "border:2px solid {c};background:{b};padding:0.6em 0.9em;margin:0.8em 0;"
CAUTION_STYLE = BOX.format(c="#7a4b00", b="#fff6e0")
DEPARTURE_STYLE = BOX.format(c="#8b1a1a", b="#fdecec")
QUIET_STYLE = BOX.format(c="#4d6b4d", b="#f0f6f0")
OVERRIDE_STYLE = BOX.format(c="#8b1a1a", b="#fff0d6")
DISAGREE_STYLE = BOX.format(c="#5a3d8a", b="#f3effa")
BLINDED_STYLE = BOX.format(c="#1f4e79", b="#eaf1f8")
ASIDE_STYLE = "margin:0.6em 0 0.8em 0;padding:0.2em 0 0.2em 1em;border-left:4px solid {c};"
BADGE_STYLE = (
    "display:inline-block;background:#8b1a1a;color:#ffffff;font-size:0.75em;"
    "font-weight:700;padding:0.05em 0.45em;border-radius:3px;vertical-align:middle;"
)
FOLLOWUP_STYLE = "margin:0.4em 0 1.2em 1.4em;padding-left:1em;border-left:3px solid #bdbdbd;"
#: A table row that needs the reader's attention (an unmapped value, a step that failed).
FLAG_ROW_STYLE = "background:#fde2e2;font-weight:600;"
#: A table row worth a glance (a blank value).
SOFT_ROW_STYLE = "background:#f1f1f1;font-style:italic;"
#: A table row that falls short of the plan (a group analysed with fewer than planned).
SHORT_ROW_STYLE = "background:#fff1d6;"


def esc(value: object) -> str:
    """HTML-escape any value shown in the report, quotes included; control characters visible."""
    return html.escape(visible(str(value)), quote=True)


#: A value with an unbroken run longer than this (a hash, a path, a long label) may break
#: anywhere on the page; shorter values break only between words and after hyphens, as a
#: browser breaks them.
LONG_RUN = 28


def long_cell(value: str) -> bool:
    """Whether a cell's text holds an unbroken run of more than ``LONG_RUN`` characters."""
    return any(len(word) > LONG_RUN for word in re.split(r"[\s\-]+", value))


def td(value: str, classes: str = "") -> str:
    """A table cell of plain text (escaped here); a long unbroken value may break anywhere."""
    names = " ".join(c for c in (classes, "prespec-long" if long_cell(value) else "") if c)
    klass = f' class="{names}"' if names else ""
    return f"<td{klass}>{esc(value)}</td>"


def table(
    header: Sequence[str],
    rows: Iterable[Sequence[str]],
    *,
    numeric: Iterable[int] = (),
    cls: str = "",
    caption: str = "",
    row_styles: Mapping[int, str] | None = None,
) -> str:
    """A plain HTML table; cells and caption are escaped here, so pass them as plain text.

    Columns whose index is in ``numeric`` are right-aligned. ``row_styles`` gives an inline
    style (one of the constants of this module, never user text) to some rows by index.
    """
    nums = set(numeric)
    styles = dict(row_styles or {})
    head = "".join(f"<th>{esc(h)}</th>" for h in header)

    def cell(j: int, value: str) -> str:
        return td(value, "num" if j in nums else "")

    def row(i: int, values: Sequence[str]) -> str:
        style = f' style="{esc(styles[i])}"' if i in styles else ""
        return f"<tr{style}>" + "".join(cell(j, c) for j, c in enumerate(values)) + "</tr>"

    body = "".join(row(i, r) for i, r in enumerate(rows))
    klass = f"prespec {cls}".strip()
    cap = f'<caption style="text-align:left">{esc(caption)}</caption>' if caption else ""
    return (
        f'<table class="{esc(klass)}">{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{body}</tbody></table>"
    )


def fields(rows: Iterable[tuple[str, str]]) -> str:
    """A two-column table of labelled values."""
    body = "".join(f"<tr><th>{esc(k)}</th>{td(v)}</tr>" for k, v in rows)
    return f'<table class="prespec prespec-fields"><tbody>{body}</tbody></table>'


def plural(count: int, one: str, many: str | None = None) -> str:
    """``1 column``, ``3 columns``, with thousands separators: ``40,401 combinations``."""
    word = one if count == 1 else (many or f"{one}s")
    return f"{count:,} {word}"
