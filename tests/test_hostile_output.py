"""Output that a reader's tools would execute or hide: formulas, terminal escapes, bidi controls.

Labels, ids, data values, a title and an amend reason that begin like a spreadsheet formula,
carry terminal escape sequences, NUL or a right-to-left override go through a real run, a
rehearsal, a family and the console. Every CSV prespec writes is read back cell by cell: text
that would start a formula begins with an apostrophe, numbers (a negative one too) stay as
they are, and hidden characters show as ``\\u202e`` / ``\\x00``. The console escapes control
characters in every line carrying user text; report.html, the notebook and results.json show
the bidi controls and NUL, while results.json still reads back to the same values.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from prespec import api, audit, cli
from prespec.analysis.families import analyse_family, prepare_run
from prespec.common import shown
from prespec.demo.safety import safety_frame
from prespec.errors import IntegrityStop
from prespec.plan import load_plan
from prespec.report import families as report_families

RLO = "\u202e"  # right-to-left override
LINK = '=HYPERLINK("http://127.0.0.1:9/x","click")'
GROUPS = [LINK, "+1+cmd", f"@SUM(A1)x{RLO}gpj.exe"]
EVENT, NO_EVENT = "-2+3", "@no"  # data values of the outcome column
HYP_ID = "@H1"
OUTCOME = "=healed\x00"
TITLE = "Trial\x1b[2J of \x1b[8mhidden"


def _plan_text() -> str:
    groups = ", ".join(json.dumps(g) for g in GROUPS)
    return f"""\
prespec: 1
title: {json.dumps(TITLE)}
data:
  id: participant
  group: arm
  groups: [{groups}]
outcomes:
  {json.dumps(OUTCOME)}:
    column: healed
    event: [{json.dumps(EVENT)}]
    no_event: [{json.dumps(NO_EVENT)}]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: {json.dumps(HYP_ID)}
    title: "{RLO}tpircs"
    outcome: {json.dumps(OUTCOME)}
    compare: [{json.dumps(GROUPS[1])}, {json.dumps(GROUPS[0])}]
    test: pearson-chi-square
    measure: risk-difference
"""


def _data_text() -> str:
    import io

    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(["participant", "arm", "healed"])
    n = 0
    for label, events in zip(GROUPS, (10, 18, 13), strict=True):
        for i in range(30):
            n += 1
            w.writerow([f"P{n:03d}", label, EVENT if i < events else NO_EVENT])
    return out.getvalue()


def _rows(path: Path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("hostile-output")
    (root / "plan.yaml").write_text(_plan_text(), encoding="utf-8")
    (root / "data.csv").write_text(_data_text(), encoding="utf-8")
    api.lock(root / "plan.yaml", actor="ana")
    api.run(root / "plan.yaml", root / "data.csv", out=root / "report", actor="ana")
    api.rehearse(root / "plan.yaml", root / "data.csv", out=root / "rehearsal", actor="ana")
    return root


# --- the helper, on its own -------------------------------------------------------------


def test_a_text_cell_that_starts_a_formula_gets_an_apostrophe() -> None:
    for text in (LINK, "+A1", "-1+1", "@SUM(A1)", "\tx", "\rx", "-", "=", "-inf"):
        assert shown.cell(text) == "'" + text, text
    for text in ("healed", "a=b", "1-2", "", " =1"):
        assert shown.cell(text) == text


def test_numbers_and_plain_number_text_are_never_changed() -> None:
    for value in (-0.05, 0, 3, -7, None, True, 1e-300):
        assert shown.cell(value) is value
    for text in ("-0.05", "+3", "-1e-5", "-.5", "12"):  # a spreadsheet reads a number, not code
        assert shown.cell(text) == text


def test_hidden_characters_are_visible_in_a_cell_and_a_console_line() -> None:
    assert shown.cell(f"a{RLO}b\x00c\u2066d") == "a\\u202eb\\x00c\\u2066d"
    assert shown.cell(f"={RLO}") == "'=\\u202e"
    assert shown.visible("\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069") == (
        "\\u202a\\u202b\\u202c\\u202d\\u202e\\u2066\\u2067\\u2068\\u2069")
    assert shown.visible("tab\tand\nline") == "tab\tand\nline"
    assert shown.console("a\x1b[2Jb\tc\nd\re\x9b") == "a\\x1b[2Jb\\tc\\nd\\re\\x9b"
    assert shown.console_lines("one\x1b[8m\ntwo") == "one\\x1b[8m\ntwo"


def test_json_text_escapes_hidden_characters_and_reads_back_the_same() -> None:
    doc = {"a": f"x{RLO}y\x00z\u2069\x85\u2028", f"k{RLO}": [1, -0.5, None, "é"]}
    text = shown.json_text(doc, indent=2)
    assert RLO not in text and "\x00" not in text and "\x85" not in text
    assert "\\u202e" in text and "\\u0000" in text and "\\u2069" in text and "é" in text
    assert json.loads(text) == doc
    plain = json.dumps(doc, indent=2, ensure_ascii=False)
    assert shown.json_text({"a": "b", "n": [1, 2]}) == json.dumps({"a": "b", "n": [1, 2]})
    assert json.loads(plain) == json.loads(text)


# --- every CSV of a run, a rehearsal and a family ------------------------------------------


def test_the_run_tables_neutralise_formulas_and_keep_numbers(study: Path) -> None:
    tables = study / "report" / "tables"
    run_tables = {"results.csv", "statistics.csv", "flow.csv"}
    groups_csv = [p for p in tables.iterdir() if p.name.startswith("groups-")]
    hyp_csv = [p for p in tables.iterdir()
               if not p.name.startswith("groups-") and p.name not in run_tables]
    assert len(groups_csv) == 1 and len(hyp_csv) == 1
    assert run_tables <= {p.name for p in tables.iterdir()}
    rows = _rows(groups_csv[0])
    assert rows[0][0] == "group"
    assert [r[0] for r in rows[1:]] == [
        "'" + LINK, "'+1+cmd", "'@SUM(A1)x\\u202egpj.exe"]
    assert [int(r[1]) for r in rows[1:]] == [10, 18, 13]
    rows = _rows(hyp_csv[0])
    assert [r[0] for r in rows[1:]] == ["'+1+cmd", "'" + LINK]
    assert [int(r[1]) for r in rows[1:]] == [18, 10]
    for row in [r for p in tables.iterdir() for r in _rows(p)]:  # every table of the run
        for text in row:
            assert not text.startswith(("=", "+", "@", "\t", "\r")), text
            assert RLO not in text and "\x00" not in text


def test_a_negative_number_in_a_csv_stays_a_number(tmp_path: Path) -> None:
    from prespec.report.tables import write_tables

    results = {"groups": {"o": [{"group": "-x", "events": 1, "total": 2, "missing": 0,
                                  "proportion": 0.5, "ci": [-0.05, 1.0], "ci_method": "=w",
                                  "level": 0.95}]},
               "hypotheses": []}
    write_tables(tmp_path, results)
    (path,) = (tmp_path / "tables").glob("groups-*.csv")
    row = _rows(path)[1]
    assert row == ["'-x", "1", "1", "2", "0", "0.5", "-0.05", "1.0", "'=w", "0.95"]


def test_the_rehearsal_tables_neutralise_data_values(study: Path) -> None:
    tables = study / "rehearsal" / "tables"
    pooled = _rows(tables / "pooled.csv")
    assert pooled[1][0] == "'=healed\\x00" and pooled[1][1:4] == ["41", "49", "90"]
    dictionary = _rows(tables / "data-dictionary.csv")
    header = dictionary[0]
    value = header.index("value")
    by_value = {r[value]: r for r in dictionary[1:] if r[0] == "healed"}
    assert set(by_value) == {"'" + EVENT, "'" + NO_EVENT}
    assert by_value["'" + EVENT][header.index("count")] == "41"
    for row in dictionary:
        for text in row:
            assert not text.startswith(("=", "+", "@", "\t", "\r")), text


def test_a_family_table_neutralises_levels_and_ids(tmp_path: Path) -> None:
    terms = {"skin": {LINK: (0.05, 0.2), f"rash{RLO}": (0.05, 0.05), "-itch": (0.1, 0.1)}}
    frame = safety_frame(per_group=60, seed=3, terms=terms)
    path = tmp_path / "plan.yaml"
    path.write_text("""\
prespec: 1
title: Tolerability
data: {id: participant, group: gel, groups: [new, standard], reference: standard}
outcomes:
  reported: {column: had_event, event: ["1"], no_event: ["0"], missing: no-event}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: "+AE"
    outcome: reported
    compare: [new, standard]
    test: fisher-exact
    over: event_term
    flag_method: benjamini-hochberg
""", encoding="utf-8")
    plan = load_plan(path).model
    _, data = prepare_run(frame, plan, "data.csv")
    fam = analyse_family(plan, plan.hypotheses[0], data[0], [])
    (table,) = report_families.write_family_tables(tmp_path, {"kind": "run", "families": [fam]})
    rows = _rows(table)
    header = rows[0]
    levels = {r[header.index("level")] for r in rows[1:]}
    assert levels == {"'" + LINK, "rash\\u202e", "'-itch"}
    ids = {r[header.index("id")] for r in rows[1:]}
    assert ids == {f"'+AE[{LINK}]", "'+AE[rash\\u202e]", "'+AE[-itch]"}
    p = header.index("p_value")
    assert all(0 < float(r[p]) <= 1 for r in rows[1:])


# --- report.html, the notebook and results.json -------------------------------------------


def test_bidi_controls_are_visible_in_the_report_and_escaped_in_results(study: Path) -> None:
    folder = study / "report"
    raw = (folder / "results.json").read_text("utf-8")
    assert RLO not in raw and "\\u202e" in raw
    results = json.loads(raw)
    assert results["hypotheses"][0]["title"] == f"{RLO}tpircs"  # the same value, read back
    assert results["title"] == TITLE
    assert list(results["groups"]) == [OUTCOME] and "=healed\\u0000" in raw
    page = (folder / "report.html").read_text("utf-8")
    assert RLO not in page and "\x1b" not in page
    assert "\\u202etpircs" in page and "gpj.exe" in page
    assert "\x00" not in page and "=healed\\x00" in page
    notebook = (folder / "report.ipynb").read_text("utf-8")
    assert RLO not in notebook and "\\\\u202etpircs" in notebook  # JSON of the visible text
    assert "\\u0000" not in notebook and "=healed\\\\x00" in notebook  # the alt text too
    api.verify(study / "plan.yaml")  # the report still verifies as the locked analysis


# --- the console ---------------------------------------------------------------------------


def test_check_and_history_escape_terminal_sequences(study: Path, tmp_path: Path,
                                                      capsys: pytest.CaptureFixture[str]
                                                      ) -> None:
    assert cli.main(["check", str(study / "plan.yaml")]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and RLO not in out
    assert "Plan:          Trial\\x1b[2J of \\x1b[8mhidden" in out
    assert "\\u202etpircs" in out
    plan = tmp_path / "plan.yaml"
    plan.write_text(_plan_text(), encoding="utf-8")
    api.lock(plan, actor="ana")
    plan.write_text(_plan_text().replace("alpha: 0.05", "alpha: 0.025"), encoding="utf-8")
    reason = "typo\x1b[8m hidden\nversion 9  forged line"
    assert cli.main(["amend", str(plan), "--reason", reason]) == 0
    capsys.readouterr()
    assert cli.main(["history", str(plan)]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out
    assert "   reason: typo\\x1b[8m hidden\\nversion 9  forged line" in out
    assert "alpha: 0.05 → 0.025" in out or "alpha" in out.split("changes in meaning")[1]
    assert not any(line.startswith("version 9") for line in out.splitlines())


def test_run_rehearse_and_errors_escape_user_text(study: Path, tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    code = cli.main(["rehearse", str(study / "plan.yaml"), str(study / "data.csv"),
                     "--out", str(tmp_path / "again")])
    assert code == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and RLO not in out and "@H1: pearson-chi-square" in out
    bad = tmp_path / "bad.yaml"
    bad.write_text(_plan_text().replace(f"compare: [{json.dumps(GROUPS[1])}",
                                        f"compare: [\"x\\e[2J{RLO}\""), encoding="utf-8")
    assert cli.main(["check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("prespec: ") and "\x1b" not in err and RLO not in err


# --- the lock and the log ------------------------------------------------------------------


def test_the_lock_and_log_escape_bidi_controls_and_the_earlier_raw_form_still_verifies(
        tmp_path: Path) -> None:
    plan, data = tmp_path / "plan.yaml", tmp_path / "data.csv"
    plan.write_text(_plan_text(), encoding="utf-8")
    data.write_text(_data_text(), encoding="utf-8")
    api.lock(plan, actor="ana")
    plan.write_text(_plan_text().replace("alpha: 0.05", "alpha: 0.025"), encoding="utf-8")
    api.amend(plan, reason=f"a typo{RLO} fixed", actor="ana")
    lock, log = audit.lock_path(plan), audit.log_path(plan)
    for path in (lock, log):
        raw = path.read_text("utf-8")
        assert RLO not in raw and "\\u202e" in raw, path.name
    versions = audit.read_lock(lock)
    assert versions is not None and versions["versions"][1]["reason"] == f"a typo{RLO} fixed"
    assert [e["details"].get("reason") for e in audit.read_log(log)] == [
        None, f"a typo{RLO} fixed"]
    # a study locked by an earlier prespec holds the characters raw: it keeps verifying, and
    # the next entry is appended to it
    for path in (lock, log):
        path.write_text(path.read_text("utf-8").replace("\\u202e", RLO), encoding="utf-8")
        assert RLO in path.read_text("utf-8")
    api.verify(plan)
    api.run(plan, data, out=tmp_path / "report", actor="ana")
    api.verify(plan)
    assert len(audit.read_log(log)) == 3
    # any third form of the same value (here the escape in capitals) is still an edit
    log.write_text(log.read_text("utf-8").replace(RLO, "\\u202E", 1), encoding="utf-8")
    with pytest.raises(IntegrityStop, match="not in the form prespec writes"):
        audit.read_log(log)
