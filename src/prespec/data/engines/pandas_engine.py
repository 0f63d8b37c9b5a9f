"""The ``pandas`` engine: one file read into memory, the columns the plan names only;
``prepare`` counts the full frame.

Errors name file lines; the data fingerprint is the file's SHA-256.
"""

from __future__ import annotations

import pandas as pd

from ...canonical import file_sha256
from ...errors import DataError
from ..read import read_data
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

    def _read(self, request: CountRequest) -> pd.DataFrame:
        """The columns of ``request.needed`` (and of ``request.read``), every row."""
        columns = dict(request.needed)
        for column in request.read:
            columns.setdefault(column, "read by the plan")
        key = tuple(columns.items())
        if key not in self._frames:
            self._frames[key] = read_data(self.source.path, columns, self.source.shown)
        return self._frames[key]

    def reduce(self, request: CountRequest) -> Reduction:
        return Reduction(frame=self._read(request), engine=self.name,
                         data_hash=file_sha256(self.source.path))

    def rows(self, request: CountRequest) -> pd.DataFrame:
        return self._read(request)
