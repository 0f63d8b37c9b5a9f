"""The ``pandas`` engine: one file read whole into memory; ``prepare`` counts the full frame.

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
        self._frame: pd.DataFrame | None = None

    def _read(self) -> pd.DataFrame:
        if self._frame is None:
            self._frame = read_data(self.source.path)
        return self._frame

    def reduce(self, request: CountRequest) -> Reduction:
        return Reduction(frame=self._read(), engine=self.name,
                         data_hash=file_sha256(self.source.path))

    def rows(self, request: CountRequest) -> pd.DataFrame:
        return self._read()
