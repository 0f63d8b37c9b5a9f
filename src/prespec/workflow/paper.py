"""``report FOLDER --pdf``: an existing report folder's page printed to PDF.

A report folder is sealed: its manifest's hash is in the audit log, so no file may be added to
it afterwards (``verify`` would, rightly, call it changed). The PDF of an existing folder is
therefore written outside it (by default ``<folder name>.pdf`` in the current folder), and
only after the folder has been checked against its own manifest; the page printed is the
``report.html`` whose bytes were checked, and every sheet's footer names the plan's
fingerprint and the folder's manifest hash, which tie the paper to the folder and its log
entry. A run that should carry its PDF inside the folder, listed in the manifest, is made with
``run --pdf``.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

from prespec.audit.manifest import MANIFEST, check_folder
from prespec.errors import BadInput, IntegrityStop
from prespec.report.paper import PDF, footer_of, print_pdf, require_chromium

PAGE = "report.html"
RESULTS = "results.json"


def report(folder: str | Path, *, pdf: bool = False, out: str | Path | None = None) -> Path:
    """Print ``folder``'s ``report.html`` to PDF; the path of the PDF.

    ``pdf`` must be set (the one thing this command makes). A folder whose run already wrote
    ``report.pdf`` (``run --pdf``) gives that file, nothing written. Otherwise the PDF goes to
    ``out`` (default ``<folder name>.pdf`` in the current folder), which must not exist and
    must lie outside the folder."""
    if not pdf:
        raise BadInput("report: give --pdf (a PDF is what this command makes)")
    place = Path(folder)
    if place.is_symlink() or not place.is_dir():
        raise BadInput(f"{place}: not a report folder")
    if not (place / MANIFEST).is_file():
        raise BadInput(f"{place}: not a report folder (no {MANIFEST})")
    target = Path(out) if out is not None else Path.cwd() / f"{place.resolve().name}.pdf"
    inside = place.resolve()
    if target.resolve() == inside or inside in target.resolve().parents:
        raise BadInput(f"{target}: inside the report folder, whose files the audit log seals; "
                       "write the PDF outside it (--out), or make it with the run (run --pdf)")
    checked = check_folder(place, keep=(RESULTS, PAGE, PDF))
    if checked.problem is not None:
        raise IntegrityStop(f"{place}: {checked.problem}; not printed (prespec verify shows "
                            "the state of the study)")
    if PDF in checked.kept:
        return place / PDF
    if PAGE not in checked.kept or RESULTS not in checked.kept:
        missing = PAGE if PAGE not in checked.kept else RESULTS
        raise BadInput(f"{place}: no {missing} in the report folder; nothing to print")
    if target.exists() or target.is_symlink():
        raise BadInput(f"{target}: already exists; nothing overwritten (give another --out)")
    if not target.parent.is_dir():
        raise BadInput(f"{target.parent}: no such folder to write {target.name} into")
    try:
        results = json.loads(checked.kept[RESULTS])
    except ValueError as exc:
        raise BadInput(f"{place / RESULTS}: not readable JSON ({exc})") from None
    if not isinstance(results, dict):
        raise BadInput(f"{place / RESULTS}: does not hold a JSON object")
    require_chromium()
    footer = f"{footer_of(results)}\nReport folder {inside.name}, manifest {checked.manifest}"
    with tempfile.TemporaryDirectory(prefix="prespec-print-") as tmp:
        page = Path(tmp) / PAGE  # the bytes the manifest check read (the figures are inside)
        page.write_bytes(checked.kept[PAGE])
        print_pdf(page, target, footer=footer)
    return target
