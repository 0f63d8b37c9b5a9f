"""Servers the engine tests need: a throw-away PostgreSQL cluster and one local Spark session.

Fixtures, imported by the test modules that use them (``from services import
postgres_server``; the fixtures' names are ``postgres`` and ``spark``):

- ``postgres`` (session scope): initdb into a temporary folder, a server on a free loopback
  port with its socket in that folder, a password-authenticated role, stopped and removed at
  the end. Run as root (CI), the server runs as the ``postgres`` system user, since initdb
  refuses root. The binaries are found on PATH or under /usr/lib/postgresql/*/bin.
- ``spark`` (session scope): the Spark engine's own session (``local[2]``), so the whole test
  session starts Java once.

Without the binaries, Java or the Python packages the tests skip with the reason; with
``PRESPEC_REQUIRE_SERVICES=1`` (set by .ci/run) each of these is a test failure instead.
"""

from __future__ import annotations

import os
import pwd
import secrets
import shutil
import socket
import subprocess
import tempfile
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

REQUIRE = os.environ.get("PRESPEC_REQUIRE_SERVICES", "") not in ("", "0")
PASSWORD_VARIABLE = "PRESPEC_TEST_PG_PASSWORD"


def unavailable(reason: str) -> None:
    """Skip the test, or fail it when the services are required (CI)."""
    if REQUIRE:
        pytest.fail(f"{reason} (PRESPEC_REQUIRE_SERVICES is set)", pytrace=False)
    pytest.skip(reason)


def postgres_bin() -> Path | None:
    """The folder holding initdb and pg_ctl: PATH first, else the newest Debian version."""
    found = shutil.which("initdb")
    if found and shutil.which("pg_ctl"):
        return Path(os.path.realpath(found)).parent
    candidates = sorted(Path("/usr/lib/postgresql").glob("*/bin/initdb"),
                        key=lambda p: _version(p.parent.parent.name), reverse=True)
    return candidates[0].parent if candidates else None


def _version(text: str) -> tuple[int, ...]:
    return tuple(int(part) for part in text.split(".") if part.isdigit())


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


@dataclass(frozen=True)
class PostgresServer:
    """A running throw-away server: connect as ``user`` with ``password`` over TCP."""

    host: str
    port: int
    user: str
    password: str
    database: str
    folder: Path

    def url(self, database: str | None = None) -> str:
        """The SQLAlchemy URL without a password, as a plan writes it."""
        return (f"postgresql+psycopg://{self.user}@{self.host}:{self.port}/"
                f"{database or self.database}")

    def engine(self) -> Any:
        """An SQLAlchemy engine with the password, for the tests' own set-up."""
        import sqlalchemy as sa

        url = sa.engine.make_url(self.url()).set(password=self.password)
        return sa.create_engine(url, poolclass=sa.pool.NullPool)

    def load(self, table: str, rows: list[dict[str, Any]] | Any,
             types: dict[str, str] | None = None) -> None:
        """(Re)create ``table`` (``schema.table`` allowed) holding ``rows``: a list of
        mappings or a DataFrame; columns are ``text`` unless ``types`` names an SQL type.
        Cells go in as bound values (None is NULL), in the order given."""
        import sqlalchemy as sa

        if hasattr(rows, "to_dict"):  # a frame: NaN as NULL, cells as Python values
            rows = rows.astype(object).where(rows.notna(), None)
            records = rows.to_dict(orient="records")
        else:
            records = list(rows)
        columns = list(records[0]) if records else list(types or {})
        types = types or {}

        def q(name: str) -> str:
            return '"' + name.replace('"', '""') + '"'

        qualified = ".".join(q(part) for part in table.split("."))
        spec = ", ".join(f"{q(c)} {types.get(c, 'text')}" for c in columns)
        marks = ", ".join(f":c{i}" for i in range(len(columns)))
        with self.engine().begin() as conn:
            if "." in table:
                conn.execute(sa.text(f"CREATE SCHEMA IF NOT EXISTS {q(table.split('.')[0])}"))
            conn.execute(sa.text(f"DROP TABLE IF EXISTS {qualified}"))
            conn.execute(sa.text(f"CREATE TABLE {qualified} ({spec})"))
            if records:
                conn.execute(sa.text(f"INSERT INTO {qualified} VALUES ({marks})"),
                             [{f"c{i}": r[c] for i, c in enumerate(columns)} for r in records])


class _Runner:
    """Runs the server's commands as an unprivileged user when the tests run as root."""

    def __init__(self) -> None:
        self.user: str | None = None
        if os.geteuid() == 0:
            try:
                pwd.getpwnam("postgres")
            except KeyError:
                unavailable("running as root and there is no 'postgres' user to run "
                            "the PostgreSQL server as")
            self.user = "postgres"

    def own(self, path: Path) -> None:
        if self.user is not None:
            entry = pwd.getpwnam(self.user)
            os.chown(path, entry.pw_uid, entry.pw_gid)

    def __call__(self, args: list[str], **kwargs: Any) -> subprocess.CompletedProcess[str]:
        command = args if self.user is None else ["runuser", "-u", self.user, "--", *args]
        return subprocess.run(command, capture_output=True, text=True, check=False,
                              env={**os.environ, "LC_ALL": "C", "LANG": "C"},
                              cwd="/", timeout=120, **kwargs)


def _fail_with(step: str, done: subprocess.CompletedProcess[str], log: Path | None) -> None:
    tail = (done.stderr or done.stdout).strip().splitlines()[-3:]
    if log is not None and log.exists():
        tail += log.read_text(errors="replace").strip().splitlines()[-5:]
    pytest.fail(f"PostgreSQL {step} failed: {' | '.join(tail)}", pytrace=False)


@pytest.fixture(scope="session", name="postgres")
def postgres_server() -> Iterator[PostgresServer]:
    """A fresh PostgreSQL cluster for the test session (see the module docstring)."""
    try:
        import psycopg  # noqa: F401
        import sqlalchemy  # noqa: F401
    except ImportError as exc:
        unavailable(f"the sql extra is not installed ({exc.name})")
    binaries = postgres_bin()
    if binaries is None:
        unavailable("PostgreSQL's initdb and pg_ctl are not installed "
                    "(Debian: apt-get install postgresql)")
        return
    run = _Runner()
    folder = Path(tempfile.mkdtemp(prefix="prespec-pg-"))
    run.own(folder)
    data, log = folder / "data", folder / "server.log"
    password = secrets.token_urlsafe(18)
    pwfile = folder / "pw"
    pwfile.write_text(password + "\n")
    run.own(pwfile)
    user = "prespec_test"
    started = False
    try:
        done = run([str(binaries / "initdb"), "-D", str(data), "-U", user, "-E", "UTF8",
                    "--no-locale", "--auth=scram-sha-256", f"--pwfile={pwfile}", "--no-sync"])
        if done.returncode != 0:
            _fail_with("initdb", done, None)
        pwfile.unlink()
        for attempt in range(3):
            port = _free_port()
            options = (f"-c listen_addresses=127.0.0.1 -c port={port} "
                       f"-c unix_socket_directories={folder} -c fsync=off "
                       "-c synchronous_commit=off -c full_page_writes=off")
            done = run([str(binaries / "pg_ctl"), "-D", str(data), "-l", str(log), "-w",
                        "-t", "60", "-o", options, "start"])
            if done.returncode == 0:
                started = True
                break
            if attempt == 2:
                _fail_with("start", done, log)
            time.sleep(0.5)
        server = PostgresServer("127.0.0.1", port, user, password, "postgres", folder)
        _wait_ready(server)
        yield server
    finally:
        if started:
            run([str(binaries / "pg_ctl"), "-D", str(data), "-m", "fast", "-w", "stop"])
        shutil.rmtree(folder, ignore_errors=True)


def _wait_ready(server: PostgresServer) -> None:
    import psycopg

    for _ in range(50):
        try:
            with psycopg.connect(host=server.host, port=server.port, user=server.user,
                                 password=server.password, dbname=server.database,
                                 connect_timeout=5):
                return
        except psycopg.OperationalError:
            time.sleep(0.2)
    pytest.fail("PostgreSQL started but refuses connections", pytrace=False)


@pytest.fixture(scope="session", name="spark")
def spark_fixture() -> Any:
    """The Spark engine's session (one per process, ``local[2]``), or a skip with the reason."""
    try:
        import pyspark  # noqa: F401
    except ImportError:
        unavailable("the spark extra is not installed (pyspark)")
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        unavailable("Java is not installed (Debian: apt-get install openjdk-17-jre-headless)")
    from prespec.data.engines.spark import spark_session

    return spark_session()


def spark_view(session: Any, name: str, frame: Any) -> None:
    """A temporary view of the session holding ``frame``'s cells as text (None is NULL)."""
    from pyspark.sql.types import StringType, StructField, StructType

    schema = StructType([StructField(str(c), StringType(), True) for c in frame.columns])
    rows = [[None if v is None else str(v) for v in row]
            for row in frame.astype(object).itertuples(index=False)]
    session.createDataFrame(rows, schema=schema).createOrReplaceTempView(name)
