"""Families over an event table (``data.events``, ``over: events``; prespec.data.events).

The check against something we did not write: the same invented review written the way the
families of one table expect it (one row per unit and level, ``had_event`` 1 or 0, built
here by plain loops from the two tables) and run by the pandas engine through the ordinary
family machinery gives the members' tables, p-values, adjusted p-values and flags that the
unit table and the event table give on every engine (pandas in-process; duckdb, PostgreSQL
and Spark in one query each). The event table holds what real ones do: a unit with the same
term twice, padded ids and terms, rows of units outside the population, ids not in the unit
table (one blank), a blank term and a term outside the declared ones; each is counted by hand
in the comments below.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from services import (  # noqa: F401 - the fixtures postgres and spark
    PASSWORD_VARIABLE,
    PostgresServer,
    postgres_server,
    spark_fixture,
)

from prespec import api, cli
from prespec.common.environment import environment
from prespec.data.engines.base import DataSource
from prespec.demo.safety import event_tables, safety_frame
from prespec.errors import PlanError
from prespec.plan import load_plan
from prespec.workflow.execute import compute_results

ENGINES = ("pandas", "duckdb", "sql", "spark")

TERMS = {"skin": {"dryness": (0.10, 0.35), "redness": (0.08, 0.25), "rash": (0.02, 0.04)},
         "general": {"headache": (0.06, 0.06), "nausea": (0.05, 0.02)}}
DECLARED = {"skin": ["dryness", "redness", "rash"], "general": ["headache", "nausea"]}

EVENTS_PLAN = """\
prespec: 1
title: Invented tolerability review from a unit table and an event table
data:
  id: subject
  group: arm
  groups: [new, standard]
  include:
    - {column: safety_set, in: ["yes"]}
__SOURCE__  events:
__EVENTS__    id: subject
    level: term
    within: system
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    compare: [new, standard]
    test: fisher-exact
    over: events
    levels:
      skin: [dryness, redness, rash]
      general: [headache, nausea]
    flag_method: double-fdr
    flag_level: 0.1
"""

EXPANDED_PLAN = """\
prespec: 1
title: The same review, one row per subject and term
data:
  id: subject
  group: arm
  groups: [new, standard]
  include:
    - {column: safety_set, in: ["yes"]}
outcomes:
  had: {column: had_event, event: [1], no_event: [0], missing: error}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    outcome: had
    compare: [new, standard]
    test: fisher-exact
    over: term
    within: system
    levels:
      skin: [dryness, redness, rash]
      general: [headache, nausea]
    flag_method: double-fdr
    flag_level: 0.1
"""


def tables() -> tuple[pd.DataFrame, pd.DataFrame]:
    """The unit table (subject, arm, safety_set) and the event table (subject, term,
    system), drawn from the demo's generator, then roughed up by hand."""
    frame = safety_frame(per_group=60, seed=3, terms=TERMS).rename(
        columns={"participant": "subject", "gel": "arm", "event_term": "term",
                 "body_system": "system"})
    units, events = event_tables(frame.rename(columns={
        "subject": "participant", "arm": "gel", "term": "event_term",
        "system": "body_system"}), seed=5)
    units = units.rename(columns={"participant": "subject", "gel": "arm"})
    events = events.rename(columns={"participant": "subject", "event_term": "term",
                                    "body_system": "system"})[["subject", "term", "system"]]
    units.loc[units["subject"] == "P0007", "safety_set"] = "no"  # outside the population
    extra = pd.DataFrame([
        ("Q0999", "dryness", "skin"),  # not in the unit table
        ("Q0999", "rash", "skin"),  # not in the unit table (the same id again)
        ("", "redness", "skin"),  # a blank id
        ("P0001", "", "skin"),  # a known unit, a blank term
        ("P0002", "hiccups", "general"),  # a term outside the declared ones
        ("P0004", "x'; DROP TABLE ev_units; --", "skin"),  # another, shaped like SQL: data
        (" P0003 ", " nausea ", "general"),  # padded: P0003 had nausea
        ("P0003", "nausea", "general"),  # and again: counts once
        ("P0007", "dryness", "skin"),  # outside the population: not counted
    ], columns=["subject", "term", "system"])
    return units, pd.concat([events, extra], ignore_index=True)


def expanded(units: pd.DataFrame, events: pd.DataFrame) -> pd.DataFrame:
    """One row per unit and declared term: had_event 1 when the event table holds a row of
    the unit (ids and terms trimmed) with that term, else 0. Plain loops, no join."""
    had = set()
    for subject, term in zip(events["subject"], events["term"], strict=True):
        had.add((subject.strip(), term.strip()))
    rows = []
    for subject, arm, safety in zip(units["subject"], units["arm"], units["safety_set"],
                                    strict=True):
        for system, terms in DECLARED.items():
            for term in terms:
                rows.append((subject, arm, safety, term, system,
                             "1" if (subject, term) in had else "0"))
    return pd.DataFrame(rows, columns=["subject", "arm", "safety_set", "term", "system",
                                       "had_event"])


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory, postgres: PostgresServer
          ) -> dict[str, Any]:
    folder = tmp_path_factory.mktemp("events")
    units, events = tables()
    units.to_csv(folder / "units.csv", index=False)
    events.to_csv(folder / "events.csv", index=False)
    expanded(units, events).to_csv(folder / "expanded.csv", index=False)
    (folder / "events.yaml").write_text(EVENTS_PLAN.replace("__SOURCE__", "").replace(
        "__EVENTS__", "    source: events.csv\n"), encoding="utf-8")
    (folder / "expanded.yaml").write_text(EXPANDED_PLAN, encoding="utf-8")
    postgres.load("ev_units", units)
    postgres.load("ev_events", events)
    (folder / "sql.yaml").write_text(EVENTS_PLAN.replace(
        "__SOURCE__", f"  source: {postgres.url()}\n  table: ev_units\n"
        f"  password_from: {PASSWORD_VARIABLE}\n").replace(
        "__EVENTS__", "    table: ev_events\n"), encoding="utf-8")
    return {"folder": folder, "units": units, "events": events}


def _results(plan: Path, source: DataSource | None, data: Path | None, engine: str
             ) -> dict[str, Any]:
    return compute_results(
        plan_path=plan, plan=load_plan(plan).model, fingerprint="sha256:" + "0" * 64,
        version=None, data_path=data, actor="tester", environment=environment(),
        deviations=[], notes=[], previous_data=None, source=source, engine=engine)


@pytest.fixture(scope="module")
def runs(study: dict[str, Any], postgres: PostgresServer, spark: Any) -> dict[str, Any]:
    folder = study["folder"]
    os.environ[PASSWORD_VARIABLE] = postgres.password
    out = {"expanded": _results(folder / "expanded.yaml", None, folder / "expanded.csv",
                                "pandas")}
    for engine in ENGINES:
        if engine == "sql":
            url = postgres.url()
            source = DataSource("url", url, f"{url} (table ev_units)", table="ev_units",
                                password_from=PASSWORD_VARIABLE)
            out[engine] = _results(folder / "sql.yaml", source, None, engine)
        else:
            out[engine] = _results(folder / "events.yaml", None, folder / "units.csv", engine)
    return out


_SAME = ("id", "level", "group", "table", "estimate", "test", "p_value", "p_adjusted",
         "p_group", "flagged")


@pytest.mark.parametrize("engine", ENGINES)
def test_the_event_table_gives_the_review_of_the_expanded_form(runs: dict[str, Any],
                                                               engine: str) -> None:
    reference = runs["expanded"]["families"][0]
    family = runs[engine]["families"][0]
    assert runs[engine]["engine"] == engine
    assert [m["id"] for m in family["members"]] == [
        "AE[dryness]", "AE[redness]", "AE[rash]", "AE[headache]", "AE[nausea]"]
    for mine, theirs in zip(family["members"], reference["members"], strict=True):
        assert {k: mine[k] for k in _SAME} == {k: theirs[k] for k in _SAME}
    assert family["groups"] == reference["groups"]
    # 120 subjects, one outside the population (P0007): the denominators of every member
    units = tables()[0]
    kept = units.loc[units["safety_set"] == "yes"].groupby("arm").size()
    for member in family["members"]:
        assert member["table"]["totals"] == [int(kept["new"]), int(kept["standard"])]
    assert runs[engine]["population"]["analysed"] == 119


@pytest.mark.parametrize("engine", ENGINES)
def test_departures_and_the_event_table_field_on_every_engine(runs: dict[str, Any],
                                                              engine: str) -> None:
    results = runs[engine]
    found = {d["code"]: d for d in results["deviations"]}
    assert set(found) == {"unmatched-event-id", "blank-event-level", "undeclared-level"}
    # the blank id and Q0999 (twice): 3 rows, 2 ids
    assert found["unmatched-event-id"]["found"] == "(blank), Q0999"
    assert "3 event rows left out" in found["unmatched-event-id"]["detail"]
    assert found["blank-event-level"]["found"] == "1 blank"
    assert found["undeclared-level"]["found"] == "hiccups, x'; DROP TABLE ev_units; --"
    table = results["event_table"]
    events = tables()[1]
    of_p7 = int((events["subject"].str.strip() == "P0007").sum())
    assert of_p7 >= 1
    assert (table["unmatched_rows"], table["unmatched_ids"], table["blank_level_rows"],
            table["outside_rows"]) == (3, 2, 1, of_p7)
    assert table["rows"] == len(tables()[1].index)
    if engine == "pandas":
        assert table["query"] is None
    else:
        assert "LEFT JOIN" in table["query"]
    notes = {n["code"] for n in results["notes"]}
    assert "event-rows-outside-population" in notes


def _study_folder(tmp_path: Path) -> tuple[Path, Path]:
    tmp_path.mkdir(parents=True, exist_ok=True)
    units, events = tables()
    units.to_csv(tmp_path / "units.csv", index=False)
    events.to_csv(tmp_path / "events.csv", index=False)
    plan = tmp_path / "review.yaml"
    plan.write_text(EVENTS_PLAN.replace("__SOURCE__", "").replace(
        "__EVENTS__", "    source: events.csv\n"), encoding="utf-8")
    return plan, tmp_path / "units.csv"


def test_an_event_table_without_its_id_column_is_one_line_exit_2_and_nothing_written(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plan, units = _study_folder(tmp_path)
    events = tables()[1].rename(columns={"subject": "patient"})
    events.to_csv(tmp_path / "events.csv", index=False)
    assert cli.main(["lock", str(plan), "--actor", "ana"]) == 0
    log = tmp_path / "review.audit.jsonl"
    before = log.read_bytes()
    capsys.readouterr()
    assert cli.main(["run", str(plan), str(units), "--actor", "ana"]) == 2
    got = capsys.readouterr()
    assert got.out == ""
    assert got.err.count("\n") == 1
    assert "events.csv" in got.err and "'subject'" in got.err and "data.events.id" in got.err
    assert log.read_bytes() == before
    assert not (tmp_path / "reports").exists() or not any((tmp_path / "reports").rglob("*.json"))
    # the rehearsal refuses it the same way
    assert cli.main(["rehearse", str(plan), str(units), "--actor", "ana",
                     "--out", str(tmp_path / "r")]) == 2
    assert capsys.readouterr().err.count("\n") == 1
    assert not (tmp_path / "r").exists()


def test_a_run_logs_and_verifies_and_the_rerun_recomputes(tmp_path: Path) -> None:
    plan, units = _study_folder(tmp_path)
    api.lock(plan, actor="ana")
    outcome = api.run(plan, units, actor="ana")
    results = json.loads((outcome.folder / "results.json").read_text())
    assert results["event_table"]["data_file"] == "events.csv"
    assert results["families"][0]["outcome"] == "events"
    codes = {d["code"] for d in results["deviations"]}
    assert {"unmatched-event-id", "blank-event-level"} <= codes
    assert cli.main(["verify", str(plan), "--rerun", str(units)]) == 0


def test_the_rehearsal_pools_the_event_counts_per_level(tmp_path: Path) -> None:
    plan, units = _study_folder(tmp_path)
    out = api.rehearse(plan, units, out=tmp_path / "r", actor="ana")
    results = out.results
    table = results["event_table"]
    assert (table["unmatched_rows"], table["unmatched_ids"], table["blank_level_rows"]) == (
        3, 2, 1)
    events = tables()[1]
    known = events.loc[events["subject"].str.strip().str.startswith("P")
                       & (events["term"].str.strip() != "")]
    by_term = known.groupby(known["term"].str.strip()).size()
    assert {r["level"]: r["rows"] for r in table["levels"]} == {
        str(k): int(v) for k, v in by_term.items()}
    family = results["families"][0]
    # pooled over the groups: the units of the population with the term, whatever the dummy
    # allocation
    unit_set = tables()[0]
    inside = set(unit_set.loc[unit_set["safety_set"] == "yes", "subject"])
    for member in family["members"]:
        having = {s.strip() for s, t in zip(events["subject"], events["term"], strict=True)
                  if t.strip() == member["level"] and s.strip() in inside}
        assert member["events"] == len(having)
        assert member["total"] == 119 and member["missing"] == 0
    assert {d["code"] for d in results["deviations"]} >= {"unmatched-event-id",
                                                          "blank-event-level"}


def test_plan_rules_of_the_event_table(tmp_path: Path) -> None:
    plan, _ = _study_folder(tmp_path)
    text = plan.read_text()
    plan.write_text(text.replace("    compare: [new, standard]\n",
                                 "    outcome: had\n    compare: [new, standard]\n"))
    with pytest.raises(PlanError, match="leave outcome out"):
        load_plan(plan)
    plan.write_text(text.replace("    level: term\n", "    level: subject\n"))
    with pytest.raises(PlanError, match="data.events.level: names the same column"):
        load_plan(plan)
    plan.write_text(text.replace("    within: system\n", "").replace(
        "    levels:\n      skin: [dryness, redness, rash]\n      general: [headache, nausea]\n",
        "    levels: [dryness, redness, rash, headache, nausea]\n"))
    with pytest.raises(PlanError, match="needs data.events.within"):
        load_plan(plan)
    plan.write_text(text.replace("    source: events.csv\n", "    table: ev_events\n"))
    with pytest.raises(PlanError, match="data.events.table goes with a database URL"):
        load_plan(plan)
    plan.write_text(text.replace("    source: events.csv\n", "    source: ../events.csv\n"))
    with pytest.raises(PlanError, match="data.events.source"):
        api.run(plan, tmp_path / "units.csv", actor="ana", accept_deviation="trying")
    plan.write_text(text.replace("    over: events\n", "    outcome: had\n    over: term\n")
                    .replace("hypotheses:\n", "outcomes:\n  had: {column: had_event, event: "
                             "[1], no_event: [0], missing: error}\nhypotheses:\n")
                    .replace("    flag_method", "    within: system\n    flag_method"))
    with pytest.raises(PlanError, match="no hypothesis has one, so leave data.events out"):
        load_plan(plan)
    # without data.events, over: events is a column of the unit table, as before
    plain = load_plan(Path(__file__).parents[1] / "plans" / "safety-events.yaml").model
    assert plain.data.events is not None and plain.hypotheses[0].within == "body_system"
    assert plain.outcomes == {}


@pytest.mark.parametrize("engine", ["pandas", "duckdb"])
def test_levels_from_the_data_and_an_ordinary_hypothesis_beside_the_family(
        tmp_path: Path, engine: str) -> None:
    """Without declared levels every level found is a member (hiccups too), sorted by group
    and level, with the counts of the declared run; an ordinary hypothesis on the unit table
    runs beside the family on the same units."""
    plan, units = _study_folder(tmp_path)
    frame = tables()[0]
    frame["completed"] = ["1" if i % 3 else "0" for i in range(len(frame.index))]
    frame.to_csv(units, index=False)
    text = plan.read_text().replace(
        "    levels:\n      skin: [dryness, redness, rash]\n      general: [headache, nausea]\n",
        "").replace("hypotheses:\n", "outcomes:\n  done: {column: completed, event: [1], "
                    "no_event: [0], missing: error}\nhypotheses:\n  - {id: H1, outcome: done, "
                    "compare: [new, standard], test: fisher-exact}\n")
    plan.write_text(text)
    declared_plan, declared_units = _study_folder(tmp_path / "declared")
    declared_run = _results(declared_plan, None, declared_units, engine)
    results = _results(plan, None, units, engine)
    members = {m["level"]: m for m in results["families"][0]["members"]}
    assert list(members) == ["headache", "hiccups", "nausea", "dryness", "rash", "redness",
                             "x'; DROP TABLE ev_units; --"]
    for member in declared_run["families"][0]["members"]:
        assert members[member["level"]]["table"] == member["table"]
    assert members["hiccups"]["table"]["events"] == [
        1 if frame.loc[frame["subject"] == "P0002", "arm"].item() == "new" else 0,
        1 if frame.loc[frame["subject"] == "P0002", "arm"].item() == "standard" else 0]
    codes = {d["code"] for d in results["deviations"]}
    assert "undeclared-level" not in codes
    (h1,) = results["hypotheses"]
    kept = frame.loc[frame["safety_set"] == "yes"]
    assert h1["table"]["totals"] == [int((kept["arm"] == g).sum()) for g in ("new", "standard")]
    assert h1["table"]["events"] == [int(((kept["arm"] == g) & (kept["completed"] == "1")).sum())
                                     for g in ("new", "standard")]


def test_the_event_demo_gives_the_review_of_the_one_table_demo(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``python -m prespec.demo.safety_events`` writes plans/safety-events.yaml with a
    participant and an event table drawn from the one-table demo's data; both plans give the
    same members, p-values and flags."""
    from prespec.demo import safety_events
    from prespec.demo.safety import EVENTS_PLAN_TEXT, write_safety_demo

    root = Path(__file__).parents[1]
    assert (root / "plans" / "safety-events.yaml").read_text() == EVENTS_PLAN_TEXT
    folder = tmp_path / "gel"
    assert safety_events.main([str(folder)]) == 0
    out = capsys.readouterr().out
    assert f"plan: {folder / 'safety-events.yaml'}" in out
    assert sorted(p.name for p in folder.iterdir()) == [
        "safety-events.csv", "safety-events.yaml", "safety-participants.csv"]
    one_plan, one_data = write_safety_demo(tmp_path / "one")
    one = _results(one_plan, None, one_data, "pandas")["families"][0]
    for engine in ("pandas", "duckdb"):
        two = _results(folder / "safety-events.yaml", None, folder / "safety-participants.csv",
                       engine)["families"][0]
        assert [{k: m[k] for k in _SAME} for m in two["members"]] == [
            {k: m[k] for k in _SAME} for m in one["members"]]
        assert two["members_flagged"] == one["members_flagged"] == 4


@pytest.mark.parametrize("engine", ["pandas", "duckdb"])
def test_bad_event_tables_are_one_line_errors_on_every_engine(tmp_path: Path,
                                                              engine: str) -> None:
    from prespec.errors import DataError

    plan, units = _study_folder(tmp_path)
    events = tables()[1]
    moved = events.copy()
    moved.loc[moved["term"].str.strip() == "dryness", "system"] = "general"
    moved.loc[moved.index[moved["term"].str.strip() == "dryness"][:1], "system"] = "skin"
    moved.to_csv(tmp_path / "events.csv", index=False)
    with pytest.raises(DataError, match=r"level 'dryness' is declared under 'skin' .* puts it "
                                        r"under 'general'"):
        _results(plan, None, units, engine)
    blank = events.copy()
    blank.loc[blank["term"].str.strip() == "nausea", "system"] = ""
    blank.to_csv(tmp_path / "events.csv", index=False)
    with pytest.raises(DataError, match=r"level 'nausea' has a blank 'system'"):
        _results(plan, None, units, engine)
    events.iloc[:0].to_csv(tmp_path / "events.csv", index=False)
    with pytest.raises(DataError, match="no rows") as caught:
        _results(plan, None, units, engine)
    assert "\n" not in str(caught.value)


def test_auto_joins_a_large_event_table_with_duckdb(tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    from prespec.data.engines import choose

    plan, units = _study_folder(tmp_path)
    pd.concat([tables()[1]] * 5).to_csv(tmp_path / "events.csv", index=False)  # each row 5x
    small = _results(plan, None, units, "auto")
    assert small["engine"] == "pandas"
    size = (tmp_path / "events.csv").stat().st_size
    assert units.stat().st_size < size
    monkeypatch.setattr(choose, "AUTO_PANDAS_LIMIT", size)  # the unit table stays below it
    large = _results(plan, None, units, "auto")
    assert large["engine"] == "duckdb"
    assert large["families"] == small["families"]


@pytest.mark.parametrize("engine", ["pandas", "duckdb"])
def test_the_event_demo_from_transport_files_gives_the_csv_review(tmp_path: Path,
                                                                   engine: str) -> None:
    """The two tables of the event demo written as transport files (.xpt version 8, by
    pyreadstat ``write_xport``) give the review of the CSV files: the same members, counts,
    p-values and flags, and the same event-table counts apart from the file and its hash."""
    import pyreadstat

    from prespec.demo import safety_events

    folder = tmp_path / "gel"
    assert safety_events.main([str(folder)]) == 0
    for name in ("safety-participants", "safety-events"):
        frame = pd.read_csv(folder / f"{name}.csv", dtype=str, keep_default_na=False)
        pyreadstat.write_xport(frame, str(folder / f"{name}.xpt"), file_format_version=8,
                               table_name=name.replace("-", "_"))
    text = (folder / "safety-events.yaml").read_text()
    assert "source: safety-events.csv" in text
    xpt = folder / "safety-events-xpt.yaml"
    xpt.write_text(text.replace("source: safety-events.csv", "source: safety-events.xpt"))
    data = folder / "safety-participants.xpt"
    got = _results(xpt, DataSource("file", str(data), str(data)), data, engine)
    want = _results(folder / "safety-events.yaml", None, folder / "safety-participants.csv",
                    engine)
    two, one = got["families"][0], want["families"][0]
    assert [{k: m[k] for k in _SAME} for m in two["members"]] == [
        {k: m[k] for k in _SAME} for m in one["members"]]
    assert two["members_flagged"] == one["members_flagged"] == 4
    drop = ("data", "data_file", "query")
    assert {k: v for k, v in got["event_table"].items() if k not in drop} == {
        k: v for k, v in want["event_table"].items() if k not in drop}
    assert got["event_table"]["data_file"] == "safety-events.xpt"


def test_the_rehearsal_shows_the_labels_an_event_table_declares(tmp_path: Path) -> None:
    """An event table written as an SPSS file (pyreadstat ``write_sav``) with column labels and
    labels for two stored terms: the rehearsal lists them beside the columns and levels."""
    import pyreadstat

    from prespec.demo import safety_events
    from prespec.report.blinded import event_table

    folder = tmp_path / "gel"
    assert safety_events.main([str(folder)]) == 0
    frame = pd.read_csv(folder / "safety-events.csv", dtype=str, keep_default_na=False)
    pyreadstat.write_sav(frame, str(folder / "events.sav"),
                         column_labels={"participant": "Participant id",
                                        "event_term": "Adverse event term"},
                         variable_value_labels={"event_term": {"dryness": "Dry skin",
                                                               "redness": "Erythema"}})
    plan = folder / "sav.yaml"
    plan.write_text((folder / "safety-events.yaml").read_text()
                    .replace("source: safety-events.csv", "source: events.sav"))
    out = api.rehearse(plan, folder / "safety-participants.csv", out=tmp_path / "reh",
                       actor="ana")
    ev = out.results["event_table"]
    assert ev["columns"] == [
        {"column": "participant", "role": "data.events.id", "label": "Participant id"},
        {"column": "event_term", "role": "data.events.level", "label": "Adverse event term"},
        {"column": "body_system", "role": "data.events.within"}]
    labelled = {lv["level"]: lv["label"] for lv in ev["levels"] if "label" in lv}
    assert labelled == {"dryness": "Dry skin", "redness": "Erythema"}
    html = event_table(out.results)
    assert "<td>dryness</td><td>Dry skin</td>" in html.replace(' class="num"', "")
    # a CSV event table declares no labels: no columns block, no label column
    plain = api.rehearse(folder / "safety-events.yaml", folder / "safety-participants.csv",
                         out=tmp_path / "reh2", actor="ana")
    assert "columns" not in plain.results["event_table"]
    assert "Label in the file" not in event_table(plain.results)
