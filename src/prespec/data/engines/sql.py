"""The ``sql`` engine: a database table through an SQLAlchemy URL, counted by the server.

The reduction runs on the server as the compiler's aggregate queries (``aggregate.py``,
``compiler.py``): the population filter, the group and outcome mapping and the ``GROUP BY``
all happen there, and only the small weighted result comes back; the id checks are two more
aggregate queries. No raw row is fetched: only the few ids an error message names. The data
fingerprint (``fingerprint.py``) is computed by the server too, for a table under
``SERVER_HASH_LIMIT`` on disk; for a larger table or a view the rows' fingerprint lines are
streamed through a server-side cursor into the hash, and never kept.

The URL holds no password: the plan names the environment variable that holds it
(``data.password_from``). Values are bound through ``sqlalchemy.text`` parameters and names
are quoted as identifiers by the compiler; the session is read-only. Tested for real on PostgreSQL through psycopg 3;
other servers that SQLAlchemy reaches with its ``postgresql`` dialect (another driver, or a
server that speaks PostgreSQL's SQL) go the same way. Other dialects are refused with a
message, since the compiled SQL uses PostgreSQL's functions (``btrim``, ``~``).
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Iterator
from typing import Any, ClassVar

import pandas as pd

from ...errors import BadInput, DataError
from . import columns
from .aggregate import AggregatingEngine
from .base import CountRequest, DataSource
from .compiler import Query, compile_row_lines, quote_table

# SQLAlchemy dialect name -> the compiler's dialect
SUPPORTED_DIALECTS = {"postgresql": "postgresql"}
# a plain ``postgresql://`` URL is read with psycopg 3 (SQLAlchemy's own default is psycopg2)
DEFAULT_DRIVERS = {"postgresql": "postgresql+psycopg"}
STREAM_BATCH = 20_000  # fingerprint lines per round trip
READ_ONLY = "SET SESSION CHARACTERISTICS AS TRANSACTION READ ONLY"
# the fingerprint is hashed by the server for a table below this size on disk (the lines of
# its rows, fewer bytes, then fit in a text value, at most 1 GB); above it, they are
# streamed into the hash here
SERVER_HASH_LIMIT = 256 * 1024 * 1024


def _first_line(exc: BaseException) -> str:
    text = str(getattr(exc, "orig", None) or exc).strip()
    return text.splitlines()[0].strip() if text else type(exc).__name__


def database_url(source: DataSource) -> Any:
    """The SQLAlchemy URL of ``source`` with the password from its environment variable.

    Refused, one line each: a URL that does not parse, a URL holding a password, a dialect
    the compiler does not speak, and a named variable that is not set.
    """
    import sqlalchemy as sa

    shown = source.shown
    try:
        url = sa.engine.make_url(source.location)
    except sa.exc.ArgumentError:
        raise BadInput(f"{shown}: data.source is not a database URL "
                       "(dialect://user@host:port/database)") from None
    if url.password is not None:
        raise BadInput(f"{shown}: the database URL holds a password; remove it and name the "
                       "environment variable that holds it in data.password_from")
    backend = url.get_backend_name()
    if backend == "spark":
        raise BadInput(f"{shown}: a table of the Spark session is read by --engine spark")
    if backend not in SUPPORTED_DIALECTS:
        raise BadInput(f"{shown}: the sql engine does not speak the {backend!r} dialect "
                       f"(supported: {', '.join(SUPPORTED_DIALECTS)})")
    if url.drivername in DEFAULT_DRIVERS:
        url = url.set(drivername=DEFAULT_DRIVERS[url.drivername])
    if source.password_from:
        password = os.environ.get(source.password_from)
        if not password:
            raise BadInput(f"{shown}: the environment variable {source.password_from} "
                           "(data.password_from) that holds the database password is not set")
        url = url.set(password=password)
    return url


def _split_table(name: str, shown: str) -> tuple[str | None, str]:
    parts = name.split(".")
    if len(parts) > 2 or not all(parts):
        raise BadInput(f"{shown}: data.table {name!r} is not a table or schema.table name")
    return (parts[0], parts[1]) if len(parts) == 2 else (None, parts[0])


def column_kind(sql_type: Any) -> str:
    """The compiler's kind of an SQLAlchemy column type."""
    import sqlalchemy as sa
    from sqlalchemy.dialects.postgresql import HSTORE

    if isinstance(sql_type, sa.Enum):  # a String to SQLAlchemy, but btrim() refuses it
        return "other"
    if isinstance(sql_type, sa.LargeBinary):  # bytea: read as UTF-8 text (columns.py)
        return "binary"
    if isinstance(sql_type, sa.ARRAY):
        return "list"
    if isinstance(sql_type, HSTORE):
        return "map"
    if isinstance(sql_type, sa.JSON):  # json, jsonb
        return "JSON"
    if isinstance(sql_type, sa.Boolean):
        return "bool"
    if isinstance(sql_type, sa.Integer):
        return "integer"
    if isinstance(sql_type, sa.Float):  # REAL, DOUBLE PRECISION (Numeric is "other")
        return "float"
    if isinstance(sql_type, sa.String):  # VARCHAR, TEXT, CHAR
        return "text"
    return "other"


class SqlEngine(AggregatingEngine):
    """A table of a database reached through SQLAlchemy; every count is made by the server."""

    name = "sql"
    dialect: ClassVar[str] = "postgresql"

    def __init__(self, source: DataSource) -> None:
        super().__init__(source)
        if not source.table:
            raise BadInput(f"{source.shown}: a database source needs data.table")
        try:
            import sqlalchemy as sa
        except ImportError:
            raise BadInput("the sql engine needs SQLAlchemy and a driver: "
                           "pip install 'prespec[sql]'") from None
        url = database_url(source)
        self._schema, self._table = _split_table(source.table, source.shown)
        self._kinds: dict[str, str] | None = None
        self._names: list[str] = []
        self._connection: Any = None
        try:
            self._engine = sa.create_engine(url, poolclass=sa.pool.NullPool)
            self._connection = self._engine.connect()
            # the engine only reads: every transaction of this session is read-only, so no
            # statement sent here can change the database, whatever it holds
            self._connection.execute(sa.text(READ_ONLY))
            self._connection.commit()
        except ImportError as exc:
            raise BadInput(f"{source.shown}: the database driver is not installed "
                           f"({exc.name}): pip install 'prespec[sql]'") from None
        except sa.exc.SQLAlchemyError as exc:
            raise DataError(f"{source.shown}: cannot connect to the database "
                            f"({_first_line(exc)})") from None

    def close(self) -> None:
        if self._connection is not None:
            self._connection.close()
            self._connection = None
        engine = getattr(self, "_engine", None)
        if engine is not None:
            engine.dispose()

    def relation(self, request: CountRequest | None) -> str:
        return quote_table(self.source.table or "", self.dialect)

    def column_kinds(self) -> dict[str, str]:
        if self._kinds is None:
            import sqlalchemy as sa

            inspector = sa.inspect(self._connection)
            try:
                with warnings.catch_warnings():  # a record type: found by _records below
                    warnings.filterwarnings("ignore", "Did not recognize type",
                                            sa.exc.SAWarning)
                    described = inspector.get_columns(self._table, schema=self._schema)
            except sa.exc.NoSuchTableError:
                raise DataError(self._no_table(inspector)) from None
            except sa.exc.SQLAlchemyError as exc:
                raise DataError(f"{self.source.shown}: cannot read the columns of table "
                                f"{self.source.table!r} ({_first_line(exc)})") from None
            finally:
                self._connection.rollback()
            self._names = [str(c["name"]) for c in described]
            self._kinds = {str(c["name"]): column_kind(c["type"]) for c in described}
            for name in self._records():
                self._kinds[name] = "struct"
        return self._kinds

    def _records(self) -> list[str]:
        """The columns of a composite (record) type, which SQLAlchemy does not recognise."""
        found = self.fetch(Query(
            "SELECT a.attname AS name FROM pg_attribute AS a JOIN pg_type AS t ON t.oid = "
            "a.atttypid WHERE a.attrelid = to_regclass(:rec_table) AND a.attnum > 0 AND NOT "
            "a.attisdropped AND t.typtype = :rec_type",
            {"rec_table": self.relation(None), "rec_type": "c"}, self.dialect))
        return [str(n) for n in found["name"]]

    def check_header(self) -> None:
        """``columns.check_names`` on the table's column names (a table cannot repeat a name
        exactly, but ``arm``, `` arm`` and ``ARM`` can stand side by side)."""
        self.column_kinds()
        columns.check_names(self._names, self.source.shown)

    def _no_table(self, inspector: Any) -> str:
        where = f"schema {self._schema!r}" if self._schema else "the database"
        try:
            tables = sorted(inspector.get_table_names(schema=self._schema)
                            + inspector.get_view_names(schema=self._schema))
        except Exception:  # noqa: BLE001 - the listing only decorates the message
            tables = []
        listing = ", ".join(tables[:20]) + (" …" if len(tables) > 20 else "")
        return (f"{self.source.shown}: table {self.source.table!r} is not in {where} "
                f"(tables: {listing or 'none'})")

    def fetch(self, query: Query) -> pd.DataFrame:
        import sqlalchemy as sa

        try:
            result = self._connection.execute(sa.text(query.text), query.params)
            names = list(result.keys())
            rows = [tuple(r) for r in result]
        except sa.exc.SQLAlchemyError as exc:
            raise DataError(f"{self.source.shown}: the database refused the query "
                            f"({_first_line(exc)})") from None
        finally:
            self._connection.rollback()  # read only: end the transaction, hold no snapshot
        columns = list(zip(*rows, strict=True)) if rows else [() for _ in names]
        return pd.DataFrame({n: pd.Series([_plain(v) for v in values], dtype=object)
                             for n, values in zip(names, columns, strict=True)}, columns=names)

    def row_hash(self, request: CountRequest, relation: str, kinds: dict[str, str]) -> str:
        """The data fingerprint, computed by the server when the table is small enough for
        its rows' lines to fit in one text value (its size on disk under
        ``SERVER_HASH_LIMIT``); else, and for a view, streamed into the hash here, batch by
        batch, and never kept. Both give the same hash (``fingerprint.py``)."""
        size = self.fetch(Query("SELECT pg_total_relation_size(to_regclass(:fp_table)) AS size",
                                {"fp_table": relation}, self.dialect))["size"].iloc[0]
        if size is not None and 0 < int(size) < SERVER_HASH_LIMIT:
            lines = compile_row_lines(request, relation, self.dialect, kinds)
            digest = self.fetch(server_hash_query(lines))["digest"].iloc[0]
            return f"sha256:{digest}"
        return super().row_hash(request, relation, kinds)

    def stream_lines(self, query: Query) -> Iterator[list[str]]:
        import sqlalchemy as sa

        try:
            result = self._connection.execution_options(
                stream_results=True, yield_per=STREAM_BATCH).execute(sa.text(query.text),
                                                                      query.params)
            for batch in result.partitions():
                yield [row[0] for row in batch]
        except sa.exc.SQLAlchemyError as exc:
            raise DataError(f"{self.source.shown}: the database refused the query "
                            f"({_first_line(exc)})") from None
        finally:
            self._connection.rollback()


def server_hash_query(lines: Query) -> Query:
    """The fingerprint of ``compile_row_lines``' rows computed by PostgreSQL itself: SHA-256
    of the lines in their order, each followed by a newline, in UTF-8 (``fingerprint.py``)."""
    order = 'prespec_id COLLATE "C", line COLLATE "C"'
    text = (f"SELECT encode(sha256(convert_to(COALESCE(string_agg(line || :fp_newline, "
            f":fp_empty ORDER BY {order}), :fp_empty), 'UTF8')), 'hex') AS digest "
            f"FROM ({lines.text}) AS prespec_fingerprint")
    return Query(text, {**lines.params, "fp_newline": "\n", "fp_empty": ""}, lines.dialect)


def _plain(value: Any) -> Any:
    """A driver's value as prepare reads a cell: a Decimal as its text, the rest as it is."""
    from decimal import Decimal

    return str(value) if isinstance(value, Decimal) else value
