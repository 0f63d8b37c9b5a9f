"""Which engine reads a source: ``--engine`` by name, or the ``auto`` choice."""

from __future__ import annotations

import importlib
import inspect
from collections.abc import Callable
from typing import Any

from ...errors import BadInput
from .base import ENGINE_NAMES, DataSource, Engine

#: ``auto`` reads a single file below this size with pandas, and with duckdb from this size.
AUTO_PANDAS_LIMIT = 64 * 1024 * 1024

_CLASSES = {
    "pandas": ("prespec.data.engines.pandas_engine", "PandasEngine"),
    "duckdb": ("prespec.data.engines.duckdb_engine", "DuckDBEngine"),
    "sql": ("prespec.data.engines.sql", "SqlEngine"),
    "spark": ("prespec.data.engines.spark", "SparkEngine"),
}
_EXTRAS = {"sql": "sql", "spark": "spark"}
# the installed distributions an engine counts with, recorded beside its name in a run
_LIBRARIES = {"pandas": ("pandas",), "duckdb": ("duckdb",), "sql": ("SQLAlchemy", "psycopg"),
              "spark": ("pyspark",)}


def engine_library(name: str) -> str:
    """The versions of what ``name`` counts with, e.g. ``"duckdb 2.0.1"`` or
    ``"SQLAlchemy 2.0.36, psycopg 3.2.3"`` (``not installed`` for one that is absent)."""
    from importlib import metadata

    shown = []
    for dist in _LIBRARIES[name]:
        try:
            shown.append(f"{dist} {metadata.version(dist)}")
        except metadata.PackageNotFoundError:
            shown.append(f"{dist} not installed")
    return ", ".join(shown)


def auto_engine(source: DataSource) -> str:
    """pandas for a file below ``AUTO_PANDAS_LIMIT``, duckdb for larger files and globs, sql
    for a database URL."""
    if source.kind == "url":
        return "sql"
    if source.kind == "glob":
        return "duckdb"
    try:
        size = source.path.stat().st_size
    except OSError:
        return "pandas"  # the reader names the problem
    return "pandas" if size < AUTO_PANDAS_LIMIT else "duckdb"


def open_engine(name: str, source: DataSource,
                progress: Callable[[float], None] | None = None) -> Engine:
    """The engine ``name`` (or the ``auto`` choice) over ``source``."""
    if name not in ENGINE_NAMES:
        raise BadInput(f"--engine {name}: not an engine (known: {', '.join(ENGINE_NAMES)})")
    if name == "auto":
        name = auto_engine(source)
    if source.kind == "url" and name in ("pandas", "duckdb"):
        raise BadInput(f"--engine {name}: reads files; a database URL needs --engine sql")
    if source.kind != "url" and name == "sql":
        raise BadInput(f"--engine sql: reads a database URL; {source.shown} is a file")
    if name == "spark" and source.kind != "url":
        from ..datasets import is_dataset

        if is_dataset(source.location):
            raise BadInput(f"--engine spark: reads CSV or Parquet files; {source.shown} is a "
                           f"{source.path.suffix.lower()} file: use --engine pandas or duckdb")
    module_name, class_name = _CLASSES[name]
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        extra = _EXTRAS.get(name)
        hint = f" (install prespec[{extra}])" if extra else ""
        raise BadInput(f"--engine {name}: not available here: {exc}{hint}") from None
    cls: Any = getattr(module, class_name)
    if progress is not None and "progress" in inspect.signature(cls).parameters:
        return cls(source, progress=progress)  # type: ignore[no-any-return]
    return cls(source)  # type: ignore[no-any-return]
