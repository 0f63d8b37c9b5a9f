"""The report room: figures, the executed notebook and the stand-alone HTML of a report folder.

It shows what ``results.json`` holds and computes no statistics. Importing it loads neither
matplotlib nor papermill; they are imported when a figure is drawn or a notebook executed.
"""

from prespec.report.figures import write_figures
from prespec.report.render import render_notebook

__all__ = ["render_notebook", "write_figures"]
