"""Every example plan's report, opened in a real browser (headless Chromium, driven over the
DevTools protocol by ``prespec.report.paper.Browser``) at 1,000 px, and the demo on paper.

Each plan in plans/ is locked and run through the command on the invented data it is written
for; the demo is run a second time on changed data, so that its report carries a departure
with two hashes (``data-changed-since-last-run``), the widest thing a report shows. In each
page: no element wider than its box and nothing past the window's right edge, every image
painted, the summary table (``id="summary"``) listing every hypothesis and the table of
contents (``id="contents"``) whose links all lead somewhere, and the departures table within
its box. A screenshot of the demo report is kept (``build/test-artefacts/``, or
``$PRESPEC_TEST_ARTEFACTS``). Then ``run --pdf`` and ``report FOLDER --pdf`` on paper.

Without Chromium these tests skip; CI installs Debian's chromium and sets
``PRESPEC_REQUIRE_SERVICES``, so there a missing browser fails them.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
import unicodedata
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pypdf
import pytest

from prespec.demo.adjusted import adjusted_frame
from prespec.demo.safety import safety_frame
from prespec.demo.wound import demo_data
from prespec.report.paper import PRINT_CSS, Browser, find_chromium, paper_width_px

ROOT = Path(__file__).resolve().parents[2]
PLANS = ROOT / "plans"
WIDTH = 1000
PAPER_PX = paper_width_px()  # the width report.pdf's pages are laid out at
PRESPEC = [sys.executable, "-m", "prespec"]
REQUIRE = os.environ.get("PRESPEC_REQUIRE_SERVICES", "") not in ("", "0")


def _wound(path: Path) -> None:
    path.write_text(demo_data(), encoding="utf-8")


def _safety(path: Path) -> None:
    safety_frame().to_csv(path, index=False)


def _adjusted(path: Path) -> None:
    adjusted_frame().to_csv(path, index=False, lineterminator="\n")


def _safety_events(path: Path) -> None:
    """The participant table as the run's data, the event table where the plan names it."""
    from prespec.demo.safety import EVENTS_NAME, event_tables

    units, events = event_tables(safety_frame())
    units.to_csv(path, index=False)
    events.to_csv(path.with_name(EVENTS_NAME), index=False)


#: each example plan and the invented data it is written for
DATA = {"wound-dressing": _wound, "methods-tour": _wound, "bayesian-secondary": _wound,
        "safety-review": _safety, "safety-events": _safety_events,
        "adjusted-primary": _adjusted}


def cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PRESPEC_ACTOR": "browser-test"}
    done = subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, f"prespec {' '.join(args)}: {done.stderr}"
    return done


@dataclass(frozen=True)
class Report:
    name: str
    folder: Path
    results: dict[str, Any]


def _run(study: Path, name: str, out: str, *extra: str) -> Report:
    cli("run", f"{name}.yaml", "data.csv", "--out", out, *extra, cwd=study)
    folder = study / out
    return Report(name, folder, json.loads((folder / "results.json").read_text()))


@pytest.fixture(scope="module")
def chromium() -> Path:
    found = find_chromium()
    if found is None:
        reason = "no Chromium on this machine (Debian: apt-get install chromium)"
        if REQUIRE:
            pytest.fail(f"{reason} (PRESPEC_REQUIRE_SERVICES is set)", pytrace=False)
        pytest.skip(reason)
    return found


@pytest.fixture(scope="module")
def reports(chromium: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Report]:
    """Every example plan locked and run; the demo a second time on changed data, with
    ``--pdf``."""
    assert sorted(p.stem for p in PLANS.glob("*.yaml")) == sorted(DATA), \
        "a new example plan: say in DATA which invented data it runs on"
    out: dict[str, Report] = {}
    for name, write in DATA.items():
        study = tmp_path_factory.mktemp(name)
        shutil.copy(PLANS / f"{name}.yaml", study / f"{name}.yaml")
        write(study / "data.csv")
        cli("lock", f"{name}.yaml", cwd=study)
        out[name] = _run(study, name, "report")
        if name == "wound-dressing":
            data = study / "data.csv"
            lines = data.read_text(encoding="utf-8").splitlines()
            data.write_text("\n".join(lines[:-1]) + "\n", encoding="utf-8")  # one row fewer
            out["demo-again"] = _run(study, name, "again", "--pdf")
    return out


@pytest.fixture(scope="module")
def browser(chromium: Path) -> Iterator[Browser]:
    with Browser(chromium, width=WIDTH, height=900) as b:
        yield b


#: every element whose content is wider than its own box, or that reaches past the window
OVERFLOW = """
(() => {
  const width = document.documentElement.clientWidth;
  const name = (el) => el.tagName.toLowerCase() + (el.id ? '#' + el.id : '') +
    (typeof el.className === 'string' && el.className ? '.' + el.className.trim().split(/\\s+/).join('.') : '');
  const bad = [];
  if (document.documentElement.scrollWidth > width) {
    bad.push('page ' + document.documentElement.scrollWidth + ' > ' + width);
  }
  for (const el of document.body.querySelectorAll('*')) {
    const box = el.getBoundingClientRect();
    if (box.width === 0 && box.height === 0) continue;
    if (box.right > width + 0.5) bad.push(name(el) + ' reaches ' + Math.round(box.right));
    else if (el.clientWidth > 0 && el.scrollWidth > el.clientWidth + 1) {
      // name the innermost thing that sticks out, with the start of its text
      const edge = box.left + el.clientWidth + 1;
      const out = Array.from(el.querySelectorAll('*'))
        .filter((c) => c.getBoundingClientRect().right > edge)
        .sort((a, b) => a.getBoundingClientRect().width - b.getBoundingClientRect().width);
      const what = out.length ? ' (' + name(out[0]) + ': ' +
        out[0].textContent.trim().slice(0, 40) + ')' : '';
      bad.push(name(el) + ' holds ' + el.scrollWidth + ' px in ' + el.clientWidth + what);
    }
  }
  return bad.slice(0, 20);
})()
"""

IMAGES = """
(() => Array.from(document.images).map((img) => {
  const box = img.getBoundingClientRect();
  return {alt: img.alt, complete: img.complete, natural: img.naturalWidth,
          width: box.width, height: box.height};
}))()
"""

SUMMARY = """
(() => {
  const summary = document.getElementById('summary');
  const contents = document.getElementById('contents');
  const links = contents ? Array.from(contents.querySelectorAll('a[href^="#"]')) : [];
  return {
    summary: summary !== null,
    table: summary !== null && summary.querySelector('table') !== null,
    text: summary ? summary.textContent : '',
    top: summary ? Math.round(summary.getBoundingClientRect().top + window.scrollY) : null,
    contents: contents !== null,
    links: links.map((a) => decodeURIComponent(a.getAttribute('href').slice(1))),
    missing: links.map((a) => decodeURIComponent(a.getAttribute('href').slice(1)))
      .filter((id) => document.getElementById(id) === null),
  };
})()
"""

DEPARTURES = """
(() => {
  const box = document.querySelector('.prespec-departures');
  if (box === null) return null;
  const table = box.querySelector('table');
  if (table === null) return {box: true, table: false};
  const outer = box.getBoundingClientRect();
  const inner = table.getBoundingClientRect();
  const cells = Array.from(table.querySelectorAll('td, th'))
    .filter((c) => c.scrollWidth > c.clientWidth + 1).length;
  return {box: true, table: true, left: inner.left - outer.left,
          right: outer.right - inner.right, wider: table.scrollWidth - table.clientWidth,
          cells: cells, text: table.textContent};
})()
"""

NAMES = ["wound-dressing", "demo-again", "methods-tour", "bayesian-secondary",
         "safety-review", "safety-events", "adjusted-primary"]


def text_of(page: Any) -> str:
    """A PDF page's text, its ligatures (the "fi" of "fingerprint") as letters, spaces as one."""
    return " ".join(unicodedata.normalize("NFKC", page.extract_text()).split())


def opened(browser: Browser, report: Report) -> Browser:
    browser.resize(WIDTH, 900)
    browser.open(report.folder / "report.html")
    return browser


@pytest.mark.parametrize("name", NAMES)
def test_nothing_overflows_at_1000_px(reports: dict[str, Report], browser: Browser,
                                      name: str) -> None:
    page = opened(browser, reports[name])
    assert page.evaluate("document.documentElement.clientWidth") == WIDTH
    assert page.evaluate(OVERFLOW) == []


@pytest.mark.parametrize("name", NAMES)
def test_every_image_is_painted(reports: dict[str, Report], browser: Browser,
                                name: str) -> None:
    images = opened(browser, reports[name]).evaluate(IMAGES)
    figures = list((reports[name].folder / "figures").glob("*.png"))
    assert figures and len(images) >= len(figures)  # each figure shown, none left out
    for image in images:
        assert image["complete"] and image["natural"] > 0, image["alt"]
        assert image["width"] > 50 and image["height"] > 50, image["alt"]


@pytest.mark.parametrize("name", NAMES)
def test_summary_table_and_contents(reports: dict[str, Report], browser: Browser,
                                    name: str) -> None:
    found = opened(browser, reports[name]).evaluate(SUMMARY)
    assert found["summary"] and found["table"], "no summary table (id=\"summary\")"
    for hyp in reports[name].results["hypotheses"]:
        if hyp.get("parent") is None:
            assert hyp["id"] in found["text"], hyp["id"]
    assert found["contents"], "no table of contents (id=\"contents\")"
    assert len(found["links"]) >= 3 and found["missing"] == []
    assert found["top"] < 1500  # the summary on the first screens, not after the figures


@pytest.mark.parametrize("name", NAMES)
def test_on_paper_nothing_is_wider_than_the_page(reports: dict[str, Report], browser: Browser,
                                                 name: str) -> None:
    """Laid out for print with the rules and at the width report.pdf is printed with (A4 less
    its margins, at its scale): nothing wider than the paper (so nothing is clipped)."""
    page = opened(browser, reports[name])
    page.add_style(PRINT_CSS)
    page.media("print")
    try:
        page.resize(PAPER_PX)
        assert page.evaluate(OVERFLOW) == []
    finally:
        page.media("")


def test_the_departures_table_stays_in_its_box(reports: dict[str, Report],
                                               browser: Browser) -> None:
    report = reports["demo-again"]
    codes = [d["code"] for d in report.results["deviations"]]
    assert "data-changed-since-last-run" in codes
    found = opened(browser, report).evaluate(DEPARTURES)
    assert found is not None and found["table"]
    changed = next(d for d in report.results["deviations"]
                   if d["code"] == "data-changed-since-last-run")
    hash_hex = changed["found"].removeprefix("sha256:")
    assert hash_hex in "".join(found["text"].split())  # the whole hash, wrapped, not cut
    assert found["left"] >= 0 and found["right"] >= 0, found
    assert found["wider"] <= 0 and found["cells"] == 0, found


def test_a_screenshot_of_the_demo_is_kept(reports: dict[str, Report],
                                          browser: Browser) -> None:
    where = Path(os.environ.get("PRESPEC_TEST_ARTEFACTS", ROOT / "build" / "test-artefacts"))
    where.mkdir(parents=True, exist_ok=True)
    shot = opened(browser, reports["wound-dressing"]).screenshot(full_page=True)
    assert shot.startswith(b"\x89PNG\r\n\x1a\n")
    width = int.from_bytes(shot[16:20], "big")
    height = int.from_bytes(shot[20:24], "big")
    assert width == WIDTH and height > 900
    (where / "demo-report.png").write_bytes(shot)
    first = opened(browser, reports["wound-dressing"]).screenshot(full_page=False)
    (where / "demo-report-first-screen.png").write_bytes(first)
    assert (where / "demo-report.png").stat().st_size > 10_000


def test_run_pdf_is_in_the_folder_and_its_manifest(reports: dict[str, Report]) -> None:
    report = reports["demo-again"]
    pdf = report.folder / "report.pdf"
    manifest = json.loads((report.folder / "manifest.json").read_text())
    assert "report.pdf" in manifest["files"]
    reader = pypdf.PdfReader(pdf)
    pages = len(reader.pages)
    assert pages >= 3
    footer = f"Plan fingerprint {report.results['plan']} (version 1)"
    for number, page in enumerate(reader.pages, start=1):
        flat = text_of(page)
        assert footer in flat and f"page {number} of {pages}" in flat, number
    whole = " ".join(text_of(p) for p in reader.pages)
    for hyp in report.results["hypotheses"]:
        assert hyp["id"] in whole
    assert "qualified statistician" in whole
    done = cli("verify", "wound-dressing.yaml", "--strict", cwd=report.folder.parent)
    assert "verified" in done.stdout


def test_report_command_prints_an_existing_folder(reports: dict[str, Report],
                                                  tmp_path: Path) -> None:
    report = reports["wound-dressing"]
    study = report.folder.parent
    before = {p: p.read_bytes() for p in report.folder.rglob("*") if p.is_file()}
    done = cli("report", str(report.folder), "--pdf", cwd=tmp_path)
    made = tmp_path / "report.pdf"
    assert done.stdout.strip() == str(made)
    assert {p: p.read_bytes() for p in report.folder.rglob("*") if p.is_file()} == before
    manifest = "sha256:" + hashlib.sha256(
        (report.folder / "manifest.json").read_bytes()).hexdigest()
    reader = pypdf.PdfReader(made)
    for page in reader.pages:
        flat = text_of(page)
        assert f"Plan fingerprint {report.results['plan']}" in flat
        assert f"manifest{manifest}" in "".join(flat.split())  # wrapped anywhere
    verified = cli("verify", "wound-dressing.yaml", "--strict", cwd=study)
    assert "verified" in verified.stdout
    # again: the PDF is there, nothing is overwritten
    again = subprocess.run([*PRESPEC, "report", str(report.folder), "--pdf"], cwd=tmp_path,
                           capture_output=True, text=True, check=False, timeout=120)
    assert again.returncode == 2 and "already exists; nothing overwritten" in again.stderr
    # a folder that no longer matches its manifest is not printed
    copy = tmp_path / "copy"
    shutil.copytree(report.folder, copy)
    (copy / "report.html").write_text("<p>changed</p>", encoding="utf-8")
    refused = subprocess.run([*PRESPEC, "report", str(copy), "--pdf", "--out",
                              str(tmp_path / "x.pdf")], cwd=tmp_path, capture_output=True,
                             text=True, check=False, timeout=120)
    assert refused.returncode == 3 and "report.html does not match its manifest hash" in \
        refused.stderr
    assert not (tmp_path / "x.pdf").exists()
    # the folder that holds its own PDF gives it
    own = reports["demo-again"].folder
    given = cli("report", str(own), "--pdf", cwd=tmp_path)
    assert given.stdout.strip() == str(own / "report.pdf")
