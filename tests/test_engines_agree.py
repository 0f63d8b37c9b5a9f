"""All four engines on the same rows give the same count tables, departures, notes and results.

The engines: pandas (the reference: ``prepare`` on the full frame, as before engines existed),
duckdb (the file), sql (the same rows in a PostgreSQL table, through ``tests/services.py``)
and spark (the file through PySpark). Two data sets: the demo's (``prespec.demo``) and a
hostile one written below (blanks, whitespace, numbers as ``1`` and ``1.0``, unexpected
groups, unmapped outcome values, filters on numbers and on text, ``is_missing``, strata, an
estimand with intercurrent events, a value shaped like an SQL injection). The expected
counts of the hostile set are worked by hand in the comments, so the agreement is not only
among the engines but also with the hand count.
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
    spark_view,
)

from prespec import api
from prespec.audit import log_path, read_log
from prespec.data import read_data
from prespec.data.engines import pipeline
from prespec.data.engines.base import DataSource
from prespec.data.engines.fingerprint import frame_row_hash
from prespec.data.engines.pipeline import count_source
from prespec.data.engines.request import count_request
from prespec.demo import PLAN_TEXT, demo_data
from prespec.environment import environment
from prespec.execute import compute_results
from prespec.plan import load_plan

ENGINES = ("pandas", "duckdb", "sql", "spark")
INJECTION = "x'; DROP TABLE t; --"

HOSTILE_PLAN = """\
prespec: 1
title: Invented rows that try every corner of the matching rule
data:
  id: pid
  group: arm
  groups: [t, c]
  include:
    - {column: consent, in: ["yes", "x'; DROP TABLE t; --"]}
    - {column: age, between: [18, 80]}
    - {column: withdrawn, is_missing: true}
outcomes:
  heal: {column: y, event: [1], no_event: [0], missing: exclude}
  leak: {column: leak, event: ["yes"], no_event: ["no"], missing: no-event}
alpha: 0.05
multiplicity: holm
hypotheses:
  - {id: H1, outcome: heal, compare: [t, c], test: fisher-exact}
  - {id: H2, outcome: heal, compare: [t, c], test: cochran-mantel-haenszel, strata: [site]}
  - id: H3
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    estimand:
      intercurrent:
        - {event: rescue dressing, column: rescue, happened: ["yes"], strategy: composite,
           counts_as: event}
        - {event: stopped dressing, column: stopped, happened: [1],
           strategy: while-on-treatment, outcome_column: y_stop}
  - {id: H4, outcome: leak, compare: [t, c], test: pearson-chi-square}
"""

# Each row with what it tests. Filter: consent in (yes, the injection text), age a number in
# [18, 80], withdrawn blank. Kept rows marked K; the outcome y: 1 / 1.0 / +1 / " 1 " are
# the event, 0 / 0.0 / " 0 " no event, 2 / "yes" / nan unmapped, blank or spaces missing.
HOSTILE_ROWS = [
    # pid, arm, consent, age, withdrawn, site, y, leak, rescue, stopped, y_stop
    ("P01", "t", "yes", "30", "", "north", "1", "no", "no", "0", ""),  # K t event
    ("P02", " t ", " yes ", "30.0", "", "north", "1.0", "yes", "no", "0", ""),  # K t event
    ("P03", "t", "yes", " 45 ", "  ", "south", "0", "no", "yes", "0", ""),  # K t no->comp
    ("P04", "t", "yes", "1e1", "", "south", "0.0", "", "no", "1", "1"),  # age 10: out
    ("P05", "t", "yes", "abc", "", "north", "1", "no", "no", "0", ""),  # age text: out
    ("P06", "t", "no", "50", "", "north", "1", "no", "no", "0", ""),  # consent no: out
    ("P07", "t", "yes", "50", "2027-03-01", "north", "1", "no", "no", "0", ""),  # withdrawn
    ("P08", "t", INJECTION, "60", "", "south", " 0 ", "no", "no", "1.0", "1"),  # K t wot
    ("P09", "t", "yes", "61", "", "", "+1", "yes", "", "", ""),  # K t event, blank site
    ("P10", "t", "yes", "62", "", "north", "2", "no", "no", "0", ""),  # K t unmapped 2
    ("P11", "t", "yes", "63", "", "north", "", "no", "no", "0", ""),  # K t blank
    ("P12", "t", "yes", "64", "", "south", "   ", "maybe", "yes", "0", ""),  # K t blank
    ("P13", "c", "yes", "18", "", "north", "0", "no", "no", "0", ""),  # K c (age = low)
    ("P14", "c", "yes", "80", "", "north", "0", "yes", "no", "0", ""),  # K c (age = high)
    ("P15", "c", "yes", "80.5", "", "south", "1", "no", "no", "0", ""),  # age: out
    ("P16", "c", "yes", "1_000", "", "south", "1", "no", "no", "0", ""),  # not a number: out
    ("P17", "c", "yes", "inf", "", "south", "1", "no", "no", "0", ""),  # not a number: out
    ("P18", "c", "yes", "40", "", "south", "1", "no", "no", "1", "0"),  # K c wot -> 0
    ("P19", "c", "yes", "41", "", "south", "yes", "no", "no", "0", ""),  # K c unmapped yes
    ("P20", "c", "yes", "42", "", "north", "nan", "no", "no", "0", ""),  # K c unmapped nan
    ("P21", "C", "yes", "43", "", "north", "1", "no", "no", "0", ""),  # K unexpected group
    ("P22", "", "yes", "44", "", "north", "1", "no", "no", "0", ""),  # K blank group
    ("P23", "x", "yes", "45", "", "south", "0", "no", "no", "0", ""),  # K unexpected group
    ("P24", "c", "yes", "46", "", "south", "1", "no", "yes", "0", ""),  # K c event
    ("P25", "c", "yes", "47", "", "north", "0", "no", "no", "0", ""),  # K c
    ("P26", "t", "Yes", "48", "", "north", "1", "no", "no", "0", ""),  # case: out
    ("P27", "c", "", "49", "", "north", "1", "no", "no", "0", ""),  # consent blank: out
    ("P28", "t", "yes", "", "", "north", "1", "no", "no", "0", ""),  # age blank: out
    # digits of another script are text, not numbers, for every engine (Python's float()
    # takes them, SQL casts do not): an age of Arabic-Indic 45 is out, an outcome of
    # Arabic-Indic 1 is unmapped
    ("P29", "c", "yes", "\u0664\u0665", "", "north", "0", "no", "no", "0", ""),  # age: out
    ("P30", "c", "yes", "50", "", "north", "\u0661", "no", "no", "0", ""),  # K c unmapped
]
HOSTILE_COLUMNS = ["pid", "arm", "consent", "age", "withdrawn", "site", "y", "leak", "rescue",
                   "stopped", "y_stop"]


def _csv_text(rows: list[tuple[str, ...]]) -> str:
    frame = pd.DataFrame(rows, columns=HOSTILE_COLUMNS)
    return str(frame.to_csv(index=False, lineterminator="\n"))


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory, postgres: PostgresServer) -> dict[str, Any]:
    """Both data sets as CSV files and as PostgreSQL tables of text columns."""
    folder = tmp_path_factory.mktemp("agree")
    sets = {}
    for name, plan_text, csv_text in (("demo", PLAN_TEXT, demo_data()),
                                      ("hostile", HOSTILE_PLAN, _csv_text(HOSTILE_ROWS))):
        (folder / name).mkdir()
        plan_path = folder / name / "plan.yaml"
        plan_path.write_text(plan_text, encoding="utf-8")
        data_path = folder / name / "data.csv"
        data_path.write_text(csv_text, encoding="utf-8")
        frame = read_data(data_path)
        postgres.load(f"{name}_rows", frame)
        sets[name] = {"plan": plan_path, "data": data_path, "frame": frame,
                      "model": load_plan(plan_path).model, "table": f"{name}_rows"}
    return sets


@pytest.fixture(autouse=True)
def _password(postgres: PostgresServer, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(PASSWORD_VARIABLE, postgres.password)


def source_for(engine: str, entry: dict[str, Any], server: PostgresServer) -> DataSource:
    if engine == "sql":
        return DataSource("url", server.url(), f"{server.url()} (table {entry['table']})",
                          table=entry["table"], password_from=PASSWORD_VARIABLE)
    return DataSource("file", str(entry["data"]), str(entry["data"]))


def results_of(engine: str, entry: dict[str, Any], server: PostgresServer,
               spark_session: Any) -> dict[str, Any]:
    """The results document of a run (without writing it), through execute.compute_results."""
    return compute_results(
        plan_path=entry["plan"], plan=entry["model"], fingerprint="sha256:" + "0" * 64,
        version=None, data_path=None, actor="tester", environment=environment(),
        deviations=[], notes=[], previous_data=None,
        source=source_for(engine, entry, server), engine=engine)


@pytest.fixture(scope="module")
def outcomes(study: dict[str, Any], postgres: PostgresServer, spark: Any
             ) -> dict[tuple[str, str], Any]:
    """Per (data set, engine): the counts and the results document of one compute_results
    (the counts captured from its call of count_source)."""
    done = {}
    os.environ[PASSWORD_VARIABLE] = postgres.password
    counted: list[Any] = []

    def recording(*args: Any, **kwargs: Any) -> Any:
        counted.append(original(*args, **kwargs))
        return counted[-1]

    original = pipeline.count_source
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(pipeline, "count_source", recording)
        for name, entry in study.items():
            for engine in ENGINES:
                results = results_of(engine, entry, postgres, spark)
                done[(name, engine)] = (counted[-1], results)
    return done


@pytest.mark.parametrize("name", ["demo", "hostile"])
@pytest.mark.parametrize("engine", ENGINES[1:])
def test_counts_departures_and_notes_equal_pandas(outcomes: dict[tuple[str, str], Any],
                                                   name: str, engine: str) -> None:
    reference, _ = outcomes[(name, "pandas")]
    counted, _ = outcomes[(name, engine)]
    assert counted.engine == engine
    assert counted.prepared == reference.prepared  # every count, stratum, departure, note


@pytest.mark.parametrize("name", ["demo", "hostile"])
@pytest.mark.parametrize("engine", ENGINES[1:])
def test_results_equal_pandas(outcomes: dict[tuple[str, str], Any], name: str,
                              engine: str) -> None:
    _, reference = outcomes[(name, "pandas")]
    _, results = outcomes[(name, engine)]
    for key in ("population", "groups", "hypotheses", "deviations", "notes"):
        assert json.dumps(results[key], sort_keys=True) == json.dumps(reference[key],
                                                                      sort_keys=True), key
    assert results["engine"] == engine and reference["engine"] == "pandas"
    assert reference["query"] is None and "GROUP BY" in results["query"]


def test_the_hostile_counts_are_the_hand_counts(outcomes: dict[tuple[str, str], Any]) -> None:
    """The hand count of HOSTILE_ROWS (see the comments there), for every engine."""
    for engine in ENGINES:
        prepared = outcomes[("hostile", engine)][0].prepared
        # kept: P01-03, P08-14, P18-25, P30 = 19 rows; out: the other 11
        assert (prepared.rows_read, prepared.excluded_by_filter, prepared.excluded_group,
                prepared.analysed) == (30, 11, 3, 16), engine
        heal = prepared.outcomes["heal"]
        # t: P01, P02, P09 events; P03, P08 no event; P10 unmapped; P11, P12 blank
        assert (heal.of("t").events, heal.of("t").total, heal.of("t").blank,
                heal.of("t").unmapped) == (3, 5, 2, 1), engine
        # c: P18, P24 events; P13, P14, P25 no event; P19, P20, P30 unmapped
        assert (heal.of("c").events, heal.of("c").total, heal.of("c").blank,
                heal.of("c").unmapped) == (2, 5, 0, 3), engine
        # leak (missing: no-event): t P02, P09 yes; P12 'maybe' unmapped -> no event
        leak = prepared.outcomes["leak"]
        assert (leak.of("t").events, leak.of("t").total) == (2, 8), engine
        assert (leak.of("c").events, leak.of("c").total) == (1, 8), engine
        codes = sorted(d.code for d in prepared.deviations)
        assert codes == ["unexpected-group", "unmapped-outcome-value",
                         "unmapped-outcome-value"], engine
        group = next(d for d in prepared.deviations if d.code == "unexpected-group")
        assert group.found == "(blank), C, x", engine
        # strata: P09 (blank site) is left out of H2's strata, with a note
        strata = prepared.strata[("heal", ("site",))]
        assert [s.values for s in strata] == [("north",), ("south",)], engine
        north = strata[0].counts
        # north, t: P01, P02 events (P10 unmapped, P11 blank); c: P13, P14, P25 no event,
        # P20 unmapped
        assert (north.of("t").events, north.of("t").total, north.of("c").events,
                north.of("c").total) == (2, 2, 0, 3), engine
        assert "blank-stratum" in [n.code for n in prepared.notes], engine
        # H3: rescue (composite, event) first: P03, P12 (t) and P24 (c) become events;
        # stopped then takes y_stop: P08 -> 1 (t), P18 -> 0 (c).
        # t: P01, P02, P03, P08, P09, P12 events, P10, P11 missing; c: P24 event,
        # P13, P14, P18, P25 no event, P19, P20 unmapped
        h3 = prepared.by_hypothesis["H3"].counts
        assert (h3.of("t").events, h3.of("t").total) == (6, 6), engine
        assert (h3.of("c").events, h3.of("c").total) == (1, 5), engine


def test_the_injection_shaped_value_matches_as_data_and_the_table_survives(
        study: dict[str, Any], postgres: PostgresServer) -> None:
    import sqlalchemy as sa

    entry = study["hostile"]
    postgres.load("t", entry["frame"])  # the table the value names
    source = DataSource("url", postgres.url(), "t", table="t", password_from=PASSWORD_VARIABLE)
    counted = count_source(entry["model"], source, engine="sql")
    assert INJECTION not in (counted.query or "") and "DROP" not in (counted.query or "")
    # P08 (consent is the injection text) is kept: 19 kept rows, as in the hand count
    assert counted.prepared.rows_read - counted.prepared.excluded_by_filter == 19
    with postgres.engine().connect() as conn:
        assert conn.execute(sa.text('SELECT COUNT(*) FROM "t"')).scalar() == len(HOSTILE_ROWS)
        kept = conn.execute(sa.text('SELECT pid FROM "t" WHERE consent = :v'),
                            {"v": INJECTION}).scalar()
    assert kept == "P08"


def test_the_sql_engine_cannot_write(study: dict[str, Any], postgres: PostgresServer) -> None:
    """Its session is read-only: even a statement that would drop the table is refused."""
    from prespec.data.engines.compiler import Query
    from prespec.data.engines.sql import SqlEngine
    from prespec.errors import DataError

    postgres.load("t", study["hostile"]["frame"])
    source = DataSource("url", postgres.url(), "t", table="t", password_from=PASSWORD_VARIABLE)
    with SqlEngine(source) as eng, pytest.raises(DataError) as err:
        eng.fetch(Query('DROP TABLE "t"', {}, "postgresql"))
    assert "read-only transaction" in str(err.value)
    with postgres.engine().connect() as conn:
        assert conn.execute(sa_text('SELECT COUNT(*) FROM "t"')).scalar() == len(HOSTILE_ROWS)


def sa_text(sql: str) -> Any:
    import sqlalchemy as sa

    return sa.text(sql)


def _shuffled(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.sample(frac=1.0, random_state=7).reset_index(drop=True)


def test_fingerprints_of_database_and_spark_sources(study: dict[str, Any], spark: Any,
                                                    postgres: PostgresServer,
                                                    tmp_path: Path) -> None:
    """One definition (fingerprint.frame_row_hash on the same rows) in PostgreSQL and Spark;
    reordering the rows keeps it, changing one cell the analysis reads changes it."""
    from prespec.data.engines import sql as sql_engine
    from prespec.data.engines.spark import SparkEngine
    from prespec.data.engines.sql import SqlEngine

    entry = study["demo"]
    frame = entry["frame"]
    request = count_request(entry["model"], "demo")
    expected = frame_row_hash(frame, request)
    changed = frame.copy()
    changed.loc[17, "infected_30d"] = "1" if changed.loc[17, "infected_30d"] != "1" else "0"
    variants = {"same": frame, "reordered": _shuffled(frame), "changed": changed}
    hashes: dict[tuple[str, str], str] = {}

    def row_hash(engine: Any) -> str:
        with engine:
            return str(engine.row_hash(request, engine.relation(request),
                                       engine.column_kinds()))

    for label, rows in variants.items():
        postgres.load("fingerprint_rows", rows)
        database = DataSource("url", postgres.url(), "fingerprint_rows",
                              table="fingerprint_rows", password_from=PASSWORD_VARIABLE)
        hashes[("sql", label)] = row_hash(SqlEngine(database))  # hashed by the server
        with pytest.MonkeyPatch.context() as patch:  # as for a large table: streamed here
            patch.setattr(sql_engine, "SERVER_HASH_LIMIT", 1)
            hashes[("sql-streamed", label)] = row_hash(SqlEngine(database))
        spark_view(spark, "fingerprint_rows", rows)
        hashes[("spark", label)] = row_hash(SparkEngine(DataSource(
            "url", "spark://", "fingerprint_rows", table="fingerprint_rows")))
    for engine in ("sql", "sql-streamed", "spark"):
        assert hashes[(engine, "same")] == expected, engine
        assert hashes[(engine, "reordered")] == expected, engine
        assert hashes[(engine, "changed")] == frame_row_hash(changed, request) != expected
    # a glob of two files (the rows in two halves, reordered) is hashed over its rows too,
    # and the whole reduction gives that hash
    rows = variants["reordered"]
    rows.iloc[:250].to_csv(tmp_path / "a.csv", index=False)
    rows.iloc[250:].to_csv(tmp_path / "b.csv", index=False)
    with SparkEngine(DataSource("glob", str(tmp_path / "*.csv"), "*.csv")) as eng:
        assert eng.reduce(request).data_hash == expected


def test_run_log_entry_names_engine_and_query(study: dict[str, Any], postgres: PostgresServer,
                                             spark: Any, tmp_path: Path) -> None:
    """Through api.run: the log entry of a run records the engine and the query text, and
    verify passes; the query names no plan value (they are bound parameters)."""
    import shutil

    entry = study["demo"]
    plan = tmp_path / "plan.yaml"
    shutil.copy(entry["plan"], plan)
    api.lock(plan, actor="tester")
    for engine, data in (("spark", entry["data"]), ("sql", None)):
        if engine == "sql":
            text = PLAN_TEXT.replace(
                "  id: participant\n",
                f"  id: participant\n  source: \"{postgres.url()}\"\n"
                f"  table: {entry['table']}\n  password_from: {PASSWORD_VARIABLE}\n")
            plan.write_text(text, encoding="utf-8")
            api.amend(plan, reason="the rows are read from the database", actor="tester")
        api.run(plan, data, engine=engine, actor="tester")
        last = read_log(log_path(plan))[-1]
        assert last["action"] == "run"
        assert last["details"]["engine"] == engine
        query = last["details"]["query"]
        assert "GROUP BY" in query and "'yes'" not in query and "negative-pressure" not in query
    assert api.verify(plan).passed  # an integrity failure would raise
