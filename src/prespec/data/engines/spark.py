"""The ``spark`` engine: files (CSV, Parquet, a glob of either) or a table, counted by Spark.

PySpark in local mode (``local[2]``): one session per process, started on first use, with
quiet logs and bound to the loopback address. CSV is read with every column as text (header,
UTF-8, RFC 4180 quotes, fields may span lines); Parquet keeps its types; a glob reads every
matching file, columns matched by name (a column missing from a file is NULL there, as DuckDB's
``union_by_name`` does). A table is one of the session's catalog: ``data.source: "spark://"``
with ``data.table`` (``--engine spark``), or a ``DataSource`` of kind ``url`` in Python.

The reduction is the compiler's SQL in the ``spark`` dialect (``aggregate.py``), run by
``spark.sql(text, args=...)`` with named parameters (PySpark 3.4 or later): no value of the
plan is pasted into the text. It needs Java (PySpark 3.5 runs on Java 8, 11 or 17).
"""

from __future__ import annotations

import itertools
import os
import shutil
import tempfile
import threading
from collections.abc import Iterator
from functools import reduce as fold
from pathlib import Path
from typing import Any, ClassVar

import pandas as pd

from ...errors import BadInput, DataError
from . import columns
from .aggregate import AggregatingEngine
from .base import CountRequest, DataSource
from .compiler import Query, quote_identifier, quote_table

MASTER = "local[2]"
TABLE_SCHEME = "spark:"  # data.source "spark://" with data.table: a table of the session
STREAM_BATCH = 20_000  # fingerprint lines per batch
_CONFIG = {
    "spark.ui.enabled": "false",
    "spark.ui.showConsoleProgress": "false",
    "spark.sql.shuffle.partitions": "2",
    "spark.sql.caseSensitive": "true",  # column names exactly as written, as elsewhere
    "spark.sql.session.timeZone": "UTC",
    "spark.driver.host": "127.0.0.1",
    "spark.driver.bindAddress": "127.0.0.1",
}
# Spark's own logging: fatal errors only (a failed task's Java stack would otherwise follow
# the one-line message that says what is wrong), and no "default log level" banner
_LOG_CONFIG = """\
rootLogger.level = fatal
rootLogger.appenderRef.stderr.ref = console
appender.console.type = Console
appender.console.name = console
appender.console.target = SYSTEM_ERR
appender.console.layout.type = PatternLayout
appender.console.layout.pattern = %d{HH:mm:ss} %p %c{1}: %m%n
logger.gateway.name = org.apache.spark.api.python.PythonGatewayServer
logger.gateway.level = fatal
"""
_KINDS = {"StringType": "text", "VarcharType": "text", "CharType": "text",
          "ByteType": "integer", "ShortType": "integer", "IntegerType": "integer",
          "LongType": "integer", "FloatType": "float", "DoubleType": "float",
          "BooleanType": "bool"}

_lock = threading.Lock()
_session: Any = None
_folder: tempfile.TemporaryDirectory[str] | None = None
_views_in_use: set[str] = set()


def spark_session() -> Any:
    """The process's one SparkSession: an active one if there is, else a local one, started
    now. Java missing or PySpark missing is a one-line error."""
    global _session, _folder
    with _lock:
        if _session is not None:
            return _session
        try:
            from pyspark.sql import SparkSession
        except ImportError:
            raise BadInput("the spark engine needs PySpark: pip install 'prespec[spark]'"
                           ) from None
        active = SparkSession.getActiveSession()
        if active is not None:
            _session = active
            return _session
        if not os.environ.get("JAVA_HOME") and shutil.which("java") is None:
            raise BadInput("the spark engine needs Java (17) and none is installed "
                           "(Debian: apt-get install openjdk-17-jre-headless)")
        _folder = tempfile.TemporaryDirectory(prefix="prespec-spark-")
        if "SPARK_CONF_DIR" not in os.environ:  # a user's own Spark configuration wins
            Path(_folder.name, "log4j2.properties").write_text(_LOG_CONFIG, encoding="utf-8")
            os.environ["SPARK_CONF_DIR"] = _folder.name
        os.environ.setdefault("SPARK_LOCAL_IP", "127.0.0.1")
        builder = SparkSession.builder.master(MASTER).appName("prespec")
        for key, value in {**_CONFIG,
                           "spark.sql.warehouse.dir": str(Path(_folder.name, "warehouse")),
                           "spark.local.dir": str(Path(_folder.name, "local"))}.items():
            builder = builder.config(key, value)
        try:
            _session = builder.getOrCreate()
        except Exception as exc:  # noqa: BLE001 - the JVM did not start: say why, one line
            raise BadInput(f"the spark engine cannot start Spark ({spark_message(exc)})"
                           ) from None
        _session.sparkContext.setLogLevel("FATAL")
        return _session


def hadoop_escape(path: str) -> str:
    """``path`` with Hadoop's glob characters escaped by a backslash, so that Spark reads the
    file of that name: ``wave[1].csv`` would otherwise read ``wave1.csv``."""
    return "".join("\\" + c if c in "\\*?[]{}" else c for c in path)


def spark_message(exc: BaseException) -> str:
    """The first meaningful line of a Spark or Py4J error (not the Java stack)."""
    text = str(exc).strip()
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    for line in lines:
        if "Exception:" in line and not line.startswith("at "):
            return line.rsplit("Exception:", 1)[1].strip() or line
    return lines[0] if lines else type(exc).__name__


def _spark_errors() -> tuple[type[BaseException], ...]:
    from py4j.protocol import Py4JError
    from pyspark.errors import PySparkException

    return (PySparkException, Py4JError)


def _take_view_name() -> str:
    """``prespec_source`` (so the query recorded in the log reads the same on every run), or
    ``prespec_source_2`` … while another engine of this process holds that name."""
    with _lock:
        for n in itertools.count(1):
            name = "prespec_source" if n == 1 else f"prespec_source_{n}"
            if name not in _views_in_use:
                _views_in_use.add(name)
                return name
    raise AssertionError("unreachable")


def _storage_level() -> Any:
    from pyspark import StorageLevel

    return StorageLevel.MEMORY_AND_DISK


_OTHER_KINDS = {"BinaryType": "binary", "ArrayType": "list", "MapType": "map",
                "StructType": "struct"}


def _kind(data_type: Any) -> str:
    name = type(data_type).__name__
    return _KINDS.get(name) or _OTHER_KINDS.get(name, "other")


class SparkEngine(AggregatingEngine):
    """The source as a temporary view of the process's SparkSession; Spark does the counting."""

    name = "spark"
    dialect: ClassVar[str] = "spark"

    def __init__(self, source: DataSource) -> None:
        super().__init__(source)
        if source.kind == "url":
            if not source.location.lower().startswith(TABLE_SCHEME):
                raise BadInput(f"{source.shown}: the spark engine reads files, or a table of "
                               f"the Spark session (data.source: \"{TABLE_SCHEME}//\"), not a "
                               "database URL: use --engine sql")
            if not source.table:
                raise BadInput(f"{source.shown}: a Spark table source needs data.table")
        self.spark = spark_session()
        self._view: str | None = None
        self._persisted: Any = None
        self._kinds: dict[str, str] | None = None

    def close(self) -> None:
        try:
            if self._view is not None:
                self.spark.catalog.dropTempView(self._view)
            if self._persisted is not None:
                self._persisted.unpersist()
        except _spark_errors():
            pass
        if self._view is not None:
            with _lock:
                _views_in_use.discard(self._view)
        self._view = None
        self._persisted = None

    # -- the source ---------------------------------------------------------------------------
    def _files(self) -> list[str]:
        shown, path = self.source.shown, self.source.path
        if self.source.kind == "file":
            if not path.exists():
                raise DataError(f"{shown}: no such data file")
            if path.is_dir():
                raise DataError(f"{shown}: is a folder, not a data file")
            if path.stat().st_size == 0:
                raise DataError(f"{shown}: the data file is empty")
            files = [str(path)]
        else:
            files = self.source.matches()  # Python's rules: no hidden file
            if not files:
                raise DataError(f"{shown}: no data file matches")
        parquet = self.source.is_parquet
        for name in files:
            suffix = Path(name).suffix.lower()
            if (suffix in (".parquet", ".pq")) != parquet or suffix not in (
                    ".csv", ".txt", "", ".parquet", ".pq"):
                raise DataError(f"{name}: unknown data format {suffix!r} or not the format of "
                                f"{shown} (use .csv or .parquet, one format per glob)")
        return files

    def _read(self, name: str) -> Any:
        reader = self.spark.read
        name = hadoop_escape(name)  # Spark globs every path it is given
        if self.source.is_parquet:
            frame = reader.parquet(name)
        else:
            frame = (reader.option("header", True).option("inferSchema", False)
                     .option("mode", "FAILFAST").option("encoding", "UTF-8")
                     .option("sep", ",").option("quote", '"').option("escape", '"')
                     .option("multiLine", True).csv(name))
        return frame.toDF(*[str(c).strip() for c in frame.columns])

    def _frame(self) -> Any:
        if self.source.table:
            return self.spark.table(quote_table(self.source.table, self.dialect))
        frames = [self._read(name) for name in self._files()]
        return fold(lambda a, b: a.unionByName(b, allowMissingColumns=True), frames)

    def relation(self, request: CountRequest | None = None) -> str:
        if self._view is None:
            try:
                frame = self._frame()
                kinds = {f.name: _kind(f.dataType) for f in frame.schema.fields}
                # the reduction reads the source four or five times (ids, counts, lines):
                # parsed once, kept in memory or spilled to Spark's local folder
                frame = frame.persist(_storage_level())
                self._persisted = frame
                self._view = _take_view_name()  # released by close()
                frame.createOrReplaceTempView(self._view)
            except _spark_errors() as exc:
                raise DataError(f"{self.source.shown}: cannot read the data "
                                f"({spark_message(exc)})") from None
            self._kinds = kinds
        return quote_identifier(self._view, self.dialect)

    def check_header(self) -> None:
        """A table: ``columns.check_names`` on its schema's names; files: their headers."""
        if not self.source.table:
            super().check_header()
            return
        try:
            names = list(self.spark.table(quote_table(self.source.table, self.dialect)).columns)
        except _spark_errors():
            return  # relation() says what is wrong
        columns.check_names(names, self.source.shown)

    def column_kinds(self) -> dict[str, str]:
        self.relation()
        assert self._kinds is not None
        return self._kinds

    # -- running queries ----------------------------------------------------------------------
    def _sql(self, query: Query) -> Any:
        return self.spark.sql(query.text, args=query.params or None)

    def fetch(self, query: Query) -> pd.DataFrame:
        try:
            result = self._sql(query)
            names = list(result.columns)
            rows = [tuple(r) for r in result.collect()]
        except _spark_errors() as exc:
            raise DataError(f"{self.source.shown}: cannot read the data "
                            f"({spark_message(exc)})") from None
        columns = list(zip(*rows, strict=True)) if rows else [() for _ in names]
        return pd.DataFrame({n: pd.Series(list(values), dtype=object)
                             for n, values in zip(names, columns, strict=True)}, columns=names)

    def stream_lines(self, query: Query) -> Iterator[list[str]]:
        try:
            rows = self._sql(query).toLocalIterator()
            while batch := [row[0] for row in itertools.islice(rows, STREAM_BATCH)]:
                yield batch
        except _spark_errors() as exc:
            raise DataError(f"{self.source.shown}: cannot read the data "
                            f"({spark_message(exc)})") from None

