"""The ``duckdb`` engine: files (CSV, Parquet, a glob of either) counted by embedded DuckDB.

CSV is read with every column as text (header, UTF-8, strict); Parquet keeps its types. A glob
reads every matching file as one table, columns matched by name. A transport or dataset file
(``.xpt``, ``.sas7bdat``, ``.sav``, ``.zsav``, ``.dta``) is copied, the plan's columns only and
a chunk of rows at a time, into a Parquet file in the engine's temporary folder, which DuckDB
then reads (``read.open_data_file``); the data hash stays the SHA-256 of the file itself. The
reduction runs out of core: DuckDB spills to a temporary folder beyond its memory limit.
"""

from __future__ import annotations

import tempfile
import threading
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pandas as pd

from ...errors import DataError
from ..datasets import is_dataset
from ..read import DataFile, open_data_file
from .aggregate import AggregatingEngine
from .base import FAILED_COLUMN, KEEP_COLUMN, WEIGHT_COLUMN, CountRequest, DataSource
from .compiler import (
    BLANK_COLUMN,
    HASH_COLUMN,
    ROWS_COLUMN,
    SET_COLUMN,
    Query,
    compile_blank_hash,
    compile_id_hashes,
    compile_mapping,
    count_inputs,
    quote_identifier,
)

MEMORY_LIMIT = "768MB"  # DuckDB's own limit; beyond it, it spills to disk
POLL_SECONDS = 0.25  # how often a long query's progress is asked for
_KINDS = {"VARCHAR": "text", "BOOLEAN": "bool", "DOUBLE": "float", "FLOAT": "float",
          "REAL": "float"}
_INTEGERS = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT",
             "UINTEGER", "UBIGINT", "UHUGEINT")


def _kind(duck_type: str) -> str:
    name = duck_type.upper()
    if name in _INTEGERS:
        return "integer"
    if name == "BLOB":
        return "binary"
    if name.endswith("]"):  # INTEGER[] (a list), VARCHAR[3] (an array)
        return "list"
    if name.startswith("MAP("):
        return "map"
    if name.startswith(("STRUCT(", "UNION(")):
        return "struct"
    return _KINDS.get(name, "other")


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _check_hashes(found: Any, blank_hash: int) -> tuple[bool, bool]:
    """(the blank hash seen, a hash repeated) among the id hashes (a numpy array, maybe
    masked), by one sort of a uint64 copy (numpy releases the GIL while it sorts; two
    threads sorting halves measured slower on two busy cores)."""
    import numpy as np

    hashes = np.array(np.ma.getdata(found), dtype=np.uint64)  # a writable copy
    hashes.sort()
    at = int(np.searchsorted(hashes, np.uint64(blank_hash)))
    blank = at < len(hashes) and int(hashes[at]) == blank_hash
    return blank, len(hashes) > 1 and bool((hashes[1:] == hashes[:-1]).any())

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
        # DuckDB never draws its own bar (it does for ``python -c``, taking that for an
        # interactive session); it tracks progress, for our bar, only when one is asked for
        # (``query_progress`` is -1 otherwise; set either way, since DuckDB's default follows
        # what it takes for an interactive session)
        self.con.execute("SET enable_progress_bar_print = false")
        self.con.execute(f"SET enable_progress_bar = {'false' if progress is None else 'true'}")
        self._kinds: dict[str, str] | None = None
        self._checked = False
        self._shown = False
        self._dataset: DataFile | None = None  # a transport or dataset file, staged to Parquet
        self._staged: tuple[frozenset[str] | None, str] | None = None  # (its columns, the copy)

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
            if is_dataset(path):
                self._dataset = open_data_file(path, self.source.shown)
                self._checked = True
                return
        else:
            if is_dataset(path):
                raise DataError(f"{self.source.shown}: a glob reads CSV or Parquet files; "
                                f"name one {path.suffix.lower()} file at a time")
            files = self.source.matches()
            if not files:
                raise DataError(f"{self.source.shown}: no data file matches")
            for name in files:
                suffix = name.lower().rsplit(".", 1)[-1]
                if suffix != ("parquet" if self.source.is_parquet else "csv") and not (
                        suffix == "pq" and self.source.is_parquet):
                    raise DataError(f"{name}: a glob must match files of one format")
        suffix = path.suffix.lower()
        if suffix not in (".csv", ".txt", ".parquet", ".pq", ""):
            from ..read import unknown_format

            raise unknown_format(self.source.shown, suffix)
        self._checked = True

    def _stage(self, request: CountRequest | None) -> None:
        """Copy the dataset file's columns that ``request`` reads (all for None), with those
        of any earlier copy, to Parquet: once per set of columns."""
        assert self._dataset is not None
        wanted: frozenset[str] | None = None if request is None else frozenset(request.read)
        if self._staged is not None:
            had = self._staged[0]
            if had is None or (wanted is not None and wanted <= had):
                return
            wanted = None if wanted is None else wanted | had
        present = set(self.column_kinds())
        columns = None if wanted is None else [c for c in wanted if c in present]
        _, path = self._dataset.scannable(Path(self._temp.name), columns)
        self._staged = (wanted, str(path))

    def relation(self, request: CountRequest | None = None) -> str:
        self._check_files()
        if self._dataset is not None:
            self._stage(request)
            return "read_parquet($source)"
        # union_by_name (columns matched by name across files) only for a glob: it slows
        # the reading of a single file
        union = ", union_by_name = true" if self.source.kind == "glob" else ""
        if self.source.is_parquet:
            return f"read_parquet($source{union})"
        return (f"read_csv($source, header = true, all_varchar = true{union}, "
                "strict_mode = true, encoding = 'utf-8', delim = ',', quote = '\"', "
                "escape = '\"')")

    def _files_param(self) -> str | list[str]:
        """What ``$source`` stands for: the file, or the list of a glob's files by Python's
        rules (DuckDB's own glob would read hidden files); escaped (``glob.escape``), since
        DuckDB globs every name it is given and ``a[1].csv`` would read ``a1.csv``."""
        import glob

        if self.source.kind == "glob":
            return [glob.escape(name) for name in self.source.matches()]
        if self._staged is not None:
            return glob.escape(self._staged[1])
        return glob.escape(self.source.location)

    def _params(self, query: Query) -> dict[str, Any]:
        if "$source" not in query.text:
            return dict(query.params)
        return {**query.params, "source": self._files_param()}

    def event_relation(self, other: AggregatingEngine) -> tuple[str, dict[str, Any]]:
        """The event table's reader on this connection, its files bound as ``$events_source``."""
        assert isinstance(other, DuckDBEngine)
        text = other.relation(None).replace("$source", "$events_source")
        return text, {"events_source": other._files_param()}

    def column_kinds(self) -> dict[str, str]:
        self._check_files()
        if self._kinds is None and self._dataset is not None:
            # from the file's header, as the Parquet copy holds them (text or doubles)
            self._kinds = self._dataset.kinds()
        if self._kinds is None:
            rel = self.relation()
            described = self._run(f"DESCRIBE SELECT * FROM {rel}",
                                  {"source": self._files_param()})
            self._kinds = {str(name).strip(): _kind(str(t)) for name, t in
                           described[["column_name", "column_type"]].itertuples(index=False)}
        return self._kinds

    # -- running queries ----------------------------------------------------------------------
    def _run(self, text: str, params: dict[str, Any]) -> pd.DataFrame:
        import duckdb

        stop, watcher = self._start_watch()
        try:
            return self.con.execute(text, params).df()
        except (duckdb.Error, UnicodeDecodeError) as exc:
            raise DataError(f"{self.source.shown}: cannot read the data "
                            f"({_one_line(exc)})") from None
        finally:
            self._stop_watch(stop, watcher)

    def _watch(self, stop: threading.Event) -> None:
        shown = -1.0
        while not stop.wait(POLL_SECONDS):
            try:
                done = float(self.con.query_progress())
            except Exception:  # noqa: BLE001 - progress is best effort
                return
            if done >= 0 and done != shown and self.progress is not None:
                shown = done
                self._shown = True
                self.progress(min(done, 100.0))

    def reduction(self, request: CountRequest, relation: str, kinds: dict[str, str]
                  ) -> tuple[pd.DataFrame, Query]:
        """Two lean queries (measured quicker than one scan doing both: issue 7). The ids:
        a 64-bit hash of each id's trimmed text and nothing else per row (a blank id hashes
        as NULL does), sorted by numpy to find repeats; a repeat is then named, or found a
        collision, by ``duplicate_ids``, and the blank hash, if seen, is confirmed by the
        exact count of blank ids. The counts: the raw cells grouped, then the filter and the
        mappings applied once per distinct combination (``compile_mapping``)."""
        import duckdb

        ids = compile_id_hashes(request, relation, self.dialect, kinds)
        q = [quote_identifier(c, self.dialect) for c in count_inputs(request)]
        groups = Query(
            f"SELECT {''.join(c + ', ' for c in q)}1 AS {SET_COLUMN}, "
            f"CAST(NULL AS UBIGINT) AS {HASH_COLUMN}, COUNT(*) AS {ROWS_COLUMN}, "
            f"0 AS {BLANK_COLUMN} FROM {relation}" + (f" GROUP BY {', '.join(q)}" if q else ""),
            {}, self.dialect)
        stop, watcher = self._start_watch()
        try:
            blank_hash = int(self.con.execute(compile_blank_hash(self.dialect).text)
                             .fetchall()[0][0])
            found = self.con.execute(ids.text, self._params(ids)).fetchnumpy()[HASH_COLUMN]
            # the hashes are sorted (one core, numpy releases the GIL) while DuckDB groups
            # the cells; the id checks still come before the counts are used
            with ThreadPoolExecutor(max_workers=1) as pool:
                checked = pool.submit(_check_hashes, found, blank_hash)
                table = self.con.sql(groups.text,
                                     params=self._params(groups)).to_arrow_table()
                blanks, repeated = checked.result()
            del found
            if blanks:  # the exact count (0 when a non-blank id shares the blank hash)
                self.check_blank_ids(request, relation, kinds)
            if repeated:  # names the duplicates (or finds a collision: then nothing)
                self.duplicate_ids(request, relation, kinds)
        except (duckdb.Error, UnicodeDecodeError) as exc:
            raise DataError(f"{self.source.shown}: cannot read the data "
                            f"({_one_line(exc)})") from None
        finally:
            self._stop_watch(stop, watcher)
        self.con.register("prespec_groups_table", table)
        try:
            query = compile_mapping(request, '"prespec_groups_table"', self.dialect, kinds)
            frame = self.fetch(query)
        finally:
            self.con.unregister("prespec_groups_table")
        frame = frame[[KEEP_COLUMN, FAILED_COLUMN, *request.grouped, WEIGHT_COLUMN]].copy()
        shown = Query(f"{ids.text};\n{groups.text};\n{query.text}",
                      {**ids.params, **query.params}, self.dialect)
        return self._weighted(frame, request), shown

    def _start_watch(self) -> tuple[threading.Event, threading.Thread | None]:
        stop = threading.Event()
        watcher = None
        if self.progress is not None:
            watcher = threading.Thread(target=self._watch, args=(stop,), daemon=True)
            watcher.start()
        return stop, watcher

    def _stop_watch(self, stop: threading.Event, watcher: threading.Thread | None) -> None:
        stop.set()
        if watcher is not None:
            watcher.join()
        if self._shown and self.progress is not None:  # a bar once shown ends at 100%
            self._shown = False
            self.progress(100.0)

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

