"""The ``duckdb`` engine: files (CSV, Parquet, a glob of either) counted by embedded DuckDB.

CSV is read with every column as text (header, UTF-8, strict); Parquet keeps its types. A glob
reads every matching file as one table, columns matched by name. The reduction runs out of
core: DuckDB spills to a temporary folder beyond its memory limit.
"""

from __future__ import annotations

import tempfile
import threading
from collections.abc import Callable, Iterator
from typing import Any

import pandas as pd

from ...errors import DataError
from .aggregate import AggregatingEngine
from .base import CountRequest, DataSource
from .compiler import Query

MEMORY_LIMIT = "1GB"  # DuckDB's own limit; beyond it, it spills to disk
_KINDS = {"VARCHAR": "text", "BOOLEAN": "bool", "DOUBLE": "float", "FLOAT": "float",
          "REAL": "float"}
_INTEGERS = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT",
             "UINTEGER", "UBIGINT", "UHUGEINT")


def _kind(duck_type: str) -> str:
    name = duck_type.upper()
    if name in _INTEGERS:
        return "integer"
    return _KINDS.get(name, "other")


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


class DuckDBEngine(AggregatingEngine):
    """One in-memory DuckDB connection over the files of ``source``."""

    name = "duckdb"
    dialect = "duckdb"

    def __init__(self, source: DataSource,
                 progress: Callable[[float], None] | None = None) -> None:
        import duckdb

        super().__init__(source)
        self.progress = progress
        self._temp = tempfile.TemporaryDirectory(prefix="prespec-duckdb-")
        self.con = duckdb.connect(config={"memory_limit": MEMORY_LIMIT,
                                          "temp_directory": self._temp.name,
                                          "preserve_insertion_order": False})
        self._kinds: dict[str, str] | None = None
        self._checked = False

    def close(self) -> None:
        self.con.close()
        self._temp.cleanup()

    # -- the source ---------------------------------------------------------------------------
    def _check_files(self) -> None:
        if self._checked:
            return
        path = self.source.path
        if self.source.kind == "file":
            if not path.exists():
                raise DataError(f"{self.source.shown}: no such data file")
            if path.is_dir():
                raise DataError(f"{self.source.shown}: is a folder, not a data file")
            if path.stat().st_size == 0:
                raise DataError(f"{self.source.shown}: the data file is empty")
        else:
            import glob

            files = sorted(glob.glob(self.source.location))
            if not files:
                raise DataError(f"{self.source.shown}: no data file matches")
            for name in files:
                suffix = name.lower().rsplit(".", 1)[-1]
                if suffix != ("parquet" if self.source.is_parquet else "csv") and not (
                        suffix == "pq" and self.source.is_parquet):
                    raise DataError(f"{name}: a glob must match files of one format")
        suffix = path.suffix.lower()
        if suffix not in (".csv", ".txt", ".parquet", ".pq", ""):
            raise DataError(f"{self.source.shown}: unknown data format {suffix!r} "
                            "(use .csv or .parquet)")
        self._checked = True

    def relation(self, request: CountRequest | None = None) -> str:
        self._check_files()
        if self.source.is_parquet:
            return "read_parquet($source, union_by_name = true)"
        return ("read_csv($source, header = true, all_varchar = true, union_by_name = true, "
                "strict_mode = true, encoding = 'utf-8', delim = ',', quote = '\"', "
                "escape = '\"', auto_detect = false)")

    def _params(self, query: Query) -> dict[str, Any]:
        return {**query.params, "source": self.source.location}

    def column_kinds(self) -> dict[str, str]:
        if self._kinds is None:
            rel = self.relation()
            described = self._run(f"DESCRIBE SELECT * FROM {rel}", {"source":
                                                                   self.source.location})
            self._kinds = {str(name).strip(): _kind(str(t)) for name, t in
                           described[["column_name", "column_type"]].itertuples(index=False)}
        return self._kinds

    # -- running queries ----------------------------------------------------------------------
    def _run(self, text: str, params: dict[str, Any]) -> pd.DataFrame:
        import duckdb

        stop = threading.Event()
        watcher = None
        if self.progress is not None:
            watcher = threading.Thread(target=self._watch, args=(stop,), daemon=True)
            watcher.start()
        try:
            return self.con.execute(text, params).df()
        except (duckdb.Error, UnicodeDecodeError) as exc:
            raise DataError(f"{self.source.shown}: cannot read the data "
                            f"({_one_line(exc)})") from None
        finally:
            stop.set()
            if watcher is not None:
                watcher.join()

    def _watch(self, stop: threading.Event) -> None:
        shown = -1.0
        while not stop.wait(0.25):
            try:
                done = float(self.con.query_progress())
            except Exception:  # noqa: BLE001 - progress is best effort
                return
            if done >= 0 and done != shown and self.progress is not None:
                shown = done
                self.progress(min(done, 100.0))

    def fetch(self, query: Query) -> pd.DataFrame:
        frame = self._run(query.text, self._params(query))
        return frame.astype(object).where(frame.notna(), None)

    def stream_lines(self, query: Query) -> Iterator[list[str]]:
        import duckdb

        try:
            result = self.con.execute(query.text, self._params(query))
            while batch := result.fetchmany(100_000):
                yield [row[0] for row in batch]
        except (duckdb.Error, UnicodeDecodeError) as exc:
            raise DataError(f"{self.source.shown}: cannot read the data "
                            f"({_one_line(exc)})") from None
