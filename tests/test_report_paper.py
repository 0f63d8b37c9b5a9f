"""report/paper.py: an HTML page printed to PDF by headless Chromium, read back with pypdf.

Without Chromium these tests skip; with ``PRESPEC_REQUIRE_SERVICES=1`` (CI, which installs
Debian's chromium) they fail instead.
"""

from __future__ import annotations

import re
from pathlib import Path

import pypdf
import pytest
from services import unavailable

from prespec.errors import BadInput, PrespecError
from prespec.report.paper import (
    CHROMIUM_VARIABLE,
    Browser,
    find_chromium,
    paper_width_px,
    print_pdf,
)

FINGERPRINT = "sha256:" + "0123456789abcdef" * 4


@pytest.fixture
def chromium() -> Path:
    found = find_chromium()
    if found is None:
        unavailable("no Chromium on this machine (Debian: apt-get install chromium)")
    assert found is not None
    return found


def long_page(folder: Path, rows: int = 160) -> Path:
    """A page of several A4 pages: a heading, a table of ``rows`` rows of two lines each and
    a cell holding a 64-digit hash that must wrap."""
    body = "".join(f"<tr><td>row {i}</td><td>first line<br>second line {i}</td></tr>"
                   for i in range(rows))
    page = folder / "page.html"
    page.write_text(
        "<!doctype html><html><head><meta charset='utf-8'><title>t</title></head><body>"
        "<h1>A long page</h1><table id='t'><thead><tr><th>Row</th><th>Text</th></tr></thead>"
        f"<tbody>{body}</tbody></table><table><tr><td>{'ab' * 200}</td></tr></table>"
        "</body></html>", encoding="utf-8")
    return page


def test_every_page_carries_the_footer_and_its_number(chromium: Path, tmp_path: Path) -> None:
    page = long_page(tmp_path)
    out = tmp_path / "page.pdf"
    print_pdf(page, out, footer=f"Plan {FINGERPRINT}")
    reader = pypdf.PdfReader(out)
    pages = len(reader.pages)
    assert pages >= 3
    texts = [p.extract_text() for p in reader.pages]
    for number, text in enumerate(texts, start=1):
        flat = " ".join(text.split())
        assert f"Plan {FINGERPRINT}" in flat
        assert f"page {number} of {pages}" in flat
    whole = "\n".join(texts)
    # no row lost or cut in two at a page break: each row's two lines on one page
    for i in range(160):
        (holder,) = [t for t in texts if re.search(rf"\brow {i}\b", t)]
        assert f"second line {i}" in holder
    assert "A long page" in whole
    assert sorted(x.name for x in tmp_path.iterdir()) == ["page.html", "page.pdf"]


def test_print_rules_keep_rows_whole_and_the_page_within_the_paper(chromium: Path,
                                                                   tmp_path: Path) -> None:
    page = long_page(tmp_path)
    from prespec.report.paper import PRINT_CSS

    with Browser(chromium) as browser:
        browser.open(page)
        browser.add_style(PRINT_CSS)
        browser.media("print")
        browser.resize(paper_width_px())  # A4 less the margins, at the print scale
        inside = browser.evaluate(
            "getComputedStyle(document.querySelector('tbody tr')).breakInside")
        assert inside == "avoid"
        assert browser.evaluate("getComputedStyle(document.querySelector('thead')).display") \
            == "table-header-group"
        # the long hash wraps: nothing wider than the paper
        assert browser.evaluate("document.documentElement.scrollWidth") <= paper_width_px()
        browser.media("")
        browser.resize(300)
        # on screen the print rules do nothing: the unbroken value runs past a narrow window
        assert browser.evaluate("document.documentElement.scrollWidth") > 300


def test_no_chromium_is_one_line_and_writes_nothing(tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(CHROMIUM_VARIABLE, str(tmp_path / "no-such-browser"))
    page = long_page(tmp_path, rows=2)
    with pytest.raises(BadInput) as err:
        print_pdf(page, tmp_path / "out.pdf", footer="x")
    assert "no Chromium found" in str(err.value) and "\n" not in str(err.value)
    assert sorted(x.name for x in tmp_path.iterdir()) == ["page.html"]


def test_a_browser_that_fails_leaves_the_old_pdf(tmp_path: Path,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    """A program that is no browser (it exits at once): a one-line error, the PDF already
    there untouched, no temporary file left."""
    monkeypatch.setenv(CHROMIUM_VARIABLE, "/bin/true")
    page = long_page(tmp_path, rows=2)
    out = tmp_path / "out.pdf"
    out.write_bytes(b"%PDF-1.4 the earlier one")
    with pytest.raises(PrespecError, match="Chromium stopped before it answered"):
        print_pdf(page, out, footer="x")
    assert out.read_bytes() == b"%PDF-1.4 the earlier one"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["out.pdf", "page.html"]


def test_missing_page_or_folder(tmp_path: Path) -> None:
    with pytest.raises(BadInput, match="no page to print"):
        print_pdf(tmp_path / "none.html", tmp_path / "out.pdf", footer="x")
    page = long_page(tmp_path, rows=1)
    with pytest.raises(BadInput, match="no such folder"):
        print_pdf(page, tmp_path / "nowhere" / "out.pdf", footer="x")


# --- report FOLDER --pdf (workflow/paper.py): the refusals, before any browser ---------------


def sealed_folder(tmp_path: Path, *, page: bool = True) -> Path:
    from prespec.audit.manifest import write_manifest

    folder = tmp_path / "run"
    folder.mkdir()
    (folder / "results.json").write_text('{"plan": "sha256:00", "plan_version": 1}\n')
    if page:
        (folder / "report.html").write_text("<p>report</p>\n")
    write_manifest(folder)
    return folder


def test_report_command_refusals(tmp_path: Path) -> None:
    from prespec import api
    from prespec.errors import IntegrityStop

    folder = sealed_folder(tmp_path)
    with pytest.raises(BadInput, match="give --pdf"):
        api.report(folder)
    with pytest.raises(BadInput, match="not a report folder"):
        api.report(tmp_path / "none", pdf=True)
    with pytest.raises(BadInput, match="inside the report folder"):
        api.report(folder, pdf=True, out=folder / "tables" / "x.pdf")
    (tmp_path / "taken.pdf").write_bytes(b"mine")
    with pytest.raises(BadInput, match="already exists; nothing overwritten"):
        api.report(folder, pdf=True, out=tmp_path / "taken.pdf")
    assert (tmp_path / "taken.pdf").read_bytes() == b"mine"
    (folder / "report.html").write_text("<p>changed</p>\n")
    with pytest.raises(IntegrityStop, match="report.html does not match its manifest hash"):
        api.report(folder, pdf=True, out=tmp_path / "out.pdf")
    (tmp_path / "bare").mkdir()
    bare = sealed_folder(tmp_path / "bare", page=False)
    with pytest.raises(BadInput, match="no report.html in the report folder"):
        api.report(bare, pdf=True, out=tmp_path / "out.pdf")
    assert not (tmp_path / "out.pdf").exists()


def test_footer_of_a_report() -> None:
    from prespec.report.paper import footer_of

    assert footer_of({"plan": "sha256:ab", "plan_version": 2}) == \
        "Plan fingerprint sha256:ab (version 2)"
    assert footer_of({"plan": "sha256:ab", "plan_version": None}) == \
        "Plan fingerprint sha256:ab (not locked)"
