"""The source of the report notebook, ``template.ipynb``.

The notebook shipped in the package is generated from this module and committed beside it
(a test checks that the two agree). After editing the cells, regenerate it with::

    python -m prespec.report.template

The notebook receives two parameters only, ``results_file`` and ``results_sha256``. Its first
cell after the parameters checks the hash of the results file and stops if it differs; every
other value is read from that file. The display logic lives in :mod:`prespec.report.sections`.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
from nbformat import NotebookNode

TEMPLATE = Path(__file__).with_name("template.ipynb")

PARAMETERS = '''\
# Parameters, replaced when the report is executed.
results_file = "results.json"
results_sha256 = ""
'''

CELLS: list[tuple[str, str]] = [
    ("check-results", '''\
# Read results.json once, and stop unless its hash is the one the report was started with.
import hashlib
import json
from pathlib import Path

results_bytes = Path(results_file).read_bytes()
found_sha256 = "sha256:" + hashlib.sha256(results_bytes).hexdigest()
if found_sha256 != results_sha256:
    raise RuntimeError(
        f"{results_file} has hash {found_sha256}, expected {results_sha256 or 'none given'}"
    )
results = json.loads(results_bytes)
if not isinstance(results, dict):
    raise TypeError(f"{results_file} does not hold a JSON object")
'''),
    ("header", '''\
from IPython.display import HTML, Image, display

from prespec.report import sections, summary

display(HTML(summary.summary(results)))
banner = sections.blinded_banner(results)
if banner:
    display(HTML(banner))
display(HTML(sections.caution(results)))
display(HTML(summary.contents(results)))
'''),
    ("departures", '''\
display(HTML(summary.anchor("departures") + sections.departures(results)))
'''),
    ("population", '''\
display(HTML(summary.anchor("population") + sections.population(results)))
'''),
    ("design", '''\
planned = sections.planned_versus_achieved(results)
if planned:
    display(HTML(summary.anchor("design") + planned))
'''),
    ("pooled", '''\
pooled = sections.pooled(results)
if pooled:
    display(HTML(summary.anchor("pooled") + pooled))
'''),
    ("dictionary", '''\
dictionary = sections.data_dictionary(results)
if dictionary:
    display(HTML(summary.anchor("dictionary") + dictionary))
'''),
    ("outcomes", '''\
outcome_parts = sections.outcomes(results)
if outcome_parts:
    display(HTML(summary.anchor("outcomes") + "<h2>Outcomes</h2>"))
for name, outcome_html, figure in outcome_parts:
    display(HTML(outcome_html))
    alt = f"Proportion with the event in each group, with intervals: {name}"
    display(Image(filename=figure, metadata={"alt": alt}))
'''),
    ("hypotheses", '''\
display(HTML(summary.anchor("hypotheses") + sections.hypotheses_heading(results)))
for hypothesis_html, figures in sections.hypothesis_blocks(results):
    display(HTML(hypothesis_html))
    for figure, alt in figures:
        display(Image(filename=figure, metadata={"alt": alt}))
forest = sections.forest_figure(results)
if forest is not None:
    display(HTML(summary.anchor("estimates") + "<h3>Estimates and intervals</h3>"))
    alt = "Estimate and interval of each hypothesis that has one"
    display(Image(filename=forest, metadata={"alt": alt}))
'''),
    ("multiplicity", '''\
display(HTML(summary.anchor("multiplicity") + sections.multiplicity(results)))
graph = sections.multiplicity_figure(results)
if graph is not None:
    alt = "Graph of the graphical procedure: initial weights and transitions"
    display(Image(filename=graph, metadata={"alt": alt}))
'''),
    ("families", '''\
from prespec.report import families as family_report

family_heading = family_report.families_heading(results)
if family_heading:
    display(HTML(summary.anchor("families") + family_heading))
for family_html, figure, alt, table_html in family_report.family_blocks(results):
    display(HTML(family_html))
    display(Image(filename=figure, metadata={"alt": alt}))
    display(HTML(table_html))
'''),
    ("environment", '''\
display(HTML(summary.anchor("environment") + sections.environment(results)))
'''),
    ("caution-end", '''\
display(HTML(sections.caution(results)))
'''),
]


def build() -> NotebookNode:
    """The template notebook, with fixed cell ids so that it is the same on every build."""
    nb = nbformat.v4.new_notebook()
    params = nbformat.v4.new_code_cell(PARAMETERS.rstrip("\n"))
    params.id = "parameters"
    params.metadata["tags"] = ["parameters"]
    nb.cells.append(params)
    for cell_id, source in CELLS:
        cell = nbformat.v4.new_code_cell(source.rstrip("\n"))
        cell.id = cell_id
        nb.cells.append(cell)
    nb.metadata["kernelspec"] = {
        "display_name": "Python 3 (ipykernel)",
        "language": "python",
        "name": "python3",
    }
    nb.metadata["language_info"] = {"name": "python"}
    nb.metadata["title"] = "prespec report"
    nbformat.validate(nb)
    return nb


def dumps() -> str:
    """The template as the text written to ``template.ipynb``."""
    return nbformat.writes(build()) + "\n"


def write(path: Path = TEMPLATE) -> Path:
    """Write the template notebook (by default into the package) and return its path."""
    path.write_text(dumps(), encoding="utf-8")
    return path


if __name__ == "__main__":
    print(write())
