"""The ``pandas`` engine: one file read into memory, the columns the plan names only;
``prepare`` counts the full frame.

Errors name file lines; the data fingerprint is the file's SHA-256. The column checks every
engine makes (``columns.py``) come first: repeated names, nested columns, bytes as UTF-8.
"""

from __future__ import annotations

import pandas as pd

from prespec.common.canonical import file_sha256

from ...errors import DataError
from ..read import read_data
from . import columns
from .base import CountRequest, DataSource, Engine, Reduction


class PandasEngine(Engine):
    name = "pandas"

    def __init__(self, source: DataSource) -> None:
        if source.kind != "file":
            raise DataError(f"{source.shown}: the pandas engine reads one data file; use "
                            "--engine duckdb for a glob" if source.kind == "glob" else
                            f"{source.shown}: the pandas engine reads files, not databases")
        super().__init__(source)
        self._frames: dict[tuple[tuple[str, str], ...], pd.DataFrame] = {}
        self._kinds: dict[str, str] = {}
        self._checked_file = False

    def _read(self, request: CountRequest) -> pd.DataFrame:
        """The columns of ``request.needed`` (and of ``request.read``), every row, after the
        file-level column checks every engine makes."""
        path = self.source.path
        if not self._checked_file and path.is_file():
            columns.check_file(path, self.source.shown)
            if self.source.is_parquet:
                try:
                    self._kinds = columns.parquet_columns(path)[1]
                except Exception:  # noqa: BLE001 - read_data says what is wrong
                    self._kinds = {}
            self._checked_file = True
        named = dict(request.needed)
        for column in request.read:
            named.setdefault(column, "read by the plan")
        key = tuple(named.items())
        if key not in self._frames:
            self._frames[key] = read_data(path, named, self.source.shown)
        return self._frames[key]

    def _checked(self, request: CountRequest) -> pd.DataFrame:
        """The frame, after the nested check, with the bytes of the plan's columns decoded."""
        frame = self._read(request)
        present = [c for c in request.read if c in frame.columns]
        columns.check_nested(self._kinds, request)
        bad: dict[str, int] = {}
        for column in columns.binary_columns(self._kinds, request):
            if column in present:
                cells, bad[column] = columns.decode_bytes(frame[column])
                frame[column] = pd.Series(cells, index=frame.index, dtype=object)
        columns.refuse_bad_bytes(request, bad)
        return frame

    def reduce(self, request: CountRequest) -> Reduction:
        return Reduction(frame=self._checked(request), engine=self.name,
                         data_hash=file_sha256(self.source.path))

    def rows(self, request: CountRequest) -> pd.DataFrame:
        return self._checked(request)
