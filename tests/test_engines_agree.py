"""All four engines on the same rows give the same count tables, departures, notes and results.

The engines: pandas (the reference: ``prepare`` on the full frame, as before engines existed),
duckdb (the file), sql (the same rows in a PostgreSQL table, through ``tests/services.py``)
and spark (the file through PySpark). Two data sets: the demo's (``prespec.demo.wound``) and a
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
from prespec.common.environment import environment
from prespec.data import read_data
from prespec.data.engines import pipeline
from prespec.data.engines.base import DataSource
from prespec.data.engines.fingerprint import frame_row_hash
from prespec.data.engines.pipeline import count_source
from prespec.data.engines.request import count_request
from prespec.demo.adjusted import PLAN_TEXT as ADJUSTED_PLAN
from prespec.demo.adjusted import adjusted_frame
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.plan import load_plan
from prespec.workflow.execute import compute_results

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
    adjusted = adjusted_frame().to_csv(index=False, lineterminator="\n")
    for name, plan_text, csv_text in (("demo", PLAN_TEXT, demo_data()),
                                      ("hostile", HOSTILE_PLAN, _csv_text(HOSTILE_ROWS)),
                                      ("adjusted", ADJUSTED_PLAN, adjusted)):
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


@pytest.mark.parametrize("name", ["demo", "hostile", "adjusted"])
@pytest.mark.parametrize("engine", ENGINES[1:])
def test_counts_departures_and_notes_equal_pandas(outcomes: dict[tuple[str, str], Any],
                                                   name: str, engine: str) -> None:
    reference, _ = outcomes[(name, "pandas")]
    counted, _ = outcomes[(name, engine)]
    assert counted.engine == engine
    assert counted.prepared == reference.prepared  # every count, stratum, departure, note


@pytest.mark.parametrize("name", ["demo", "hostile", "adjusted"])
@pytest.mark.parametrize("engine", ENGINES[1:])
def test_results_equal_pandas(outcomes: dict[tuple[str, str], Any], name: str,
                              engine: str) -> None:
    _, reference = outcomes[(name, "pandas")]
    _, results = outcomes[(name, engine)]
    for key in ("population", "flow", "groups", "hypotheses", "deviations", "notes"):
        assert json.dumps(results[key], sort_keys=True) == json.dumps(reference[key],
                                                                      sort_keys=True), key
    assert results["engine"] == engine and reference["engine"] == "pandas"
    assert reference["query"] is None and "GROUP BY" in results["query"]


def test_the_adjusted_primary_and_stratified_secondary_ran_on_every_engine(
        outcomes: dict[tuple[str, str], Any]) -> None:
    """The covariate-adjusted primary fitted its working model (no fallback) and the
    stratified secondary weighted its four centres, on the grouped rows of every engine; the
    SQL engines fetched one row per distinct (group, outcome, covariates), not every row."""
    for engine in ENGINES:
        counted, results = outcomes[("adjusted", engine)]
        h1, h2 = results["hypotheses"]
        assert h1["test"] == "g-computation" and h1["adjusted"]["fallback"] is None, engine
        assert [t["term"] for t in h1["adjusted"]["model"]["terms"]] == [
            "intercept", "group", "age", "frail", "centre=hill", "centre=river",
            "centre=valley"], engine
        assert h2["test"] == "stratified-score", engine
        assert len(h2["stratified"]["stratum_weights"]) == 4, engine
        assert [d["code"] for d in results["deviations"]] == ["missing-covariate"], engine
        units = counted.prepared.units["H1"]
        assert int(units.weights.sum()) == sum(h1["table"]["totals"]), engine
        assert len(units.weights) < int(units.weights.sum()), engine  # grouped


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


def test_the_hostile_flow_is_the_hand_count(outcomes: dict[tuple[str, str], Any]) -> None:
    """The participant flow of HOSTILE_ROWS by hand, for every engine: each row left out
    under the first condition it fails (consent, then age, then withdrawn)."""
    for engine in ENGINES:
        flow = outcomes[("hostile", engine)][1]["flow"]
        # t: P01-P12, P26, P28; c: P13-P20, P24, P25, P27, P29, P30; other: P21-P23
        assert flow["read"] == {"groups": {"t": 14, "c": 13}, "other": 3}, engine
        excluded = [c["excluded"] for c in flow["conditions"]]
        assert excluded == [
            {"groups": {"t": 2, "c": 1}, "other": 0},  # consent: P06, P26 (t); P27 (c)
            # age: P04 (10), P05 (abc), P28 (blank) (t); P15, P16, P17, P29 (c)
            {"groups": {"t": 3, "c": 4}, "other": 0},
            {"groups": {"t": 1, "c": 0}, "other": 0},  # withdrawn: P07 (t)
        ], engine
        assert [c["condition"] for c in flow["conditions"]] == [
            f"is one of: yes, {INJECTION}", "between 18 and 80", "is blank"], engine
        assert flow["outside_groups"] == 3 and flow["analysed"] == {"t": 8, "c": 8}, engine
        assert flow["outcomes"] == {"heal": {"missing": "exclude", "favourable": None},
                                    "leak": {"missing": "no-event", "favourable": None}}


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


# -- columns each engine once read its own way (issue 14, item 11) ------------------------------
# One rule per case, the same on every engine (prespec.data.engines.columns): bytes are read as
# UTF-8 text, nested columns are refused, names repeated (trimmed, ignoring case) are refused.

COLUMN_PLAN = """\
prespec: 1
title: Invented dressing rows whose columns the engines once read each in its own way
data:
  id: pid
  group: arm
  groups: [gauze, écume]
outcomes:
  heal: {column: y, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
hypotheses:
  - {id: H1, outcome: heal, compare: [gauze, écume], test: fisher-exact}
"""

# pid, arm (bytes), y (bytes of these digits), note (bytes the plan does not read)
BYTES_ROWS = [
    ("B01", b"gauze", "1", b"ok"),  # gauze event
    ("B02", b"gauze", "1", b"\xff"),  # gauze event; the note is not UTF-8 and not read
    ("B03", b" gauze ", "1", b"ok"),  # gauze event (trimmed)
    ("B04", b"gauze", "0", b"ok"),  # gauze no event
    ("B05", "écume".encode(), "0", b"ok"),  # écume (two bytes for é) no event
    ("B06", "écume".encode(), "0", None),  # écume no event
    ("B07", "écume".encode(), "1", b"ok"),  # écume event
    ("B08", "écume".encode(), "0", b"ok"),  # écume no event
    ("B09", b"", "1", b"ok"),  # blank group: left out
    ("B10", None, "0", b"ok"),  # blank (null) group: left out
]
# the same rows with two group cells that are not text: a lone 0xff and a NUL
BAD_BYTES_ROWS = [row if row[0] not in ("B02", "B04") else
                  (row[0], b"gau\xffze" if row[0] == "B02" else b"gau\x00ze", *row[2:])
                  for row in BYTES_ROWS]
Y_VALUES = [1, 1, 1, 0, 0, 0, 1, 0]
NESTED_PIDS = [f"N{i}" for i in range(1, 9)]
NESTED_ARMS = ["gauze"] * 4 + ["écume"] * 4
NESTED_REFUSAL = ("column 'y' (outcomes.heal.column) holds {} values; prespec compares single "
                  "values (text, numbers, true or false), so give the plan a column of those")


def _names_refusal(name: str, first: str, second: str) -> str:
    return (f"2 columns are named {name!r} (columns 2 {first!r} and 3 {second!r}; names are "
            "compared trimmed and ignoring case); rename all but one")


# case -> (what the file engines read, how PostgreSQL holds it, the answer of every engine):
# an answer is the tuple (gauze events, gauze total, écume events, écume total, left out)
# or the refusal after "<source>: ". None for PostgreSQL: a table cannot repeat a name.
COLUMN_CASES: dict[str, tuple[str, str | None, Any]] = {
    "bytes": ("parquet", "bytea", (3, 4, 1, 4, 2)),
    "bytes-not-text": ("parquet", "bytea",
                       ("column 'arm' (data.group) holds bytes, read as UTF-8 text, and 2 "
                        "cells are not UTF-8 text (or hold a NUL character)")),
    "list": ("parquet", "bigint[]", NESTED_REFUSAL.format("list")),
    "map": ("parquet", "hstore", NESTED_REFUSAL.format("map")),
    "struct": ("parquet", "prespec_heal_record", NESTED_REFUSAL.format("struct")),
    "name-and-spaced-name": ("csv", "text", _names_refusal("arm", "arm", " arm")),
    "name-twice": ("csv", None, _names_refusal("arm", "arm", "arm")),
    "name-in-two-cases": ("csv", "text", _names_refusal("arm", "arm", "ARM")),
    "name-twice-parquet": ("parquet", None, _names_refusal("arm", "arm", "arm")),
}


def _column_case_files(folder: Path) -> dict[str, Path]:
    """Each case as the file the file engines read."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    files = {}

    def bytes_table(rows: list[tuple[Any, ...]]) -> Any:
        pid, arm, y, note = (list(c) for c in zip(*rows, strict=True))
        return pa.table({"pid": pid, "arm": pa.array(arm, pa.binary()),
                         "y": pa.array([v.encode() for v in y], pa.binary()),
                         "note": pa.array(note, pa.binary())})

    for name, rows in (("bytes", BYTES_ROWS), ("bytes-not-text", BAD_BYTES_ROWS)):
        files[name] = folder / f"{name}.parquet"
        pq.write_table(bytes_table(rows), files[name])
    nested = {"list": pa.array([[v] for v in Y_VALUES], pa.list_(pa.int64())),
              "map": pa.array([[("a", v)] for v in Y_VALUES], pa.map_(pa.string(), pa.int64())),
              "struct": pa.array([{"a": v} for v in Y_VALUES], pa.struct([("a", pa.int64())]))}
    for name, column in nested.items():
        files[name] = folder / f"{name}.parquet"
        pq.write_table(pa.table({"pid": NESTED_PIDS, "arm": NESTED_ARMS, "y": column}),
                       files[name])
    for name, second in (("name-and-spaced-name", " arm"), ("name-twice", "arm"),
                         ("name-in-two-cases", "ARM")):
        files[name] = folder / f"{name}.csv"
        lines = [f"pid,arm,{second},y"] + [f"{p},{a},x,{v}" for p, a, v in
                                           zip(NESTED_PIDS, NESTED_ARMS, Y_VALUES, strict=True)]
        files[name].write_text("\n".join(lines) + "\n", encoding="utf-8")
    files["name-twice-parquet"] = folder / "name-twice.parquet"
    pq.write_table(pa.Table.from_arrays(
        [pa.array(NESTED_PIDS), pa.array(NESTED_ARMS), pa.array(["x"] * 8),
         pa.array([str(v) for v in Y_VALUES])], names=["pid", "arm", "arm", "y"]),
        files["name-twice-parquet"])
    return files


def _column_case_tables(server: PostgresServer) -> None:
    """Each case PostgreSQL can hold as a table named after it (``-`` as ``_``)."""
    import sqlalchemy as sa

    with server.engine().begin() as conn:
        conn.execute(sa.text("CREATE EXTENSION IF NOT EXISTS hstore"))
        conn.execute(sa.text("DROP TYPE IF EXISTS prespec_heal_record CASCADE"))
        conn.execute(sa.text("CREATE TYPE prespec_heal_record AS (a bigint)"))
    for name, rows in (("bytes", BYTES_ROWS), ("bytes-not-text", BAD_BYTES_ROWS)):
        server.load(name.replace("-", "_"),
                    [{"pid": p, "arm": a, "y": y.encode(), "note": n} for p, a, y, n in rows],
                    types={"pid": "text", "arm": "bytea", "y": "bytea", "note": "bytea"})
    cells = {"list": "{{{}}}", "map": '"a"=>"{}"', "struct": "({})"}
    for name, shape in cells.items():
        server.load(name, [{"pid": p, "arm": a, "y": shape.format(v)} for p, a, v in
                           zip(NESTED_PIDS, NESTED_ARMS, Y_VALUES, strict=True)],
                    types={"pid": "text", "arm": "text", "y": COLUMN_CASES[name][1] or ""})
    for name, second in (("name-and-spaced-name", " arm"), ("name-in-two-cases", "ARM")):
        server.load(name.replace("-", "_"),
                    [{"pid": p, "arm": a, second: "x", "y": str(v)} for p, a, v in
                     zip(NESTED_PIDS, NESTED_ARMS, Y_VALUES, strict=True)])


@pytest.fixture(scope="module")
def column_cases(tmp_path_factory: pytest.TempPathFactory, postgres: PostgresServer
                 ) -> dict[str, Any]:
    folder = tmp_path_factory.mktemp("columns")
    plan = folder / "plan.yaml"
    plan.write_text(COLUMN_PLAN, encoding="utf-8")
    files = _column_case_files(folder)
    _column_case_tables(postgres)
    return {"model": load_plan(plan).model, "files": files}


def _column_case_source(engine: str, case: str, files: dict[str, Path],
                        server: PostgresServer) -> DataSource:
    if engine == "sql":
        table = case.replace("-", "_")
        return DataSource("url", server.url(), f"{server.url()} (table {table})", table=table,
                          password_from=PASSWORD_VARIABLE)
    return DataSource("file", str(files[case]), str(files[case]))


# every case on every engine, but the two PostgreSQL cannot hold (a table repeating a name)
COLUMN_RUNS = [(case, engine) for case in COLUMN_CASES for engine in ENGINES
               if engine != "sql" or COLUMN_CASES[case][1] is not None]


@pytest.mark.parametrize(("case", "engine"), COLUMN_RUNS)
def test_column_cases_give_the_same_answer_on_every_engine(
        column_cases: dict[str, Any], postgres: PostgresServer, spark: Any, case: str,
        engine: str) -> None:
    """Each case, on each engine, gives the hand count or the one refusal written above."""
    from prespec.errors import DataError

    answer = COLUMN_CASES[case][2]
    source = _column_case_source(engine, case, column_cases["files"], postgres)
    if isinstance(answer, str):
        with pytest.raises(DataError) as refused:
            count_source(column_cases["model"], source, engine=engine)
        assert str(refused.value) == f"{source.shown}: {answer}"
        return
    counted = count_source(column_cases["model"], source, engine=engine)
    assert counted.engine == engine
    prepared = counted.prepared
    heal = prepared.outcomes["heal"]
    assert (heal.of("gauze").events, heal.of("gauze").total, heal.of("écume").events,
            heal.of("écume").total, prepared.excluded_group) == answer
    assert prepared.rows_read == len(BYTES_ROWS)
    assert [(d.code, d.found) for d in prepared.deviations] == [("unexpected-group",
                                                                 "(blank)")]
    reference = count_source(column_cases["model"], _column_case_source(
        "pandas", case, column_cases["files"], postgres), engine="pandas")
    assert prepared == reference.prepared


# byte strings against Python's strict UTF-8 decoder: valid (ASCII, two-, three- and four-byte
# forms, the largest code point, a byte-order mark) and not (a lone 0xff, a lone continuation
# byte, a cut sequence, overlong forms, an encoded surrogate, a code point above U+10FFFF, and
# a NUL, which is UTF-8 but not a PostgreSQL text)
UTF8_SAMPLES = [b"", b"gauze", "écume".encode(), "\u20ac".encode(), "\U0001f600".encode(),
                "\U0010ffff".encode(), b"\xef\xbb\xbfgauze", b"\xff", b"\x80", b"\xc3",
                b"\xe2\x82", b"\xc0\xaf", b"\xe0\x80\xaf", b"\xed\xa0\x80", b"\xf4\x90\x80\x80",
                b"\xf8\x88\x80\x80\x80", b"gau\x00ze"]


def test_the_bytes_rule_is_pythons_strict_utf8_on_every_sql_dialect(
        postgres: PostgresServer, spark: Any) -> None:
    """``_Sql.not_text`` and ``_Sql.text`` of a bytes column, run by DuckDB, PostgreSQL and
    Spark, agree with ``bytes.decode('utf-8')`` (strict) on every sample, NUL refused."""
    import duckdb
    import pyarrow as pa
    import sqlalchemy as sa
    from pyspark.sql.types import BinaryType, StringType, StructField, StructType

    from prespec.data.engines.columns import valid_text
    from prespec.data.engines.compiler import _Sql

    def strict(cell: bytes) -> bool:
        try:
            cell.decode("utf-8")
        except UnicodeDecodeError:
            return False
        return b"\x00" not in cell

    expected = {f"S{i:02d}": strict(b) for i, b in enumerate(UTF8_SAMPLES)}
    assert expected == {f"S{i:02d}": valid_text(b) for i, b in enumerate(UTF8_SAMPLES)}
    assert sum(expected.values()) == 7  # the first seven are valid text
    rows = [{"pid": f"S{i:02d}", "b": b} for i, b in enumerate(UTF8_SAMPLES)]
    found: dict[str, dict[str, bool]] = {}
    texts: dict[str, dict[str, str]] = {}

    def query(dialect: str, relation: str) -> tuple[str, dict[str, Any]]:
        sql = _Sql(dialect, {"b": "binary"})
        text = (f"SELECT pid, {sql.not_text('b')} AS bad, CASE WHEN NOT {sql.not_text('b')} "
                f"THEN {sql.text('b')} END AS t FROM {relation}")
        return text, sql.params

    con = duckdb.connect()
    con.register("samples", pa.table({"pid": [r["pid"] for r in rows],
                                      "b": pa.array([r["b"] for r in rows], pa.binary())}))
    text, params = query("duckdb", "samples")
    result = con.execute(text, params).fetchall()
    found["duckdb"] = {p: not bad for p, bad, _ in result}
    texts["duckdb"] = {p: t for p, _, t in result if t is not None}
    postgres.load("utf8_samples", rows, types={"pid": "text", "b": "bytea"})
    text, params = query("postgresql", '"utf8_samples"')
    with postgres.engine().connect() as conn:
        result = [tuple(r) for r in conn.execute(sa.text(text), params)]
    found["postgresql"] = {p: not bad for p, bad, _ in result}
    texts["postgresql"] = {p: t for p, _, t in result if t is not None}
    schema = StructType([StructField("pid", StringType()), StructField("b", BinaryType())])
    spark.createDataFrame([(r["pid"], bytearray(r["b"])) for r in rows],
                          schema).createOrReplaceTempView("utf8_samples")
    text, params = query("spark", "utf8_samples")
    result = [tuple(r) for r in spark.sql(text, args=params).collect()]
    found["spark"] = {p: not bad for p, bad, _ in result}
    texts["spark"] = {p: t for p, _, t in result if t is not None}
    decoded = {f"S{i:02d}": b.decode("utf-8").strip() for i, b in enumerate(UTF8_SAMPLES)
               if expected[f"S{i:02d}"]}
    for dialect, valid in found.items():
        assert valid == expected, dialect
        # blank cells aside, the text is Python's decoding, trimmed
        assert {p: t for p, t in texts[dialect].items() if t} == {
            p: t for p, t in decoded.items() if t}, dialect


@pytest.mark.parametrize("engine", ENGINES)
def test_a_rehearsal_reads_bytes_as_text_on_every_engine(
        column_cases: dict[str, Any], postgres: PostgresServer, spark: Any,
        engine: str) -> None:
    """The rows a rehearsal reads (no group column): the outcome's bytes as UTF-8 text."""
    source = _column_case_source(engine, "bytes", column_cases["files"], postgres)
    frame = pipeline.blinded_rows(column_cases["model"], source, engine=engine).frame
    rows = sorted(zip(frame["pid"], frame["y"], strict=True))
    assert rows == [(p, y) for p, _, y, _ in BYTES_ROWS]


def test_repeated_names_in_a_glob_and_in_a_spark_table(column_cases: dict[str, Any],
                                                       spark: Any, tmp_path: Path) -> None:
    """A glob: every file's header is checked and the file named (duckdb, spark); a table of
    the Spark session: its schema's names."""
    from prespec.errors import DataError

    good = tmp_path / "a.csv"
    good.write_text("pid,arm,y\nG1,gauze,1\n", encoding="utf-8")
    bad = tmp_path / "b.csv"
    bad.write_text("pid,arm,Arm,y\nG2,gauze,x,1\n", encoding="utf-8")
    refusal = _names_refusal("arm", "arm", "Arm")
    for engine in ("duckdb", "spark"):
        source = DataSource("glob", str(tmp_path / "*.csv"), "*.csv")
        with pytest.raises(DataError) as refused:
            count_source(column_cases["model"], source, engine=engine)
        assert str(refused.value) == f"{bad}: {refusal}", engine
    spark_view(spark, "repeated_names", pd.DataFrame(
        {"pid": ["G1"], "arm": ["gauze"], "ARM": ["x"], "y": ["1"]}))
    source = DataSource("url", "spark://", "the table", table="repeated_names")
    with pytest.raises(DataError) as refused:
        count_source(column_cases["model"], source, engine="spark")
    assert str(refused.value) == f"the table: {_names_refusal('arm', 'arm', 'ARM')}"


def test_blank_names_of_trailing_commas_are_not_repeated_names(column_cases: dict[str, Any],
                                                               spark: Any,
                                                               tmp_path: Path) -> None:
    """A header ending in commas (as spreadsheets write) has blank names, which every file
    reader names apart; they are not a repeated name, and the counts are the hand count."""
    data = tmp_path / "trailing.csv"
    lines = ["pid,arm,y,,"] + [f"{p},{a},{v},," for p, a, v in
                               zip(NESTED_PIDS, NESTED_ARMS, Y_VALUES, strict=True)]
    data.write_text("\n".join(lines) + "\n", encoding="utf-8")
    for engine in ("pandas", "duckdb", "spark"):
        counted = count_source(column_cases["model"], DataSource("file", str(data), str(data)),
                               engine=engine)
        heal = counted.prepared.outcomes["heal"]
        # gauze N1-N3 events, N4 not; écume N7 event, N5, N6, N8 not
        assert (heal.of("gauze").events, heal.of("gauze").total, heal.of("écume").events,
                heal.of("écume").total) == (3, 4, 1, 4), engine


def test_a_json_column_of_a_table_is_refused(column_cases: dict[str, Any],
                                            postgres: PostgresServer) -> None:
    """json and jsonb hold documents, not single values: refused as the nested kinds are."""
    from prespec.errors import DataError

    for sql_type in ("json", "jsonb"):
        postgres.load("json_rows", [{"pid": p, "arm": a, "y": str(v)} for p, a, v in
                                    zip(NESTED_PIDS, NESTED_ARMS, Y_VALUES, strict=True)],
                      types={"pid": "text", "arm": "text", "y": sql_type})
        source = DataSource("url", postgres.url(), "json rows", table="json_rows",
                            password_from=PASSWORD_VARIABLE)
        with pytest.raises(DataError) as refused:
            count_source(column_cases["model"], source, engine="sql")
        assert str(refused.value) == f"json rows: {NESTED_REFUSAL.format('JSON')}", sql_type
