"""The ``sql`` engine on a real PostgreSQL server (a throw-away cluster: ``tests/services.py``).

The password comes from the environment variable the plan names, never from the URL; a
missing variable, a missing table or column, a wrong password and an unknown dialect are
one-line errors with exit status 2; column types of the database (integer, double, boolean,
numeric) count as their text would; ids are checked by the server and named in errors; a run
through the command needs no DATA argument and is verified by ``prespec verify``.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from services import PASSWORD_VARIABLE, PostgresServer, postgres_server  # noqa: F401

from prespec.audit import log_path, read_log
from prespec.data import prepare, read_data
from prespec.data.engines.base import DataSource
from prespec.data.engines.fingerprint import frame_row_hash
from prespec.data.engines.pipeline import count_source
from prespec.data.engines.request import count_request
from prespec.data.engines.sql import SqlEngine, column_kind, database_url
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import BadInput, DataError
from prespec.plan import load_plan

PRESPEC = [sys.executable, "-m", "prespec"]
TABLE = "wound_rows"


def cli(*args: str, cwd: Path, env: dict[str, str] | None = None
        ) -> subprocess.CompletedProcess[str]:
    """The command in a fresh process; the password variable only as ``env`` gives it."""
    environment = {**os.environ, "PRESPEC_ACTOR": "test-monitor"}
    environment.pop(PASSWORD_VARIABLE, None)
    environment.update(env or {})
    return subprocess.run([*PRESPEC, *args], check=False, cwd=cwd, env=environment,
                          capture_output=True, text=True, timeout=300)


def database_plan(server: PostgresServer, table: str = TABLE,
                  password_from: str | None = PASSWORD_VARIABLE, url: str | None = None) -> str:
    """The demo plan reading its rows from ``table`` of the server."""
    lines = [f"  source: \"{url or server.url()}\"", f"  table: {table}"]
    if password_from:
        lines.append(f"  password_from: {password_from}")
    return PLAN_TEXT.replace("  id: participant\n",
                             "  id: participant\n" + "\n".join(lines) + "\n")


@pytest.fixture(scope="module")
def demo_frame(tmp_path_factory: pytest.TempPathFactory, postgres: PostgresServer) -> Any:
    """The demo rows, as read from their CSV, in the table ``wound_rows`` (text columns)."""
    path = tmp_path_factory.mktemp("pgdemo") / "demo.csv"
    path.write_text(demo_data(), encoding="utf-8")
    frame = read_data(path)
    postgres.load(TABLE, frame)
    return frame


@pytest.fixture()
def password(postgres: PostgresServer, monkeypatch: pytest.MonkeyPatch) -> str:
    monkeypatch.setenv(PASSWORD_VARIABLE, postgres.password)
    return postgres.password


def source(server: PostgresServer, table: str = TABLE, **kwargs: Any) -> DataSource:
    return DataSource("url", kwargs.pop("url", server.url()), f"{server.url()} (table {table})",
                      table=table, password_from=kwargs.pop("password_from", PASSWORD_VARIABLE))


def plan_model(tmp_path: Path, text: str = PLAN_TEXT) -> Any:
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    return load_plan(path).model


# -- the password -----------------------------------------------------------------------------

def test_the_password_comes_from_the_named_variable(postgres: PostgresServer, password: str
                                                    ) -> None:
    url = database_url(source(postgres))
    assert url.password == password and url.drivername == "postgresql+psycopg"
    assert password not in postgres.url()


def test_an_unset_variable_is_a_one_line_error(postgres: PostgresServer,
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(PASSWORD_VARIABLE, raising=False)
    with pytest.raises(BadInput) as err:
        database_url(source(postgres))
    message = str(err.value)
    assert "\n" not in message and PASSWORD_VARIABLE in message and "not set" in message


def test_a_password_in_the_url_is_refused_by_the_engine(postgres: PostgresServer,
                                                        password: str) -> None:
    with_password = postgres.url().replace("@", f":{password}@")
    with pytest.raises(BadInput) as err:
        database_url(source(postgres, url=with_password))
    assert "holds a password" in str(err.value) and password not in str(err.value)


def test_a_password_in_the_plan_url_is_refused_at_check(postgres: PostgresServer,
                                                        tmp_path: Path) -> None:
    plan = tmp_path / "plan.yaml"
    plan.write_text(database_plan(postgres, url=postgres.url().replace("@", ":s3cret@")),
                    encoding="utf-8")
    done = cli("check", str(plan), cwd=tmp_path)
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "data.source" in lines[0] and "password" in lines[0]
    assert "s3cret" not in done.stderr


def test_a_wrong_password_is_a_one_line_error(postgres: PostgresServer,
                                              monkeypatch: pytest.MonkeyPatch,
                                              demo_frame: Any, tmp_path: Path) -> None:
    monkeypatch.setenv(PASSWORD_VARIABLE, "not-the-password")
    with pytest.raises(DataError) as err:
        count_source(plan_model(tmp_path), source(postgres), engine="sql")
    message = str(err.value)
    assert "\n" not in message and "cannot connect" in message
    assert "not-the-password" not in message


def test_another_dialect_is_refused(postgres: PostgresServer, tmp_path: Path) -> None:
    with pytest.raises(BadInput) as err:
        database_url(DataSource("url", f"sqlite:///{tmp_path / 'x.db'}", "x.db", table="t"))
    assert "'sqlite' dialect" in str(err.value) and "postgresql" in str(err.value)
    with pytest.raises(BadInput) as err:
        database_url(DataSource("url", "spark://", "spark://", table="t"))
    assert "--engine spark" in str(err.value)


# -- tables, columns, types, ids --------------------------------------------------------------

def test_the_demo_counts_equal_the_csv_read_by_pandas(postgres: PostgresServer, password: str,
                                                      demo_frame: Any, tmp_path: Path) -> None:
    plan = plan_model(tmp_path)
    counted = count_source(plan, source(postgres), engine="sql")
    assert counted.engine == "sql"
    assert counted.prepared == prepare(demo_frame, plan, "demo.csv")
    assert counted.prepared.rows_read == 601 and counted.prepared.analysed == 581


def test_a_missing_table_is_a_one_line_error(postgres: PostgresServer, password: str,
                                             demo_frame: Any, tmp_path: Path) -> None:
    with pytest.raises(DataError) as err:
        count_source(plan_model(tmp_path), source(postgres, table="no_such_rows"),
                     engine="sql")
    message = str(err.value)
    assert "\n" not in message and "'no_such_rows' is not in the database" in message
    assert TABLE in message  # the tables that exist are listed


def test_a_missing_column_is_a_one_line_error(postgres: PostgresServer, password: str,
                                              demo_frame: Any, tmp_path: Path) -> None:
    postgres.load("no_outcome_rows", demo_frame.drop(columns=["infected_30d"]))
    with pytest.raises(DataError) as err:
        count_source(plan_model(tmp_path), source(postgres, table="no_outcome_rows"),
                     engine="sql")
    message = str(err.value)
    assert "\n" not in message
    assert ("column 'infected_30d' (outcomes.infection.column) is not in the data "
            "(columns: participant, site, arm, consented)") in message


def test_a_schema_qualified_table(postgres: PostgresServer, password: str, demo_frame: Any,
                                  tmp_path: Path) -> None:
    postgres.load("trial.wound rows", demo_frame)  # a schema, and a space in the name
    plan = plan_model(tmp_path)
    counted = count_source(plan, source(postgres, table="trial.wound rows"), engine="sql")
    assert counted.prepared == prepare(demo_frame, plan, "demo.csv")
    assert '"trial"."wound rows"' in (counted.query or "")


def test_a_view_counts_and_hashes_as_its_table(postgres: PostgresServer, password: str,
                                               demo_frame: Any, tmp_path: Path) -> None:
    """A view has no size on disk: its fingerprint is streamed, and equals the table's
    (hashed by the server)."""
    import sqlalchemy as sa

    with postgres.engine().begin() as conn:
        conn.execute(sa.text(f'CREATE OR REPLACE VIEW "wound view" AS SELECT * FROM {TABLE}'))
    plan = plan_model(tmp_path)
    table = count_source(plan, source(postgres), engine="sql")
    view = count_source(plan, source(postgres, table="wound view"), engine="sql")
    assert view.prepared == table.prepared
    assert view.data_hash == table.data_hash == frame_row_hash(
        demo_frame, count_request(plan, "rows"))


def test_typed_columns_count_as_their_text(postgres: PostgresServer, password: str,
                                           demo_frame: Any, tmp_path: Path) -> None:
    """An integer outcome, a double and a numeric filter column and a boolean consent give
    the counts of the same rows written as text."""
    typed = demo_frame.copy()
    typed["infected_30d"] = pd.Series([None if v.strip() == "" else int(v)
                                       for v in typed["infected_30d"]], dtype=object)
    typed["score"] = [float(i % 7) + 0.5 for i in range(len(typed.index))]
    typed["dose"] = [f"{i % 5}.50" for i in range(len(typed.index))]
    typed["consent_flag"] = [v == "yes" for v in typed["consented"]]
    postgres.load("typed_rows", typed, types={"infected_30d": "integer",
                                              "score": "double precision",
                                              "dose": "numeric(6, 2)",
                                              "consent_flag": "boolean"})
    text = typed.astype(object).map(lambda v: "" if v is None else str(v))
    extra = ('    - {column: score, between: [1, 5.5]}\n'
             '    - {column: dose, in: [1.5, "2.50", 3]}\n'
             '    - {column: consent_flag, in: ["True"]}\n')
    plan = plan_model(tmp_path, PLAN_TEXT.replace('    - {column: consented, in: ["yes"]}\n',
                                                  extra))
    counted = count_source(plan, source(postgres, table="typed_rows"), engine="sql")
    with SqlEngine(source(postgres, table="typed_rows")) as eng:
        kinds = eng.column_kinds()
    assert (kinds["infected_30d"], kinds["score"], kinds["dose"], kinds["consent_flag"]) == (
        "integer", "float", "other", "bool")
    reference = prepare(text, plan, "typed.csv")
    assert counted.prepared == reference
    assert 0 < reference.analysed < 300  # the filters did select


def test_column_kinds_of_sqlalchemy_types() -> None:
    sa = pytest.importorskip("sqlalchemy")

    assert [column_kind(t) for t in (sa.Text(), sa.String(20), sa.Integer(), sa.BigInteger(),
                                     sa.Float(), sa.Double(), sa.Numeric(6, 2), sa.Boolean(),
                                     sa.Date(), sa.Enum("a", "b"))] == [
        "text", "text", "integer", "integer", "float", "float", "other", "bool", "other",
        "other"]


@pytest.mark.parametrize("change,expected", [
    ("duplicate", "duplicate ids in column 'participant': 'WD-0002' (2 rows)"),
    ("blank", "blank id in column 'participant' (1 row)"),
])
def test_ids_are_checked_by_the_server(postgres: PostgresServer, password: str,
                                       demo_frame: Any, tmp_path: Path, change: str,
                                       expected: str) -> None:
    rows = demo_frame.copy()
    rows.loc[5, "participant"] = " WD-0002 " if change == "duplicate" else "  "
    postgres.load("bad_id_rows", rows)
    with pytest.raises(DataError) as err:
        count_source(plan_model(tmp_path), source(postgres, table="bad_id_rows"),
                     engine="sql")
    assert expected in str(err.value) and "\n" not in str(err.value)


def test_an_error_in_the_counts_names_ids(postgres: PostgresServer, password: str,
                                          demo_frame: Any, tmp_path: Path) -> None:
    """missing: error with unmapped values: the message names the ids of those rows (found
    by a follow-up query), where a file's message names lines."""
    rows = demo_frame.copy()
    rows.loc[[10, 3], "infected_30d"] = "unknown"
    postgres.load("unmapped_rows", rows)
    plan = plan_model(tmp_path, PLAN_TEXT.replace("missing: exclude", "missing: error"))
    with pytest.raises(DataError) as err:
        count_source(plan, source(postgres, table="unmapped_rows"), engine="sql")
    message = str(err.value)
    assert "'unknown' (2)" in message and "ids 'WD-0004', 'WD-0011'" in message


# -- through the command ----------------------------------------------------------------------

def test_run_through_the_command_without_data_then_verify(postgres: PostgresServer,
                                                          demo_frame: Any,
                                                          tmp_path: Path) -> None:
    plan = tmp_path / "plan.yaml"
    plan.write_text(database_plan(postgres), encoding="utf-8")
    env = {PASSWORD_VARIABLE: postgres.password}
    assert cli("lock", str(plan), cwd=tmp_path, env=env).returncode == 0

    unset = cli("run", str(plan), cwd=tmp_path)  # the variable is not set
    assert unset.returncode == 2
    assert unset.stderr.strip().count("\n") == 0 and PASSWORD_VARIABLE in unset.stderr
    assert not (tmp_path / "reports").exists()

    done = cli("run", str(plan), "--out", "report", cwd=tmp_path, env=env)
    assert done.returncode == 0, done.stderr
    results = json.loads((tmp_path / "report" / "results.json").read_text())
    assert results["engine"] == "sql" and results["data"].startswith("sha256:")
    assert results["population"] == {"rows_read": 601, "excluded_by_filter": 19,
                                     "excluded_group": 1, "analysed": 581}
    entry = read_log(log_path(plan))[-1]
    assert entry["action"] == "run" and entry["details"]["engine"] == "sql"
    assert entry["data"] == results["data"]
    assert 'FROM "wound_rows"' in entry["details"]["query"]
    assert postgres.password not in (tmp_path / "plan.audit.jsonl").read_text()
    verified = cli("verify", str(plan), cwd=tmp_path)
    assert verified.returncode == 0, verified.stdout + verified.stderr


def test_rehearse_through_the_command_never_names_the_group(postgres: PostgresServer,
                                                            demo_frame: Any,
                                                            tmp_path: Path) -> None:
    plan = tmp_path / "plan.yaml"
    plan.write_text(database_plan(postgres), encoding="utf-8")
    env = {PASSWORD_VARIABLE: postgres.password}
    done = cli("rehearse", str(plan), "--out", "dry", cwd=tmp_path, env=env)
    assert done.returncode == 0, done.stderr
    entry = read_log(log_path(plan))[-1]
    assert entry["action"] == "rehearse" and entry["details"]["engine"] == "sql"
    assert '"arm"' not in entry["details"]["query"]
    assert '"participant"' in entry["details"]["query"]
