"""The report room: figures, the executed notebook and the stand-alone HTML of a report folder.

It shows what ``results.json`` holds and computes no statistics. Importing it loads neither
matplotlib nor papermill; they are imported when a figure is drawn or a notebook executed. Its
two entry points are loaded on first use, so that the notebook's kernel, which imports the
report's section modules as it starts, does not import the notebook machinery (nbformat and
its schema validator) it has no use for.
"""

from __future__ import annotations

from typing import Any

__all__ = ["render_notebook", "write_figures"]


def __getattr__(name: str) -> Any:
    if name == "render_notebook":
        from prespec.report.render import render_notebook

        return render_notebook
    if name == "write_figures":
        from prespec.report.figures import write_figures

        return write_figures
    raise AttributeError(f"module 'prespec.report' has no attribute {name!r}")
