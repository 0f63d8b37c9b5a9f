"""``prespec describe`` and ``verify --document``: the plan document, from the lock.

The document's words are checked against the resolved plan they come from: a walk over every
key of a locked plan (plans/methods-tour.yaml, and every plan of tests/fixtures/plans, copied)
finds each value that changes the analysis in the document, as the plan writes it.
"""

from __future__ import annotations

import os
import re
import shutil
import stat
from pathlib import Path
from typing import Any

import pytest
from services import unavailable

from prespec import api, audit, cli
from prespec.errors import BadInput, IntegrityStop
from prespec.plan import vocabulary as v
from prespec.plan.looks import EFFICACY, FUTILITY
from prespec.plan.model import kind_of
from prespec.plan.summary import number
from prespec.report import describe as words
from prespec.report.markup import esc
from prespec.workflow import describe as step

ROOT = Path(__file__).resolve().parent.parent
TOUR = ROOT / "plans" / "methods-tour.yaml"
FIXTURE_PLANS = sorted((ROOT / "tests" / "fixtures" / "plans").glob("*.yaml"))
SRC = ROOT / "src" / "prespec"


def locked_copy(tmp_path: Path, source: Path = TOUR) -> Path:
    plan = tmp_path / source.name
    shutil.copyfile(source, plan)
    api.lock(plan, actor="tester")
    return plan


def folder_files(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


# --- the walk: every key that changes the analysis, in the document's words ----------------

#: Mappings whose keys are values of the study (groups, hypothesis ids, columns), not key names.
VALUE_KEYED = {"prior", "covariates", "levels", "weights", "transitions", "planned_n",
               "assumed", "allocation", "scenarios"}
#: Free text shown as text, not as a plan term.
FREE_TEXT = {"title", "protocol", "population", "variable", "event"}
#: Keys that do not change the analysis: the format version.
NOT_ANALYSIS = {"prespec"}


def term(value: Any) -> str:
    """A plan value as the document shows a plan term."""
    shown = number(value) if isinstance(value, (int, float)) else value
    return f"<code>{esc(shown)}</code>"


def expected(key: str, value: Any, hyp: dict[str, Any] | None = None) -> list[str]:
    """The HTML fragments that must appear for one key of the resolved plan."""
    if value is None or key in NOT_ANALYSIS:
        return []
    if key in FREE_TEXT and isinstance(value, str):
        return [esc(value)]
    if isinstance(value, bool):
        if key == "continuity" and hyp is not None:
            takes = v.CONTINUITY_TESTS_BY_KIND[kind_of(hyp["compare"]) or "pair"]
            return [term(f"continuity: {'true' if value else 'false'}")] \
                if value or hyp["test"] in takes else []
        if key == "is_missing":
            return [("is blank" if value else "is not blank") + f" ({term('is_missing')})"]
        if key == "continuity":  # design's 2×2 formula
            return ["continuity-corrected" if value else "without continuity correction"]
        if key == "binding":
            return ["non-binding"] if not value else [term("binding: true")]
        raise AssertionError(f"an unchecked boolean key {key}")
    if key == "compare" and isinstance(value, str):
        return [term(f"compare: {value}")]
    if isinstance(value, (str, int, float)):
        return [term(value)]
    if isinstance(value, list):
        return [piece for item in value for piece in expected(f"{key}[]", item, hyp)]
    if isinstance(value, dict):
        pieces = [term(k) for k in value] if key in VALUE_KEYED else []
        return pieces + [piece for k, item in value.items()
                         for piece in expected(key if key in VALUE_KEYED else k, item, hyp)]
    raise AssertionError(f"an unchecked value {key}: {value!r}")


def hypothesis_sections(page: str) -> dict[str, str]:
    """Each hypothesis's part of the document, by id (its ``<h3><code>ID</code>`` to the
    next heading of its level or above)."""
    out = {}
    for found in re.finditer(r"<h3><code>([^<]+)</code>", page):
        rest = page[found.start():]
        end = re.search(r"<h[23][ >]", rest[4:])
        out[found.group(1)] = rest[: end.start() + 4] if end else rest
    return out


def missing_words(plan: Path, page: str) -> list[str]:
    """Every value of the lock's resolved plan that the document does not show."""
    resolved = audit.read_lock(audit.lock_path(plan))["versions"][-1]["plan"]
    sections = hypothesis_sections(page)
    missing = []
    for key, value in resolved.items():
        if key == "hypotheses":
            continue
        missing += [f"{key}: {piece}" for piece in expected(key, value) if piece not in page]
    for hyp in resolved["hypotheses"]:
        section = sections.get(esc(hyp["id"]), "")
        assert section, f"no section for {hyp['id']}"
        for key, value in hyp.items():
            missing += [f"{hyp['id']}.{key}: {piece}" for piece in expected(key, value, hyp)
                        if piece not in section]
    return missing


def test_every_key_of_the_methods_tour_is_in_the_words(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    made = api.describe(plan)
    page = made.html.read_text("utf-8")
    assert missing_words(plan, page) == []
    # the walk sees what it should: a sample of the tour's keys, in their sections
    sections = hypothesis_sections(page)
    assert "<code>cochran-mantel-haenszel</code>" in sections["H1"]
    assert "<code>site</code>" in sections["H1"]
    assert "<code>0.05</code>" in sections["H2"] and "<code>non-inferiority</code>" in \
        sections["H2"]
    assert "<code>0.15</code>" in sections["H3"]
    assert "<code>holm</code>" in sections["H5"]
    assert "<code>0.8</code>" in sections["H7"] and "<code>1.25</code>" in sections["H7"]
    assert "<code>woolf</code>" in sections["H10"]


def test_the_walk_fails_on_a_value_the_words_leave_out(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    page = api.describe(plan).html.read_text("utf-8")
    cut = page.replace("<code>site</code>", "site", 1)
    assert missing_words(plan, cut) == ["H1.strata: <code>site</code>"]


@pytest.mark.parametrize("source", FIXTURE_PLANS, ids=lambda p: p.stem)
def test_every_key_of_every_fixture_plan_is_in_the_words(tmp_path: Path, source: Path) -> None:
    plan = locked_copy(tmp_path, source)
    page = api.describe(plan).html.read_text("utf-8")
    assert missing_words(plan, page) == []


# --- the first page -------------------------------------------------------------------------


def test_first_page_names_fingerprint_lock_time_and_no_time_stamp(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    entry = audit.read_log(audit.log_path(plan))[0]
    made = api.describe(plan)
    assert made.html == tmp_path / "methods-tour.plan-v1.html"
    assert (made.version, made.fingerprint, made.timestamp) == (1, entry["plan"], None)
    assert made.locked_at == entry["at"]
    text = words.html_text(made.html.read_text("utf-8"))
    first = text[: text.index("Population and data")]
    assert f"Plan fingerprint {entry['plan']}" in first
    assert f"Locked at {entry['at']} by tester" in first
    assert "Trusted time-stamp no trusted time-stamp" in first
    assert "plan document format 1" in first
    assert "does not judge whether the plan suits the study" in first  # the caution
    # the fingerprint is the first one the text holds (verify reads it there)
    assert words.FINGERPRINT.findall(text)[0] == entry["plan"]


def test_the_time_stamp_hook_is_shown_on_the_first_page(tmp_path: Path,
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    plan = locked_copy(tmp_path)
    monkeypatch.setattr(step, "trusted_time", lambda plan, version, entry:
                        "2027-03-02T10:14:07Z (time-stamped by a test authority)")
    made = api.describe(plan)
    text = words.html_text(made.html.read_text("utf-8"))
    assert "Trusted time-stamp 2027-03-02T10:14:07Z (time-stamped by a test authority)" in text
    assert words.NO_TIMESTAMP not in text
    assert made.timestamp == "2027-03-02T10:14:07Z (time-stamped by a test authority)"


def test_the_document_is_the_same_every_time(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    first = api.describe(plan).html.read_bytes()
    again = api.describe(plan, out=tmp_path / "again.html").html.read_bytes()
    assert first == again


def test_the_words_come_from_the_lock_not_the_working_file(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    plan.write_text(plan.read_text().replace("title: Dressing regimens",
                                             "title: Edited after lock"))
    # the title is part of the meaning, so the file now differs from its lock
    with pytest.raises(BadInput, match=r"differs in meaning from lock version 1.*--version N"):
        api.describe(plan)
    made = api.describe(plan, version=1)
    page = made.html.read_text("utf-8")
    assert "Dressing regimens" in page and "Edited after lock" not in page


def test_an_amended_plan_describes_each_version(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    first_fp = audit.read_lock(audit.lock_path(plan))["versions"][0]["fingerprint"]
    plan.write_text(plan.read_text().replace("alpha: 0.05", "alpha: 0.025"))
    api.amend(plan, reason="a stricter level", actor="tester")
    latest = api.describe(plan)
    assert latest.version == 2 and latest.html.name == "methods-tour.plan-v2.html"
    text = words.html_text(latest.html.read_text("utf-8"))
    assert f"Amends the version with fingerprint {first_fp}; reason: a stricter level" in text
    assert "Alpha 0.025, the significance level" in text
    assert words.FINGERPRINT.findall(text)[0] == latest.fingerprint
    old = words.html_text(api.describe(plan, version=1).html.read_text("utf-8"))
    assert "Alpha 0.05, the significance level" in old and "Amends" not in old


# --- methods and references -----------------------------------------------------------------


def test_every_method_name_of_the_format_has_words_and_a_reference() -> None:
    names = (v.KNOWN_TESTS | v.KNOWN_INTERVALS | set(v.KNOWN_MULTIPLICITY) - {"none"}
             | set(v.FLAG_METHODS) | set(EFFICACY) | set(FUTILITY)
             | {"worst-case", "best-case", "tipping-point"})
    assert sorted(names - set(words.METHODS)) == []
    assert sorted(set(words.METHODS) - names) == []


@pytest.mark.parametrize("name", sorted(words.METHODS))
def test_each_reference_is_one_the_code_already_cites(name: str) -> None:
    """No invented citation: every author and year of a reference stands in the module the
    table names (its References section or comments)."""
    _, reference, modules = words.METHODS[name]
    source = "".join((SRC / m).read_text("utf-8") for m in modules.split())
    for cited in reference.split("; "):
        author = cited.split(" ")[0].rstrip(",.")
        year = re.search(r"(19|20)\d\d", cited)
        assert author in source, (name, author, modules)
        assert year is not None and year.group(0) in source, (name, cited, modules)


def test_the_references_list_the_methods_the_plan_uses(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    text = words.html_text(api.describe(plan).html.read_text("utf-8"))
    refs = text[text.index("Methods and references"):]
    for name in ("graphical", "cochran-mantel-haenszel", "greenland-robins",
                 "farrington-manning", "miettinen-nurminen", "binomial-exact",
                 "clopper-pearson", "cochran-armitage-trend", "fisher-exact", "holm",
                 "newcombe", "boschloo-exact", "exact-conditional", "two-proportion-z", "katz",
                 "barnard-exact", "agresti-caffo", "likelihood-ratio", "woolf"):
        assert f" {name} " in refs, name
    assert "Bretz F, Maurer W, Brannath W, Posch M. Statistics in Medicine 2009;28:586–604" \
        in refs
    assert " wilson " not in refs and " sato " not in refs  # not used by the tour


# --- interim looks: the planned boundaries ---------------------------------------------------


def test_looks_show_the_planned_boundaries(tmp_path: Path) -> None:
    from prespec.stats.sequential import boundaries

    plan = locked_copy(tmp_path, ROOT / "tests" / "fixtures" / "plans" / "looks-futility.yaml")
    page = api.describe(plan).html.read_text("utf-8")
    section = words.html_text(hypothesis_sections(page)["H1"])
    # the same function the run calls, at the planned fractions and alpha (the boundaries'
    # own values are checked against published ones in tests/test_stats_sequential.py)
    b = boundaries([1 / 3, 2 / 3, 1.0], alpha=0.05, sides=2, efficacy="hwang-shih-decani",
                   gamma=-4.0, futility="lan-demets-pocock", power=0.8)
    for k in range(3):
        assert (f"{k + 1} {b.fractions[k]:.4f} {b.z[k]:.4f} {b.nominal_p[k]:.5f} "
                f"{b.alpha_spent[k]:.5f} {b.futility_z[k]:.4f}") in section
    assert "3 looks at cumulative total sizes 200, 400, 600" in section
    # common practice: the last look of a spending function spends all of alpha
    assert f"{b.alpha_spent[2]:.5f}" == "0.05000"


# --- refusals -------------------------------------------------------------------------------


def test_an_unlocked_plan_is_refused_in_one_line(tmp_path: Path,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "tour.yaml"
    shutil.copyfile(TOUR, plan)
    assert cli.main(["describe", str(plan)]) == 2
    err = capsys.readouterr().err
    assert err == (f"prespec: {plan}: not locked; the plan document is written from the lock "
                   f"(run prespec lock {plan} first)\n")
    assert folder_files(tmp_path) == {"tour.yaml"}


def test_bad_options_are_refused_and_nothing_written(tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    plan = locked_copy(tmp_path)
    before = folder_files(tmp_path)
    assert cli.main(["describe", str(plan), "--version", "3"]) == 2
    assert capsys.readouterr().err == ("prespec: --version 3: methods-tour.lock.json holds "
                                       "version 1\n")
    assert cli.main(["describe", str(plan), "--out", str(tmp_path / "plan.txt")]) == 2
    assert "name a .html file" in capsys.readouterr().err
    assert cli.main(["describe", str(plan), "--out", str(tmp_path / "no" / "p.html")]) == 2
    assert "no such folder" in capsys.readouterr().err
    assert folder_files(tmp_path) == before


def test_the_command_prints_where_and_how_to_check(tmp_path: Path,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    plan = locked_copy(tmp_path)
    entry = audit.read_log(audit.log_path(plan))[0]
    assert cli.main(["describe", str(plan)]) == 0
    html = tmp_path / "methods-tour.plan-v1.html"
    assert capsys.readouterr().out.splitlines() == [
        f"wrote the plan document of lock version 1: {html}",
        f"fingerprint: {entry['plan']}",
        f"locked at {entry['at']} (the locking machine's clock); no trusted time-stamp",
        f"anyone can check it with: prespec verify {plan} --document {html}",
    ]


# --- verify --document ------------------------------------------------------------------------


def test_verify_accepts_the_document_it_regenerates(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    res = api.verify(plan, document=html)
    assert res.passed[-1] == ("document: methods-tour.plan-v1.html (HTML) carries the "
                              "fingerprint of lock version 1, and its words are those prespec "
                              "writes from that version")


def test_verify_compares_the_text_not_the_bytes(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    page = html.read_text("utf-8")
    relaid = page.replace("<style>", "<style>/* printed */ ").replace("</tr>", "</tr>\n  ")
    html.write_text(relaid.replace("<h2>", "\n\n<h2  >"), "utf-8")
    assert api.verify(plan, document=html).passed[-1].startswith("document: ")


def test_verify_fails_on_a_changed_word(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    html.write_text(html.read_text("utf-8").replace(
        "<code>non-inferiority</code>) at the margin <code>0.05</code>",
        "<code>non-inferiority</code>) at the margin <code>0.10</code>"), "utf-8")
    with pytest.raises(IntegrityStop) as caught:
        api.verify(plan, document=html)
    message = str(caught.value)
    assert message.startswith("document methods-tour.plan-v1.html: its words differ from those "
                              "of lock version 1: the document has ")
    assert "margin 0.10 on the risk difference" in message
    assert "margin 0.05 on the risk difference" in message


def test_verify_fails_on_a_fingerprint_of_no_version(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    fp = api.describe(plan).fingerprint
    html.write_text(html.read_text("utf-8").replace(fp, "sha256:" + "0" * 64), "utf-8")
    with pytest.raises(IntegrityStop, match=r"names sha256:0{64}, the fingerprint of no version "
                       r"of methods-tour.lock.json"):
        api.verify(plan, document=html)
    html.write_text("<html><body><p>an analysis plan</p></body></html>", "utf-8")
    with pytest.raises(IntegrityStop, match="carries no plan fingerprint"):
        api.verify(plan, document=html)


def test_verify_names_a_document_of_another_format(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    html.write_text(html.read_text("utf-8").replace("plan document format 1",
                                                    "plan document format 7"), "utf-8")
    with pytest.raises(IntegrityStop, match="written in plan document format 7; this prespec "
                       "writes format 1 and cannot write it again to compare"):
        api.verify(plan, document=html)


def test_verify_checks_an_earlier_version_after_an_amend(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    first = api.describe(plan).html
    plan.write_text(plan.read_text().replace("alpha: 0.05", "alpha: 0.025"))
    api.amend(plan, reason="a stricter level", actor="tester")
    second = api.describe(plan).html
    assert "lock version 1," in api.verify(plan, document=first).passed[-1]
    assert "lock version 2," in api.verify(plan, document=second).passed[-1]
    # version 1's fingerprint with version 2's words: not what version 1 says
    fp1 = audit.read_lock(audit.lock_path(plan))["versions"][0]["fingerprint"]
    fp2 = audit.read_lock(audit.lock_path(plan))["versions"][1]["fingerprint"]
    forged = tmp_path / "forged.html"
    forged.write_text(second.read_text("utf-8").replace(fp2, fp1), "utf-8")
    with pytest.raises(IntegrityStop, match="its words differ from those of lock version 1"):
        api.verify(plan, document=forged)


def test_verify_document_on_the_command_line(tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    assert cli.main(["verify", str(plan), "--document", str(html)]) == 0
    out = capsys.readouterr().out
    assert "ok    document: methods-tour.plan-v1.html (HTML) carries the fingerprint" in out
    html.write_text(html.read_text("utf-8").replace("Holm", "Hochberg"), "utf-8")
    assert cli.main(["verify", str(plan), "--document", str(html)]) == 3
    out = capsys.readouterr().out
    assert "FAIL  document methods-tour.plan-v1.html: its words differ" in out
    assert cli.main(["verify", str(plan), "--document", str(tmp_path / "none.html")]) == 2
    assert "--document" in capsys.readouterr().err


def test_verify_document_of_a_plan_never_locked(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    html = api.describe(plan).html
    other = tmp_path / "other"
    other.mkdir()
    shutil.copyfile(TOUR, other / "methods-tour.yaml")
    audit.log_path(other / "methods-tour.yaml").write_text("")  # a log, but no lock
    with pytest.raises(IntegrityStop, match="the plan was never locked"):
        api.verify(other / "methods-tour.yaml", document=html)


# --- documents written earlier keep verifying ------------------------------------------------

GOLDEN = ROOT / "tests" / "fixtures" / "documents" / "methods-tour"


def test_a_document_written_by_an_earlier_prespec_still_verifies(tmp_path: Path) -> None:
    """tests/fixtures/documents/methods-tour: the tour locked and described when describe
    came (plan document format 1). Any change of wording, here or in the sentences and
    numbers other rooms lend the document, fails this test: a format's words never change
    (docs/plan-document.md). Never regenerate the fixture."""
    study = tmp_path / "study"
    shutil.copytree(GOLDEN, study)
    plan = study / "methods-tour.yaml"
    res = api.verify(plan, document=study / "methods-tour.plan-v1.html")
    assert res.passed[-1].startswith("document: methods-tour.plan-v1.html (HTML) carries the "
                                     "fingerprint of lock version 1")
    again = api.describe(plan, out=tmp_path / "again.html").html
    assert words.html_text(again.read_text("utf-8")) == words.html_text(
        (GOLDEN / "methods-tour.plan-v1.html").read_text("utf-8"))


def test_the_document_is_readable_by_whoever_reads_the_study(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    old = os.umask(0o022)
    try:
        html = api.describe(plan).html
    finally:
        os.umask(old)
    assert stat.S_IMODE(html.stat().st_mode) == 0o644
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


# --- the printed document (headless Chromium, installed by .ci/run) ---------------------------

@pytest.fixture
def chromium() -> None:
    """Skip without Chromium, or fail under PRESPEC_REQUIRE_SERVICES (CI installs it)."""
    from prespec.report.paper import find_chromium

    if find_chromium() is None:
        unavailable("no Chromium to print the plan document with")


@pytest.mark.usefixtures("chromium")
def test_pdf_is_printed_beside_the_html_and_verifies(tmp_path: Path) -> None:
    from pypdf import PdfReader

    plan = locked_copy(tmp_path)
    made = api.describe(plan, pdf=True)
    assert made.pdf == tmp_path / "methods-tour.plan-v1.pdf"
    assert made.pdf.read_bytes().startswith(b"%PDF-")
    pages = PdfReader(made.pdf).pages
    first = pages[0].extract_text()
    assert made.fingerprint in first and words.NO_TIMESTAMP in first
    assert "Population and data" not in first  # the first page holds the first page only
    footer = f"methods-tour.yaml, lock version 1, {made.fingerprint}"
    assert all(footer in p.extract_text() for p in pages)
    assert api.verify(plan, document=made.pdf).passed[-1] == (
        "document: methods-tour.plan-v1.pdf (PDF) carries the fingerprint of lock version 1, and "
        "its words are those prespec writes from that version")


@pytest.mark.usefixtures("chromium")
def test_a_pdf_of_changed_words_fails(tmp_path: Path) -> None:
    from prespec.report.paper import print_pdf

    plan = locked_copy(tmp_path)
    made = api.describe(plan)
    page = made.html.read_text("utf-8").replace("step-down procedure", "step-up procedure")
    assert page != made.html.read_text("utf-8")
    changed = tmp_path / "changed.html"
    changed.write_text(page, "utf-8")
    pdf = tmp_path / "changed.pdf"
    locked = step.locked_version(plan, audit.read_lock(audit.lock_path(plan)),
                                 audit.read_log(audit.log_path(plan)), 1)
    print_pdf(changed, pdf, footer=step.footer(locked))
    with pytest.raises(IntegrityStop) as caught:
        api.verify(plan, document=pdf)
    assert str(caught.value).startswith("document changed.pdf: its words differ from those of "
                                        "lock version 1: the document has ")
    assert "step-up" in str(caught.value) and "step-down" in str(caught.value)


def test_no_chromium_writes_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    plan = locked_copy(tmp_path)
    before = folder_files(tmp_path)
    monkeypatch.setenv("PRESPEC_CHROMIUM", str(tmp_path / "no-such-browser"))
    assert cli.main(["describe", str(plan), "--pdf"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("prespec: no Chromium found") and err.count("\n") == 1
    assert folder_files(tmp_path) == before  # neither the HTML nor the PDF


def test_a_file_that_is_neither_html_nor_pdf_fails(tmp_path: Path) -> None:
    plan = locked_copy(tmp_path)
    junk = tmp_path / "junk.bin"
    junk.write_bytes(b"\xff\xfe\x00binary")
    with pytest.raises(IntegrityStop, match="document junk.bin: neither a PDF nor UTF-8 HTML"):
        api.verify(plan, document=junk)
    broken = tmp_path / "broken.pdf"
    broken.write_bytes(b"%PDF-1.4\nnot really a pdf")
    with pytest.raises(IntegrityStop, match="document broken.pdf: "):
        api.verify(plan, document=broken)


def test_user_text_is_shown_as_text(tmp_path: Path) -> None:
    """A title or label that looks like markup, or like a fingerprint, stays text: escaped in
    the page, and never taken for the document's fingerprint."""
    plan = tmp_path / "tour.yaml"
    hostile = 'Tour <script>alert(1)</script> & "sha256:' + "a" * 64 + '"'
    plan.write_text(TOUR.read_text("utf-8").replace(
        "title: Dressing regimens - a tour of the pre-specified methods",
        f"title: '{hostile}'").replace(
        "title: Negative-pressure vs gauze, stratified by site",
        "title: '<b>bold</b> \u202eedis'"), "utf-8")
    api.lock(plan, actor="tester")
    made = api.describe(plan)
    page = made.html.read_text("utf-8")
    assert "<script>" not in page and "<b>bold</b>" not in page
    assert "Tour &lt;script&gt;alert(1)&lt;/script&gt; &amp; &quot;sha256:" in page
    assert "\u202e" not in page  # the bidi control shown, not obeyed
    assert api.verify(plan, document=made.html).passed[-1].startswith(
        "document: tour.plan-v1.html (HTML) carries the fingerprint of lock version 1")
